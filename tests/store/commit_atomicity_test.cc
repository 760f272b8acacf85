// Commit() is all or nothing: a change with any inconsistent part is refused before a byte
// is written, and the store reads exactly as before (also after a reopen).
#include <sstream>

#include "tests/store/store_fixture.h"

namespace plumb::store {
namespace {

using testing::MakeVersion;
using testing::OwnedVersion;
using testing::StoreFixture;

class CommitAtomicityTest : public StoreFixture {
 protected:
  void SetUp() override {
    StoreFixture::SetUp();
    AddIds(4, 5);
    AppendResult r;
    ASSERT_TRUE(store_->AppendEvents(Loans(6, 0), &r).ok());
    base_version_ = Publish(3, 1.0f, true);
    StateChange state;
    state.new_interactions = {{0, 1}, {3, 4}};
    state.item_degrees = {{1, 1}, {4, 1}};
    state.cursor = 2;
    state.meta = {{"auto_activate", "true"}};
    ASSERT_TRUE(store_->Commit(state).ok());
    before_ = Fingerprint();
  }

  // Everything the store can tell about itself, as text.
  std::string Fingerprint() {
    std::ostringstream out;
    for (IdSpace space : {IdSpace::kUser, IdSpace::kItem}) {
      std::vector<std::string> ids;
      EXPECT_TRUE(store_->LoadIds(space, store_->IdCount(space), &ids).ok());
      out << "ids " << static_cast<char>(space) << ":";
      for (const auto& id : ids) {
        uint32_t index = 0;
        EXPECT_TRUE(store_->LookupId(space, id, &index).ok());
        out << " " << id << "=" << index;
      }
      out << "\n";
    }
    for (const char* probe : {"member-new", "tool-new", "member-x", "member-y"}) {
      uint32_t index = 0;
      out << probe << (store_->LookupId(IdSpace::kUser, probe, &index).ok() ? " u" : " -")
          << (store_->LookupId(IdSpace::kItem, probe, &index).ok() ? " i\n" : " -\n");
    }
    EXPECT_TRUE(store_
                    ->ForEachInteraction(
                        [&](uint32_t u, uint32_t i) { out << "x " << u << "," << i << "\n"; })
                    .ok());
    std::vector<uint32_t> degrees;
    EXPECT_TRUE(store_->LoadItemDegrees(&degrees).ok());
    for (uint32_t d : degrees) out << "deg " << d << "\n";
    uint64_t cursor = 0, active = 0;
    EXPECT_TRUE(store_->GetCursor(&cursor).ok());
    EXPECT_TRUE(store_->GetActiveVersion(&active).ok());
    out << "cursor " << cursor << " active " << active << " last " << store_->LastSequence()
        << "\n";
    for (const char* key : {"auto_activate", "note"}) {
      std::string value;
      out << key << "=" << (store_->GetMeta(key, &value).ok() ? value : "<unset>") << "\n";
    }
    std::vector<VersionManifest> versions;
    EXPECT_TRUE(store_->ListVersions(&versions).ok());
    for (const auto& m : versions) {
      out << "version " << m.version << " " << m.num_users << "x" << m.num_items << "x" << m.dim
          << "\n";
    }
    return out.str();
  }

  // A change whose every part is valid; each test breaks one part.
  StateChange ValidChange(OwnedVersion* version) {
    StateChange change;
    change.new_users = {{4, "member-new"}};
    change.new_items = {{5, "tool-new"}};
    change.new_interactions = {{4, 5}, {1, 2}};
    change.item_degrees = {{5, 1}, {2, 1}};
    change.cursor = 6;
    change.meta = {{"note", "written"}};
    change.version = &version->write;
    change.activate_published = true;
    return change;
  }

  // Commits `change`, expects `code`, and checks that nothing changed, before and after a
  // reopen. Then checks that the same fixture with the valid change does go through, so
  // that the test could tell a refused change from a store that writes nothing at all.
  void ExpectRefused(const StateChange& change, Status::Code code) {
    uint64_t published = 77;
    Status s = store_->Commit(change, &published);
    EXPECT_EQ(s.code(), code) << s.ToString();
    EXPECT_FALSE(s.message().empty());
    EXPECT_EQ(published, 0u);
    EXPECT_EQ(Fingerprint(), before_);
    Reopen();
    EXPECT_EQ(Fingerprint(), before_);
  }

  void ExpectValidGoesThrough() {
    auto v = MakeVersion(5, 6, 3, 2.0f);
    ASSERT_TRUE(store_->Commit(ValidChange(v.get())).ok());
    EXPECT_NE(Fingerprint(), before_);
  }

