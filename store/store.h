// plumb::store::Store — the only code in plumb that knows RocksDB.
//
// One database directory holds everything plumb persists, by column family:
//   events       big-endian uint64 sequence -> StoredEvent (the durable event log)
//   event_ids    client event_id -> sequence and receive time (de-duplication)
//   ids          'u'|'i' + 'x' + external id -> dense uint32 index, and
//                'u'|'i' + 'n' + big-endian index -> external id (append-only dictionaries)
//   interactions big-endian user index + big-endian item index -> (empty): per-user item sets
//   degrees      big-endian item index -> uint32 training degree (live, not per version)
//   models       'm' + big-endian version -> StoredManifest;
//                'b' + big-endian version + kind byte + big-endian block -> float32 rows;
//                'd' + big-endian version + big-endian block -> uint32 item degrees
//   meta         small named values: active version, consumer cursor, next version, retention
//                totals, the withdrawn items ('plumb.withdrawn/' + external item id), ...
//   pair_history big-endian user index + big-endian item index -> StoredPairHistory: what
//                event-log retention folded in before removing events (store/retention.cc)
// Keys are big-endian so that iteration order is numeric order. Integers and float32 rows
// inside values are little-endian (store/keys.h has the exact layout). Matrices and version
// degrees are cut into blocks of StoreOptions::rows_per_block rows; the last may be shorter.
//
// Errors: a value that cannot be what the store wrote (unparseable, truncated, wrong size,
// a block missing) is reported as Corruption with a message naming the record, e.g.
// "version 7 items matrix: block 3 is missing"; the store never crashes on one. A write on
// a store opened as a secondary fails with FailedPrecondition. A full disk is
// ResourceExhausted and a directory another process holds is Unavailable, whichever call
// meets it; other failures of the disk or of RocksDB are IoError.
//
// One process opens the directory as the primary (the only writer: plumb-train or the
// `plumb` command line); any number of readers open it as secondaries (plumb-serve) and
// call CatchUp() to see what the primary wrote since. Every write below is one RocksDB
// write batch, so a reader (and a process restarted after a crash) sees all of it or none.
//
// Thread safety: all methods may be called from several threads at once. Writes are
// serialised internally. On a secondary, reads may run concurrently with CatchUp(); a read
// sees the state before or after a catch-up, never a mix within one call.
#pragma once

#include <cstdint>
#include <functional>
#include <limits>
#include <map>
#include <memory>
#include <optional>
#include <span>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

#include "core/status.h"

