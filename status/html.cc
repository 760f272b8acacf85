#include "status/html.h"

#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <ctime>

#include "core/utc_time.h"

namespace plumb::status {
namespace {

constexpr std::string_view kReplacement = "&#xFFFD;";

// Length of the UTF-8 sequence starting at text[i] and its code point, or 0 when the bytes
// there are not well-formed UTF-8 (RFC 3629: no overlongs, no surrogates, <= U+10FFFF).
size_t DecodeUtf8(std::string_view text, size_t i, char32_t* cp) {
  const auto b = [&](size_t k) { return static_cast<unsigned char>(text[i + k]); };
  const unsigned char c = b(0);
  size_t len;
  char32_t v;
  if (c < 0x80) {
    *cp = c;
    return 1;
  } else if (c >= 0xC2 && c <= 0xDF) {
    len = 2;
    v = c & 0x1F;
  } else if (c >= 0xE0 && c <= 0xEF) {
    len = 3;
    v = c & 0x0F;
  } else if (c >= 0xF0 && c <= 0xF4) {
    len = 4;
    v = c & 0x07;
  } else {
    return 0;
  }
  if (i + len > text.size()) return 0;
  for (size_t k = 1; k < len; ++k) {
    if ((b(k) & 0xC0) != 0x80) return 0;
    v = (v << 6) | (b(k) & 0x3F);
  }
  if ((len == 3 && v < 0x800) || (len == 4 && v < 0x10000) || v > 0x10FFFF ||
      (v >= 0xD800 && v <= 0xDFFF)) {
    return 0;
  }
  *cp = v;
  return len;
}

}  // namespace

void AppendEscaped(std::string* out, std::string_view text, size_t max_chars) {
  size_t chars = 0;
  for (size_t i = 0; i < text.size();) {
    if (max_chars > 0 && chars == max_chars) {
      out->append("\xE2\x80\xA6");  // U+2026 HORIZONTAL ELLIPSIS
      return;
    }
    ++chars;
    char32_t cp = 0;
    const size_t len = DecodeUtf8(text, i, &cp);
    if (len == 0) {
      out->append(kReplacement);
      ++i;
      continue;
    }
    if (cp < 0x20 || (cp >= 0x7F && cp <= 0x9F)) {
      out->append(kReplacement);
    } else if (cp == '&') {
      out->append("&amp;");
    } else if (cp == '<') {
      out->append("&lt;");
    } else if (cp == '>') {
      out->append("&gt;");
    } else if (cp == '"') {
      out->append("&quot;");
    } else if (cp == '\'') {
      out->append("&#39;");
    } else {
      out->append(text.substr(i, len));
    }
    i += len;
  }
}

std::string Escaped(std::string_view text, size_t max_chars) {
  std::string out;
  out.reserve(text.size());
  AppendEscaped(&out, text, max_chars);
  return out;
}

std::string FormatNumber(double value, int digits) {
  if (!std::isfinite(value)) return "\xE2\x80\x93";  // U+2013 EN DASH
  char buf[64];
  const double mag = std::fabs(value);
  if (value == 0.0) return "0";
  if (mag < 1e15 && value == std::floor(value) && mag >= 1.0) {
    std::snprintf(buf, sizeof buf, "%.0f", value);  // counts and versions: no decimals
    return buf;
  }
  if (mag >= 1e15 || mag < 1e-4) {
    std::snprintf(buf, sizeof buf, "%.*g", digits, value);
    return buf;
  }
  const int before = mag >= 1.0 ? static_cast<int>(std::floor(std::log10(mag))) + 1 : 0;
  int decimals = digits - before;
  if (mag < 1.0) decimals = digits - static_cast<int>(std::floor(std::log10(mag))) - 1;
  if (decimals < 0) decimals = 0;
  std::snprintf(buf, sizeof buf, "%.*f", decimals, value);
  return buf;
}

std::string ExactNumber(double value) {
  if (std::isnan(value)) return "NaN";
  if (std::isinf(value)) return value > 0 ? "Infinity" : "-Infinity";
  char buf[64];
  for (int precision = 1; precision <= 17; ++precision) {
    std::snprintf(buf, sizeof buf, "%.*g", precision, value);
    if (std::strtod(buf, nullptr) == value) return buf;
  }
  return buf;
}

std::string FormatUtc(int64_t ms) {
  if (ms <= 0) return "\xE2\x80\x93";
  return UtcText(ms, "%Y-%m-%d %H:%M:%S UTC");
}

std::string FormatUtcMinute(int64_t ms) { return UtcText(ms, "%H:%M"); }

}  // namespace plumb::status
