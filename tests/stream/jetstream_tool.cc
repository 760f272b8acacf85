// jetstream_tool: the NATS side of plumb's JetStream tests and benchmark (not installed).
//
// Every command that connects to NATS uses TLS when JETSTREAM_TOOL_TLS_CA names a CA file
// (and presents JETSTREAM_TOOL_TLS_CERT / JETSTREAM_TOOL_TLS_KEY when set).
//
//   jetstream_tool create-stream SERVERS STREAM SUBJECT REPLICAS
//       creates (or keeps) a file-backed stream with REPLICAS replicas, retrying for up to
//       60 s while the cluster elects its leaders.
//   jetstream_tool publish SERVERS SUBJECT PREFIX FIRST COUNT EVENTS_PER_MESSAGE RATE
//       publishes events FIRST..FIRST+COUNT-1 (user u<i % 5000>, item t<i % 1000>), one
//       message per EVENTS_PER_MESSAGE events (1: a plain InteractionEvent; more: a batch
//       with header Plumb-Payload: batch). Every message has Nats-Msg-Id
//       PREFIX-<first event index>; events carry no event_id of their own (so the trainer
//       names them after the message), except every 7th single event, which carries the
//       same id as its message. Publishes asynchronously; a publish that is not
//       acknowledged is resent with the same Nats-Msg-Id (JetStream drops the copy it
//       already has) until it is, for up to 120 s. RATE: messages started per second at most
//       (0: as fast as JetStream acknowledges). Prints "progress N" (messages acknowledged)
//       every 1000 messages, then "acked N messages M events E seconds S".
//   jetstream_tool hostile SERVERS SUBJECT MAX_MESSAGE_BYTES MAX_EVENTS
//       publishes one message of each kind plumb-train must terminate, and one mixed batch
//       (one valid event, one rejected); prints the expected terminations per reason.
//   jetstream_tool verify DB PREFIX COUNT EVENTS_PER_MESSAGE
//       opens the store read-only (a secondary) and checks that each of the COUNT published
//       events is in the log exactly once, under the id the trainer gives it. Prints what it
//       found; exit 1 on a missing or repeated event.
//   jetstream_tool bad-version SERVERS STREAM SUBJECT_PREFIX BUCKET VERSION DAMAGE
//       publishes a small, valid version bundle (3 items, 2 users, dim 4) as VERSION on
//       SUBJECT_PREFIX.VERSION of STREAM, damaged as DAMAGE says, then puts VERSION into
//       BUCKET's key `active` (what plumb-train's version shipper does for a good one):
//         chunk-crc   one payload byte of the second chunk changed (its CRC-32 no longer
//                     matches)
//         truncated   the last chunk left out (the trailer counts it)
//         no-trailer  every chunk, no trailer
//   jetstream_tool make-version DB ITEMS USERS DIM INTERACTIONS
//       creates a store at DB (bench/system/replica_fanout.py) with ITEMS tools and USERS
//       members, INTERACTIONS random pairs, and two versions: version 1 (the first 10 tools
//       and members, active) and version 2 (all of them, DIM, values uniform in [-0.5, 0.5),
//       not active). Prints both version numbers.
#include <nats/nats.h>

#include <atomic>
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <map>
#include <memory>
#include <mutex>
#include <random>
#include <set>
#include <string>
#include <thread>
#include <vector>

#include "plumb/v1/ingest.pb.h"
#include "replica/version_bundle.h"
#include "store/store.h"

