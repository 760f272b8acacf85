// FuzzInput: takes typed values off the front of a fuzzer's input, so that one byte string
// drives a structured test. Running out of bytes yields zeros and empty strings, never an
// error: every input is a valid test.
#pragma once

#include <algorithm>
#include <cstddef>
#include <cstdint>
#include <cstring>
#include <string>
#include <string_view>

namespace plumb::fuzz {

class FuzzInput {
 public:
  FuzzInput(const uint8_t* data, size_t size) : data_(data), size_(size) {}

  template <typename T>
  T Take() {
    T value{};
    const size_t n = std::min(sizeof(T), size_);
    std::memcpy(&value, data_, n);
    data_ += n;
    size_ -= n;
    return value;
  }
  // A value in [0, bound) (0 when bound is 0).
  uint32_t Below(uint32_t bound) { return bound == 0 ? 0 : Take<uint32_t>() % bound; }
  bool Flag() { return (Take<uint8_t>() & 1) != 0; }
  // Up to max_size bytes: a length byte, then that many bytes.
  std::string Bytes(size_t max_size) {
    const size_t n = std::min<size_t>({Take<uint8_t>(), max_size, size_});
    std::string out(reinterpret_cast<const char*>(data_), n);
    data_ += n;
    size_ -= n;
    return out;
  }
  // Everything that is left.
  std::string_view Rest() {
    std::string_view out(reinterpret_cast<const char*>(data_), size_);
    data_ += size_;
    size_ = 0;
    return out;
  }
  size_t remaining() const { return size_; }

 private:
  const uint8_t* data_;
  size_t size_;
};

}  // namespace plumb::fuzz
