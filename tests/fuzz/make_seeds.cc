// Writes the seed corpus of every fuzz target: a handful of valid and nearly valid inputs
// each, so that fuzzing starts from the shapes real callers send. Run once; the files are
// checked in under tests/fuzz/corpus/<target>/ (the fuzzers' own finds are not).
// Usage: fuzz_make_seeds OUT_DIR
#include <filesystem>
#include <fstream>
#include <string>

#include "plumb/v1/ingest.pb.h"
#include "plumb/v1/ranker.pb.h"
#include "store/keys.h"
#include "store/records.h"

namespace fs = std::filesystem;

void Write(const fs::path& dir, const std::string& name, const std::string& bytes) {
  fs::create_directories(dir);
  std::ofstream(dir / name, std::ios::binary) << bytes;
}

int main(int argc, char** argv) {
  if (argc != 2) return 2;
  const fs::path out = argv[1];
  using namespace plumb;

  const fs::path csv = out / "fuzz_csv_import";
  Write(csv, "plain", "user,item,ts\nm1,t1,1700000000000\nm2,t2,1700000000001\n");
  Write(csv, "all_columns",
        "event_id,weight,ts,item,user,extra\ne1,2.5,17,t9,m9,x\ne2,,18,t8,m8,\n");
  Write(csv, "quoted", "user,item\n\"m,1\",\"t \"\"one\"\"\"\n\"m2\",t2\n");
  Write(csv, "bad_lines", "user,item,weight\nm1,t1,-1\nm2,,1\n\"open,t3,1\nm4,t4,1001\n");
  Write(csv, "no_header_columns", "who,what\nm1,t1\n");
  Write(csv, "crlf", "user,item\r\nm1,t1\r\n");

  const fs::path ranker = out / "fuzz_ranker_requests";
  {
    v1::RecommendRequest r;
    r.set_user_id("member-3");
    r.set_count(5);
    r.set_include_seen(true);
    r.add_exclude_item_ids("tool-1");
    Write(ranker, "recommend", std::string(1, '\0') + r.SerializeAsString());
    r.set_user_id("unknown");
    r.add_recent_item_ids("tool-4");
    r.add_recent_item_ids("t\xc3\xa9l\xc3\xa9");
    r.set_unknown_user(v1::UNKNOWN_USER_MOST_INTERACTED);
    Write(ranker, "recommend_fold_in", std::string(1, '\0') + r.SerializeAsString());
    v1::RankCandidatesRequest c;
    c.set_user_id("member-0");
    for (const char* id : {"tool-2", "tool-2", "nope", "tool-59"}) c.add_candidate_item_ids(id);
    Write(ranker, "rank", std::string(1, '\1') + c.SerializeAsString());
    v1::SimilarItemsRequest s;
    s.set_item_id("tool-9");
    s.set_count(4);
    Write(ranker, "similar", std::string(1, '\2') + s.SerializeAsString());
    s.set_item_id("tool-7");  // the zero vector
    Write(ranker, "similar_zero", std::string(1, '\2') + s.SerializeAsString());
  }

  const fs::path ingest = out / "fuzz_ingest_events";
  {
    v1::PublishBatchRequest b;
    auto add = [&](const char* u, const char* i, int64_t ts, float w, const char* id) {
      v1::InteractionEvent* e = b.add_events();
      e->set_user_id(u);
      e->set_item_id(i);
      e->set_timestamp_ms(ts);
      e->set_weight(w);
      e->set_event_id(id);
    };
    add("member-1", "tool-1", 1700000000000, 1.0f, "e1");
    add("member-2", "tool-2", 0, 0.0f, "");
    add("m\x01", "tool", 1, 2.0f, "e3");
    add("member-4", "tool-4", 32503680000000, 1.0f, "e4");
    add("member-5", "", -7, 1e9f, "e5");
    Write(ingest, "batch", b.SerializeAsString());
  }

  const fs::path records = out / "fuzz_store_records";
  {
    store::EventInput e;
    e.user_id = "member-1";
    e.item_id = "tool-1";
    e.timestamp_ms = 1700000000000;
    e.event_id = "loan-1";
    e.weight = 1.5f;
    const std::string seq(8, '\x07');
    Write(records, "event", std::string(1, '\0') + seq + store::records::EncodeEvent(e, 99));
    store::VersionManifest m;
    m.version = 0x0707070707070707ull;
    m.objective = "cpr";
    m.num_users = 3;
    m.num_items = 4;
    m.dim = 2;
    m.figures["loss"] = 0.5;
    Write(records, "manifest", std::string(1, '\1') + seq + store::records::EncodeManifest(m, 4));
    Write(records, "event_id", std::string(1, '\2') + seq + store::keys::EventIdRecord(12, 34));
    Write(records, "keys", std::string(1, '\3') + seq + store::keys::ManifestKey(5));
  }

  const fs::path versions = out / "fuzz_version_reader";
  for (int k = 0; k < 4; ++k) {
    std::string bytes;
    for (int n = 0; n < 200; ++n) bytes += static_cast<char>((n * (k + 3) + k) & 0xff);
    Write(versions, "pattern" + std::to_string(k), bytes);
  }
  return 0;
}