namespace {

using Clock = std::chrono::steady_clock;
using plumb::Status;

std::vector<std::string> Split(const std::string& text) {
  std::vector<std::string> out;
  size_t begin = 0;
  while (begin <= text.size()) {
    size_t end = text.find(',', begin);
    if (end == std::string::npos) end = text.size();
    if (end > begin) out.push_back(text.substr(begin, end - begin));
    begin = end + 1;
  }
  return out;
}

[[noreturn]] void Die(const std::string& what, natsStatus s = NATS_OK) {
  std::fprintf(stderr, "jetstream_tool: %s%s%s\n", what.c_str(), s == NATS_OK ? "" : ": ",
               s == NATS_OK ? "" : natsStatus_GetText(s));
  std::exit(1);
}

struct Connection {
  natsConnection* nc = nullptr;
  jsCtx* js = nullptr;
  explicit Connection(const std::string& servers, int64_t max_pending = 0,
                      jsPubAckHandler on_ack = nullptr, void* closure = nullptr) {
    natsOptions* opts = nullptr;
    natsOptions_Create(&opts);
    std::vector<std::string> urls = Split(servers);
    std::vector<const char*> ptrs;
    for (auto& u : urls) ptrs.push_back(u.c_str());
    natsOptions_SetServers(opts, ptrs.data(), static_cast<int>(ptrs.size()));
    natsOptions_SetMaxReconnect(opts, -1);
    natsOptions_SetReconnectWait(opts, 100);
    natsOptions_SetRetryOnFailedConnect(opts, true, nullptr, nullptr);
    if (const char* ca = std::getenv("JETSTREAM_TOOL_TLS_CA"); ca != nullptr && ca[0] != '\0') {
      natsStatus t = natsOptions_SetSecure(opts, true);
      if (t == NATS_OK) t = natsOptions_LoadCATrustedCertificates(opts, ca);
      const char* cert = std::getenv("JETSTREAM_TOOL_TLS_CERT");
      const char* key = std::getenv("JETSTREAM_TOOL_TLS_KEY");
      if (t == NATS_OK && cert != nullptr && key != nullptr) {
        t = natsOptions_LoadCertificatesChain(opts, cert, key);
      }
      if (t != NATS_OK) Die("TLS files", t);
    }
    natsStatus s = natsConnection_Connect(&nc, opts);
    natsOptions_Destroy(opts);
    if (s != NATS_OK && s != NATS_NOT_YET_CONNECTED) Die("connect to " + servers, s);
    jsOptions jo;
    jsOptions_Init(&jo);
    jo.Wait = 5000;
    if (max_pending > 0) jo.PublishAsync.MaxPending = max_pending;
    jo.PublishAsync.AckHandler = on_ack;
    jo.PublishAsync.AckHandlerClosure = closure;
    if ((s = natsConnection_JetStream(&js, nc, &jo)) != NATS_OK) Die("JetStream context", s);
  }
  ~Connection() {
    jsCtx_Destroy(js);
    natsConnection_Destroy(nc);
  }
};

std::string EncodeEvent(uint64_t i, const std::string& event_id) {
  plumb::v1::InteractionEvent e;
  e.set_user_id("u" + std::to_string(i % 5000));
  e.set_item_id("t" + std::to_string((i * 7919) % 1000));
  if (!event_id.empty()) e.set_event_id(event_id);
  return e.SerializeAsString();
}

int CreateStream(const std::string& servers, const std::string& stream, const std::string& subject,
                 int replicas) {
  Connection c(servers);
  const auto deadline = Clock::now() + std::chrono::seconds(60);
  while (true) {
    jsStreamConfig cfg;
    jsStreamConfig_Init(&cfg);
    cfg.Name = stream.c_str();
    const char* subjects[] = {subject.c_str()};
    cfg.Subjects = subjects;
    cfg.SubjectsLen = 1;
    cfg.Storage = js_FileStorage;
    cfg.Replicas = replicas;
    cfg.Duplicates = int64_t{10} * 60 * 1000000000;  // 10 min de-duplication window
    jsStreamInfo* si = nullptr;
    jsErrCode jerr = static_cast<jsErrCode>(0);
    natsStatus s = js_AddStream(&si, c.js, &cfg, nullptr, &jerr);
    if (s == NATS_OK || jerr == JSStreamNameExistErr) {
      if (si != nullptr) jsStreamInfo_Destroy(si);
      std::printf("stream %s ready (%d replicas)\n", stream.c_str(), replicas);
      return 0;
    }
    if (Clock::now() > deadline)
      Die("create stream (JetStream error " + std::to_string(jerr) + ")", s);
    std::this_thread::sleep_for(std::chrono::milliseconds(500));
  }
}

struct PublishState {
  std::mutex mu;
  std::set<uint64_t> pending;  // first event index of each unacknowledged message
  std::atomic<uint64_t> acked{0};
};

void OnAck(jsCtx*, natsMsg* msg, jsPubAck* pa, jsPubAckErr* pae, void* closure) {
  auto* state = static_cast<PublishState*>(closure);
  if (pa != nullptr) {
    const char* id = nullptr;
    natsMsgHeader_Get(msg, "Nats-Msg-Id", &id);
    const char* dash = id != nullptr ? std::strrchr(id, '-') : nullptr;
    if (dash != nullptr) {
      std::lock_guard<std::mutex> lock(state->mu);
      if (state->pending.erase(std::strtoull(dash + 1, nullptr, 10)) > 0) state->acked++;
    }
  }
  (void)pae;  // left pending: resent below
  natsMsg_Destroy(msg);
}

natsMsg* MakeMessage(const std::string& subject, const std::string& prefix, uint64_t first,
                     uint64_t n) {
  const std::string id = prefix + "-" + std::to_string(first);
  std::string data;
  natsMsg* msg = nullptr;
  if (n == 1) {
    data = EncodeEvent(first, first % 7 == 0 ? id : "");
  } else {
    plumb::v1::PublishBatchRequest batch;
    for (uint64_t i = first; i < first + n; ++i) {
      batch.add_events()->ParseFromString(EncodeEvent(i, ""));
    }
    data = batch.SerializeAsString();
  }
  natsMsg_Create(&msg, subject.c_str(), nullptr, data.data(), static_cast<int>(data.size()));
  natsMsgHeader_Set(msg, "Nats-Msg-Id", id.c_str());
  if (n > 1) natsMsgHeader_Set(msg, "Plumb-Payload", "batch");
  return msg;
}

int Publish(const std::string& servers, const std::string& subject, const std::string& prefix,
            uint64_t first, uint64_t count, uint64_t per_message, double rate) {
  PublishState state;
  for (uint64_t i = first; i < first + count; i += per_message) state.pending.insert(i);
  const uint64_t messages = state.pending.size();
  Connection c(servers, 8192, &OnAck, &state);
  const auto start = Clock::now();
  uint64_t started = 0;
  for (uint64_t i = first; i < first + count; i += per_message) {
    if (rate > 0) {
      std::this_thread::sleep_until(start + std::chrono::microseconds(static_cast<int64_t>(
                                                static_cast<double>(started) * 1e6 / rate)));
    }
    if (++started % 1000 == 0) {
      std::printf("progress %llu\n", static_cast<unsigned long long>(state.acked.load()));
      std::fflush(stdout);
    }
    natsMsg* msg = MakeMessage(subject, prefix, i, std::min(per_message, first + count - i));
    jsPubOptions po;
    jsPubOptions_Init(&po);
    po.MaxWait = 5000;
    while (js_PublishMsgAsync(c.js, &msg, &po) != NATS_OK) {
      std::this_thread::sleep_for(std::chrono::milliseconds(50));  // stalled or reconnecting
    }
  }
  jsPubOptions po;
  jsPubOptions_Init(&po);
  po.MaxWait = 20000;
  js_PublishAsyncComplete(c.js, &po);
  // Resend what was not acknowledged, with the same ids, until everything is.
  const auto deadline = Clock::now() + std::chrono::seconds(120);
  int rounds = 0;
  while (true) {
    std::vector<uint64_t> todo;
    {
      std::lock_guard<std::mutex> lock(state.mu);
      todo.assign(state.pending.begin(), state.pending.end());
    }
    if (todo.empty()) break;
    if (Clock::now() > deadline) Die(std::to_string(todo.size()) + " messages never acknowledged");
    ++rounds;
    for (uint64_t i : todo) {
      natsMsg* msg = MakeMessage(subject, prefix, i, std::min(per_message, first + count - i));
      jsPubAck* ack = nullptr;
      jsPubOptions one;
      jsPubOptions_Init(&one);
      one.MaxWait = 2000;
      if (js_PublishMsg(&ack, c.js, msg, &one, nullptr) == NATS_OK) {
        std::lock_guard<std::mutex> lock(state.mu);
        if (state.pending.erase(i) > 0) state.acked++;
        jsPubAck_Destroy(ack);
      }
      natsMsg_Destroy(msg);
    }
  }
  const double seconds = std::chrono::duration<double>(Clock::now() - start).count();
  std::printf("acked %llu messages %llu events %llu seconds %.3f resend_rounds %d\n",
              static_cast<unsigned long long>(state.acked.load()),
              static_cast<unsigned long long>(messages), static_cast<unsigned long long>(count),
              seconds, rounds);
  return state.acked.load() == messages ? 0 : 1;
}

int Hostile(const std::string& servers, const std::string& subject, size_t max_bytes,
            size_t max_events) {
  Connection c(servers);
  auto send = [&](const std::string& data, const char* payload_header, const std::string& id) {
    natsMsg* msg = nullptr;
    natsMsg_Create(&msg, subject.c_str(), nullptr, data.data(), static_cast<int>(data.size()));
    natsMsgHeader_Set(msg, "Nats-Msg-Id", id.c_str());
    if (payload_header != nullptr) natsMsgHeader_Set(msg, "Plumb-Payload", payload_header);
    jsPubAck* ack = nullptr;
    const natsStatus s = js_PublishMsg(&ack, c.js, msg, nullptr, nullptr);
    natsMsg_Destroy(msg);
    if (s != NATS_OK) Die("publish " + id, s);
    jsPubAck_Destroy(ack);
  };
  std::map<std::string, int> expected;
  // undecodable: not a protobuf encoding at all (JSON text), truncated protobuf, a user_id
  // that is not UTF-8.
  send("{\"user_id\": \"u1\", \"item_id\": \"t1\"}", nullptr, "bad-json");
  const std::string good = EncodeEvent(1, "");
  send(good.substr(0, good.size() - 1), nullptr, "bad-truncated");
  send(std::string("\x0a\x02\xff\xfe\x12\x02t1", 8), nullptr, "bad-utf8");
  expected["undecodable"] = 3;
  // oversized: a valid event padded past the limit (an unknown field would be wrong_type,
  // but size is checked first).
  {
    plumb::v1::InteractionEvent e;
    e.set_user_id("u1");
    e.set_item_id(std::string(200, 't'));
    e.set_event_id("x");
    std::string data = e.SerializeAsString();
    data += std::string("\x32") + "\x80\x80\x01" + std::string(16384, 'p');  // field 6, 16 KiB
    if (data.size() <= max_bytes) Die("max_message_bytes too large for the oversized case");
    send(data, nullptr, "bad-oversized");
  }
  expected["oversized"] = 1;
  // wrong_type: another message type (a PublishSummary-shaped varint field 9), an event
  // whose timestamp is sent as a string (wire type mismatch), an unknown Plumb-Payload.
  send(std::string("\x48\x05", 2) + good, nullptr, "bad-field9");
  send(std::string("\x0a\x02u1\x12\x02t1\x1a\x03"
                   "abc",
                   13),
       nullptr, "bad-wiretype");
  send(good, "json", "bad-header");
  expected["wrong_type"] = 3;
  // too_many_events: a batch one event over the limit.
  {
    plumb::v1::PublishBatchRequest batch;
    for (size_t i = 0; i <= max_events; ++i) {
      auto* e = batch.add_events();
      e->set_user_id("u");
      e->set_item_id("t");
    }
    send(batch.SerializeAsString(), "batch", "bad-too-many");
  }
  expected["too_many_events"] = 1;
  // no_valid_event: an event without a user, an empty batch.
  {
    plumb::v1::InteractionEvent e;
    e.set_item_id("t1");
    send(e.SerializeAsString(), nullptr, "bad-no-user");
    send("", "batch", "bad-empty-batch");
  }
  expected["no_valid_event"] = 2;
  // A mixed batch: stored (one event), its rejected event counted, the message acked.
  {
    plumb::v1::PublishBatchRequest batch;
    auto* ok = batch.add_events();
    ok->set_user_id("hostile-user");
    ok->set_item_id("hostile-item");
    auto* bad = batch.add_events();
    bad->set_user_id("hostile-user");
    bad->set_item_id("hostile-item");
    bad->set_weight(-1);
    send(batch.SerializeAsString(), "batch", "mixed");
  }
  for (const auto& [reason, n] : expected) std::printf("%s %d\n", reason.c_str(), n);
  return 0;
}

int Verify(const std::string& db, const std::string& prefix, uint64_t count, uint64_t per_message) {
  const std::string scratch = db + ".verify-scratch";
  std::unique_ptr<plumb::store::Store> store;
  if (auto s = plumb::store::Store::OpenSecondary(db, scratch, &store); !s.ok()) {
    Die("open " + db + ": " + s.ToString());
  }
  std::vector<uint32_t> seen(count, 0);
  uint64_t after = 0, total = 0, foreign = 0;
  std::vector<plumb::store::Event> batch;
  while (true) {
    batch.clear();
    if (auto s = store->ReadEvents(after, 65536, &batch); !s.ok()) Die("read: " + s.ToString());
    if (batch.empty()) break;
    for (const auto& e : batch) {
      after = e.seq;
      ++total;
      // Ids: PREFIX-<first> (single events) or PREFIX-<first>/<k> (batches).
      const std::string& id = e.event_id;
      if (id.rfind(prefix + "-", 0) != 0) {
        ++foreign;
        continue;
      }
      const char* p = id.c_str() + prefix.size() + 1;
      char* end = nullptr;
      uint64_t index = std::strtoull(p, &end, 10);
      if (per_message > 1) {
        if (*end != '/') Die("unexpected id " + id);
        index += std::strtoull(end + 1, nullptr, 10);
      }
      if (index >= count) Die("id out of range: " + id);
      // The event must be the one published under that index.
      if (e.user_id != "u" + std::to_string(index % 5000)) Die("wrong user for " + id);
      seen[index]++;
    }
  }
  uint64_t missing = 0, repeated = 0;
  for (uint64_t i = 0; i < count; ++i) {
    if (seen[i] == 0) ++missing;
    if (seen[i] > 1) ++repeated;
  }
  std::printf("log events %llu, published %llu: missing %llu, repeated %llu, other %llu\n",
              static_cast<unsigned long long>(total), static_cast<unsigned long long>(count),
              static_cast<unsigned long long>(missing), static_cast<unsigned long long>(repeated),
              static_cast<unsigned long long>(foreign));
  store.reset();
  std::filesystem::remove_all(scratch);
  return missing == 0 && repeated == 0 ? 0 : 1;
}

}  // namespace