namespace plumb::store {

// The two id dictionaries. Users and items are numbered separately from 0.
enum class IdSpace : char { kUser = 'u', kItem = 'i' };

// Which matrix of a version.
enum class MatrixKind : char { kUsers = 'u', kItems = 'i' };

// Outcome of the trainer's validation gate for a version.
enum class GateOutcome : int { kUnspecified = 0, kPassed = 1, kFailed = 2, kSkipped = 3 };

// "passed", "failed" or "skipped"; `unspecified` for kUnspecified (each screen has its own
// word for a version whose gate was not recorded).
std::string_view GateOutcomeName(GateOutcome gate, std::string_view unspecified);

struct StoreOptions {
  // Create the directory and column families when missing (primary only).
  bool create_if_missing = true;
  // fsync the write-ahead log before AppendEvents / Commit return. With false, a crash of
  // the machine (not of the process) can lose the last writes; acknowledged-means-durable
  // then holds only against process crashes.
  bool sync = true;
  // Which versions to keep. When Commit() publishes a version it deletes, in the same write
  // batch, every version that is (a) not among the newest keep_versions, (b) older than
  // keep_versions_for_ms (by its created_ms; 0 = no age rule) and (c) neither active nor
  // pinned (SetPinned). So the newest keep_versions are always there, and so is every
  // version younger than keep_versions_for_ms, however often versions are published.
  // keep_versions at least 1.
  //
  // Disk: a version holds (num_users + num_items) x dim float32s plus num_items uint32
  // degrees, e.g. 0.6 MB for 3,000 users and 1,500 items at dim 32, 77 MB for 200,000 users
  // and 100,000 items at dim 64. Publishing every 30 s for the default 2 h keeps up to 240
  // versions: multiply.
  uint32_t keep_versions = 5;
  int64_t keep_versions_for_ms = 2LL * 3600 * 1000;
  // Rows per stored block of an embedding matrix.
  uint32_t rows_per_block = 4096;
  // A duplicate event_id is recognised if its first copy was received within this window.
  // Longer windows cost disk (one small record per event id). 0 = forever.
  int64_t dedup_window_ms = 24LL * 3600 * 1000;
  // Free space kept on the store's file system: a write that would leave less is refused
  // with ResourceExhausted (nothing written) instead of being attempted. RocksDB needs the
  // room to flush and compact; a write that actually meets a full disk leaves it refusing
  // writes until its own recovery finds a memtable's worth (64 MB) free again, and can
  // even abort the process (an assertion the Debian build keeps). 0 = no check.
  uint64_t min_free_disk_bytes = 128ull << 20;
};

// What Store::Verify found. Every problem is one sentence naming the record or file.
struct VerifyReport {
  uint64_t table_files = 0;  // table files whose every block was read and checksummed
  uint64_t table_bytes = 0;
  uint64_t events = 0;    // events read and decoded
  uint64_t versions = 0;  // versions read in full
  std::vector<std::string> problems;
  std::vector<uint64_t> damaged_versions;  // versions that cannot be read in full
};

// What Store::Repair did.
struct RepairReport {
  // A table file RocksDB's repair moved to <dir>/lost/ because it could not be read in full.
  struct SetAside {
    std::string file;    // e.g. "000034.sst"
    std::string family;  // its column family, "" when even that is unreadable
    std::string why;
    uint64_t salvaged = 0;  // readable records copied back from it
    uint64_t unreadable_ranges = 0;
  };
  bool rebuilt = false;  // RocksDB's repair rebuilt the set of live files
  std::string rebuild_reason;
  std::vector<SetAside> set_aside;
  uint64_t salvaged_records = 0;
  std::vector<uint64_t> dropped_versions;  // incomplete or unreadable versions deleted
  uint64_t active_before = 0, active_after = 0;
  uint64_t cursor_before = 0, cursor_after = 0;
  uint64_t degrees_rewritten = 0;      // live item degrees recomputed from interactions
  std::vector<std::string> remaining;  // problems Verify still finds afterwards
};

// What Store::ForgetUser erased.
struct ForgetReport {
  uint64_t events = 0;        // events of the user deleted from the log
  bool had_index = false;     // the user was in the dictionary (trained on at least once)
  uint32_t index = 0;         // its dense index, now named by a placeholder
  uint64_t interactions = 0;  // (user, item) pairs deleted
  std::vector<uint64_t> versions_changed;  // kept versions whose row for the user is now 0
  std::vector<std::string> lost_files;     // files in <dir>/lost/ (from plumb repair) that
                                           // may hold the user's data: delete them by hand
};

// The external id a forgotten user's dictionary entry is renamed to: the prefix and the
// index. The control character keeps it apart from every real id (ingest refuses control
// characters in ids).
inline constexpr std::string_view kForgottenIdPrefix = "\x01forgotten:";

// An event as submitted, already validated by the caller.
struct EventInput {
  std::string user_id;
  std::string item_id;
  int64_t timestamp_ms = 0;
  std::string event_id;  // empty: no de-duplication
  float weight = 1.0f;
};

// An event as stored in the log.
struct Event : EventInput {
  uint64_t seq = 0;
  int64_t received_ms = 0;
};

struct AppendResult {
  uint64_t appended = 0;
  uint64_t duplicates = 0;
  // One entry per input: the sequence number given to it, or, for a duplicate, the
  // sequence number of the earlier copy.
  std::vector<uint64_t> seqs;
  std::vector<bool> duplicate;
  // Highest sequence number in the log after the append.
  uint64_t last_seq = 0;
};

// How a version was trained (storage.proto StoredTrainingConfig has the meaning of each
// field). origin is empty for versions written before configurations were recorded.
struct TrainingConfig {
  std::string origin;
  std::string objective;
  uint32_t dim = 0;
  uint32_t cpr_k = 0;
  uint32_t cpr_mix_k = 0;
  double cpr_mix_share = 0.0;
  double beta = 0.0;
  std::string optimizer;
  double learning_rate = 0.0;
  double l2 = 0.0;
  uint32_t batch_size = 0;
  uint32_t epochs = 0;
  double replay_ratio = 0.0;
  double holdout_fraction = 0.0;
  uint64_t seed = 0;
  uint64_t refit_pairs = 0;
  std::vector<double> tune_betas;
  int64_t training_window_ms = 0;
  bool known() const { return !origin.empty(); }
};

// One candidate of a tuning run (storage.proto StoredTuneRow).
struct TuneRecord {
  double beta = 0.0;
  double cpr_mix_share = 0.0;
  double recall = 0.0;
  double ndcg = 0.0;
  double arp = 0.0;
  double shift = 0.0;
  double shift_distance = 0.0;
  double standard_error = 0.0;
  bool near_tie = false;
  bool chosen = false;
};

struct VersionManifest {
  uint64_t version = 0;  // assigned by Commit() when 0
  int64_t created_ms = 0;
  std::string objective;
  uint64_t events_seen = 0;  // log sequence this version was trained up to
  uint64_t num_interactions = 0;
  uint32_t num_users = 0;
  uint32_t num_items = 0;
  uint32_t dim = 0;
  double validation_recall = 0.0;  // NaN when not measured
  uint32_t validation_k = 0;
  GateOutcome gate = GateOutcome::kUnspecified;
  std::string gate_reason;
  std::map<std::string, double> figures;
  TrainingConfig training;
  // Debiased validation at publish (storage.proto has the meaning); empty / NaN when not
  // measured.
  std::vector<double> target_group_shares;
  std::vector<double> validation_group_shares;
  double validation_shift = std::numeric_limits<double>::quiet_NaN();
  double validation_shift_distance = std::numeric_limits<double>::quiet_NaN();
  std::vector<TuneRecord> tune;
  std::string tune_reason;
  // Pinned versions are never pruned (SetPinned). Filled by ReadManifest and ListVersions;
  // ignored by Commit.
  bool pinned = false;
};

// A borrowed view of a row-major float32 matrix: rows * dim values.
struct MatrixView {
  const float* data = nullptr;
  uint32_t rows = 0;
  uint32_t dim = 0;
};

// An embedding version to publish. The views must stay valid during Commit().
struct VersionWrite {
  VersionManifest manifest;                // num_users/num_items/dim must match the views
  MatrixView users;                        // num_users x dim
  MatrixView items;                        // num_items x dim
  std::span<const uint32_t> item_degrees;  // num_items training degrees
};

// A group of changes that Commit() applies as one atomic write.
// A canary rollout: a candidate version served beside the active one to a stable share of the
// subjects (users; items for SimilarItems), chosen by core/canary_bucket.h. share_bp is in
// basis points (1 = 0.01 %, 10000 = everyone).
struct Canary {
  uint64_t version = 0;  // 0: no canary
  uint32_t share_bp = 0;
  int64_t started_ms = 0;  // when this candidate's canary began (widening keeps it)
};

struct StateChange {
  // New dictionary entries (index, external id). Indexes must continue the dictionary
  // without gaps: the next user index is IdCount(kUser), and so on.
  std::vector<std::pair<uint32_t, std::string>> new_users;
  std::vector<std::pair<uint32_t, std::string>> new_items;
  // (user index, item index) pairs added to the interaction sets. Re-adding is harmless.
  std::vector<std::pair<uint32_t, uint32_t>> new_interactions;
  // (item index, degree): absolute live degree values to store.
  std::vector<std::pair<uint32_t, uint32_t>> item_degrees;
  // The consumer cursor: the last log sequence folded into this state.
  std::optional<uint64_t> cursor;
  // A version to publish, or null.
  const VersionWrite* version = nullptr;
  // Make the published version the active one.
  bool activate_published = false;
  // Make an already stored version the active one (ignored if activate_published).
  std::optional<uint64_t> activate;
  // Named meta values to set (e.g. "auto_activate"). Keys starting with "plumb." are reserved.
  std::vector<std::pair<std::string, std::string>> meta;
  // Starts, changes (a new share; started_ms is kept for the same version) or, with version 0,
  // ends the canary. The candidate must be kept and complete (NotFound / FailedPrecondition as
  // for activation), must not be the active version after the change (FailedPrecondition), and
  // share_bp must be 1..10000 (InvalidArgument). Independently of this field, a change that
  // activates the canary's version ends the canary in the same write (a promotion).
  std::optional<Canary> canary;
};

// Event-log retention (RetainEvents). Events leave the log from the oldest on, each one only
// once the trainer has folded it in (sequence <= the consumer cursor), and only while it is
// older than the age rule or the log is over its size budget. A pass stops at the first event
// that no rule removes: an event that arrived after a newer one (a late event) waits until
// the events before it have gone.
struct RetentionPolicy {
  // Remove events whose timestamp is more than this before the clock (0: no age rule).
  int64_t max_age_ms = 0;
  // Remove the oldest events while the log's stored bytes (LogStats::bytes) exceed this
  // (0: no size rule).
  uint64_t max_log_bytes = 0;
  // The clock of the age rule, ms since the epoch. 0: the newest event timestamp the store has
  // (the timestamp of the last event in the log, or the newest one already folded in, whichever
  // is later): the stream's own clock, as for the training window, so that a replayed
  // history behaves as it did live.
  int64_t now_ms = 0;
  // Events removed per atomic write. Smaller writes stall concurrent appends less.
  uint32_t events_per_write = 4096;
  // After removing, let RocksDB drop and compact the table files of the removed range, so that
  // the disk space comes back now rather than at some later compaction.
  bool reclaim_disk = true;
};

// What one RetainEvents pass did.
struct RetentionReport {
  uint64_t removed_events = 0;
  uint64_t removed_bytes = 0;
  uint64_t pairs_updated = 0;  // pair_history records written (new or merged)
  uint64_t pairs_added = 0;    // of them, new records
  uint64_t first_seq_after = 0;  // oldest event left, 0 when the log is empty
  int64_t cut_ms = 0;            // events older than this went by age (0: no age rule)
  // Why the pass stopped: "the log is empty", "the end of the log" (everything went), "the
  // trainer's cursor", "an event within the age and the log within its budget", or "no rule"
  // (a policy without rules).
  std::string stopped_by;
  double seconds = 0.0;
};

// The event log and what retention did (Store::GetLogStats).
struct LogStats {
  uint64_t first_seq = 0;  // oldest event in the log, 0 when the log is empty
  uint64_t last_seq = 0;   // newest sequence ever given
  uint64_t events = 0;     // events in the log now
  uint64_t bytes = 0;      // their stored size (key + value, before compression)
  uint64_t disk_bytes = 0;  // table files of the events family (may still hold removed events)
  int64_t oldest_timestamp_ms = 0;  // of the oldest event in the log (0 when empty)
  int64_t oldest_received_ms = 0;
  // Retention, since the store began.
  uint64_t removed_events = 0;
  uint64_t removed_bytes = 0;
  uint64_t folded_through = 0;      // every event up to this sequence is in pair_history
  int64_t folded_watermark_ms = 0;  // newest timestamp among them
  uint64_t history_pairs = 0;       // records in pair_history
  uint64_t retention_passes = 0;    // passes that removed something
  int64_t last_retention_ms = 0;    // when the last such pass ended
};

// One pair_history record (storage.proto StoredPairHistory).
struct PairHistory {
  uint64_t count = 0;
  uint64_t first_seq = 0;
  int64_t last_ms = 0;
  friend bool operator==(const PairHistory&, const PairHistory&) = default;
};

// A withdrawn item (Store::ListWithdrawnItems).
struct WithdrawnItem {
  std::string item_id;
  int64_t withdrawn_ms = 0;
};

// What SetItemsWithdrawn changed.
struct AvailabilityChange {
  uint64_t changed = 0;    // items whose state changed
  uint64_t unchanged = 0;  // items already in the asked state (or repeated in the request)
  uint64_t withdrawn = 0;  // items withdrawn after the write
  uint64_t generation = 0;
};

struct StoreTestAccess;

class Store {
 public:
  // Opens `dir` read-write. Fails with Unavailable if another process (or another Store in
  // this process) holds it, ResourceExhausted when the disk is full, InvalidArgument for bad
  // options, Corruption if the store's counters are unreadable or a table file is missing or
  // damaged. With create_if_missing, a new store is created only in a directory that holds no store
  // files: a directory with table, log or MANIFEST files but no CURRENT file is a damaged store,
  // and creating a new one there would delete its files, so that fails with Corruption (pointing at
  // `plumb repair`). On success *out owns the store; on failure *out is null.
  static Status OpenPrimary(const std::string& dir, const StoreOptions& options,
                            std::unique_ptr<Store>* out);

