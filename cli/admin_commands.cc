// plumb versions / activate / inspect / export / synth: looking at and steering a store.
#include <cmath>
#include <cstdio>
#include <ctime>
#include <filesystem>
#include <fstream>

#include "cli/commands.h"
#include "cli/store_access.h"
#include "core/utc_time.h"
#include "trainer/online/training_config.h"

namespace plumb::cli {
namespace {

std::string FormatTime(int64_t ms) {
  std::time_t t = static_cast<std::time_t>(ms / 1000);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y-%m-%d %H:%M:%SZ", &tm);
  return buf;
}

}  // namespace

Status RunSynth(const trainer::SynthOptions& options, const std::string& out_dir) {
  std::fprintf(stderr, "synth: %u members, %u tools, about %llu borrowings, seed %llu\n",
               options.users, options.items,
               static_cast<unsigned long long>(options.target_interactions),
               static_cast<unsigned long long>(options.seed));
  trainer::SynthWorld world;
  PLUMB_RETURN_IF_ERROR(trainer::GenerateSynthWorld(options, &world));
  PLUMB_RETURN_IF_ERROR(trainer::WriteSynthCsv(world, out_dir));
  std::printf(
      "wrote %s/events.csv (%zu borrowings), %s/test.csv (%zu ground-truth pairs), "
      "%s/items.csv (%zu tools)\n",
      out_dir.c_str(), world.events.size(), out_dir.c_str(), world.test.size(), out_dir.c_str(),
      world.item_names.size());
  return Status::Ok();
}

Status RunVersions(const AdminArgs& args) {
  std::unique_ptr<store::Store> store;
  PLUMB_RETURN_IF_ERROR(OpenForRead(args.db, &store));
  std::vector<store::VersionManifest> versions;
  PLUMB_RETURN_IF_ERROR(store->ListVersions(&versions));
  uint64_t active = 0;
  PLUMB_RETURN_IF_ERROR(store->GetActiveVersion(&active));
  if (versions.empty()) {
    std::printf("no versions in %s\n", args.db.c_str());
    return Status::Ok();
  }
  std::printf("%-3s %8s  %-20s  %-4s %9s %8s %8s %4s  %-10s %s\n", "", "version", "created (UTC)",
              "obj", "events", "users", "items", "dim", "val.recall", "gate");
  for (const store::VersionManifest& m : versions) {
    char recall[32] = "-";
    if (!std::isnan(m.validation_recall) && m.validation_k > 0) {
      std::snprintf(recall, sizeof recall, "%.4f@%u", m.validation_recall, m.validation_k);
    }
    const std::string mark = std::string(m.version == active ? "*" : "") + (m.pinned ? "p" : "");
    std::printf("%-3s %8llu  %-20s  %-4s %9llu %8u %8u %4u  %-10s %s%s%s\n", mark.c_str(),
                static_cast<unsigned long long>(m.version), FormatTime(m.created_ms).c_str(),
                m.objective.c_str(), static_cast<unsigned long long>(m.events_seen), m.num_users,
                m.num_items, m.dim, recall,
                std::string(store::GateOutcomeName(m.gate, "-")).c_str(),
                m.gate_reason.empty() ? "" : ": ", m.gate_reason.c_str());
    std::printf("%-3s %8s  trained: %s\n", "", "",
                online::FormatTrainingConfig(m.training).c_str());
    if (std::isfinite(m.validation_shift)) {
      std::printf("%-3s %8s  popularity shift on validation %+.3f (%s), distance %.3f\n", "", "",
                  m.validation_shift,
                  m.validation_shift > 0 ? "toward the head: under-corrected"
                                         : "toward the tail: over-corrected",
                  m.validation_shift_distance);
    }
    if (!m.tune_reason.empty()) std::printf("%-3s %8s  tuned: %s\n", "", "", m.tune_reason.c_str());
  }
  std::printf("(* active, p pinned: kept whatever the retention rules say)\n");
  return Status::Ok();
}

Status RunPin(const AdminArgs& args, bool pinned) {
  if (args.version == 0) return Status::InvalidArgument("--model-version must be at least 1");
  std::unique_ptr<store::Store> store;
  store::StoreOptions existing;
  existing.create_if_missing = false;  // activating or pinning never creates a store
  PLUMB_RETURN_IF_ERROR(OpenForWrite(args.db, existing, &store));
  PLUMB_RETURN_IF_ERROR(store->SetPinned(args.version, pinned));
  std::printf("version %llu is %s\n", static_cast<unsigned long long>(args.version),
              pinned ? "pinned: never pruned" : "unpinned: pruned by the retention rules");
  return Status::Ok();
}

Status RunActivate(const AdminArgs& args) {
  if (args.version == 0) return Status::InvalidArgument("--model-version must be at least 1");
  std::unique_ptr<store::Store> store;
  store::StoreOptions existing;
  existing.create_if_missing = false;  // activating or pinning never creates a store
  PLUMB_RETURN_IF_ERROR(OpenForWrite(args.db, existing, &store));
  uint64_t before = 0;
  PLUMB_RETURN_IF_ERROR(store->GetActiveVersion(&before));
  PLUMB_RETURN_IF_ERROR(store->Activate(args.version));
  std::printf("version %llu is active (was %llu)\n", static_cast<unsigned long long>(args.version),
              static_cast<unsigned long long>(before));
  return Status::Ok();
}

namespace {

// "2026-12-02 21:30:05 UTC" for ms since the epoch.
std::string FormatUtc(int64_t ms) { return UtcText(ms, "%Y-%m-%d %H:%M:%S UTC"); }

}  // namespace

Status RunInspect(const AdminArgs& args) {
  std::unique_ptr<store::Store> store;
  PLUMB_RETURN_IF_ERROR(OpenForRead(args.db, &store));
  uint64_t cursor = 0, active = 0;
  PLUMB_RETURN_IF_ERROR(store->GetCursor(&cursor));
  PLUMB_RETURN_IF_ERROR(store->GetActiveVersion(&active));
  std::vector<store::VersionManifest> versions;
  PLUMB_RETURN_IF_ERROR(store->ListVersions(&versions));
  uint64_t interactions = 0;
  PLUMB_RETURN_IF_ERROR(store->ForEachInteraction([&](uint32_t, uint32_t) { ++interactions; }));
  store::LogStats log;
  PLUMB_RETURN_IF_ERROR(store->GetLogStats(&log));
  std::printf("store           %s\n", args.db.c_str());
  std::printf("event log       %llu events (%.1f MB stored; %.1f MB of table files), sequences "
              "%llu..%llu\n",
              static_cast<unsigned long long>(log.events), static_cast<double>(log.bytes) / 1e6,
              static_cast<double>(log.disk_bytes) / 1e6,
              static_cast<unsigned long long>(log.first_seq),
              static_cast<unsigned long long>(log.last_seq));
  if (log.events > 0) {
    std::printf("oldest event    %s (sequence %llu)\n", FormatUtc(log.oldest_timestamp_ms).c_str(),
                static_cast<unsigned long long>(log.first_seq));
  }
  if (log.removed_events > 0) {
    std::printf(
        "retention       removed %llu events (%.1f MB) in %llu passes, the last at %s; "
        "everything up to sequence %llu (newest %s) is kept as %llu (user, item) pairs with "
        "their counts and last times\n",
        static_cast<unsigned long long>(log.removed_events),
        static_cast<double>(log.removed_bytes) / 1e6,
        static_cast<unsigned long long>(log.retention_passes),
        FormatUtc(log.last_retention_ms).c_str(),
        static_cast<unsigned long long>(log.folded_through),
        FormatUtc(log.folded_watermark_ms).c_str(),
        static_cast<unsigned long long>(log.history_pairs));
  } else {
    std::printf("retention       nothing removed yet\n");
  }
  uint64_t availability_generation = 0, withdrawn = 0;
  PLUMB_RETURN_IF_ERROR(store->GetAvailability(&availability_generation, &withdrawn));
  std::printf("withdrawn items %llu\n", static_cast<unsigned long long>(withdrawn));
  std::printf("trained up to   %llu (lag %llu events)\n", static_cast<unsigned long long>(cursor),
              static_cast<unsigned long long>(store->LastSequence() - cursor));
  std::printf("users, items    %u, %u\n", store->IdCount(store::IdSpace::kUser),
              store->IdCount(store::IdSpace::kItem));
  std::printf("interactions    %llu distinct (user, item) training pairs\n",
              static_cast<unsigned long long>(interactions));
  // A version's blocks: (users + items) x dim float32s and one uint32 degree per item.
  uint64_t version_bytes = 0;
  for (const store::VersionManifest& m : versions) {
    version_bytes += (uint64_t{m.num_users} + m.num_items) * m.dim * sizeof(float) +
                     uint64_t{m.num_items} * sizeof(uint32_t);
  }
  std::printf(
      "versions kept   %zu, active %llu; their embeddings take %.1f MB before "
      "compression\n",
      versions.size(), static_cast<unsigned long long>(active),
      static_cast<double>(version_bytes) / 1e6);
  std::string auto_activate;
  if (store->GetMeta("auto_activate", &auto_activate).ok()) {
    std::printf("auto-activate   %s\n", auto_activate == "1" ? "on" : "off (paused)");
  }
  if (!args.verify) return Status::Ok();

  std::fflush(stdout);
  store::VerifyReport report;
  PLUMB_RETURN_IF_ERROR(store->Verify(&report));
  std::printf(
      "verified        %llu table files (%.1f MB), %llu events, %llu versions read in "
      "full\n",
      static_cast<unsigned long long>(report.table_files), report.table_bytes / 1e6,
      static_cast<unsigned long long>(report.events),
      static_cast<unsigned long long>(report.versions));
  for (const std::string& problem : report.problems) {
    std::printf("damage          %s\n", problem.c_str());
  }
  if (report.problems.empty()) {
    std::printf("no damage found\n");
    return Status::Ok();
  }
  return Status::Corruption(std::to_string(report.problems.size()) +
                            " problem(s) found; `plumb repair --db " + args.db +
                            "` recovers what can be read (stop plumb-train first)");
}

Status RunRepair(const AdminArgs& args) {
  store::RepairReport r;
  PLUMB_RETURN_IF_ERROR(store::Store::Repair(args.db, store::StoreOptions{}, &r));
  if (r.rebuilt) {
    std::printf("rebuilt         RocksDB's repair rebuilt the file set (%s)\n",
                r.rebuild_reason.c_str());
  } else {
    std::printf("file set        intact\n");
  }
  for (const store::RepairReport::SetAside& a : r.set_aside) {
    std::printf(
        "set aside       %s/lost/%s (%s): %s; %llu records copied back, %llu unreadable "
        "range(s)\n",
        args.db.c_str(), a.file.c_str(), a.family.empty() ? "?" : a.family.c_str(), a.why.c_str(),
        static_cast<unsigned long long>(a.salvaged),
        static_cast<unsigned long long>(a.unreadable_ranges));
  }
  for (uint64_t v : r.dropped_versions) {
    std::printf("dropped         version %llu (incomplete or unreadable)\n",
                static_cast<unsigned long long>(v));
  }
  std::printf("active version  %llu%s\n", static_cast<unsigned long long>(r.active_after),
              r.active_after == r.active_before
                  ? ""
                  : (" (was " + std::to_string(r.active_before) + ")").c_str());
  std::printf("cursor          %llu%s\n", static_cast<unsigned long long>(r.cursor_after),
              r.cursor_after == r.cursor_before
                  ? ""
                  : (" (was " + std::to_string(r.cursor_before) + ")").c_str());
  if (r.degrees_rewritten > 0) {
    std::printf("degrees         %llu item degrees recomputed from the interactions\n",
                static_cast<unsigned long long>(r.degrees_rewritten));
  }
  for (const std::string& problem : r.remaining) {
    std::printf("still damaged   %s\n", problem.c_str());
  }
  if (!r.remaining.empty()) {
    return Status::Corruption(std::to_string(r.remaining.size()) +
                              " problem(s) remain after the repair");
  }
  std::printf("the store verifies clean; restart plumb-serve so that it reopens the store\n");
  return Status::Ok();
}

Status RunForget(const AdminArgs& args) {
  if (args.users.empty()) return Status::InvalidArgument("--user is required");
  std::unique_ptr<store::Store> store;
  PLUMB_RETURN_IF_ERROR(OpenForWrite(args.db, store::StoreOptions{}, &store));
  for (const std::string& user : args.users) {
    store::ForgetReport r;
    PLUMB_RETURN_IF_ERROR(store->ForgetUser(user, &r));
    std::printf(
        "forgot '%s': %llu events, %llu interactions%s, %zu kept version(s) with the "
        "row set to zero\n",
        user.c_str(), static_cast<unsigned long long>(r.events),
        static_cast<unsigned long long>(r.interactions),
        r.had_index ? (", dictionary entry " + std::to_string(r.index) + " renamed").c_str()
                    : ", no dictionary entry",
        r.versions_changed.size());
    for (const std::string& file : r.lost_files) {
      std::printf(
          "warning: %s was set aside by plumb repair and may still hold this user's "
          "data: delete it\n",
          file.c_str());
    }
  }
  // Opening the store again rewrites RocksDB's MANIFEST, the last file that names keys of
  // the deleted table files.
  store.reset();
  PLUMB_RETURN_IF_ERROR(OpenForWrite(args.db, store::StoreOptions{}, &store));
  store.reset();
  std::printf(
      "the store is compacted: the erased records are gone from its files. Restart "
      "plumb-serve (or wait for the next version) so that its memory forgets too.\n");
  return Status::Ok();
}

Status RunExport(const AdminArgs& args) {
  if (args.out.empty()) return Status::InvalidArgument("--out is required");
  std::unique_ptr<store::Store> store;
  PLUMB_RETURN_IF_ERROR(OpenForRead(args.db, &store));
  LoadedModel loaded;
  PLUMB_RETURN_IF_ERROR(LoadModel(*store, args.version, &loaded));
  std::error_code ec;
  std::filesystem::create_directories(args.out, ec);
  if (ec) return Status::IoError("cannot create " + args.out + ": " + ec.message());
  // Tab-separated values (IANA text/tab-separated-values): a header line `user` (or
  // `item`) then d0 .. d<dim-1>, and one line per id with the id and dim float32 values,
  // each printed with 9 significant digits (enough to read back the exact float32). TSV has
  // no quoting, so an id holding a tab or a line break cannot be written: refused.
  auto write = [&](const std::string& name, const char* id_column,
                   const std::vector<std::string>& ids, const trainer::RowMatrix& m) -> Status {
    for (const std::string& id : ids) {
      if (id.find_first_of("\t\r\n") != std::string::npos) {
        return Status::InvalidArgument("cannot export " + std::string(id_column) + " id '" + id +
                                       "' as TSV: it holds a tab or a line break");
      }
    }
    const std::string path = (std::filesystem::path(args.out) / name).string();
    std::ofstream out(path);
    if (!out) return Status::IoError("cannot write " + path);
    out << id_column;
    for (Eigen::Index c = 0; c < m.cols(); ++c) out << "\td" << c;
    out << '\n';
    char buf[32];
    for (size_t r = 0; r < ids.size(); ++r) {
      out << ids[r];
      for (Eigen::Index c = 0; c < m.cols(); ++c) {
        std::snprintf(buf, sizeof buf, "%.9g", static_cast<double>(m(r, c)));
        out << '\t' << buf;
      }
      out << '\n';
    }
    out.flush();
    if (!out) return Status::IoError("write failed: " + path);
    return Status::Ok();
  };
  PLUMB_RETURN_IF_ERROR(write("users.tsv", "user", loaded.user_ids, loaded.model.users()));
  PLUMB_RETURN_IF_ERROR(write("items.tsv", "item", loaded.item_ids, loaded.model.items()));
  std::printf("version %llu exported to %s/users.tsv (%zu rows) and %s/items.tsv (%zu rows), "
              "dim %u\n",
              static_cast<unsigned long long>(loaded.manifest.version), args.out.c_str(),
              loaded.user_ids.size(), args.out.c_str(), loaded.item_ids.size(),
              loaded.manifest.dim);
  return Status::Ok();
}

}  // namespace plumb::cli
