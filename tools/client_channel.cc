#include "tools/client_channel.h"

#include <grpcpp/create_channel.h>
#include <grpcpp/security/credentials.h>
#include <grpcpp/support/channel_arguments.h>

#include <fstream>
#include <sstream>

namespace plumb::tools {
namespace {

Status ReadWholeFile(const std::string& path, std::string* text) {
  std::ifstream in(path, std::ios::binary);
  if (!in) return Status::IoError("cannot read " + path);
  std::ostringstream buffer;
  buffer << in.rdbuf();
  if (in.bad()) return Status::IoError("error reading " + path);
  *text = buffer.str();
  return Status::Ok();
}

}  // namespace

Status MakeChannel(const ChannelSpec& spec, std::shared_ptr<grpc::Channel>* out) {
  if (spec.target.empty()) return Status::InvalidArgument("no target address given");
  grpc::ChannelArguments args;
  // Calls in a load run would otherwise share one HTTP/2 connection with any other channel
  // to the same target in this process (gRPC pools subchannels by default); each channel
  // here is meant to be its own connection.
  args.SetInt(GRPC_ARG_USE_LOCAL_SUBCHANNEL_POOL, 1);
  std::shared_ptr<grpc::ChannelCredentials> credentials;
  if (spec.tls_ca_file.empty()) {
    credentials = grpc::InsecureChannelCredentials();
  } else {
    grpc::SslCredentialsOptions tls;
    PLUMB_RETURN_IF_ERROR(ReadWholeFile(spec.tls_ca_file, &tls.pem_root_certs));
    credentials = grpc::SslCredentials(tls);
    if (!spec.tls_server_name.empty()) args.SetSslTargetNameOverride(spec.tls_server_name);
  }
  *out = grpc::CreateCustomChannel(spec.target, credentials, args);
  return Status::Ok();
}

Status ReadBearerToken(const std::string& path, std::string* token) {
  std::string text;
  PLUMB_RETURN_IF_ERROR(ReadWholeFile(path, &text));
  const auto is_space = [](char c) { return c == ' ' || c == '\t' || c == '\r' || c == '\n'; };
  size_t begin = 0, end = text.size();
  while (begin < end && is_space(text[begin])) ++begin;
  while (end > begin && is_space(text[end - 1])) --end;
  if (begin == end) return Status::InvalidArgument("the token file " + path + " is empty");
  for (size_t i = begin; i < end; ++i) {
    const unsigned char c = static_cast<unsigned char>(text[i]);
    if (c <= 0x20 || c >= 0x7f) {
      return Status::InvalidArgument("the token in " + path +
                                     " holds a space or a non-printable character");
    }
  }
  *token = text.substr(begin, end - begin);
  return Status::Ok();
}

void AttachBearerToken(const std::string& token, grpc::ClientContext* context) {
  if (!token.empty()) context->AddMetadata("authorization", "Bearer " + token);
}

std::string StatusCodeName(grpc::StatusCode code) {
  switch (code) {
    case grpc::StatusCode::OK:
      return "OK";
    case grpc::StatusCode::CANCELLED:
      return "CANCELLED";
    case grpc::StatusCode::UNKNOWN:
      return "UNKNOWN";
    case grpc::StatusCode::INVALID_ARGUMENT:
      return "INVALID_ARGUMENT";
    case grpc::StatusCode::DEADLINE_EXCEEDED:
      return "DEADLINE_EXCEEDED";
    case grpc::StatusCode::NOT_FOUND:
      return "NOT_FOUND";
    case grpc::StatusCode::ALREADY_EXISTS:
      return "ALREADY_EXISTS";
    case grpc::StatusCode::PERMISSION_DENIED:
      return "PERMISSION_DENIED";
    case grpc::StatusCode::RESOURCE_EXHAUSTED:
      return "RESOURCE_EXHAUSTED";
    case grpc::StatusCode::FAILED_PRECONDITION:
      return "FAILED_PRECONDITION";
    case grpc::StatusCode::ABORTED:
      return "ABORTED";
    case grpc::StatusCode::OUT_OF_RANGE:
      return "OUT_OF_RANGE";
    case grpc::StatusCode::UNIMPLEMENTED:
      return "UNIMPLEMENTED";
    case grpc::StatusCode::INTERNAL:
      return "INTERNAL";
    case grpc::StatusCode::UNAVAILABLE:
      return "UNAVAILABLE";
    case grpc::StatusCode::DATA_LOSS:
      return "DATA_LOSS";
    case grpc::StatusCode::UNAUTHENTICATED:
      return "UNAUTHENTICATED";
    default:
      return "CODE_" + std::to_string(static_cast<int>(code));
  }
}

std::string DescribeStatus(const grpc::Status& status) {
  std::string text = StatusCodeName(status.error_code());
  if (!status.error_message().empty()) text += ": " + status.error_message();
  return text;
}

}  // namespace plumb::tools