  // Opens `dir` as a read-only follower of the primary. `scratch_dir` is this follower's
  // own directory for RocksDB's info log (created if missing; one per follower process).
  // The store must exist (NotFound otherwise). Runs CheckFiles() first: Corruption naming
  // the file when a table file is missing or damaged. Call CatchUp() to see later writes of
  // the primary; until then the secondary shows the state it opened with.
  static Status OpenSecondary(const std::string& dir, const std::string& scratch_dir,
                              std::unique_ptr<Store>* out);

  // Checks that every table file the store's MANIFEST lists is present, as long as
  // recorded, and has a readable footer and index, by opening `dir` read-only with RocksDB's
  // paranoid checks and every table file open (the write-ahead log is not read). A RocksDB
  // secondary steps around such damage without a word: it falls back to the newest state
  // whose files all exist, which shows older data as if it were current. NotFound when
  // `dir` holds no store; Corruption naming the file and what is wrong with it otherwise.
  // `scratch_dir` (created if missing) receives the check's RocksDB info log. Safe while a
  // primary writes the store: if the MANIFEST changes during the check (a compaction
  // deleted a file just listed), the check runs again, up to a few times. Reads the footer
  // and index of every table file: milliseconds for a small store, about a second for
  // thousands of files.
  static Status CheckFiles(const std::string& dir, const std::string& scratch_dir);

