#include "rpc/message_decoding.h"

#include <google/protobuf/io/coded_stream.h>
#include <google/protobuf/wire_format_lite.h>
#include <grpcpp/support/proto_buffer_reader.h>

#include <map>
#include <vector>

namespace plumb::rpc {
namespace {

using google::protobuf::Descriptor;
using google::protobuf::FieldDescriptor;
using google::protobuf::internal::WireFormatLite;

// Walks one message's encoding; returns the first problem found, "" if none. `path` names
// the message itself ("" at the top).
std::string Walk(const Descriptor& type, std::string_view bytes, const std::string& path,
                 size_t offset, int depth) {
  if (depth > 64) return "";  // protobuf's own recursion limit is 100; nothing plumb sends nests
  google::protobuf::io::CodedInputStream in(reinterpret_cast<const uint8_t*>(bytes.data()),
                                            static_cast<int>(bytes.size()));
  std::map<int, int> seen;  // field number -> occurrences so far (the index of a repeated one)
  auto at = [&] { return " (at byte " + std::to_string(offset + in.CurrentPosition()) + ")"; };
  const std::string truncated = (path.empty() ? std::string("the message") : path) +
                                " is truncated or not a protobuf encoding";
  while (true) {
    const uint32_t tag = in.ReadTag();
    if (tag == 0) {
      // 0 is both the end of the input and an invalid tag.
      return in.CurrentPosition() == static_cast<int>(bytes.size()) ? "" : truncated + at();
    }
    const int number = WireFormatLite::GetTagFieldNumber(tag);
    const FieldDescriptor* field = type.FindFieldByNumber(number);
    const int index = seen[number]++;
    if (field == nullptr ||
        WireFormatLite::GetTagWireType(tag) != WireFormatLite::WIRETYPE_LENGTH_DELIMITED ||
        (field->type() != FieldDescriptor::TYPE_STRING &&
         field->type() != FieldDescriptor::TYPE_MESSAGE)) {
      if (!WireFormatLite::SkipField(&in, tag)) return truncated + at();
      continue;
    }
    std::string name = (path.empty() ? "" : path + ".") + field->name();
    if (field->is_repeated()) name += "[" + std::to_string(index) + "]";
    uint32_t length = 0;
    const size_t start = offset + static_cast<size_t>(in.CurrentPosition());
    if (!in.ReadVarint32(&length) || length > bytes.size()) return truncated + at();
    const void* data = nullptr;
    int available = 0;
    const size_t body = offset + static_cast<size_t>(in.CurrentPosition());
    std::string_view value;
    if (length > 0) {
      if (!in.GetDirectBufferPointer(&data, &available) || available < static_cast<int>(length)) {
        return truncated + " (" + name + " at byte " + std::to_string(start) + ")";
      }
      value = std::string_view(static_cast<const char*>(data), length);
      in.Skip(static_cast<int>(length));
    }
    if (field->type() == FieldDescriptor::TYPE_STRING) {
      if (!IsValidUtf8(value)) {
        return name + " is not valid UTF-8 (string fields must be UTF-8; send ids as text)";
      }
    } else if (std::string why = Walk(*field->message_type(), value, name, body, depth + 1);
               !why.empty()) {
      return why;
    }
  }
}

}  // namespace

bool IsValidUtf8(std::string_view bytes) {
  const auto* p = reinterpret_cast<const unsigned char*>(bytes.data());
  const auto* end = p + bytes.size();
  while (p < end) {
    const unsigned char c = *p;
    if (c < 0x80) {
      ++p;
      continue;
    }
    int extra;
    uint32_t min, code;
    if ((c & 0xE0) == 0xC0) {
      extra = 1, min = 0x80, code = c & 0x1F;
    } else if ((c & 0xF0) == 0xE0) {
      extra = 2, min = 0x800, code = c & 0x0F;
    } else if ((c & 0xF8) == 0xF0) {
      extra = 3, min = 0x10000, code = c & 0x07;
    } else {
      return false;  // a continuation byte without a lead, or 0xF8..0xFF
    }
    if (end - p <= extra) return false;
    for (int i = 1; i <= extra; ++i) {
      if ((p[i] & 0xC0) != 0x80) return false;
      code = (code << 6) | (p[i] & 0x3F);
    }
    if (code < min || code > 0x10FFFF || (code >= 0xD800 && code <= 0xDFFF)) return false;
    p += extra + 1;
  }
  return true;
}

std::string ExplainUndecodable(const Descriptor& type, std::string_view bytes) {
  return Walk(type, bytes, "", 0, 0);
}

Status DecodeMessage(const grpc::ByteBuffer& buffer, google::protobuf::Message* message) {
  message->Clear();
  grpc::ByteBuffer copy(buffer);  // shares the slices; the reader consumes its own handle
  {
    grpc::ProtoBufferReader reader(&copy);
    if (reader.status().ok() && message->ParseFromZeroCopyStream(&reader)) return Status::Ok();
  }
  message->Clear();
  std::vector<grpc::Slice> slices;
  std::string bytes;
  if (buffer.Dump(&slices).ok()) {
    for (const grpc::Slice& s : slices)
      bytes.append(reinterpret_cast<const char*>(s.begin()), s.size());
  }
  std::string why = ExplainUndecodable(*message->GetDescriptor(), bytes);
  if (why.empty()) why = "the message could not be decoded";
  return Status::InvalidArgument(message->GetDescriptor()->full_name() + ": " + why);
}

}  // namespace plumb::rpc
