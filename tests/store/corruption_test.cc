// Damaged records: garbage or truncated values written behind the store's back must come
// out as Corruption with a message that says where, never as a crash or as wrong data.
#include <algorithm>

#include "store/keys.h"
#include "store/raw_records.h"
#include "store/records.h"
#include "tests/store/store_fixture.h"

namespace plumb::store {
namespace {

using testing::StoreFixture;

bool Mentions(const Status& s, const std::string& text) {
  return s.message().find(text) != std::string::npos;
}

class CorruptionTest : public StoreFixture {
 protected:
  void SetUp() override {
    StoreFixture::SetUp();
    ASSERT_NO_FATAL_FAILURE(OpenWithFirstVersion());  // items: blocks of 4, 4, 2 rows
    version_ = 1;
  }

  // Closes the store, replaces one raw record, and opens the store again.
  void Damage(const char* family, const std::string& key, const std::string& value) {
    Close();
    Status s = testing::PutRawRecord(dir_, family, key, value);
    ASSERT_TRUE(s.ok()) << s.ToString();
    Reopen();
  }
  void Remove(const char* family, const std::string& key) {
    Close();
    ASSERT_TRUE(testing::DeleteRawRecord(dir_, family, key).ok());
    Reopen();
  }
  std::string Raw(const char* family, const std::string& key) {
    Close();
    std::string value;
    EXPECT_TRUE(testing::GetRawRecord(dir_, family, key, &value).ok());
    Reopen();
    return value;
  }