  uint64_t base_version_ = 0;
  std::string before_;
};

TEST_F(CommitAtomicityTest, TheValidChangeIsAccepted) {
  auto v = MakeVersion(5, 6, 3, 2.0f);
  uint64_t published = 0;
  ASSERT_TRUE(store_->Commit(ValidChange(v.get()), &published).ok());
  EXPECT_EQ(published, base_version_ + 1);
  const std::string after = Fingerprint();
  EXPECT_NE(after.find("member-new=4"), std::string::npos) << after;
  EXPECT_NE(after.find("x 4,5"), std::string::npos) << after;
  EXPECT_NE(after.find("cursor 6 active 2"), std::string::npos) << after;
  EXPECT_NE(after.find("note=written"), std::string::npos) << after;
}

TEST_F(CommitAtomicityTest, GapInUserIndexes) {
  auto v = MakeVersion(5, 6, 3, 2.0f);
  StateChange change = ValidChange(v.get());
  change.new_users = {{5, "member-new"}};  // 4 is next
  ExpectRefused(change, Status::Code::kInvalidArgument);
  ExpectValidGoesThrough();
}

TEST_F(CommitAtomicityTest, GapInsideTheNewItems) {
  auto v = MakeVersion(5, 6, 3, 2.0f);
  StateChange change = ValidChange(v.get());
  change.new_items = {{5, "tool-new"}, {7, "tool-other"}};
  ExpectRefused(change, Status::Code::kInvalidArgument);
  ExpectValidGoesThrough();
}

TEST_F(CommitAtomicityTest, ExternalIdAlreadyKnownOrRepeated) {
  auto v = MakeVersion(5, 6, 3, 2.0f);
  StateChange change = ValidChange(v.get());
  change.new_users = {{4, "member-0"}};  // member-0 has index 0
  ExpectRefused(change, Status::Code::kInvalidArgument);
  change.new_users = {{4, "member-x"}, {5, "member-x"}};
  ExpectRefused(change, Status::Code::kInvalidArgument);
  change.new_users = {{4, ""}};
  ExpectRefused(change, Status::Code::kInvalidArgument);
}

TEST_F(CommitAtomicityTest, WrongMatrixSizes) {
  auto v = MakeVersion(5, 6, 3, 2.0f);
  StateChange change = ValidChange(v.get());
  v->write.items.rows = 5;  // manifest says 6
  ExpectRefused(change, Status::Code::kInvalidArgument);
  v->write.items.rows = 6;
  v->write.users.dim = 2;  // manifest says 3
  ExpectRefused(change, Status::Code::kInvalidArgument);
  v->write.users.dim = 3;
  v->write.item_degrees = std::span<const uint32_t>(v->degrees.data(), 5);  // 6 items
  ExpectRefused(change, Status::Code::kInvalidArgument);
  v->write.item_degrees = v->degrees;
  v->write.manifest.num_users = 9;  // more rows than the dictionary will hold
  v->users.resize(27);
  v->write.users = {v->users.data(), 9, 3};
  ExpectRefused(change, Status::Code::kInvalidArgument);
}

TEST_F(CommitAtomicityTest, UnknownIndexesCursorAndMeta) {
  auto v = MakeVersion(5, 6, 3, 2.0f);
  StateChange change = ValidChange(v.get());
  change.new_interactions.emplace_back(5, 0);  // user 5 does not exist even after the change
  ExpectRefused(change, Status::Code::kInvalidArgument);
  change = ValidChange(v.get());
  change.item_degrees.emplace_back(6, 1);
  ExpectRefused(change, Status::Code::kInvalidArgument);
  change = ValidChange(v.get());
  change.cursor = 7;  // the log ends at 6
  ExpectRefused(change, Status::Code::kInvalidArgument);
  change = ValidChange(v.get());
  change.meta.emplace_back("plumb.active_version", "x");
  ExpectRefused(change, Status::Code::kInvalidArgument);
}

TEST_F(CommitAtomicityTest, ActivatingAMissingVersion) {
  auto v = MakeVersion(5, 6, 3, 2.0f);
  StateChange change = ValidChange(v.get());
  change.activate_published = false;
  change.activate = 42;
  ExpectRefused(change, Status::Code::kNotFound);
  change.version = nullptr;
  change.activate_published = true;  // nothing published to activate
  ExpectRefused(change, Status::Code::kInvalidArgument);
}

}  // namespace
}  // namespace plumb::store
