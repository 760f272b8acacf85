// Token files, status names and the id sources of the tools.
#include "tools/client_channel.h"

#include <gtest/gtest.h>
#include <sys/stat.h>

#include <fstream>

#include "tests/store/store_fixture.h"
#include "tools/id_source.h"

namespace plumb::tools {
namespace {

std::string WriteFile(const std::string& name, const std::string& text) {
  const std::string path = ::testing::TempDir() + "/" + name;
  std::ofstream(path, std::ios::trunc) << text;
  return path;
}

TEST(BearerTokenTest, TrimsSurroundingWhitespace) {
  std::string token;
  ASSERT_TRUE(ReadBearerToken(WriteFile("token", "  abc-123_XYZ\n\n"), &token).ok());
  EXPECT_EQ(token, "abc-123_XYZ");
}

TEST(BearerTokenTest, RefusesEmptyOrSpacedTokens) {
  std::string token = "unchanged";
  EXPECT_EQ(ReadBearerToken(WriteFile("empty", " \n"), &token).code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(ReadBearerToken(WriteFile("spaced", "ab cd\n"), &token).code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(ReadBearerToken(::testing::TempDir() + "/none", &token).code(), Status::Code::kIoError);
  EXPECT_EQ(token, "unchanged");
}

// Names as the gRPC protocol documents them (doc/statuscodes.md).
TEST(StatusNameTest, EveryCodeHasItsProtocolName) {
  const char* names[] = {"OK",
                         "CANCELLED",
                         "UNKNOWN",
                         "INVALID_ARGUMENT",
                         "DEADLINE_EXCEEDED",
                         "NOT_FOUND",
                         "ALREADY_EXISTS",
                         "PERMISSION_DENIED",
                         "RESOURCE_EXHAUSTED",
                         "FAILED_PRECONDITION",
                         "ABORTED",
                         "OUT_OF_RANGE",
                         "UNIMPLEMENTED",
                         "INTERNAL",
                         "UNAVAILABLE",
                         "DATA_LOSS",
                         "UNAUTHENTICATED"};
  for (int code = 0; code <= 16; ++code) {
    EXPECT_EQ(StatusCodeName(static_cast<grpc::StatusCode>(code)), names[code]) << code;
  }
  EXPECT_EQ(StatusCodeName(static_cast<grpc::StatusCode>(42)), "CODE_42");
  EXPECT_EQ(DescribeStatus(grpc::Status(grpc::StatusCode::NOT_FOUND, "unknown user 'x'")),
            "NOT_FOUND: unknown user 'x'");
}

TEST(MakeChannelTest, RefusesEmptyTargetAndUnreadableCa) {
  std::shared_ptr<grpc::Channel> channel;
  EXPECT_EQ(MakeChannel({"", "", ""}, &channel).code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(MakeChannel({"127.0.0.1:1", ::testing::TempDir() + "/no-ca.pem", ""}, &channel).code(),
            Status::Code::kIoError);
  EXPECT_TRUE(MakeChannel({"127.0.0.1:1", "", ""}, &channel).ok());
  EXPECT_NE(channel, nullptr);
}

TEST(IdFileTest, OneIdPerLineFirstCsvColumnBlankLinesSkipped) {
  std::vector<std::string> ids;
  ASSERT_TRUE(ReadIdFile(WriteFile("ids.txt", "m1\n  m2 \r\n\nt7,Sturdy hammer #1\n"), &ids).ok());
  EXPECT_EQ(ids, (std::vector<std::string>{"m1", "m2", "t7"}));
}

TEST(IdFileTest, AByteOrderMarkBeforeTheFirstIdIsIgnored) {
  std::vector<std::string> ids;
  ASSERT_TRUE(ReadIdFile(WriteFile("bom_ids.txt", "\xEF\xBB\xBFm1\r\nm2\r\n"), &ids).ok());
  EXPECT_EQ(ids, (std::vector<std::string>{"m1", "m2"}));
}

TEST(IdFileTest, RefusesOverlongIdsAndEmptyFiles) {
  std::vector<std::string> ids;
  const Status s = ReadIdFile(WriteFile("long.txt", "ok\n" + std::string(257, 'x') + "\n"), &ids);
  EXPECT_EQ(s.code(), Status::Code::kInvalidArgument);
  EXPECT_NE(s.message().find("long.txt:2"), std::string::npos) << s.message();
  EXPECT_EQ(ReadIdFile(WriteFile("blank.txt", "\n\n"), &ids).code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(ReadIdFile(::testing::TempDir() + "/absent.txt", &ids).code(), Status::Code::kNotFound);
}

class ActiveIdsTest : public store::testing::StoreFixture {};

// Only the ids the active version was trained on: dictionary entries added after it (users
// the trainer has seen since) would be NOT_FOUND at the server.
TEST_F(ActiveIdsTest, ReadsTheActiveVersionsUsersAndItems) {
  std::vector<std::string> users, items;
  EXPECT_EQ(ReadActiveIds(dir_, &users, &items).code(), Status::Code::kFailedPrecondition);
  AddIds(3, 2);
  Publish(4, 1.0f, /*activate=*/true);
  AddIds(2, 1);  // known to the dictionary, not to the active version
  ASSERT_TRUE(ReadActiveIds(dir_, &users, &items).ok());
  EXPECT_EQ(users, (std::vector<std::string>{"member-0", "member-1", "member-2"}));
  EXPECT_EQ(items, (std::vector<std::string>{"tool-0", "tool-1"}));
  std::vector<std::string> only_items;
  ASSERT_TRUE(ReadActiveIds(dir_, nullptr, &only_items).ok());
  EXPECT_EQ(only_items.size(), 2u);
  EXPECT_EQ(ReadActiveIds(dir_ + "-missing", &users, &items).code(), Status::Code::kNotFound);
}

}  // namespace
}  // namespace plumb::tools
