// Decoding requests in plumb's code: the UTF-8 check against the Unicode Standard's table of
// well-formed byte sequences, and the field paths ExplainUndecodable reports.
#include "rpc/message_decoding.h"

#include <gtest/gtest.h>

#include <string>

#include "plumb/v1/ingest.pb.h"
#include "plumb/v1/ranker.pb.h"

namespace plumb::rpc {
namespace {

// Well-formed UTF-8 byte sequences, as listed in The Unicode Standard, chapter 3, Table 3-7
// ("Well-Formed UTF-8 Byte Sequences"): for each lead byte, the range of the second byte;
// every later byte is 80..BF.
bool WellFormedByTable37(const std::string& s) {
  size_t i = 0;
  auto in = [&](size_t at, int lo, int hi) {
    return at < s.size() && static_cast<unsigned char>(s[at]) >= lo &&
           static_cast<unsigned char>(s[at]) <= hi;
  };
  while (i < s.size()) {
    const int b = static_cast<unsigned char>(s[i]);
    int n, lo = 0x80, hi = 0xBF;
    if (b <= 0x7F) {
      n = 1;
    } else if (b >= 0xC2 && b <= 0xDF) {
      n = 2;
    } else if (b == 0xE0) {
      n = 3, lo = 0xA0;
    } else if ((b >= 0xE1 && b <= 0xEC) || b == 0xEE || b == 0xEF) {
      n = 3;
    } else if (b == 0xED) {
      n = 3, hi = 0x9F;
    } else if (b == 0xF0) {
      n = 4, lo = 0x90;
    } else if (b >= 0xF1 && b <= 0xF3) {
      n = 4;
    } else if (b == 0xF4) {
      n = 4, hi = 0x8F;
    } else {
      return false;
    }
    if (n > 1 && !in(i + 1, lo, hi)) return false;
    for (int k = 2; k < n; ++k) {
      if (!in(i + k, 0x80, 0xBF)) return false;
    }
    i += n;
  }
  return true;
}

TEST(IsValidUtf8, AgreesWithTable37OnEveryStringOfUpToThreeBytes) {
  std::string s;
  long checked = 0, valid = 0;
  for (int len = 1; len <= 3; ++len) {
    const long total = 1L << (8 * len);
    s.assign(len, '\0');
    for (long v = 0; v < total; ++v) {
      for (int k = 0; k < len; ++k) s[k] = static_cast<char>((v >> (8 * k)) & 0xFF);
      const bool want = WellFormedByTable37(s);
      ASSERT_EQ(IsValidUtf8(s), want) << "length " << len << " value " << std::hex << v;
      ++checked;
      valid += want;
    }
  }
  EXPECT_EQ(checked, 256L + 65536L + 16777216L);
  EXPECT_GT(valid, 0);
}

TEST(IsValidUtf8, FourByteSequencesAndTheClassicInvalidOnes) {
  // Hand-worked from RFC 3629 and the table: U+1F600, U+10FFFF are valid; U+110000 (F4 90..),
  // a surrogate (ED A0 80), overlong "/" (C0 AF, E0 80 AF), a lone continuation byte, a cut
  // sequence and the never-used bytes FE, FF are not.
  EXPECT_TRUE(IsValidUtf8("\xF0\x9F\x98\x80"));
  EXPECT_TRUE(IsValidUtf8("\xF4\x8F\xBF\xBF"));
  EXPECT_TRUE(IsValidUtf8("m\xC3\xA9mbre \xE2\x82\xAC"));
  EXPECT_FALSE(IsValidUtf8("\xF4\x90\x80\x80"));
  EXPECT_FALSE(IsValidUtf8("\xED\xA0\x80"));
  EXPECT_FALSE(IsValidUtf8("\xC0\xAF"));
  EXPECT_FALSE(IsValidUtf8("\xE0\x80\xAF"));
  EXPECT_FALSE(IsValidUtf8("\x80"));
  EXPECT_FALSE(IsValidUtf8("ab\xE2\x82"));
  EXPECT_FALSE(IsValidUtf8("\xFE\xFF"));
  EXPECT_FALSE(IsValidUtf8("\xF8\x88\x80\x80\x80"));
}

TEST(ExplainUndecodable, NamesTheFieldByItsPath) {
  plumb::v1::PublishBatchRequest batch;
  for (int i = 0; i < 3; ++i) {
    plumb::v1::InteractionEvent* e = batch.add_events();
    e->set_user_id("m" + std::to_string(i));
    e->set_item_id("t1");
  }
  batch.mutable_events(2)->set_item_id("t\xFF");  // protobuf does not check while encoding
  std::string bytes;
  ASSERT_TRUE(batch.SerializePartialToString(&bytes));
  EXPECT_EQ(ExplainUndecodable(*batch.GetDescriptor(), bytes),
            "events[2].item_id is not valid UTF-8 (string fields must be UTF-8; send ids as "
            "text)");

  plumb::v1::RecommendRequest recommend;
  recommend.set_user_id("m1");
  recommend.add_exclude_item_ids("t1");
  recommend.add_exclude_item_ids("t\xED\xA0\x80");
  ASSERT_TRUE(recommend.SerializePartialToString(&bytes));
  EXPECT_EQ(ExplainUndecodable(*recommend.GetDescriptor(), bytes).substr(0, 44),
            "exclude_item_ids[1] is not valid UTF-8 (stri");

  recommend.clear_exclude_item_ids();
  ASSERT_TRUE(recommend.SerializeToString(&bytes));
  EXPECT_EQ(ExplainUndecodable(*recommend.GetDescriptor(), bytes), "");
  // Cut inside the user_id field: the length says 2 bytes, 1 is there.
  EXPECT_NE(ExplainUndecodable(*recommend.GetDescriptor(), bytes.substr(0, 3)).find("truncated"),
            std::string::npos);
}

TEST(DecodeMessage, DecodesValidBytesAndExplainsInvalidOnes) {
  plumb::v1::InteractionEvent event;
  event.set_user_id("m1");
  event.set_item_id("t2");
  event.set_timestamp_ms(5);
  std::string bytes = event.SerializeAsString();
  grpc::Slice slice(bytes);
  plumb::v1::InteractionEvent decoded;
  Status s = DecodeMessage(grpc::ByteBuffer(&slice, 1), &decoded);
  ASSERT_TRUE(s.ok()) << s.ToString();
  EXPECT_EQ(decoded.item_id(), "t2");
  EXPECT_EQ(decoded.timestamp_ms(), 5);

  event.set_user_id("m\xC3");
  ASSERT_TRUE(event.SerializePartialToString(&bytes));
  grpc::Slice bad(bytes);
  s = DecodeMessage(grpc::ByteBuffer(&bad, 1), &decoded);
  EXPECT_EQ(s.code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(s.message().substr(0, 59),
            "plumb.v1.InteractionEvent: user_id is not valid UTF-8 (stri");
}

}  // namespace
}  // namespace plumb::rpc