  // Brings a damaged store at `dir` back to a state that opens and verifies, keeping every
  // record that can still be read (store/repair.cc):
  //  1. when CURRENT is missing, a table file is missing or damaged, or any block fails its
  //     checksum, RocksDB's own repair rebuilds the set of live files: it sets aside into
  //     <dir>/lost/ every table file it cannot read in full and turns the write-ahead logs
  //     into table files;
  //  2. every readable record of a set-aside file is copied back when the store lacks its
  //     key (events, event ids, ids, interactions, version blocks: records written once);
  //  3. versions that are not complete are deleted; if the active version is among them, the
  //     newest complete version that did not fail its gate becomes active (or none);
  //  4. the cursor is kept within the log; live item degrees are recomputed from the
  //     interaction sets;
  //  5. Verify() runs and report->remaining lists what is still wrong.
  // Unavailable while another process holds the store (stop plumb-train first; restart
  // plumb-serve afterwards). NotFound without a store. OK when the repair ran, even if
  // report->remaining is not empty.
  static Status Repair(const std::string& dir, const StoreOptions& options, RepairReport* report);

  Store(const Store&) = delete;
  Store& operator=(const Store&) = delete;
  // Closes the database. Blocks until background work of RocksDB has stopped.
  ~Store();

  bool is_primary() const;

