// The offline commands end to end on a small synthetic world: synth -> fit -> eval ->
// export -> versions/activate, through the same functions the `plumb` binary calls.
#include "cli/commands.h"

#include <gtest/gtest.h>
#include <unistd.h>

#include <algorithm>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "cli/eval_checks.h"
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

// Two versions side by side: each column is what evaluating that version alone gives (both
// versions know every user and item, so both columns use the same test pairs).
TEST_F(CommandsTest, EvalPrintsSeveralVersionsSideBySide) {
  FitArgs a = SmallFit();
  ASSERT_TRUE(RunFit(a).ok());
  a.import.events.clear();
  a.objective = "bpr";
  ASSERT_TRUE(RunFit(a).ok());
  EvalArgs e;
  e.db = a.import.db;
  e.test = (dir_ / "world" / "test.csv").string();
  e.k = 10;
  e.json = true;
  auto run = [&](std::vector<uint64_t> versions) {
    e.versions = std::move(versions);
    ::testing::internal::CaptureStdout();
    Status s = RunEval(e);
    std::string out = ::testing::internal::GetCapturedStdout();
    EXPECT_TRUE(s.ok()) << s.ToString();
    return out;
  };
  const std::string both = run({1, 2});
  const std::string first = run({1});
  const std::string second = run({2});
  // {"k":10,"test_group_shares":[..],"reports":{"v1 cpr b=3":{...},"v2 bpr":{...}}}
  auto report = [](const std::string& json, const std::string& label) {
    const size_t at = json.find("\"" + label + "\":{");
    if (at == std::string::npos) return std::string();
    return json.substr(at, json.find('}', at) - at);
  };
  ASSERT_FALSE(report(both, "v1 cpr b=3").empty()) << both;
  ASSERT_FALSE(report(both, "v2 bpr").empty()) << both;
  EXPECT_EQ(report(both, "v1 cpr b=3"), report(first, "v1 cpr b=3"));
  EXPECT_EQ(report(both, "v2 bpr"), report(second, "v2 bpr"));
  EXPECT_NE(report(both, "v1 cpr b=3").substr(12), report(both, "v2 bpr").substr(7));
  // The list form means the same.
  EXPECT_EQ(run({2, 1, 2}).find("\"v2 bpr\""), run({2, 1}).find("\"v2 bpr\""));
}

// Test pairs naming a user or item no evaluated version knows are left out, and eval says how
// many and of which versions, in a sentence that reads right for one version and for several.
TEST_F(CommandsTest, EvalNamesTheTestPairsItLeavesOut) {
  FitArgs a = SmallFit();
  ASSERT_TRUE(RunFit(a).ok());
  a.import.events.clear();
  a.objective = "bpr";
  ASSERT_TRUE(RunFit(a).ok());
  std::ifstream world_test(dir_ / "world" / "test.csv");
  std::string header, known;
  ASSERT_TRUE(std::getline(world_test, header) && std::getline(world_test, known));
  const fs::path test = dir_ / "test_with_unknown.csv";
  std::ofstream(test) << header << "\n"
                      << known << "\nnobody-we-know," << known.substr(known.find(',') + 1) << "\n";
  EvalArgs e;
  e.db = a.import.db;
  e.test = test.string();
  e.k = 10;
  e.json = true;
  auto warning = [&](std::vector<uint64_t> versions) {
    e.versions = std::move(versions);
    ::testing::internal::CaptureStderr();
    ::testing::internal::CaptureStdout();
    const Status s = RunEval(e);
    ::testing::internal::GetCapturedStdout();
    const std::string err = ::testing::internal::GetCapturedStderr();
    EXPECT_TRUE(s.ok()) << s.ToString();
    return err;
  };
  EXPECT_NE(warning({1, 2}).find("eval: 1 of 2 test pairs name a user or item that versions 1, 2 "
                                 "do not all know; they are left out of every column"),
            std::string::npos);
  EXPECT_NE(warning({1}).find("eval: 1 of 2 test pairs name a user or item that version 1 does "
                              "not know; they are left out\n"),
            std::string::npos);
}

// The test file is the training file: every test pair is a training pair, nothing can be
// evaluated, and eval says so instead of printing zeros in silence.
TEST_F(CommandsTest, EvalWarnsWhenTheTestFileIsTheTrainingFile) {
  ASSERT_TRUE(RunFit(SmallFit()).ok());
  EvalArgs e;
  e.db = (dir_ / "db").string();
  e.test = (dir_ / "world" / "events.csv").string();
  ::testing::internal::CaptureStderr();
  ::testing::internal::CaptureStdout();
  Status s = RunEval(e);
  const std::string out = ::testing::internal::GetCapturedStdout();
  const std::string err = ::testing::internal::GetCapturedStderr();
  ASSERT_TRUE(s.ok()) << s.ToString();
  EXPECT_NE(err.find("Is the test file the training file?"), std::string::npos) << err;
  EXPECT_NE(err.find("nothing is evaluated"), std::string::npos) << err;
  EXPECT_NE(out.find("users evaluated"), std::string::npos) << out;
  // The real test file raises no such warning.
  e.test = (dir_ / "world" / "test.csv").string();
  ::testing::internal::CaptureStderr();
  ::testing::internal::CaptureStdout();
  ASSERT_TRUE(RunEval(e).ok());
  ::testing::internal::GetCapturedStdout();
  EXPECT_EQ(::testing::internal::GetCapturedStderr().find("training pairs"), std::string::npos);
}

