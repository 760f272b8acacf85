#include "replica/nats_access.h"

#include <nats/nats.h>
#include <spdlog/spdlog.h>

#include <deque>
#include <fstream>
#include <mutex>
#include <random>
#include <sstream>
#include <string_view>

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

NatsAccess ToNatsAccess(const NatsSettings& settings) {
  NatsAccess access;
  access.servers = SplitServers(settings.servers);
  access.token_file = settings.token_file;
  access.credentials_file = settings.credentials_file;
  access.tls_ca = settings.tls_ca;
  access.tls_cert = settings.tls_cert;
  access.tls_key = settings.tls_key;
  return access;
}

namespace {

// libnats prefixes its last error with where it was set, "(conn.c:733): ": not for operators.
std::string_view WithoutSourceLocation(std::string_view text) {
  if (text.size() > 1 && text[0] == '(') {
    const size_t end = text.find("): ");
    if (end != std::string_view::npos) text.remove_prefix(end + 3);
  }
  return text;
}

// What a connection's reconnect attempts may touch. libnats calls OnReconnectDelay on the
// connection's reconnect thread, and a connection keeps a copy of its options, so this lives
// as long as the process (one per MakeNatsOptions call; each daemon makes a few).
struct ReconnectReport {
  std::string who;
  std::mutex mu;
  std::string last;  // the failure logged last in this episode
};

ReconnectReport* NewReconnectReport(std::string who) {
  static std::mutex pool_mu;
  static std::deque<ReconnectReport> pool;  // never freed, kept reachable for leak checkers
  std::lock_guard<std::mutex> lock(pool_mu);
  ReconnectReport& report = pool.emplace_back();
  report.who = std::move(who);
  return &report;
}

constexpr int64_t kReconnectWaitMs = 250;

// Called before each pass over the server list while reconnecting (attempts counts the
// passes, from 1 in each episode). libnats retries silently; this logs why the previous pass
// failed, once per distinct reason, so that a reconnect refused for good (a certificate the
// server no longer accepts, a changed token) is not an endless quiet "reconnecting".
int64_t OnReconnectDelay(natsConnection*, int attempts, void* closure) {
  auto* report = static_cast<ReconnectReport*>(closure);
  natsStatus last_status = NATS_OK;
  const char* last = nats_GetLastError(&last_status);  // this reconnect thread's last error
  std::lock_guard<std::mutex> lock(report->mu);
  if (attempts <= 1) report->last.clear();
  if (last != nullptr && last[0] != '\0' && last_status != NATS_OK) {
    std::string text = ExplainNatsFailure(last_status, last);
    if (text != report->last) {
      spdlog::warn("{}: cannot reconnect to NATS: {}; retrying", report->who, text);
      report->last = std::move(text);
    }
  }
  // libnats' own jitter does not apply with a custom delay: spread replicas a little.
  thread_local std::minstd_rand jitter(std::random_device{}());
  return kReconnectWaitMs + static_cast<int64_t>(jitter() % 100);
}

}  // namespace

std::string ExplainNatsFailure(int nats_status, std::string_view last_error) {
  const natsStatus s = static_cast<natsStatus>(nats_status);
  last_error = WithoutSourceLocation(last_error);
  std::string libnats = natsStatus_GetText(s);
  if (!last_error.empty() && last_error != libnats) libnats += ": " + std::string(last_error);
  auto says = [last_error](std::string_view what) {
    return last_error.find(what) != std::string_view::npos;
  };
  const bool client_refused =
      (s == NATS_PROTOCOL_ERROR && says("Expected 'PONG', got ''")) || says("certificate required");
  std::string why;
  if (client_refused) {
    // With TLS 1.3 the client finishes its handshake before the server checks the client's
    // certificate; a server that refuses it closes the connection (after the alert
    // "certificate required", which the client may or may not read first).
    why =
        "the server closed the connection while connecting, as a NATS server that verifies "
        "TLS clients does when the client's certificate is missing or not signed by its CA";
  } else if (s == NATS_SSL_ERROR && says("handshake")) {
    // OpenSSL's verification results (X509_V_ERR_*) as libnats reports them. (Other TLS
    // errors, such as files that do not load, are libnats' words alone.)
    if (says("unable to get local issuer certificate") || says("unable to get issuer") ||
        says("self-signed certificate") || says("self signed certificate")) {
      why =
          "TLS handshake failed: the server's certificate is not signed by a CA this client "
          "trusts (check the TLS CA file)";
    } else if (says("hostname mismatch") || says("IP address mismatch")) {
      why =
          "TLS handshake failed: the server's certificate does not name the host of the URL "
          "(its subject alternative names)";
    } else if (says("certificate has expired") || says("certificate is not yet valid")) {
      why = "TLS handshake failed: the server's certificate is outside its validity period";
    } else {
      why = "TLS handshake failed";
    }
  } else if (s == NATS_SECURE_CONNECTION_REQUIRED) {
    why = "the server requires TLS: set the TLS CA file (or use tls:// URLs)";
  } else if (s == NATS_SECURE_CONNECTION_WANTED) {
    why = "TLS is configured but the server does not offer it";
  }
  return why.empty() ? libnats : why + " (" + libnats + ")";
}

std::string NatsErrorText(int nats_status) {
  const char* last = nats_GetLastError(nullptr);
  return ExplainNatsFailure(nats_status, last != nullptr ? last : "");
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
    natsOptions_SetReconnectWait(o, kReconnectWaitMs);
    natsOptions_SetCustomReconnectDelay(
        o, &OnReconnectDelay,
        NewReconnectReport(std::string_view(label) == "NATS" ? client_name : label));
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
    for (const std::string* file : {&access.tls_ca, &access.tls_cert, &access.tls_key}) {
      if (!file->empty() && !std::ifstream(*file)) {
        return Status::InvalidArgument(who + "cannot read the TLS file " + *file);
      }
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