  // Secondary: replays what the primary wrote since the last catch-up. Primary: no-op.
  Status CatchUp();

  // ---- event log -------------------------------------------------------------------

  // Appends events with consecutive sequence numbers in one atomic, durable write (fsync
  // when options.sync). Events whose event_id was seen within the de-duplication window
  // are not appended again (reported in the result); so are repeats of one event_id within
  // the batch. InvalidArgument for an event with an empty user or item id; Corruption if a
  // stored de-duplication record is unreadable; ResourceExhausted when the write would cut
  // into min_free_disk_bytes. On error nothing was appended.
  Status AppendEvents(std::span<const EventInput> events, AppendResult* result);

  // Replaces *out with up to `max_events` events with sequence > after_seq, in order.
  Status ReadEvents(uint64_t after_seq, size_t max_events, std::vector<Event>* out) const;

  // Highest sequence number in the log, 0 when empty.
  uint64_t LastSequence() const;

  // ---- retention (store/retention.cc) ----------------------------------------------

  // Removes events from the log under `policy` (see RetentionPolicy), folding each into the
  // pair_history record of its (user, item) pair (count, first sequence, newest timestamp)
  // in the same atomic write that removes it, so that TrainingState::Load rebuilds the same
  // state from pair_history plus the events left. Never removes an event beyond the consumer
  // cursor. The de-duplication records are separate and keep their window. Primary only
  // (FailedPrecondition otherwise); one pass at a time (a second caller waits). Runs beside
  // appends and commits without holding them up longer than one write of events_per_write
  // events. Corruption when an event to remove is unreadable or names an id the dictionary
  // lacks (nothing of that write is applied; earlier writes of the pass stay).
  Status RetainEvents(const RetentionPolicy& policy, RetentionReport* report);

