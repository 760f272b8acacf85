#include "trainer/online/train_config.h"

#include <gtest/gtest.h>

#include <cctype>
#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include "tests/common/help_keys.h"
#include "tests/common/scratch_dir.h"

namespace plumb::online {
namespace {

using ::plumb::testing::ScratchDir;

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
commit_window = "10ms"
dedup_window = "7d"
objective = "bpr"
dim = 32
learning_rate = 0.1
publish_interval = "5s"
shutdown_grace = "1.5s"
auto_activate = false
)";
  TrainConfig c;
  ASSERT_EQ(Parse({"--config", path, "--dim", "48", "--sync"}, &c), std::nullopt);
  EXPECT_EQ(c.db, "/var/lib/plumb");
  EXPECT_EQ(c.listen, "127.0.0.1:7700");
  EXPECT_TRUE(c.sync);                  // flag wins
  EXPECT_EQ(c.commit_window_ms, 10.0);
  EXPECT_EQ(c.shutdown_grace_seconds, 1.5);
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
  EXPECT_EQ(parse_file("db = [\n"), 2);                             // not TOML
  EXPECT_EQ(parse_file("db = \"/x\"\ncommit_window = \"3ms\"\n"), std::nullopt);
  EXPECT_EQ(parse_file("db = \"/x\"\ncommit_window = 3\n"), 2);         // a duration is a text
  EXPECT_EQ(parse_file("db = \"/x\"\ncommit_window = \"3\"\n"), 2);     // ... with a unit
  EXPECT_EQ(parse_file("db = \"/x\"\npublish_interval = \"0\"\n"), 2);  // must be positive
  EXPECT_EQ(parse_file("db = \"/x\"\nversion = \"1\"\n"), 2);           // not a key
  TrainConfig c;
  EXPECT_EQ(Parse({"--db", "/x", "--no-such-flag"}, &c), 2);
  EXPECT_EQ(Parse({"--db", "/x", "--holdout-fraction", "0.9"}, &c), 2);
  EXPECT_EQ(Parse({"--db", "/x", "--shutdown-grace", "5"}, &c), 2);
}

// The JetStream keys are checked only when a source is configured, and then together.
TEST(TrainConfig, JetStreamKeysAreChecked) {
  auto parse = [](std::vector<std::string> extra) {
    std::vector<std::string> args = {"--db", "/x", "--jetstream-servers", "nats://127.0.0.1:4222"};
    args.insert(args.end(), extra.begin(), extra.end());
    TrainConfig c;
    return Parse(args, &c);
  };
  EXPECT_EQ(parse({}), std::nullopt);
  EXPECT_EQ(parse({"--jetstream-ack-wait", "500ms"}), 2);  // below 1s
  EXPECT_EQ(parse({"--jetstream-ack-wait", "30"}), 2);     // no unit
  EXPECT_EQ(parse({"--jetstream-tls-cert", "c.pem"}), 2);  // key missing
  EXPECT_EQ(parse({"--jetstream-fetch-batch", "0"}), 2);
  EXPECT_EQ(parse({"--jetstream-create-replicas", "6"}), 2);  // JetStream allows 1..5
  EXPECT_EQ(parse({"--jetstream-create-replicas", "3"}), std::nullopt);
  EXPECT_EQ(parse({"--jetstream-stream", ""}), 2);
  TrainConfig c;  // without servers the other keys are not in use
  EXPECT_EQ(Parse({"--db", "/x", "--jetstream-ack-wait", "500ms"}, &c), std::nullopt);
}

TEST(TrainConfig, VersionPrintsTheProgramAndExitsZero) {
  TrainConfig c;
  ::testing::internal::CaptureStdout();
  EXPECT_EQ(Parse({"--version"}, &c), 0);
  EXPECT_EQ(::testing::internal::GetCapturedStdout(),
            std::string("plumb-train ") + PLUMB_VERSION + "\n");
}