int BadVersion(const std::string& servers, const std::string& stream, const std::string& prefix,
               const std::string& bucket, uint64_t version, const std::string& damage) {
  plumb::replica::VersionBundle b;
  b.version = version;
  b.dim = 4;
  b.objective = "cpr";
  if (!plumb::ItemMatrix::Create(3, 4, &b.items).ok() ||
      !plumb::ItemMatrix::Create(2, 4, &b.users).ok()) {
    Die("allocation");
  }
  for (size_t k = 0; k < 12; ++k) b.items.data()[k] = 0.25f * static_cast<float>(k);
  for (size_t k = 0; k < 8; ++k) b.users.data()[k] = 1.0f - 0.125f * static_cast<float>(k);
  b.item_degrees = {3, 2, 1};
  b.item_ids = {"t1", "t2", "t3"};
  b.user_ids = {"u1", "u2"};
  b.seen_offsets = {0, 1, 1};
  b.seen_items = {2};
  std::string bytes;
  if (!plumb::replica::EncodeBundle(b, &bytes).ok()) Die("encode");
  std::vector<std::string> messages = plumb::replica::CutIntoChunks(version, bytes, 64);
  if (damage == "chunk-crc") {
    messages[1][plumb::replica::kChunkHeaderBytes + 3] ^= 0x20;
  } else if (damage == "truncated") {
    messages.erase(messages.end() - 2);
  } else if (damage == "no-trailer") {
    messages.pop_back();
  } else {
    Die("unknown damage " + damage);
  }
  Connection c(servers);
  const std::string subject = prefix + "." + std::to_string(version);
  for (const std::string& m : messages) {
    jsPubAck* ack = nullptr;
    jsErrCode jerr = static_cast<jsErrCode>(0);
    natsStatus s = js_Publish(&ack, c.js, subject.c_str(), m.data(), static_cast<int>(m.size()),
                              nullptr, &jerr);
    jsPubAck_Destroy(ack);
    if (s != NATS_OK) Die("publish to " + subject + " of " + stream, s);
  }
  kvStore* kv = nullptr;
  natsStatus s = js_KeyValue(&kv, c.js, bucket.c_str());
  if (s != NATS_OK) Die("bucket " + bucket, s);
  uint64_t revision = 0;
  s = kvStore_PutString(&revision, kv, "active", std::to_string(version).c_str());
  kvStore_Destroy(kv);
  if (s != NATS_OK) Die("put the pointer", s);
  std::printf("published version %llu (%s, %zu messages) and pointed at it\n",
              static_cast<unsigned long long>(version), damage.c_str(), messages.size());
  return 0;
}