  // The log's size, its oldest event and the retention totals. Thread-safe; on a secondary
  // as of the last catch-up.
  Status GetLogStats(LogStats* out) const;

  // Calls fn(user, item, record) for every pair_history record, ordered by user then item.
  // Nothing (OK) when the family does not exist (a follower opened before it was created).
  Status ForEachPairHistory(
      const std::function<void(uint32_t, uint32_t, const PairHistory&)>& fn) const;

  // ---- item availability (store/availability.cc) -----------------------------------

  // Withdraws (withdrawn = true) or restores items by external id, in one atomic write that
  // also advances the availability generation. Ids need not be in the dictionary yet (an item
  // can be withdrawn before its first event). InvalidArgument for an empty id (nothing
  // written). Primary only.
  Status SetItemsWithdrawn(std::span<const std::string> item_ids, bool withdrawn,
                           AvailabilityChange* result);

  // The withdrawn items in id order, starting after `start_after` ("" = from the first), at
  // most `limit` (0 = all). Thread-safe.
  Status ListWithdrawnItems(std::string_view start_after, size_t limit,
                            std::vector<WithdrawnItem>* out) const;

  // The availability generation (0: nothing ever withdrawn) and the number of withdrawn items.
  // One small read: followers call it every catch-up to see whether to reload the list.
  Status GetAvailability(uint64_t* generation, uint64_t* withdrawn) const;

  // ---- training state -------------------------------------------------------------

  // The consumer cursor (0 when never set).
  Status GetCursor(uint64_t* seq) const;

  // Index of an external id; NotFound when it has none.
  Status LookupId(IdSpace space, std::string_view external, uint32_t* index) const;

  // Number of entries in a dictionary.
  uint32_t IdCount(IdSpace space) const;

  // External ids of indexes [0, count), in index order. Corruption if one is missing.
  Status LoadIds(IdSpace space, uint32_t count, std::vector<std::string>* out) const;

  // Calls fn(user, item) for every stored interaction, ordered by user then item.
  Status ForEachInteraction(const std::function<void(uint32_t, uint32_t)>& fn) const;

  // The item indexes of one user's interaction set, ascending.
  Status UserItems(uint32_t user, std::vector<uint32_t>* items) const;

  // Live item degrees, one per item index [0, IdCount(kItem)); missing entries are 0.
  Status LoadItemDegrees(std::vector<uint32_t>* degrees) const;

  // Applies `change` atomically and durably. With a version, assigns its number (when
  // manifest.version is 0; an explicit number must be higher than any published before),
  // sets created_ms to now when 0, writes manifest and all blocks, then deletes the versions
  // that StoreOptions' keep rules no longer keep (never the active or a pinned one). `published`
  // receives the version number (0 when none). Everything is checked before anything is written:
  // InvalidArgument for inconsistent input (index gaps, known or repeated external ids,
  // interactions or degrees naming unknown indexes, a cursor beyond LastSequence(), matrix or
  // degree sizes that differ from the manifest, more rows than the dictionaries hold, reserved or
  // empty meta keys); `activate` of a version not kept gives NotFound, of an incomplete one
  // FailedPrecondition. Nothing is written then.
  Status Commit(const StateChange& change, uint64_t* published = nullptr);

