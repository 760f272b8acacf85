// FlagFile: options that are flags and keys of a TOML file; which one wins, and the errors
// that name the key and the file.
#include "config/flag_file.h"

#include <gtest/gtest.h>

#include <fstream>
#include <string>
#include <vector>

#include "tests/common/scratch_dir.h"

namespace plumb::config {
namespace {

using ::plumb::testing::ScratchDir;

// A small set of settings of every supported type.
struct Settings {
  std::string name = "default";
  bool on = true;
  uint32_t count = 7;
  int level = -1;
  float ratio = 0.5f;
  double rate = 0.25;
  std::vector<double> betas = {1.0, 2.0};
};

class FlagFileTest : public ::testing::Test {
 protected:
  FlagFileTest() : keys_(&app_) {
    keys_.Add("name", &s_.name, "a text");
    keys_.Add("on", &s_.on, "a switch");
    keys_.Add("count", &s_.count, "a count")->check(CLI::Range(1u, 100u));
    keys_.Add("level", &s_.level, "a signed number");
    keys_.Add("ratio", &s_.ratio, "a float");
    keys_.Add("max_rate", &s_.rate, "a double");
    keys_.Add("betas", &s_.betas, "numbers");
  }

  // Parses `args` (after a program name), then the file holding `toml`.
  Status Run(std::vector<std::string> args, const std::string& toml) {
    args.insert(args.begin(), "prog");
    std::vector<const char*> argv;
    for (const std::string& a : args) argv.push_back(a.c_str());
    app_.parse(static_cast<int>(argv.size()), argv.data());
    std::ofstream(path_) << toml;
    return keys_.Apply(path_);
  }

  ScratchDir dir_;
  const std::string path_ = dir_.Sub("settings.toml");
  CLI::App app_{"test"};
  Settings s_;
  FlagFile keys_;
};

TEST_F(FlagFileTest, FileSetsEveryTypeAndTheFlagWins) {
  ASSERT_TRUE(Run({"--count", "9", "--no-on"},
                  "name = 'from file'\non = true\ncount = 50\nlevel = -3\nratio = 0.125\n"
                  "max_rate = 2\nbetas = [1.5, 3]\n")
                  .ok());
  EXPECT_EQ(s_.name, "from file");
  EXPECT_FALSE(s_.on);      // the flag --no-on wins over on = true
  EXPECT_EQ(s_.count, 9u);  // the flag wins over count = 50
  EXPECT_EQ(s_.level, -3);
  EXPECT_EQ(s_.ratio, 0.125f);
  EXPECT_EQ(s_.rate, 2.0);  // an integer is a number
  EXPECT_EQ(s_.betas, (std::vector<double>{1.5, 3.0}));
}

TEST_F(FlagFileTest, AKeyMaySpellItsWordsWithDashes) {
  ASSERT_TRUE(Run({}, "max-rate = 0.75\n").ok());
  EXPECT_EQ(s_.rate, 0.75);
  EXPECT_EQ(FlagFile::FlagName("max_rate"), "--max-rate");
}

TEST_F(FlagFileTest, DefaultsStayWithoutFlagOrKey) {
  ASSERT_TRUE(Run({}, "").ok());
  EXPECT_EQ(s_.name, "default");
  EXPECT_TRUE(s_.on);
  EXPECT_EQ(s_.count, 7u);
  EXPECT_EQ(s_.betas, (std::vector<double>{1.0, 2.0}));
}

TEST_F(FlagFileTest, AnUnknownKeyIsNamedWithTheFileAndLine) {
  const Status s = Run({}, "name = 'x'\ncont = 3\n");
  ASSERT_FALSE(s.ok());
  EXPECT_EQ(s.message(), "config file '" + path_ + "' line 2: unknown key 'cont' (see --help)");
}

TEST_F(FlagFileTest, WrongTypesAreRefusedNamingTheKey) {
  struct Case {
    const char* toml;
    const char* message;
  };
  for (const Case& c : {Case{"count = 'many'\n", "key 'count' expects an integer"},
                        Case{"count = -1\n", "key 'count' must not be negative"},
                        Case{"count = 5000000000\n", "key 'count' is too large"},
                        Case{"level = 3000000000\n", "key 'level' is too large"},
                        Case{"level = -3000000000\n", "key 'level' is too small"},
                        Case{"on = 'yes'\n", "key 'on' expects true or false"},
                        Case{"name = 3\n", "key 'name' expects a string"},
                        Case{"max_rate = 'fast'\n", "key 'max_rate' expects a number"},
                        Case{"betas = 2\n", "key 'betas' expects an array of numbers"},
                        Case{"betas = [1, 'b']\n", "key 'betas' expects an array of numbers"}}) {
    Settings before = s_;
    const Status s = Run({}, c.toml);
    ASSERT_FALSE(s.ok()) << c.toml;
    EXPECT_NE(s.message().find(c.message), std::string::npos) << s.message();
    EXPECT_NE(s.message().find("config file '" + path_ + "' line 1: "), std::string::npos)
        << s.message();
    EXPECT_EQ(s_.count, before.count);
    EXPECT_EQ(s_.name, before.name);
  }
}

TEST_F(FlagFileTest, TheOptionsChecksApplyToTheFile) {
  const Status s = Run({}, "count = 0\n");  // CLI::Range(1, 100) refuses it
  ASSERT_FALSE(s.ok());
  EXPECT_NE(s.message().find("key 'count': "), std::string::npos) << s.message();
}

TEST_F(FlagFileTest, AnUnparsableOrMissingFileIsAnError) {
  Status s = Run({}, "name = \n");
  ASSERT_FALSE(s.ok());
  EXPECT_NE(s.message().find("config file '" + path_ + "' line 1: "), std::string::npos)
      << s.message();
  s = keys_.Apply(dir_.Sub("absent.toml"));
  ASSERT_FALSE(s.ok());
  EXPECT_NE(s.message().find("absent.toml"), std::string::npos) << s.message();
}

TEST_F(FlagFileTest, HelpShowsDefaultsAndSwitchPairs) {
  const std::string help = app_.help();
  EXPECT_NE(help.find("--on,--no-on"), std::string::npos) << help;
  EXPECT_NE(help.find("--name TEXT=default"), std::string::npos) << help;
  EXPECT_NE(help.find("=7"), std::string::npos) << help;  // after the range check's text
  EXPECT_NE(help.find("--betas FLOAT=1,2"), std::string::npos) << help;
}

}  // namespace
}  // namespace plumb::config
