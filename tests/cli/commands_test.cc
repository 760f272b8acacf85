// The offline commands end to end on a small synthetic world: synth -> fit -> eval ->
// export -> versions/activate, through the same functions the `plumb` binary calls.
#include "cli/commands.h"

#include <gtest/gtest.h>
#include <unistd.h>

#include <algorithm>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "cli/store_access.h"

namespace plumb::cli {
namespace {

namespace fs = std::filesystem;

class CommandsTest : public ::testing::Test {
 protected:
  void SetUp() override {
    dir_ = fs::temp_directory_path() /
           ("plumb_cli_" + std::to_string(::getpid()) + "_" +
            ::testing::UnitTest::GetInstance()->current_test_info()->name());
    fs::remove_all(dir_);
    world_.users = 400;
    world_.items = 200;
    world_.target_interactions = 8000;
    world_.seed = 3;
    ASSERT_TRUE(RunSynth(world_, (dir_ / "world").string()).ok());
  }
  void TearDown() override { fs::remove_all(dir_); }

  FitArgs SmallFit() {
    FitArgs a;
    a.import.events = (dir_ / "world" / "events.csv").string();
    a.import.db = (dir_ / "db").string();
    a.import.sync = false;
    a.dim = 16;
    a.epochs = 3;
    a.threads = 1;
    return a;
  }