int MakeVersion(const std::string& db, uint32_t items, uint32_t users, uint32_t dim,
                uint64_t interactions) {
  plumb::store::StoreOptions options;
  options.create_if_missing = true;
  options.sync = false;
  std::unique_ptr<plumb::store::Store> store;
  if (!plumb::store::Store::OpenPrimary(db, options, &store).ok()) Die("open " + db);
  std::mt19937_64 rng(17);
  {
    plumb::store::StateChange ids;
    for (uint32_t i = 0; i < items; ++i) ids.new_items.emplace_back(i, "t" + std::to_string(i));
    for (uint32_t u = 0; u < users; ++u) ids.new_users.emplace_back(u, "u" + std::to_string(u));
    std::uniform_int_distribution<uint32_t> item(0, items - 1), user(0, users - 1);
    for (uint64_t k = 0; k < interactions; ++k)
      ids.new_interactions.emplace_back(user(rng), item(rng));
    if (Status s = store->Commit(ids); !s.ok()) Die("ids: " + s.ToString());
  }
  uint64_t numbers[2] = {0, 0};
  for (int v = 0; v < 2; ++v) {
    const uint32_t n_items = v == 0 ? 10 : items, n_users = v == 0 ? 10 : users;
    std::uniform_real_distribution<float> value(-0.5f, 0.5f);
    std::vector<float> item_values(size_t{n_items} * dim), user_values(size_t{n_users} * dim);
    for (float& x : item_values) x = value(rng);
    for (float& x : user_values) x = value(rng);
    std::vector<uint32_t> degrees(n_items);
    for (uint32_t i = 0; i < n_items; ++i) degrees[i] = static_cast<uint32_t>(rng() % 50);
    plumb::store::VersionWrite write;
    write.manifest.objective = "cpr";
    write.manifest.num_items = n_items;
    write.manifest.num_users = n_users;
    write.manifest.dim = dim;
    write.users = {user_values.data(), n_users, dim};
    write.items = {item_values.data(), n_items, dim};
    write.item_degrees = degrees;
    plumb::store::StateChange change;
    change.version = &write;
    change.activate_published = v == 0;
    if (Status s = store->Commit(change, &numbers[v]); !s.ok()) Die("version: " + s.ToString());
  }
  std::printf("versions %llu %llu\n", static_cast<unsigned long long>(numbers[0]),
              static_cast<unsigned long long>(numbers[1]));
  return 0;
}

