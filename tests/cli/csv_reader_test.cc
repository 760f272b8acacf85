#include "cli/csv_reader.h"

#include <gtest/gtest.h>

#include <filesystem>
#include <fstream>

#include "cli/item_names.h"

namespace plumb::cli {
namespace {

std::string WriteTemp(const std::string& name, const std::string& text) {
  auto path = std::filesystem::temp_directory_path() / ("plumb_csv_" + name);
  std::ofstream(path) << text;
  return path.string();
}

TEST(SplitCsvLine, PlainQuotedAndEscapedFields) {
  std::vector<std::string> f;
  ASSERT_TRUE(SplitCsvLine("a,b,,c", &f).ok());
  EXPECT_EQ(f, (std::vector<std::string>{"a", "b", "", "c"}));
  ASSERT_TRUE(SplitCsvLine("\"x,y\",\"say \"\"hi\"\"\",z\r", &f).ok());
  EXPECT_EQ(f, (std::vector<std::string>{"x,y", "say \"hi\"", "z"}));
  EXPECT_FALSE(SplitCsvLine("\"open,b", &f).ok());
  EXPECT_FALSE(SplitCsvLine("\"a\"b,c", &f).ok());
}

TEST(ReadEventCsv, ColumnsInAnyOrderWithOptionalFields) {
  const std::string path =
      WriteTemp("ok.csv", "ts,item,user,weight,event_id\n5,t1,m1,2.5,e1\n,t2,m2,,\n");
  std::vector<CsvEvent> ev;
  CsvReadReport rep;
  ASSERT_TRUE(ReadEventCsv(path, {}, &ev, &rep).ok());
  ASSERT_EQ(ev.size(), 2u);
  EXPECT_EQ(ev[0].user, "m1");
  EXPECT_EQ(ev[0].item, "t1");
  EXPECT_EQ(ev[0].timestamp_ms, 5);
  EXPECT_FLOAT_EQ(ev[0].weight, 2.5f);
  EXPECT_EQ(ev[0].event_id, "e1");
  EXPECT_EQ(ev[1].timestamp_ms, 0);
  EXPECT_FLOAT_EQ(ev[1].weight, 1.0f);
}

TEST(ReadEventCsv, BadLineStopsWithFileLineAndReasonAndKeepsNothing) {
  const std::string path =
      WriteTemp("bad.csv", "user,item,ts\nm1,t1,10\nm2,t2,yesterday\nm3,t3,5\n");
  std::vector<CsvEvent> ev;
  CsvReadReport rep;
  Status s = ReadEventCsv(path, {}, &ev, &rep);
  ASSERT_FALSE(s.ok());
  EXPECT_NE(s.message().find(path + ":3:"), std::string::npos) << s.message();
  EXPECT_NE(s.message().find("ts 'yesterday'"), std::string::npos) << s.message();
  EXPECT_TRUE(ev.empty());
}

TEST(ReadEventCsv, SkipBadCountsAndReportsTheFirst) {
  const std::string long_id(300, 'x');
  const std::string path = WriteTemp(
      "skip.csv", "user,item\nm1,t1\n," + std::string("t2") + "\nm3," + long_id + "\nm4,t4\n");
  std::vector<CsvEvent> ev;
  CsvReadReport rep;
  CsvReadOptions opt;
  opt.skip_bad = true;
  ASSERT_TRUE(ReadEventCsv(path, opt, &ev, &rep).ok());
  EXPECT_EQ(ev.size(), 2u);
  EXPECT_EQ(rep.skipped, 2u);
  EXPECT_NE(rep.first_skip_reason.find(":3: user is empty"), std::string::npos)
      << rep.first_skip_reason;
}

TEST(ReadEventCsv, HeaderMustNameUserAndItem) {
  const std::string path = WriteTemp("hdr.csv", "member,tool\nm1,t1\n");
  std::vector<CsvEvent> ev;
  CsvReadReport rep;
  Status s = ReadEventCsv(path, {}, &ev, &rep);
  ASSERT_FALSE(s.ok());
  EXPECT_NE(s.message().find("'user' and 'item'"), std::string::npos);
}

// A spreadsheet's "CSV UTF-8" starts with the byte-order mark EF BB BF (the encoding of
// U+FEFF in UTF-8, RFC 3629 section 6); it is not part of the first column's name.
TEST(ReadEventCsv, AByteOrderMarkBeforeTheHeaderIsIgnored) {
  const std::string path =
      WriteTemp("bom.csv", "\xEF\xBB\xBFuser,item,ts\r\nm1,t1,5\r\nm2,t2,6\r\n");
  std::vector<CsvEvent> ev;
  CsvReadReport rep;
  Status s = ReadEventCsv(path, {}, &ev, &rep);
  ASSERT_TRUE(s.ok()) << s.ToString();
  ASSERT_EQ(ev.size(), 2u);
  EXPECT_EQ(ev[0].user, "m1");
  EXPECT_EQ(ev[1].timestamp_ms, 6);
  // Only a leading mark is removed: one inside a field is data (here, an id with a mark).
  const std::string inside = WriteTemp("bom_inside.csv", "user,item\n\xEF\xBB\xBFm1,t1\n");
  ASSERT_TRUE(ReadEventCsv(inside, {}, &ev, &rep).ok());
  EXPECT_EQ(ev[0].user, "\xEF\xBB\xBFm1");
}

TEST(ReadEventCsv, ATabOrSemicolonSeparatedFileIsToldToUseCommas) {
  std::vector<CsvEvent> ev;
  CsvReadReport rep;
  Status s = ReadEventCsv(WriteTemp("tabs.tsv", "user\titem\tts\nm1\tt1\t5\n"), {}, &ev, &rep);
  ASSERT_FALSE(s.ok());
  EXPECT_NE(s.message().find("separated by tabs"), std::string::npos) << s.message();
  EXPECT_NE(s.message().find("use commas"), std::string::npos) << s.message();
  s = ReadEventCsv(WriteTemp("semi.csv", "\xEF\xBB\xBFuser;item\nm1;t1\n"), {}, &ev, &rep);
  ASSERT_FALSE(s.ok());
  EXPECT_NE(s.message().find("separated by semicolons"), std::string::npos) << s.message();
  EXPECT_NE(s.message().find("(got 'user;item')"), std::string::npos) << s.message();
  // A comma-separated header that lacks a column gets no separator hint.
  s = ReadEventCsv(WriteTemp("hdr2.csv", "member,tool\nm1,t1\n"), {}, &ev, &rep);
  EXPECT_EQ(s.message().find("use commas"), std::string::npos) << s.message();
}

// One rule with the wire (InteractionEvent.weight): 0 or empty means 1; negative is refused.
TEST(ReadEventCsv, WeightZeroMeansOneAsOnTheWire) {
  std::vector<CsvEvent> ev;
  CsvReadReport rep;
  ASSERT_TRUE(ReadEventCsv(WriteTemp("w0.csv", "user,item,weight\nm1,t1,0\nm2,t2,\nm3,t3,2.5\n"),
                           {}, &ev, &rep)
                  .ok());
  ASSERT_EQ(ev.size(), 3u);
  EXPECT_FLOAT_EQ(ev[0].weight, 1.0f);
  EXPECT_FLOAT_EQ(ev[1].weight, 1.0f);
  EXPECT_FLOAT_EQ(ev[2].weight, 2.5f);
  Status s = ReadEventCsv(WriteTemp("wneg.csv", "user,item,weight\nm1,t1,-0.5\n"), {}, &ev, &rep);
  ASSERT_FALSE(s.ok());
  EXPECT_NE(s.message().find("[0, 1000] (0 means 1)"), std::string::npos) << s.message();
}

// ts in seconds (about 1.7e9 today) read as milliseconds is January 1970: when every ts of
// a file is below 1e11 ms (1973-03-03), the report warns. One plausible ts silences it.
TEST(ReadEventCsv, WarnsWhenEveryTimestampLooksLikeSeconds) {
  std::vector<CsvEvent> ev;
  CsvReadReport rep;
  const std::string seconds =
      WriteTemp("ts_s.csv", "user,item,ts\nm1,t1,1700000000\nm2,t2,1700000060\nm3,t3,\n");
  ASSERT_TRUE(ReadEventCsv(seconds, {}, &ev, &rep).ok());
  EXPECT_EQ(ev.size(), 3u);  // a warning, not an error
  ASSERT_EQ(rep.warnings.size(), 1u);
  EXPECT_NE(rep.warnings[0].find("are they seconds?"), std::string::npos) << rep.warnings[0];
  EXPECT_NE(rep.warnings[0].find("1700000060"), std::string::npos) << rep.warnings[0];
  const std::string mixed =
      WriteTemp("ts_ms.csv", "user,item,ts\nm1,t1,1700000000\nm2,t2,1700000060000\n");
  ASSERT_TRUE(ReadEventCsv(mixed, {}, &ev, &rep).ok());
  EXPECT_TRUE(rep.warnings.empty());
  ASSERT_TRUE(ReadEventCsv(WriteTemp("no_ts.csv", "user,item\nm1,t1\n"), {}, &ev, &rep).ok());
  EXPECT_TRUE(rep.warnings.empty());
}

TEST(ItemNames, AByteOrderMarkIsIgnoredAndAMissingNameColumnIsAnError) {
  ItemNames names;
  Status s =
      ItemNames::Read(WriteTemp("names_bom.csv", "\xEF\xBB\xBFitem,name\nt1,spade\n"), &names);
  ASSERT_TRUE(s.ok()) << s.ToString();
  EXPECT_EQ(names.Find("t1"), "spade");
  s = ItemNames::Read(WriteTemp("names_none.csv", "item,label\nt1,spade\n"), &names);
  ASSERT_FALSE(s.ok());
  EXPECT_NE(s.message().find("'item' and 'name'"), std::string::npos) << s.message();
}

TEST(ReadEventCsv, WeightOutOfRangeIsRejected) {
  const std::string path = WriteTemp("w.csv", "user,item,weight\nm1,t1,-1\n");
  std::vector<CsvEvent> ev;
  CsvReadReport rep;
  Status s = ReadEventCsv(path, {}, &ev, &rep);
  ASSERT_FALSE(s.ok());
  EXPECT_NE(s.message().find("weight '-1'"), std::string::npos);
}

}  // namespace
}  // namespace plumb::cli