  fs::path dir_;
  trainer::SynthOptions world_;
};

size_t CountLines(const fs::path& p) {
  std::ifstream in(p);
  std::string line;
  size_t n = 0;
  while (std::getline(in, line)) ++n;
  return n;
}

TEST_F(CommandsTest, FitPublishesAnActiveVersionCoveringEveryEvent) {
  ASSERT_TRUE(RunFit(SmallFit()).ok());
  std::unique_ptr<store::Store> store;
  ASSERT_TRUE(OpenForRead((dir_ / "db").string(), &store).ok());
  const size_t events = CountLines(dir_ / "world" / "events.csv") - 1;
  EXPECT_EQ(store->LastSequence(), events);
  uint64_t cursor = 0, active = 0;
  ASSERT_TRUE(store->GetCursor(&cursor).ok());
  ASSERT_TRUE(store->GetActiveVersion(&active).ok());
  EXPECT_EQ(cursor, events);
  EXPECT_EQ(active, 1u);
  LoadedModel m;
  ASSERT_TRUE(LoadModel(*store, 0, &m).ok());
  EXPECT_EQ(m.manifest.dim, 16u);
  EXPECT_EQ(m.user_ids.size(), m.manifest.num_users);
  // Every (distinct) observed pair is a training pair: the synthetic events have no repeats.
  EXPECT_EQ(m.train.size(), events);
  EXPECT_TRUE(m.model.AllFinite());
}

TEST_F(CommandsTest, MalformedFileChangesNothing) {
  ASSERT_TRUE(RunFit(SmallFit()).ok());
  const fs::path bad = dir_ / "bad.csv";
  std::ofstream(bad) << "user,item\nm1,t1\nm2\n";
  FitArgs a = SmallFit();
  a.import.events = bad.string();
  Status s = RunFit(a);
  ASSERT_FALSE(s.ok());
  EXPECT_NE(s.message().find(bad.string() + ":3:"), std::string::npos) << s.message();
  std::unique_ptr<store::Store> store;
  ASSERT_TRUE(OpenForRead((dir_ / "db").string(), &store).ok());
  EXPECT_EQ(store->LastSequence(), CountLines(dir_ / "world" / "events.csv") - 1);
  std::vector<store::VersionManifest> versions;
  ASSERT_TRUE(store->ListVersions(&versions).ok());
  EXPECT_EQ(versions.size(), 1u);
}

TEST_F(CommandsTest, EvalJsonReportsFiguresInRange) {
  ASSERT_TRUE(RunFit(SmallFit()).ok());
  EvalArgs e;
  e.db = (dir_ / "db").string();
  e.test = (dir_ / "world" / "test.csv").string();
  e.k = 10;
  e.json = true;
  ::testing::internal::CaptureStdout();
  Status s = RunEval(e);
  const std::string out = ::testing::internal::GetCapturedStdout();
  ASSERT_TRUE(s.ok()) << s.ToString();
  EXPECT_NE(out.find("\"k\":10"), std::string::npos) << out;
  EXPECT_NE(out.find("\"recall\":"), std::string::npos) << out;
  EXPECT_NE(out.find("\"group_shares\":["), std::string::npos) << out;
}

TEST_F(CommandsTest, ExportWritesOneLinePerIdWithDimFloats) {
  ASSERT_TRUE(RunFit(SmallFit()).ok());
  AdminArgs a;
  a.db = (dir_ / "db").string();
  a.out = (dir_ / "export").string();
  ASSERT_TRUE(RunExport(a).ok());
  std::unique_ptr<store::Store> store;
  ASSERT_TRUE(OpenForRead(a.db, &store).ok());
  LoadedModel m;
  ASSERT_TRUE(LoadModel(*store, 0, &m).ok());
  std::ifstream in(dir_ / "export" / "items.tsv");
  std::string line;
  // A header naming the columns, then one line per item; every field separated by one tab.
  ASSERT_TRUE(std::getline(in, line));
  std::string header = "item";
  for (int c = 0; c < 16; ++c) header += "\td" + std::to_string(c);
  EXPECT_EQ(line, header);
  size_t row = 0;
  while (std::getline(in, line)) {
    std::vector<std::string> fields;
    std::stringstream split(line);
    for (std::string f; std::getline(split, f, '\t');) fields.push_back(f);
    ASSERT_EQ(fields.size(), 17u) << line;
    EXPECT_EQ(fields[0], m.item_ids[row]);
    for (size_t c = 0; c < 16; ++c) {
      // %.9g round-trips float32 exactly (9 significant digits suffice for binary32).
      EXPECT_EQ(std::stof(fields[c + 1]), m.model.items()(row, c)) << "row " << row << " col " << c;
    }
    ++row;
  }
  EXPECT_EQ(row, m.item_ids.size());
}

TEST_F(CommandsTest, ActivateRollsBackToAnOlderVersion) {
  FitArgs a = SmallFit();
  ASSERT_TRUE(RunFit(a).ok());
  a.import.events.clear();  // train again on what the store holds
  a.objective = "bpr";
  ASSERT_TRUE(RunFit(a).ok());
  AdminArgs admin;
  admin.db = a.import.db;
  admin.version = 1;
  ASSERT_TRUE(RunActivate(admin).ok());
  std::unique_ptr<store::Store> store;
  ASSERT_TRUE(OpenForRead(admin.db, &store).ok());
  uint64_t active = 0;
  ASSERT_TRUE(store->GetActiveVersion(&active).ok());
  EXPECT_EQ(active, 1u);
  admin.version = 99;
  EXPECT_FALSE(RunActivate(admin).ok());
}

// plumb forget: a user's events leave the log and the user never reaches a later version.
TEST_F(CommandsTest, ForgetRemovesTheUserFromTheLogAndFromFutureVersions) {
  FitArgs fit = SmallFit();
  ASSERT_TRUE(RunFit(fit).ok());
  // The first user of the file, and how many events the file has for them.
  std::ifstream csv(dir_ / "world" / "events.csv");
  std::string line, user;
  std::getline(csv, line);  // header
  size_t total = 0, theirs = 0;
  while (std::getline(csv, line)) {
    const std::string who = line.substr(0, line.find(','));
    if (user.empty()) user = who;
    ++total;
    theirs += who == user;
  }
  ASSERT_GT(theirs, 0u);

  AdminArgs admin;
  admin.db = fit.import.db;
  admin.users = {user};
  ASSERT_TRUE(RunForget(admin).ok());

  fit.import.events.clear();  // train on what the store holds now
  ASSERT_TRUE(RunFit(fit).ok());
  std::unique_ptr<store::Store> store;
  ASSERT_TRUE(OpenForRead(fit.import.db, &store).ok());
  std::vector<store::Event> events;
  ASSERT_TRUE(store->ReadEvents(0, total + 1, &events).ok());
  EXPECT_EQ(events.size(), total - theirs);
  for (const store::Event& e : events) ASSERT_NE(e.user_id, user);
  LoadedModel model;
  ASSERT_TRUE(LoadModel(*store, 0, &model).ok());
  EXPECT_EQ(model.manifest.version, 2u);
  EXPECT_EQ(std::count(model.user_ids.begin(), model.user_ids.end(), user), 0);
  // The user's index is kept (rows are numbered by it) under a name no caller can send, and
  // it holds no interaction in the new version's training data.
  const auto placeholder =
      std::find_if(model.user_ids.begin(), model.user_ids.end(),
                   [](const std::string& id) { return id.starts_with(store::kForgottenIdPrefix); });
  ASSERT_NE(placeholder, model.user_ids.end());
  const uint32_t index = static_cast<uint32_t>(placeholder - model.user_ids.begin());
  EXPECT_TRUE(model.train.items_of(index).empty());
}

}  // namespace
}  // namespace plumb::cli
