#include "trainer/online/holdout_meta.h"

#include <charconv>

namespace plumb::online {

std::string HoldoutFractionText(double fraction) {
  char buf[32];  // the shortest round-trip form of a double needs at most 24 characters
  const std::to_chars_result r = std::to_chars(buf, buf + sizeof buf, fraction);
  return std::string(buf, r.ptr);
}

Status ParseHoldoutFraction(const std::string& text, double* out) {
  double value = 0.0;
  const char* end = text.data() + text.size();
  const std::from_chars_result r = std::from_chars(text.data(), end, value);
  if (r.ec != std::errc() || r.ptr != end || !(value >= 0.0 && value < 1.0)) {
    return Status::Corruption("meta holdout_fraction holds '" + text + "', not a share in [0, 1)");
  }
  *out = value;
  return Status::Ok();
}

Status ReadHoldoutFraction(const store::Store& store, std::optional<double>* out) {
  std::string text;
  if (Status s = store.GetMeta(kHoldoutFractionKey, &text); s.IsNotFound()) {
    out->reset();
    return Status::Ok();
  } else if (!s.ok()) {
    return s;
  }
  double value = 0.0;
  PLUMB_RETURN_IF_ERROR(ParseHoldoutFraction(text, &value));
  *out = value;
  return Status::Ok();
}

}  // namespace plumb::online