TEST(TrainConfig, HelpExitsZero) {
  TrainConfig c;
  ::testing::internal::CaptureStdout();
  EXPECT_EQ(Parse({"--help"}, &c), 0);
  const std::string help = ::testing::internal::GetCapturedStdout();
  // Every key is listed, with its default.
  for (const char* flag :
       {"--db", "--listen", "--metrics", "--sync", "--commit-window", "--keep-versions",
        "--dedup-window", "--token-file", "--tls-cert", "--tls-key", "--allow-insecure-remote",
        "--objective", "--dim", "--publish-every-events", "--gate-tolerance", "--auto-activate"}) {
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

// deploy/plumb-train.toml documents every key with its default: it must parse, name every
// flag that --help lists, and (db aside) hold exactly the built-in defaults.
TEST(TrainConfig, ExampleFileCoversEveryKeyWithItsDefault) {
  const std::string example = std::string(PLUMB_SOURCE_DIR) + "/deploy/plumb-train.toml";
  TrainConfig c;
  ASSERT_EQ(Parse({"--config", example}, &c), std::nullopt);
  TrainConfig d;
  ASSERT_EQ(Parse({"--db", c.db}, &d), std::nullopt);
  EXPECT_EQ(c.listen, d.listen);
  EXPECT_EQ(c.metrics, d.metrics);
  EXPECT_EQ(c.sync, d.sync);
  EXPECT_EQ(c.commit_window_ms, d.commit_window_ms);
  EXPECT_EQ(c.max_group_events, d.max_group_events);
  EXPECT_EQ(c.max_batch_events, d.max_batch_events);
  EXPECT_EQ(c.keep_versions, d.keep_versions);
  EXPECT_EQ(c.dedup_window, d.dedup_window);
  EXPECT_EQ(c.retention_max_age_ms, d.retention_max_age_ms);
  EXPECT_EQ(c.retention_max_log_mb, d.retention_max_log_mb);
  EXPECT_EQ(c.retention_interval_ms, d.retention_interval_ms);
  EXPECT_EQ(c.shutdown_grace_seconds, d.shutdown_grace_seconds);
  EXPECT_EQ(c.online.objective, d.online.objective);
  EXPECT_EQ(c.online.dim, d.online.dim);
  EXPECT_EQ(c.online.cpr_k, d.online.cpr_k);
  EXPECT_EQ(c.online.beta, d.online.beta);
  EXPECT_EQ(c.online.learning_rate, d.online.learning_rate);
  EXPECT_EQ(c.online.l2, d.online.l2);
  EXPECT_EQ(c.online.batch_size, d.online.batch_size);
  EXPECT_EQ(c.online.replay_ratio, d.online.replay_ratio);
  EXPECT_EQ(c.online.holdout_fraction, d.online.holdout_fraction);
  EXPECT_EQ(c.online.publish_every_events, d.online.publish_every_events);
  EXPECT_EQ(c.online.publish_every_seconds, d.online.publish_every_seconds);
  EXPECT_EQ(c.online.gate_k, d.online.gate_k);
  EXPECT_EQ(c.online.gate_tolerance, d.online.gate_tolerance);
  EXPECT_EQ(c.online.gate_max_row_norm, d.online.gate_max_row_norm);
  EXPECT_EQ(c.online.auto_activate, d.online.auto_activate);

  std::ifstream in(example);
  std::stringstream text;
  text << in.rdbuf();
  TrainConfig h;
  ::testing::internal::CaptureStdout();
  ASSERT_EQ(Parse({"--help"}, &h), 0);
  const std::vector<std::string> keys =
      plumb::testing::HelpKeys(::testing::internal::GetCapturedStdout());
  for (const std::string& key : keys) {
    EXPECT_NE(text.str().find("\n" + key + " = "), std::string::npos)
        << key << " is not in " << example;
  }
  EXPECT_GE(keys.size(), 35u);
}

}  // namespace
}  // namespace plumb::online