TEST_F(CommandsTest, EvalWarnsWhenKCoversTheCatalogue) {
  ASSERT_TRUE(RunFit(SmallFit()).ok());
  EvalArgs e;
  e.db = (dir_ / "db").string();
  e.test = (dir_ / "world" / "test.csv").string();
  e.k = 200;  // the world has 200 tools
  ::testing::internal::CaptureStderr();
  ::testing::internal::CaptureStdout();
  ASSERT_TRUE(RunEval(e).ok());
  ::testing::internal::GetCapturedStdout();
  const std::string err = ::testing::internal::GetCapturedStderr();
  EXPECT_NE(err.find("K = 200 is at least the catalogue (200 items)"), std::string::npos) << err;
  EXPECT_EQ(LargeKWarning(199, 200), "");
}

// Importing the same file twice without event ids doubles the log: said, not silent. With
// event ids the store drops the repeats itself and no warning is needed.
TEST_F(CommandsTest, ImportingTheSameFileTwiceWithoutEventIdsWarns) {
  ImportArgs a;
  a.events = (dir_ / "world" / "events.csv").string();
  a.db = (dir_ / "db").string();
  a.sync = false;
  ::testing::internal::CaptureStderr();
  ASSERT_TRUE(RunImport(a).ok());
  EXPECT_EQ(::testing::internal::GetCapturedStderr().find("warning"), std::string::npos);
  ::testing::internal::CaptureStderr();
  ASSERT_TRUE(RunImport(a).ok());
  const std::string err = ::testing::internal::GetCapturedStderr();
  const size_t events = CountLines(dir_ / "world" / "events.csv") - 1;
  EXPECT_NE(err.find("imported the same events before"), std::string::npos) << err;
  EXPECT_NE(err.find("log entries 1.." + std::to_string(events)), std::string::npos) << err;
  // Another file is not mistaken for it.
  const fs::path other = dir_ / "other.csv";
  std::ofstream(other) << "user,item\nm1,t1\n";
  a.events = other.string();
  ::testing::internal::CaptureStderr();
  ASSERT_TRUE(RunImport(a).ok());
  EXPECT_EQ(::testing::internal::GetCapturedStderr().find("warning"), std::string::npos);

  const fs::path with_ids = dir_ / "ids.csv";
  std::ofstream(with_ids) << "user,item,event_id\nm1,t1,e1\nm2,t2,e2\n";
  a.events = with_ids.string();
  a.db = (dir_ / "db_ids").string();
  ASSERT_TRUE(RunImport(a).ok());
  ::testing::internal::CaptureStderr();
  ASSERT_TRUE(RunImport(a).ok());
  const std::string again = ::testing::internal::GetCapturedStderr();
  EXPECT_NE(again.find("0 events appended, 2 duplicates"), std::string::npos) << again;
  EXPECT_EQ(again.find("warning"), std::string::npos) << again;
}

// compare on the user's own files: the objectives side by side, no truth column.
TEST_F(CommandsTest, CompareRunsOnTheUsersOwnFiles) {
  CompareArgs c;
  c.events = (dir_ / "world" / "events.csv").string();
  c.test = (dir_ / "world" / "test.csv").string();
  c.dim = 8;
  c.epochs = 2;
  c.threads = 1;
  c.k = 10;
  c.json = true;
  c.tune_betas = {1.0, 3.0};
  ::testing::internal::CaptureStdout();
  Status s = RunCompare(c);
  const std::string out = ::testing::internal::GetCapturedStdout();
  ASSERT_TRUE(s.ok()) << s.ToString();
  for (const char* label : {"\"cpr b=3\"", "\"cpr b=1\"", "\"bpr\"", "\"bce\"", "\"cpr tuned\""}) {
    EXPECT_NE(out.find(label), std::string::npos) << label << " in " << out;
  }
  EXPECT_EQ(out.find("\"truth\""), std::string::npos) << out;
  c.test.clear();
  EXPECT_FALSE(RunCompare(c).ok());  // --events needs --test
}

// tune on a CSV alone: a temporary store, removed afterwards.
TEST_F(CommandsTest, TuneRunsOnAFileWithoutAStore) {
  TuneArgs t;
  t.fit.import.events = (dir_ / "world" / "events.csv").string();
  t.fit.holdout = 0.1;  // plumb tune's default
  t.fit.dim = 8;
  t.fit.epochs = 2;
  t.fit.threads = 1;
  t.betas = {1.0, 3.0};
  t.k = 10;
  auto temporary_stores = [] {
    size_t n = 0;
    const std::string prefix = "plumb-tune-" + std::to_string(::getpid()) + "-";
    for (const auto& e : fs::directory_iterator(fs::temp_directory_path())) {
      n += e.path().filename().string().starts_with(prefix) ? 1 : 0;
    }
    return n;
  };
  ::testing::internal::CaptureStdout();
  Status s = RunTune(t);
  const std::string out = ::testing::internal::GetCapturedStdout();
  ASSERT_TRUE(s.ok()) << s.ToString();
  EXPECT_NE(out.find("chosen: "), std::string::npos) << out;
  EXPECT_EQ(temporary_stores(), 0u);
  t.publish = true;
  EXPECT_FALSE(RunTune(t).ok());  // publishing needs a store
}

}  // namespace
}  // namespace plumb::cli
