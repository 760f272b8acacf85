#include "replica/nats_access.h"

#include <nats/nats.h>

#include <fstream>
#include <sstream>

namespace plumb::replica {

std::vector<std::string> SplitServers(const std::string& list) {
  std::vector<std::string> out;
  for (size_t begin = 0; begin <= list.size();) {
    size_t end = list.find(',', begin);
    if (end == std::string::npos) end = list.size();
    if (end > begin) out.push_back(list.substr(begin, end - begin));
    begin = end + 1;
  }
  return out;
}

std::string NatsErrorText(int nats_status) {
  std::string text = natsStatus_GetText(static_cast<natsStatus>(nats_status));
  if (const char* last = nats_GetLastError(nullptr); last != nullptr && last[0] != '\0') {
    text += std::string(" (") + last + ")";
  }
  return text;
}

Status MakeNatsOptions(const NatsAccess& access, const char* client_name, natsOptions** out,
                       const char* label) {
  const std::string who = std::string(label) + ": ";
  if (access.servers.empty()) return Status::InvalidArgument(who + "no server URL");
  if (access.tls_cert.empty() != access.tls_key.empty()) {
    return Status::InvalidArgument(who + "a TLS certificate and its key go together");
  }
  natsOptions* o = nullptr;
  if (natsOptions_Create(&o) != NATS_OK) {
    return Status::Unavailable(who + "cannot create the client options");
  }
  auto check = [o, &who](natsStatus s, const std::string& what) {
    if (s == NATS_OK) return Status::Ok();
    return Status::InvalidArgument(who + what + ": " + NatsErrorText(s));
  };
  Status s = [&]() -> Status {
    std::vector<const char*> urls;
    for (const std::string& u : access.servers) urls.push_back(u.c_str());
    PLUMB_RETURN_IF_ERROR(check(
        natsOptions_SetServers(o, urls.data(), static_cast<int>(urls.size())), "server list"));
    natsOptions_SetName(o, client_name);
    natsOptions_SetMaxReconnect(o, -1);  // forever
    natsOptions_SetReconnectWait(o, 250);
    natsOptions_SetTimeout(o, 2000);
    if (!access.token_file.empty()) {
      std::ifstream in(access.token_file);
      if (!in)
        return Status::InvalidArgument(who + "cannot read the token file " + access.token_file);
      std::stringstream text;
      text << in.rdbuf();
      std::string token = text.str();
      const size_t begin = token.find_first_not_of(" \t\r\n");
      if (begin == std::string::npos) {
        return Status::InvalidArgument(who + "the token file " + access.token_file + " is empty");
      }
      token = token.substr(begin, token.find_last_not_of(" \t\r\n") - begin + 1);
      PLUMB_RETURN_IF_ERROR(check(natsOptions_SetToken(o, token.c_str()), "token"));
    }
    if (!access.credentials_file.empty()) {
      if (!std::ifstream(access.credentials_file)) {
        return Status::InvalidArgument(who + "cannot read the credentials file " +
                                       access.credentials_file);
      }
      PLUMB_RETURN_IF_ERROR(check(
          natsOptions_SetUserCredentialsFromFiles(o, access.credentials_file.c_str(), nullptr),
          "credentials file"));
    }
    if (!access.tls_ca.empty() || !access.tls_cert.empty()) {
      PLUMB_RETURN_IF_ERROR(check(natsOptions_SetSecure(o, true), "TLS"));
      if (!access.tls_ca.empty()) {
        PLUMB_RETURN_IF_ERROR(check(natsOptions_LoadCATrustedCertificates(o, access.tls_ca.c_str()),
                                    "TLS CA " + access.tls_ca));
      }
      if (!access.tls_cert.empty()) {
        PLUMB_RETURN_IF_ERROR(check(
            natsOptions_LoadCertificatesChain(o, access.tls_cert.c_str(), access.tls_key.c_str()),
            "TLS certificate " + access.tls_cert));
      }
    }
    return Status::Ok();
  }();
  if (!s.ok()) {
    natsOptions_Destroy(o);
    return s;
  }
  *out = o;
  return Status::Ok();
}

int ConnectJetStream(natsOptions* options, jsOptions* js_options, natsConnection** nc, jsCtx** js,
                     const char** failed_step) {
  natsStatus s = natsConnection_Connect(nc, options);
  if (s != NATS_OK) {
    *failed_step = "cannot connect";
    return s;
  }
  if ((s = natsConnection_JetStream(js, *nc, js_options)) != NATS_OK) {
    *failed_step = "no JetStream context";
  }
  return s;
}

void CloseNats(natsConnection** nc, jsCtx** js) {
  if (*js != nullptr) jsCtx_Destroy(*js);
  *js = nullptr;
  if (*nc != nullptr) {
    natsConnection_Close(*nc);
    natsConnection_Destroy(*nc);
  }
  *nc = nullptr;
}

std::string ConnectedUrl(natsConnection* nc) {
  char url[256] = {0};
  natsConnection_GetConnectedUrl(nc, url, sizeof url);
  return url;
}

}  // namespace plumb::replica