int main(int argc, char** argv) {
  const std::vector<std::string> a(argv, argv + argc);
  if (argc == 6 && a[1] == "create-stream") return CreateStream(a[2], a[3], a[4], std::stoi(a[5]));
  if (argc == 9 && a[1] == "publish") {
    return Publish(a[2], a[3], a[4], std::stoull(a[5]), std::stoull(a[6]), std::stoull(a[7]),
                   std::stod(a[8]));
  }
  if (argc == 6 && a[1] == "hostile") {
    return Hostile(a[2], a[3], std::stoull(a[4]), std::stoull(a[5]));
  }
  if (argc == 8 && a[1] == "bad-version") {
    return BadVersion(a[2], a[3], a[4], a[5], std::stoull(a[6]), a[7]);
  }
  if (argc == 7 && a[1] == "make-version") {
    return MakeVersion(a[2], static_cast<uint32_t>(std::stoul(a[3])),
                       static_cast<uint32_t>(std::stoul(a[4])),
                       static_cast<uint32_t>(std::stoul(a[5])), std::stoull(a[6]));
  }
  if (argc == 6 && a[1] == "verify")
    return Verify(a[2], a[3], std::stoull(a[4]), std::stoull(a[5]));
  std::fprintf(stderr, "usage: see the comment at the top of tests/stream/jetstream_tool.cc\n");
  return 2;
}
