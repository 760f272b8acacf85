#include "trainer/online/train_config.h"

#include <fstream>
#include <string>
#include <vector>

#include <gtest/gtest.h>

#include "tests/online/scratch_dir.h"

namespace plumb::online {
namespace {

using testing::ScratchDir;

std::optional<int> Parse(std::vector<std::string> args, TrainConfig* config) {
  args.insert(args.begin(), "plumb-train");
  std::vector<const char*> argv;
  for (const std::string& a : args) argv.push_back(a.c_str());
  return ParseTrainConfig(static_cast<int>(argv.size()), argv.data(), config);
}

TEST(TrainConfig, DefaultsNeedOnlyADatabase) {
  TrainConfig c;
  EXPECT_EQ(Parse({}, &c), 2);  // no db
  TrainConfig d;
  ASSERT_EQ(Parse({"--db", "/tmp/x"}, &d), std::nullopt);
  EXPECT_EQ(d.db, "/tmp/x");
  EXPECT_EQ(d.listen, "127.0.0.1:7601");
  EXPECT_EQ(d.metrics, "127.0.0.1:9465");
  EXPECT_TRUE(d.sync);
  EXPECT_EQ(d.online.objective, "cpr");
  EXPECT_EQ(d.online.dim, OnlineOptions().dim);
}

TEST(TrainConfig, FileSetsKeysAndFlagsWin) {
  ScratchDir dir;
  const std::string path = dir.Sub("plumb-train.toml");
  std::ofstream(path) << R"(
db = "/var/lib/plumb"
listen = "127.0.0.1:7700"
sync = false
commit_window_ms = 10
dedup_window = "7d"
objective = "bpr"
dim = 32
learning_rate = 0.1
publish_every_seconds = 5
auto_activate = false
)";
  TrainConfig c;
  ASSERT_EQ(Parse({"--config", path, "--dim", "48", "--sync"}, &c), std::nullopt);
  EXPECT_EQ(c.db, "/var/lib/plumb");
  EXPECT_EQ(c.listen, "127.0.0.1:7700");
  EXPECT_TRUE(c.sync);  // flag wins
  EXPECT_EQ(c.commit_window_ms, 10.0);  // an integer is fine for a float key
  EXPECT_EQ(c.dedup_window, "7d");
  EXPECT_EQ(c.online.objective, "bpr");
  EXPECT_EQ(c.online.dim, 48u);  // flag wins
  EXPECT_EQ(c.online.learning_rate, 0.1);
  EXPECT_EQ(c.online.publish_every_seconds, 5.0);
  EXPECT_FALSE(c.online.auto_activate);

  TrainConfig n;
  ASSERT_EQ(Parse({"--config", path, "--no-auto-activate", "--metrics", ""}, &n), std::nullopt);
  EXPECT_FALSE(n.online.auto_activate);
  EXPECT_EQ(n.metrics, "");
}

TEST(TrainConfig, BadFilesAndValuesAreRefused) {
  ScratchDir dir;
  auto parse_file = [&](const std::string& text) {
    const std::string path = dir.Sub("c.toml");
    std::ofstream(path) << text;
    TrainConfig c;
    return Parse({"--config", path}, &c);
  };
  EXPECT_EQ(parse_file("db = \"/x\"\nlisten_port = 1\n"), 2);  // unknown key
  EXPECT_EQ(parse_file("db = \"/x\"\ndim = \"sixty\"\n"), 2);  // wrong type
  EXPECT_EQ(parse_file("db = \"/x\"\ndim = -3\n"), 2);         // negative unsigned
  EXPECT_EQ(parse_file("db = \"/x\"\nobjective = \"wals\"\n"), 2);
  EXPECT_EQ(parse_file("db = \"/x\"\ndedup_window = \"3 weeks\"\n"), 2);
  EXPECT_EQ(parse_file("db = \"/x\"\ntls_cert = \"c.pem\"\n"), 2);  // key missing
  EXPECT_EQ(parse_file("db = [\n"), 2);                                // not TOML
  EXPECT_EQ(parse_file("db = \"/x\"\ncommit_window_ms = 2.5\n"), std::nullopt);
  TrainConfig c;
  EXPECT_EQ(Parse({"--db", "/x", "--no-such-flag"}, &c), 2);
  EXPECT_EQ(Parse({"--db", "/x", "--holdout-fraction", "0.9"}, &c), 2);
}

TEST(TrainConfig, HelpExitsZero) {
  TrainConfig c;
  ::testing::internal::CaptureStdout();
  EXPECT_EQ(Parse({"--help"}, &c), 0);
  const std::string help = ::testing::internal::GetCapturedStdout();
  // Every key is listed, with its default.
  for (const char* flag : {"--db", "--listen", "--metrics", "--sync", "--commit-window-ms",
                           "--keep-versions", "--dedup-window", "--token-file", "--tls-cert",
                           "--tls-key", "--allow-insecure-remote", "--objective", "--dim",
                           "--publish-every-events", "--gate-tolerance", "--auto-activate"}) {
    EXPECT_NE(help.find(flag), std::string::npos) << flag;
  }
  EXPECT_NE(help.find("127.0.0.1:7601"), std::string::npos);
  EXPECT_NE(help.find("24h"), std::string::npos);
}

TEST(Duration, Units) {
  int64_t ms = -1;
  ASSERT_TRUE(ParseDuration("0", &ms).ok());
  EXPECT_EQ(ms, 0);
  ASSERT_TRUE(ParseDuration("250ms", &ms).ok());
  EXPECT_EQ(ms, 250);
  ASSERT_TRUE(ParseDuration("1.5s", &ms).ok());
  EXPECT_EQ(ms, 1500);
  ASSERT_TRUE(ParseDuration("24h", &ms).ok());
  EXPECT_EQ(ms, 86'400'000);
  ASSERT_TRUE(ParseDuration("7d", &ms).ok());
  EXPECT_EQ(ms, 604'800'000);
  EXPECT_FALSE(ParseDuration("24", &ms).ok());
  EXPECT_FALSE(ParseDuration("-1h", &ms).ok());
  EXPECT_FALSE(ParseDuration("h", &ms).ok());
}

}  // namespace
}  // namespace plumb::online
