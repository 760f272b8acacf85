// The store's hold-out share as text: written so that it reads back as exactly the same
// double, and read strictly.
#include "trainer/online/holdout_meta.h"

#include <gtest/gtest.h>

#include <cmath>
#include <string>

namespace plumb::online {
namespace {

TEST(HoldoutMeta, TextReadsBackAsExactlyTheSameShare) {
  // 1/3 and 0.0123456789 need more than 6 significant digits; the nextafter values differ
  // from their neighbours only in the last bit of the double.
  for (double share : {0.0, 0.02, 0.1, 1.0 / 3.0, 0.0123456789, std::nextafter(0.5, 0.0),
                       std::nextafter(1.0, 0.0), 5e-324}) {
    const std::string text = HoldoutFractionText(share);
    double back = -1.0;
    ASSERT_TRUE(ParseHoldoutFraction(text, &back).ok()) << text;
    EXPECT_EQ(back, share) << text;  // bit for bit, not approximately
  }
  // Shortest form: no padding digits.
  EXPECT_EQ(HoldoutFractionText(0.02), "0.02");
  EXPECT_EQ(HoldoutFractionText(0.0123456789), "0.0123456789");
  // What a 6-digit rendering (std::to_string) would have stored reads back as another share.
  EXPECT_NE(std::stod(std::to_string(0.0123456789)), 0.0123456789);
}

TEST(HoldoutMeta, AnythingButAShareInZeroToOneIsCorruption) {
  double value = 0.25;
  for (const char* bad : {"", "x", "0.1x", " 0.1", "1", "1.5", "-0.1", "nan", "inf"}) {
    EXPECT_EQ(ParseHoldoutFraction(bad, &value).code(), Status::Code::kCorruption) << bad;
  }
  EXPECT_EQ(value, 0.25) << "unchanged on error";
  // Texts written by earlier versions (printf %.17g, std::to_string) still read.
  ASSERT_TRUE(ParseHoldoutFraction("0.020000", &value).ok());
  EXPECT_EQ(value, 0.02);
  ASSERT_TRUE(ParseHoldoutFraction("0.33333333333333331", &value).ok());
  EXPECT_EQ(value, 1.0 / 3.0);
}

}  // namespace
}  // namespace plumb::online