  // ---- versions -------------------------------------------------------------------

  // The active version, 0 when none.
  Status GetActiveVersion(uint64_t* version) const;

  // Manifests of all kept versions, newest first.
  Status ListVersions(std::vector<VersionManifest>* out) const;

  Status ReadManifest(uint64_t version, VersionManifest* out) const;

  // Fills dest (exactly rows * dim floats, caller-owned, e.g. an aligned buffer) with a
  // matrix of a version. NotFound for a version not kept; Corruption for a missing or
  // wrongly sized block.
  Status ReadMatrix(uint64_t version, MatrixKind kind, std::span<float> dest) const;

  // The item degrees stored with a version (num_items values).
  Status ReadVersionDegrees(uint64_t version, std::vector<uint32_t>* out) const;

  // Makes a kept, complete version active (manifest readable, every block present and of
  // the right size). NotFound / FailedPrecondition (naming the damaged record) otherwise.
  Status Activate(uint64_t version);

  // Makes the next published version number at least `next` (never lower than it is): for a
  // trainer whose store is behind the versions it finds elsewhere (restored from a backup while
  // remote replicas hold newer numbers), so that a number never names two different versions.
  // Durable; primary only. `*was` (may be null) receives the next number before.
  Status SkipVersionNumbers(uint64_t next, uint64_t* was = nullptr);

  // The canary (version 0 when none runs). A canary's version is never pruned.
  Status GetCanary(Canary* out) const;

  // Pins a kept version (it is then never pruned, whatever its age or rank) or unpins it.
  // NotFound for a version that is not kept. Primary only. Idempotent.
  Status SetPinned(uint64_t version, bool pinned);

  // Named meta values set through StateChange::meta. NotFound when unset.
  Status GetMeta(std::string_view key, std::string* value) const;

  // A named meta value that holds a number as decimal text (e.g. "0.2"): NotFound when
  // unset; Corruption naming the key when the stored text is not one finite number.
  Status GetMetaNumber(std::string_view key, double* value) const;

  // ---- erasure (store/forget.cc) ----------------------------------------------------

  // Erases what the store holds of one user (primary only): every event of theirs in the
  // log (trained on yet or not) with its de-duplication record; their dictionary entry,
  // whose index stays taken but is renamed to kForgottenIdPrefix + index; their interaction
  // set and its share of the live item degrees; and their row in every kept version (set
  // to zeros). One atomic write; then every column family is flushed and compacted, so
  // that the deleted bytes are gone from the table files and the log when it returns
  // (slow on a large store: it rewrites all of it). RocksDB's MANIFEST still names the
  // first and last key of table files that no longer exist until the store is next opened
  // (which rewrites it): close and reopen the store to finish (plumb forget does). Future versions
  // never see the user: the training state is rebuilt from the log, which no longer holds them.
  // Processes that hold the data in memory (a running plumb-serve's snapshot) keep it until they
  // load a newer version or restart. A user unknown to the store is not an error (the
  // report says 0 events). InvalidArgument for an empty or already forgotten id;
  // Corruption (nothing erased) when the log cannot be read in full.
  Status ForgetUser(std::string_view user_id, ForgetReport* report);

  // ---- integrity (store/integrity.cc) ---------------------------------------------

  // Reads the whole store and reports every problem found in *report: each table file's
  // blocks against their checksums (naming the file, its column family and key range),
  // every event, the id dictionaries, interactions, degrees and meta values, and every kept
  // version in full. OK when the checks ran (report->problems may still be non-empty); an
  // error only when they could not run. Reads everything once: minutes for a large store.
  // Thread-safe; on a secondary it sees the state of the last catch-up.
  Status Verify(VerifyReport* report) const;

  // On a secondary: CheckFiles() on this store's directory, for damage that appeared after
  // the opening (a follower's catch-up steps around it as its opening would). OK on a
  // primary, whose reads fail on such damage by themselves.
  Status RecheckFiles() const;

 private:
  struct Impl;
  friend struct StoreTestAccess;  // store/failing_disk.cc (tests only)
  explicit Store(std::unique_ptr<Impl> impl);
  std::unique_ptr<Impl> impl_;
};

}  // namespace plumb::store
