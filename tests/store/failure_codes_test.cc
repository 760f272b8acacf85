// What the store's Status codes say about a failure, so that callers decide by the code and
// never by RocksDB's wording: a full disk is ResourceExhausted, a store another process (or
// another Store of this one) holds is Unavailable, a meta value that cannot be what was
// written is Corruption naming its key.
#include <fcntl.h>
#include <sys/wait.h>
#include <unistd.h>

#include <atomic>
#include <cmath>
#include <memory>

#include "store/failing_disk.h"
#include "tests/store/store_fixture.h"

namespace plumb::store {
namespace {

using testing::StoreFixture;
using FailureCodesTest = StoreFixture;

bool Mentions(const Status& s, const std::string& text) {
  return s.message().find(text) != std::string::npos;
}

TEST_F(FailureCodesTest, ASecondPrimaryInThisProcessIsUnavailable) {
  std::unique_ptr<Store> other;
  Status s = Store::OpenPrimary(dir_, testing::TestOptions(), &other);
  EXPECT_EQ(s.code(), Status::Code::kUnavailable) << s.ToString();
  EXPECT_TRUE(Mentions(s, "LOCK")) << s.ToString();
  EXPECT_EQ(other, nullptr);
  RepairReport report;
  s = Store::Repair(dir_, testing::TestOptions(), &report);
  EXPECT_EQ(s.code(), Status::Code::kUnavailable) << s.ToString();
  EXPECT_TRUE(Mentions(s, "in use by another process")) << s.ToString();
}

// Another process holds the store's LOCK file the way RocksDB does (an fcntl write lock on
// the whole file). The child only calls async-signal-safe functions after fork().
TEST_F(FailureCodesTest, AStoreAnotherProcessHoldsIsUnavailable) {
  Close();
  const std::string lock_file = dir_ + "/LOCK";
  int ready[2], release[2];
  ASSERT_EQ(::pipe(ready), 0);
  ASSERT_EQ(::pipe(release), 0);
  const pid_t child = ::fork();
  ASSERT_GE(child, 0);
  if (child == 0) {
    ::close(ready[0]);
    ::close(release[1]);
    const int fd = ::open(lock_file.c_str(), O_RDWR);
    struct flock f {};
    f.l_type = F_WRLCK;
    f.l_whence = SEEK_SET;
    const char ok = (fd >= 0 && ::fcntl(fd, F_SETLK, &f) == 0) ? 'y' : 'n';
    if (::write(ready[1], &ok, 1) != 1) ::_exit(2);
    char byte;
    while (::read(release[0], &byte, 1) > 0) {
    }
    ::_exit(0);
  }
  ::close(ready[1]);
  ::close(release[0]);
  char ok = 0;
  ASSERT_EQ(::read(ready[0], &ok, 1), 1);
  ASSERT_EQ(ok, 'y');

  std::unique_ptr<Store> other;
  Status s = Store::OpenPrimary(dir_, testing::TestOptions(), &other);
  EXPECT_EQ(s.code(), Status::Code::kUnavailable) << s.ToString();
  EXPECT_TRUE(Mentions(s, "LOCK")) << s.ToString();
  EXPECT_EQ(other, nullptr);

  ::close(release[1]);  // the child sees end of file, exits, and the lock goes with it
  int status = 0;
  ASSERT_EQ(::waitpid(child, &status, 0), child);
  ::close(ready[0]);
  EXPECT_TRUE(WIFEXITED(status) && WEXITSTATUS(status) == 0);
  s = Store::OpenPrimary(dir_, testing::TestOptions(), &other);
  EXPECT_TRUE(s.ok()) << s.ToString();
}

// A write that meets a full disk (the store's own free-space reserve turned off, so that
// RocksDB's write itself fails) is ResourceExhausted, and nothing of it is stored.
TEST_F(FailureCodesTest, AWriteThatMeetsAFullDiskIsResourceExhausted) {
  Close();
  StoreOptions options = testing::TestOptions();
  options.min_free_disk_bytes = 0;
  auto full = std::make_shared<std::atomic<bool>>(false);
  std::unique_ptr<Store> store;
  Status s = testing::OpenPrimaryOnFailingDisk(dir_, options, full, &store);
  ASSERT_TRUE(s.ok()) << s.ToString();
  AppendResult r;
  ASSERT_TRUE(store->AppendEvents(Loans(3, 0), &r).ok());

  full->store(true);
  s = store->AppendEvents(Loans(2, 3), &r);
  EXPECT_EQ(s.code(), Status::Code::kResourceExhausted) << s.ToString();
  EXPECT_TRUE(Mentions(s, "No space left")) << s.ToString();
  EXPECT_EQ(store->LastSequence(), 3u);
  StateChange change;
  change.new_users.emplace_back(0, "member-0");
  s = store->Commit(change);
  EXPECT_EQ(s.code(), Status::Code::kResourceExhausted) << s.ToString();
  EXPECT_EQ(store->IdCount(IdSpace::kUser), 0u);
  // Reads still work.
  std::vector<Event> events;
  ASSERT_TRUE(store->ReadEvents(0, 10, &events).ok());
  EXPECT_EQ(events.size(), 3u);
  store.reset();

  // With room again, the store opens with the acknowledged events and nothing else.
  full->store(false);
  Open(options);
  EXPECT_EQ(store_->LastSequence(), 3u);
  ASSERT_TRUE(store_->ReadEvents(0, 10, &events).ok());
  EXPECT_EQ(events.size(), 3u);
  EXPECT_EQ(store_->IdCount(IdSpace::kUser), 0u);
}

TEST_F(FailureCodesTest, MetaNumbersAreReadWithoutThrowing) {
  double value = 0.0;
  Status s = store_->GetMetaNumber("holdout_fraction", &value);
  EXPECT_TRUE(s.IsNotFound()) << s.ToString();
  EXPECT_TRUE(Mentions(s, "holdout_fraction")) << s.ToString();

  auto set = [&](const std::string& text) {
    StateChange change;
    change.meta.emplace_back("holdout_fraction", text);
    ASSERT_TRUE(store_->Commit(change).ok());
  };
  set("0.25");  // exact in binary
  ASSERT_TRUE(store_->GetMetaNumber("holdout_fraction", &value).ok());
  EXPECT_EQ(value, 0.25);
  set("-1.5e-3");
  ASSERT_TRUE(store_->GetMetaNumber("holdout_fraction", &value).ok());
  EXPECT_EQ(value, -1.5e-3);

  // Text std::stod would throw on (or half-read) is Corruption naming the key.
  const std::vector<std::string> unreadable = {"",      "abc", "0.2x", " 0.2",
                                               "1e999", "nan", "inf",  std::string("\x00\x01", 2)};
  for (const std::string& bad : unreadable) {
    set(bad);
    value = 7.0;
    s = store_->GetMetaNumber("holdout_fraction", &value);
    EXPECT_TRUE(s.IsCorruption()) << "'" << bad << "': " << s.ToString();
    EXPECT_TRUE(Mentions(s, "meta value 'holdout_fraction'")) << s.ToString();
    EXPECT_EQ(value, 7.0);  // untouched
  }
}

}  // namespace
}  // namespace plumb::store
