// How plumb's NATS connections explain a failure (replica/nats_access.h): the failures an
// operator can fix (TLS trust, host names, client certificates, TLS on one side only) are
// named; the rest is libnats' text unchanged. Error texts marked "seen" are what libnats 3.4.1
// (Debian bookworm) reported against nats-server 2.9.10 while tests/stream/nats_tls_test.py
// was written (the real processes are checked there); the others are OpenSSL's names of
// verification results and alerts, from memory. Also the option checks of MakeNatsOptions and
// the mapping of a configuration's NATS settings (ToNatsAccess).
#include "replica/nats_access.h"

#include <gtest/gtest.h>
#include <nats/nats.h>

#include <string>
#include <vector>

namespace plumb::replica {
namespace {

bool Contains(const std::string& text, const std::string& part) {
  return text.find(part) != std::string::npos;
}

TEST(ExplainNatsFailure, ServerCertificateFromAnotherCa) {  // seen
  const std::string text = ExplainNatsFailure(
      NATS_SSL_ERROR,
      "(conn.c:733): SSL handshake error: 20:unable to get local issuer certificate:depth=0:"
      "cert=/CN=localhost:issuer=/CN=plumb test CA");
  EXPECT_TRUE(Contains(text,
                       "TLS handshake failed: the server's certificate is not signed by a "
                       "CA this client trusts"))
      << text;
  // libnats' own words stay, without its source location.
  EXPECT_TRUE(Contains(text, "(SSL Error: SSL handshake error: 20:unable to get local issuer"))
      << text;
  EXPECT_FALSE(Contains(text, "conn.c")) << text;
}

TEST(ExplainNatsFailure, SelfSignedServerCertificate) {
  // OpenSSL 3 spells X509_V_ERR_DEPTH_ZERO_SELF_SIGNED_CERT (18) with a hyphen.
  EXPECT_TRUE(Contains(ExplainNatsFailure(NATS_SSL_ERROR,
                                          "SSL handshake error: 18:self-signed "
                                          "certificate:depth=0"),
                       "not signed by a CA this client trusts"));
}

TEST(ExplainNatsFailure, ServerCertificateForAnotherHost) {  // seen
  const std::string text =
      ExplainNatsFailure(NATS_SSL_ERROR,
                         "(conn.c:733): SSL handshake error: 64:IP address mismatch:depth=0:"
                         "cert=/CN=elsewhere:issuer=/CN=plumb test CA");
  EXPECT_TRUE(Contains(text, "does not name the host of the URL")) << text;
}

TEST(ExplainNatsFailure, OtherTlsFailuresStillSayTls) {
  const std::string text = ExplainNatsFailure(NATS_SSL_ERROR, "SSL handshake error: 0:");
  EXPECT_EQ(text.rfind("TLS handshake failed (SSL Error", 0), 0u) << text;
  // Seen: a key that does not match its certificate is no handshake failure.
  EXPECT_EQ(ExplainNatsFailure(NATS_SSL_ERROR,
                               "Error loading private key 'client-key.pem': key values mismatch"),
            "SSL Error: Error loading private key 'client-key.pem': key values mismatch");
}

TEST(ExplainNatsFailure, ServerThatRefusesTheClientCertificate) {
  // Seen. TLS 1.3: the server checks the client's certificate after the client's handshake ended
  // and closes the connection; libnats then reads nothing where it expects PONG.
  const std::string text =
      ExplainNatsFailure(NATS_PROTOCOL_ERROR, "(conn.c:1909): Expected 'PONG', got ''");
  EXPECT_TRUE(Contains(text,
                       "verifies TLS clients does when the client's certificate is "
                       "missing or not signed by its CA"))
      << text;
  EXPECT_TRUE(Contains(ExplainNatsFailure(NATS_SSL_ERROR,
                                          "SSL_read: tlsv13 alert certificate "
                                          "required"),
                       "client's certificate is missing"));
  // A different protocol error is not mistaken for it.
  EXPECT_FALSE(Contains(ExplainNatsFailure(NATS_PROTOCOL_ERROR, "Expected 'PONG', got 'PING'"),
                        "certificate"));
}

TEST(ExplainNatsFailure, TlsOnOneSideOnly) {  // the first seen
  EXPECT_TRUE(Contains(ExplainNatsFailure(NATS_SECURE_CONNECTION_WANTED,
                                          "(conn.c:773): Secure Connection not available"),
                       "TLS is configured but the server does not offer it"));
  EXPECT_TRUE(
      Contains(ExplainNatsFailure(NATS_SECURE_CONNECTION_REQUIRED, ""), "the server requires TLS"));
}

TEST(ExplainNatsFailure, UnknownCausesAreLibnatsText) {
  EXPECT_EQ(ExplainNatsFailure(NATS_NO_SERVER, ""), natsStatus_GetText(NATS_NO_SERVER));
  EXPECT_EQ(ExplainNatsFailure(NATS_TIMEOUT, "(js.c:12): Timeout"), "Timeout");
}

TEST(MakeNatsOptions, TlsFilesThatDoNotLoadAreNamed) {
  NatsAccess access;
  access.servers = {"tls://127.0.0.1:4222"};
  access.tls_ca = "/nonexistent/ca.pem";
  natsOptions* options = nullptr;
  Status s = MakeNatsOptions(access, "test", &options, "replica");
  EXPECT_EQ(s.code(), Status::Code::kInvalidArgument);
  EXPECT_TRUE(Contains(s.ToString(), "replica: cannot read the TLS file /nonexistent/ca.pem"))
      << s.ToString();
  EXPECT_EQ(options, nullptr);

  access.tls_ca.clear();
  access.tls_cert = "/nonexistent/client.pem";
  s = MakeNatsOptions(access, "test", &options, "replica");
  EXPECT_TRUE(Contains(s.ToString(), "a TLS certificate and its key go together")) << s.ToString();
}

// Hand-worked: the list as an operator may type it, with empty parts (a doubled or trailing
// comma) dropped and the order kept; every file name passed on as it is.
TEST(ToNatsAccess, SplitsTheServersAndKeepsTheFiles) {
  NatsSettings settings;
  settings.servers = "nats://10.0.0.1:4222,,tls://10.0.0.2:4222,";
  settings.token_file = "/etc/plumb/nats.token";
  settings.credentials_file = "/etc/plumb/nats.creds";
  settings.tls_ca = "ca.pem";
  settings.tls_cert = "client.pem";
  settings.tls_key = "client.key";
  const NatsAccess access = ToNatsAccess(settings);
  EXPECT_EQ(access.servers,
            (std::vector<std::string>{"nats://10.0.0.1:4222", "tls://10.0.0.2:4222"}));
  EXPECT_EQ(access.token_file, "/etc/plumb/nats.token");
  EXPECT_EQ(access.credentials_file, "/etc/plumb/nats.creds");
  EXPECT_EQ(access.tls_ca, "ca.pem");
  EXPECT_EQ(access.tls_cert, "client.pem");
  EXPECT_EQ(access.tls_key, "client.key");
  EXPECT_TRUE(ToNatsAccess(NatsSettings{}).servers.empty());  // "": no server
}

}  // namespace
}  // namespace plumb::replica
