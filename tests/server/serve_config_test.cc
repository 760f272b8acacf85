// plumb-serve's settings: flags, the TOML file, and which one wins.
#include "server/serve_config.h"

#include <gtest/gtest.h>

#include <fstream>
#include <sstream>

#include "tests/common/help_keys.h"
#include "tests/server/test_model.h"

namespace plumb::server {
namespace {

int Parse(std::vector<std::string> args, ServeConfig* config, std::string* out = nullptr,
          std::string* err = nullptr) {
  args.insert(args.begin(), "plumb-serve");
  std::vector<const char*> argv;
  for (const auto& a : args) argv.push_back(a.c_str());
  std::ostringstream o, e;
  const int code = ParseServeConfig(static_cast<int>(argv.size()), argv.data(), config, o, e);
  if (out) *out = o.str();
  if (err) *err = e.str();
  return code;
}

TEST(ServeConfigTest, DefaultsMatchTheDocumentedLimits) {
  ServeConfig c;
  ASSERT_EQ(Parse({"--db", "/srv/plumb"}, &c), -1);
  EXPECT_EQ(c.db, "/srv/plumb");
  EXPECT_EQ(c.catchup_interval_ms, 500);
  // ranker.proto documents these defaults.
  EXPECT_EQ(c.limits.max_count, 1000u);
  EXPECT_EQ(c.limits.max_candidates, 10000u);
  EXPECT_EQ(c.limits.max_exclusions, 10000u);
  EXPECT_EQ(c.limits.max_recent, 1000u);
  EXPECT_EQ(c.limits.max_id_bytes, 256u);
  EXPECT_TRUE(c.endpoint.reflection);
}

TEST(ServeConfigTest, FileKeysSetOptionsAndFlagsWinOverTheFile) {
  testing::ScratchDir dir;
  const std::string path = dir.Sub("serve.toml");
  std::ofstream(path) << "db = '/var/lib/plumb'\n"
                         "listen = '0.0.0.0:9000'\n"
                         "max-count = 200\n"
                         "max_recent = 50\n"
                         "fold-in-l2 = 0.25\n"
                         "reflection = false\n"
                         "catchup-interval = '250ms'\n"
                         "exposure_window_max_age = '2m'\n"
                         "shutdown_grace = '1.5s'\n";
  ServeConfig c;
  ASSERT_EQ(Parse({"--config", path, "--max-count", "300"}, &c), -1);
  EXPECT_EQ(c.db, "/var/lib/plumb");
  EXPECT_EQ(c.endpoint.listen, "0.0.0.0:9000");
  EXPECT_EQ(c.limits.max_count, 300u);  // the flag wins
  EXPECT_EQ(c.limits.max_recent, 50u);  // underscore spelling accepted
  EXPECT_FLOAT_EQ(c.fold_in.l2, 0.25f);
  EXPECT_FALSE(c.endpoint.reflection);
  EXPECT_EQ(c.catchup_interval_ms, 250);
  EXPECT_DOUBLE_EQ(c.exposure.window_seconds, 120.0);
  EXPECT_EQ(c.shutdown_grace_ms, 1500);
}

// Durations take a unit (the vocabulary in DEVELOPERS.md); booleans are --x / --no-x.
TEST(ServeConfigTest, DurationsNeedAUnitAndBooleansAreFlagPairs) {
  ServeConfig c;
  std::string err;
  EXPECT_EQ(Parse({"--db", "x", "--catchup-interval", "250"}, &c, nullptr, &err), 2);
  EXPECT_NE(err.find("--catchup-interval: duration '250' needs a unit"), std::string::npos) << err;
  EXPECT_EQ(Parse({"--db", "x", "--catchup-interval", "2h"}, &c, nullptr, &err), 2);
  EXPECT_NE(err.find("outside [10ms, 1h]"), std::string::npos) << err;
  ASSERT_EQ(Parse({"--db", "x", "--no-reflection", "--no-exposure-monitor"}, &c), -1);
  EXPECT_FALSE(c.endpoint.reflection);
  EXPECT_FALSE(c.exposure_monitor);
  std::string out;
  EXPECT_EQ(Parse({"--version"}, &c, &out), 0);
  EXPECT_EQ(out, std::string("plumb-serve ") + PLUMB_VERSION + "\n");
  EXPECT_EQ(Parse({"--db", "x", "--reflection", "false"}, &c, nullptr, &err), 2);  // a flag
}

TEST(ServeConfigTest, BadFilesAndFlagsAreRefusedWithAMessage) {
  testing::ScratchDir dir;
  std::string err;
  ServeConfig c;
  std::ofstream(dir.Sub("unknown.toml")) << "db = 'x'\nmax-cout = 3\n";
  EXPECT_GT(Parse({"--config", dir.Sub("unknown.toml")}, &c, nullptr, &err), 0);
  EXPECT_NE(err.find("unknown key 'max-cout'"), std::string::npos) << err;

  std::ofstream(dir.Sub("type.toml")) << "db = 'x'\nmax-count = 'many'\n";
  EXPECT_GT(Parse({"--config", dir.Sub("type.toml")}, &c, nullptr, &err), 0);
  EXPECT_NE(err.find("max-count"), std::string::npos) << err;

  std::ofstream(dir.Sub("range.toml")) << "db = 'x'\nmax-count = 0\n";
  EXPECT_GT(Parse({"--config", dir.Sub("range.toml")}, &c, nullptr, &err), 0);

  std::ofstream(dir.Sub("broken.toml")) << "db = \n";
  EXPECT_GT(Parse({"--config", dir.Sub("broken.toml")}, &c, nullptr, &err), 0);
  EXPECT_NE(err.find("line 1"), std::string::npos) << err;

  EXPECT_GT(Parse({"--config", dir.Sub("absent.toml")}, &c, nullptr, &err), 0);
  c = ServeConfig{};
  EXPECT_GT(Parse({}, &c, nullptr, &err), 0);
  EXPECT_NE(err.find("--db is required"), std::string::npos) << err;
  EXPECT_GT(Parse({"--db", "x", "--no-such-flag"}, &c, nullptr, &err), 0);
  EXPECT_GT(Parse({"--db", "x", "--log-level", "chatty"}, &c, nullptr, &err), 0);
}

TEST(ServeConfigTest, HelpListsEveryKeyWithItsDefault) {
  ServeConfig c;
  std::string out;
  EXPECT_EQ(Parse({"--help"}, &c, &out), 0);
  for (const char* key : {"--db",
                          "--config",
                          "--listen",
                          "--metrics",
                          "--scratch-dir",
                          "--catchup-interval",
                          "--max-count",
                          "--max-candidates",
                          "--max-exclusions",
                          "--max-recent",
                          "--fold-in-confidence",
                          "--fold-in-l2",
                          "--max-running-calls",
                          "--max-waiting-calls",
                          "--rpc-threads",
                          "--reflection",
                          "--tls-cert",
                          "--tls-key",
                          "--tls-client-ca",
                          "--shutdown-grace",
                          "--log-level",
                          "--version"}) {
    EXPECT_NE(out.find(key), std::string::npos) << key;
  }
  EXPECT_NE(out.find("=500ms"), std::string::npos) << out;  // catch-up interval
  EXPECT_NE(out.find("=1000"), std::string::npos) << out;  // max count
}

// deploy/plumb-serve.toml documents every key: it must parse, hold the built-in defaults for
// the keys below, and name every flag that --help lists.
TEST(ServeConfigTest, ExampleFileParsesAndNamesEveryKey) {
  const std::string example = std::string(PLUMB_SOURCE_DIR) + "/deploy/plumb-serve.toml";
  ServeConfig c;
  std::string err;
  ASSERT_EQ(Parse({"--config", example}, &c, nullptr, &err), -1) << err;
  ServeConfig d;
  ASSERT_EQ(Parse({"--db", c.db}, &d), -1);
  EXPECT_EQ(c.limits.max_count, d.limits.max_count);
  EXPECT_EQ(c.catchup_interval_ms, d.catchup_interval_ms);
  EXPECT_EQ(c.exposure_monitor, d.exposure_monitor);

  std::ifstream in(example);
  std::stringstream text;
  text << in.rdbuf();
  std::string help;
  ServeConfig h;
  ASSERT_EQ(Parse({"--help"}, &h, &help), 0);
  const std::vector<std::string> keys = plumb::testing::HelpKeys(help);
  for (const std::string& key : keys) {
    EXPECT_NE(text.str().find(key + " = "), std::string::npos) << "example lacks " << key;
  }
  EXPECT_GT(keys.size(), 20u);
}

// deploy/plumb-replica.toml (deploy/systemd/plumb-replica.service) parses: every key is one
// plumb-serve knows, it follows NATS instead of a store, and its directory is its own.
TEST(ServeConfigTest, ExampleReplicaFileParses) {
  const std::string example = std::string(PLUMB_SOURCE_DIR) + "/deploy/plumb-replica.toml";
  ServeConfig c;
  std::string err;
  ASSERT_EQ(Parse({"--config", example}, &c, nullptr, &err), -1) << err;
  EXPECT_EQ(c.replica_nats.servers.rfind("nats://", 0), 0u) << c.replica_nats.servers;
  EXPECT_EQ(c.db, "/var/lib/plumb-replica");
  EXPECT_FALSE(c.replica_nats.token_file.empty());
  EXPECT_EQ(c.replica_stream, "PLUMB_VERSIONS");
}

}  // namespace
}  // namespace plumb::server
