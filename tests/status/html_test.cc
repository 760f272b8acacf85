#include "status/html.h"

#include <gtest/gtest.h>

#include <cmath>
#include <string>

namespace plumb::status {
namespace {

// A string is safe in HTML text and in a quoted attribute when it holds none of the five
// markup characters raw and no control character (HTML Living Standard, 13.2.5: "<" opens
// a tag, "&" a character reference, quotes end an attribute value).
bool Safe(const std::string& s) {
  for (unsigned char c : s) {
    if (c == '<' || c == '>' || c == '"' || c == '\'' || c < 0x20 || c == 0x7F) return false;
  }
  for (size_t i = s.find('&'); i != std::string::npos; i = s.find('&', i + 1)) {
    const size_t end = s.find(';', i);
    if (end == std::string::npos) return false;
    const std::string entity = s.substr(i, end - i + 1);
    if (entity != "&amp;" && entity != "&lt;" && entity != "&gt;" && entity != "&quot;" &&
        entity != "&#39;" && entity != "&#xFFFD;") {
      return false;
    }
  }
  return true;
}

TEST(Escaping, ScriptTagsBecomeText) {
  EXPECT_EQ(Escaped("<script>alert(1)</script>"), "&lt;script&gt;alert(1)&lt;/script&gt;");
  EXPECT_EQ(Escaped("a&b"), "a&amp;b");
  EXPECT_EQ(Escaped("&amp;"), "&amp;amp;");  // an entity in an id is shown as typed
}

TEST(Escaping, QuotesCannotLeaveAnAttribute) {
  const std::string s = Escaped("x\" onmouseover=\"alert(1)' y='");
  EXPECT_EQ(s, "x&quot; onmouseover=&quot;alert(1)&#39; y=&#39;");
  EXPECT_TRUE(Safe(s));
}

TEST(Escaping, ControlCharactersAndBrokenUtf8BecomeReplacementCharacters) {
  EXPECT_EQ(Escaped(std::string("a\0b", 3)), "a&#xFFFD;b");
  EXPECT_EQ(Escaped("tab\there\nnew\rline\x1b[31m\x7f"),
            "tab&#xFFFD;here&#xFFFD;new&#xFFFD;line&#xFFFD;[31m&#xFFFD;");
  // C1 control U+0085 (NEL), encoded C2 85.
  EXPECT_EQ(Escaped("x\xC2\x85y"), "x&#xFFFD;y");
  // Invalid UTF-8: a lone continuation byte, an overlong "<" (C0 BC), a surrogate
  // (ED A0 80), a truncated sequence at the end. Each bad byte is one replacement, and an
  // overlong encoding never turns into a raw "<".
  EXPECT_EQ(Escaped("a\x80z"), "a&#xFFFD;z");
  EXPECT_EQ(Escaped("\xC0\xBCscript"), "&#xFFFD;&#xFFFD;script");
  EXPECT_EQ(Escaped("\xED\xA0\x80"), "&#xFFFD;&#xFFFD;&#xFFFD;");
  EXPECT_EQ(Escaped("ok\xE2\x82"), "ok&#xFFFD;&#xFFFD;");
  // Well-formed text outside ASCII is kept as is.
  EXPECT_EQ(Escaped("caf\xC3\xA9 \xE2\x82\xAC \xF0\x9F\x93\x9A"),
            "caf\xC3\xA9 \xE2\x82\xAC \xF0\x9F\x93\x9A");
}

TEST(Escaping, EveryByteValueIsSafe) {
  for (int c = 0; c < 256; ++c) {
    const std::string in(1, static_cast<char>(c));
    const std::string out = Escaped("id" + in + "<" + in);
    EXPECT_TRUE(Safe(out)) << c << ": " << out;
  }
}

TEST(Escaping, VeryLongIdsAreCutAtACharacterBoundary) {
  const std::string long_id(100000, 'x');
  const std::string s = Escaped(long_id, 40);
  EXPECT_EQ(s, std::string(40, 'x') + "\xE2\x80\xA6");
  // Characters, not bytes: 50 two-byte characters cut at 10 stay whole.
  std::string wide;
  for (int i = 0; i < 50; ++i) wide += "\xC3\xA9";
  EXPECT_EQ(Escaped(wide, 10), wide.substr(0, 20) + "\xE2\x80\xA6");
  // An escaped character counts as one: "<" x 5 cut at 3.
  EXPECT_EQ(Escaped("<<<<<", 3), "&lt;&lt;&lt;\xE2\x80\xA6");
  EXPECT_EQ(Escaped("short", 40), "short");
  EXPECT_EQ(Escaped(long_id).size(), long_id.size());  // no limit: whole
}

TEST(Numbers, ExactNumberReadsBackAsTheSameDouble) {
  for (double v : {0.1, 1.0 / 3.0, 123456.789, -2.5e-7, 1e300, 0.0, 5e-324}) {
    EXPECT_EQ(std::strtod(ExactNumber(v).c_str(), nullptr), v) << ExactNumber(v);
  }
  EXPECT_EQ(ExactNumber(0.1), "0.1");
  EXPECT_EQ(ExactNumber(std::nan("")), "NaN");
}

TEST(Numbers, PageFormat) {
  EXPECT_EQ(FormatNumber(0.012345), "0.0123");
  EXPECT_EQ(FormatNumber(12.5), "12.5");
  EXPECT_EQ(FormatNumber(1234.4), "1234");
  EXPECT_EQ(FormatNumber(0), "0");
  EXPECT_EQ(FormatNumber(std::nan("")), "\xE2\x80\x93");
  EXPECT_EQ(FormatUtc(0), "\xE2\x80\x93");
  // 2026-12-02 21:53:53 UTC = 1796248433 s since the epoch (date -u -d @1796248433).
  EXPECT_EQ(FormatUtc(1796248433000), "2026-12-02 21:53:53 UTC");
  EXPECT_EQ(FormatUtcMinute(1796248433000), "21:53");
}

}  // namespace
}  // namespace plumb::status