  uint64_t version_ = 0;
};

TEST_F(CorruptionTest, GarbageEvent) {
  Damage(keys::kEventsFamily, keys::EventKey(3), std::string("\xff\xfe\x01garbage", 10));
  std::vector<Event> events;
  Status s = store_->ReadEvents(0, 10, &events);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_TRUE(Mentions(s, "event 3")) << s.ToString();
  // Reading around the damaged record still works.
  ASSERT_TRUE(store_->ReadEvents(0, 2, &events).ok());
  EXPECT_EQ(events.size(), 2u);
  ASSERT_TRUE(store_->ReadEvents(3, 10, &events).ok());
  EXPECT_EQ(events.size(), 2u);
}

TEST_F(CorruptionTest, TruncatedEvents) {
  const std::string whole = Raw(keys::kEventsFamily, keys::EventKey(2));
  ASSERT_GT(whole.size(), 4u);
  // Every truncation, at field boundaries too, is noticed.
  for (size_t keep : {size_t{0}, size_t{1}, whole.size() / 2, whole.size() - 1}) {
    SCOPED_TRACE("kept " + std::to_string(keep) + " of " + std::to_string(whole.size()));
    Damage(keys::kEventsFamily, keys::EventKey(2), whole.substr(0, keep));
    std::vector<Event> events;
    Status s = store_->ReadEvents(1, 1, &events);
    EXPECT_TRUE(s.IsCorruption()) << s.ToString();
    EXPECT_TRUE(Mentions(s, "event 2")) << s.ToString();
  }
  // The whole sweep, below the store: no proper prefix of a record decodes as a record.
  for (size_t keep = 0; keep < whole.size(); ++keep) {
    Event e;
    std::string why;
    EXPECT_FALSE(records::DecodeEvent(whole.substr(0, keep), 2, &e, &why)) << "prefix " << keep;
  }
  Event e;
  std::string why;
  EXPECT_TRUE(records::DecodeEvent(whole, 2, &e, &why)) << why;
}

TEST_F(CorruptionTest, GarbageAndTruncatedManifest) {
  const std::string whole = Raw(keys::kModelsFamily, keys::ManifestKey(version_));
  for (const std::string& bad : {std::string("\x0a\xff\xff\xff\xff\x0f", 6), std::string(),
                                 whole.substr(0, whole.size() / 2)}) {
    SCOPED_TRACE("value of " + std::to_string(bad.size()) + " bytes");
    Damage(keys::kModelsFamily, keys::ManifestKey(version_), bad);
    VersionManifest m;
    Status s = store_->ReadManifest(version_, &m);
    EXPECT_TRUE(s.IsCorruption()) << s.ToString();
    EXPECT_TRUE(Mentions(s, "version 1 manifest")) << s.ToString();
    std::vector<VersionManifest> versions;
    EXPECT_TRUE(store_->ListVersions(&versions).IsCorruption());
    std::vector<float> items(30);
    EXPECT_TRUE(store_->ReadMatrix(version_, MatrixKind::kItems, items).IsCorruption());
    s = store_->Activate(version_);
    EXPECT_EQ(s.code(), Status::Code::kFailedPrecondition) << s.ToString();
    EXPECT_TRUE(Mentions(s, "version 1 manifest")) << s.ToString();
  }
}

TEST_F(CorruptionTest, ManifestUnderTheWrongKey) {
  // A well-formed manifest of version 1 stored as version 2: misplaced, so not trusted.
  const std::string whole = Raw(keys::kModelsFamily, keys::ManifestKey(version_));
  Damage(keys::kModelsFamily, keys::ManifestKey(2), whole);
  VersionManifest m;
  Status s = store_->ReadManifest(2, &m);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_TRUE(Mentions(s, "version 2 manifest")) << s.ToString();
}

TEST_F(CorruptionTest, TruncatedAndMissingBlocks) {
  const std::string key = keys::BlockKey(version_, MatrixKind::kItems, 1);
  const std::string whole = Raw(keys::kModelsFamily, key);
  ASSERT_EQ(whole.size(), 4u * 3 * sizeof(float));
  Damage(keys::kModelsFamily, key, whole.substr(0, 13));
  std::vector<float> items(30, -1.0f);
  Status s = store_->ReadMatrix(version_, MatrixKind::kItems, items);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_TRUE(Mentions(s, "version 1 items matrix: block 1 holds 13 bytes, expected 48"))
      << s.ToString();
  s = store_->Activate(version_);
  EXPECT_EQ(s.code(), Status::Code::kFailedPrecondition) << s.ToString();
  EXPECT_TRUE(Mentions(s, "items matrix: block 1")) << s.ToString();
  // The users matrix of the same version is intact and still reads.
  std::vector<float> users(18);
  EXPECT_TRUE(store_->ReadMatrix(version_, MatrixKind::kUsers, users).ok());

  Remove(keys::kModelsFamily, key);
  s = store_->ReadMatrix(version_, MatrixKind::kItems, items);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_TRUE(Mentions(s, "version 1 items matrix: block 1 is missing")) << s.ToString();

  // The last, partial block too: 2 rows of 3 floats.
  Damage(keys::kModelsFamily, key, whole);
  Damage(keys::kModelsFamily, keys::BlockKey(version_, MatrixKind::kItems, 2), whole);
  s = store_->ReadMatrix(version_, MatrixKind::kItems, items);
  EXPECT_TRUE(Mentions(s, "block 2 holds 48 bytes, expected 24")) << s.ToString();
}

TEST_F(CorruptionTest, DamagedVersionDegrees) {
  Damage(keys::kModelsFamily, keys::VersionDegreesKey(version_, 0), "abc");
  std::vector<uint32_t> degrees;
  Status s = store_->ReadVersionDegrees(version_, &degrees);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_TRUE(Mentions(s, "version 1 item degrees: block 0")) << s.ToString();
  EXPECT_EQ(store_->Activate(version_).code(), Status::Code::kFailedPrecondition);
}

TEST_F(CorruptionTest, DamagedStateValues) {
  // Meta values name their key (a stored value that is not 8 bytes is not read as one).
  Damage(keys::kMetaFamily, std::string(keys::kMetaCursor), "xyz");
  uint64_t cursor = 0;
  Status meta = store_->GetCursor(&cursor);
  EXPECT_TRUE(meta.IsCorruption()) << meta.ToString();
  EXPECT_TRUE(Mentions(meta, "'plumb.cursor' holds 3 bytes")) << meta.ToString();
  VerifyReport report;
  ASSERT_TRUE(store_->Verify(&report).ok());
  EXPECT_NE(std::find(report.problems.begin(), report.problems.end(), meta.message()),
            report.problems.end());

  Damage(keys::kMetaFamily, std::string(keys::kMetaActiveVersion), "");
  uint64_t active = 0;
  meta = store_->GetActiveVersion(&active);
  EXPECT_TRUE(meta.IsCorruption()) << meta.ToString();
  EXPECT_TRUE(Mentions(meta, "plumb.active_version")) << meta.ToString();

  Damage(keys::kIdsFamily, keys::IdByExternalKey(IdSpace::kUser, "member-2"), "12345");
  uint32_t index = 0;
  Status s = store_->LookupId(IdSpace::kUser, "member-2", &index);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_TRUE(Mentions(s, "member-2")) << s.ToString();

  Remove(keys::kIdsFamily, keys::ExternalByIdKey(IdSpace::kItem, 4));
  std::vector<std::string> ids;
  s = store_->LoadIds(IdSpace::kItem, 10, &ids);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_TRUE(Mentions(s, "item index 4 is missing")) << s.ToString();

  Damage(keys::kDegreesFamily, keys::DegreeKey(1), "toolong!");
  std::vector<uint32_t> degrees;
  EXPECT_TRUE(store_->LoadItemDegrees(&degrees).IsCorruption());

  Damage(keys::kInteractionsFamily, "abc", "");
  EXPECT_TRUE(store_->ForEachInteraction([](uint32_t, uint32_t) {}).IsCorruption());
}

TEST_F(CorruptionTest, DamagedDedupRecordRefusesTheBatch) {
  Damage(keys::kEventIdsFamily, "loan-1", "short");
  AppendResult r;
  Status s = store_->AppendEvents(Loans(1, 1), &r);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_TRUE(Mentions(s, "loan-1")) << s.ToString();
  EXPECT_EQ(store_->LastSequence(), 5u);  // nothing appended
}

TEST_F(CorruptionTest, DamagedCounterFailsTheOpenCleanly) {
  Close();
  ASSERT_TRUE(
      testing::PutRawRecord(dir_, keys::kMetaFamily, std::string(keys::kMetaLastSequence), "seven")
          .ok());
  std::unique_ptr<Store> store;
  Status s = Store::OpenPrimary(dir_, options_, &store);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_TRUE(Mentions(s, "'plumb.last_sequence' holds 5 bytes")) << s.ToString();
  EXPECT_EQ(store, nullptr);
}

}  // namespace
}  // namespace plumb::store
