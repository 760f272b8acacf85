// A damaged block in the newest version keeps the trainer from starting (its warm start
// reads that version), and activating an older version does not help. `plumb inspect
// --verify` names the damage and `plumb repair` is the way back: afterwards the trainer
// starts from the older version and every event is still in the log.
#include <gtest/gtest.h>
#include <unistd.h>

#include <filesystem>
#include <fstream>

#include "cli/commands.h"
#include "store/keys.h"
#include "store/raw_records.h"
#include "store/store.h"
#include "trainer/online/online_loop.h"

namespace plumb::online {
namespace {

namespace fs = std::filesystem;

class RepairRestartTest : public ::testing::Test {
 protected:
  void SetUp() override {
    dir_ = fs::temp_directory_path() / ("plumb_repair_" + std::to_string(::getpid()));
    fs::remove_all(dir_);
    trainer::SynthOptions world;
    world.users = 300;
    world.items = 400;
    world.target_interactions = 5000;
    world.seed = 4;
    ASSERT_TRUE(cli::RunSynth(world, (dir_ / "world").string()).ok());
  }
  void TearDown() override { fs::remove_all(dir_); }

  std::string db() const { return (dir_ / "db").string(); }

  cli::FitArgs Fit(bool with_events) {
    cli::FitArgs a;
    if (with_events) a.import.events = (dir_ / "world" / "events.csv").string();
    a.import.db = db();
    a.import.sync = false;
    a.dim = 8;
    a.epochs = 1;
    a.threads = 1;
    return a;
  }

  Status CreateLoop() {
    std::unique_ptr<store::Store> store;
    store::StoreOptions options;
    options.create_if_missing = false;
    PLUMB_RETURN_IF_ERROR(store::Store::OpenPrimary(db(), options, &store));
    OnlineOptions o;
    o.dim = 8;
    o.refit_epochs = 1;  // the fits' configuration: the loop warm-starts from their newest version
    o.tune = false;
    std::unique_ptr<OnlineLoop> loop;
    Status s = OnlineLoop::Create(store.get(), o, &loop);
    if (s.ok()) active_ = loop->status().active_version;
    return s;
  }

  static void Flip(const std::string& path, uint64_t offset) {
    std::fstream f(path, std::ios::in | std::ios::out | std::ios::binary);
    char c = 0;
    f.seekg(static_cast<std::streamoff>(offset));
    f.get(c);
    f.seekp(static_cast<std::streamoff>(offset));
    f.put(static_cast<char>(c ^ 0x5a));
  }

  // Flips one byte of a models table file such that Verify finds exactly `version` damaged.
  bool DamageOnly(uint64_t version) {
    std::vector<std::string> tables;
    if (!store::testing::ListTableFiles(db(), store::keys::kModelsFamily, &tables).ok()) {
      return false;
    }
    for (const std::string& table : tables) {
      for (uint64_t offset = 100; offset < fs::file_size(table); offset += 1500) {
        Flip(table, offset);
        std::unique_ptr<store::Store> store;
        store::VerifyReport report;
        if (store::Store::OpenSecondary(db(), (dir_ / "scratch").string(), &store).ok() &&
            store->Verify(&report).ok() &&
            report.damaged_versions == std::vector<uint64_t>{version}) {
          return true;
        }
        Flip(table, offset);  // undo
      }
    }
    return false;
  }

  fs::path dir_;
  uint64_t active_ = 0;
};

TEST_F(RepairRestartTest, RepairLetsTheTrainerStartAgain) {
  ASSERT_TRUE(cli::RunFit(Fit(true)).ok());   // version 1
  ASSERT_TRUE(cli::RunFit(Fit(false)).ok());  // version 2, in table files of its own
  ASSERT_TRUE(CreateLoop().ok());
  EXPECT_EQ(active_, 2u);

  // One flipped byte among version 2's embedding rows, and only there: the table file may
  // hold version 1 too (RocksDB compacts as it likes), so find a spot that damages 2 alone.
  ASSERT_TRUE(DamageOnly(2));
  Status s = CreateLoop();
  ASSERT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_NE(s.message().find("version 2"), std::string::npos) << s.ToString();

  // Rolling back does not help: the warm start still reads the newest version.
  cli::AdminArgs admin;
  admin.db = db();
  admin.version = 1;
  s = cli::RunActivate(admin);
  ASSERT_TRUE(s.ok()) << s.ToString();
  EXPECT_TRUE(CreateLoop().IsCorruption());

  // inspect --verify finds it and exits non-zero; repair fixes it.
  admin.verify = true;
  s = cli::RunInspect(admin);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  ASSERT_TRUE(cli::RunRepair(admin).ok());
  EXPECT_TRUE(cli::RunInspect(admin).ok());

  s = CreateLoop();
  ASSERT_TRUE(s.ok()) << s.ToString();
  EXPECT_EQ(active_, 1u);
  std::unique_ptr<store::Store> store;
  ASSERT_TRUE(store::Store::OpenPrimary(db(), store::StoreOptions{}, &store).ok());
  std::vector<store::Event> events;
  ASSERT_TRUE(store->ReadEvents(0, 1u << 20, &events).ok());
  std::ifstream csv(dir_ / "world" / "events.csv");
  size_t lines = 0;
  for (std::string line; std::getline(csv, line);) ++lines;
  EXPECT_EQ(events.size(), lines - 1);  // every event, header excluded
}

}  // namespace
}  // namespace plumb::online
