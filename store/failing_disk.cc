#include "store/failing_disk.h"

#include <rocksdb/env.h>
#include <rocksdb/file_system.h>

#include <utility>

#include "store/store_impl.h"

namespace plumb::store {

namespace {

rocksdb::IOStatus FullDisk(const std::string& what) {
  return rocksdb::IOStatus::NoSpace(what, "No space left on device");
}

// A file whose appends fail while the disk is full.
class FailingFile : public rocksdb::FSWritableFileOwnerWrapper {
 public:
  FailingFile(std::unique_ptr<rocksdb::FSWritableFile> file, std::string name,
              std::shared_ptr<std::atomic<bool>> full)
      : FSWritableFileOwnerWrapper(std::move(file)),
        name_(std::move(name)),
        full_(std::move(full)) {}

  rocksdb::IOStatus Append(const rocksdb::Slice& data, const rocksdb::IOOptions& options,
                           rocksdb::IODebugContext* dbg) override {
    if (full_->load()) return FullDisk("While appending to file: " + name_);
    return FSWritableFileOwnerWrapper::Append(data, options, dbg);
  }
  rocksdb::IOStatus Append(const rocksdb::Slice& data, const rocksdb::IOOptions& options,
                           const rocksdb::DataVerificationInfo& info,
                           rocksdb::IODebugContext* dbg) override {
    if (full_->load()) return FullDisk("While appending to file: " + name_);
    return FSWritableFileOwnerWrapper::Append(data, options, info, dbg);
  }

 private:
  std::string name_;
  std::shared_ptr<std::atomic<bool>> full_;
};

class FailingFileSystem : public rocksdb::FileSystemWrapper {
 public:
  explicit FailingFileSystem(std::shared_ptr<std::atomic<bool>> full)
      : FileSystemWrapper(rocksdb::FileSystem::Default()), full_(std::move(full)) {}

  static const char* kClassName() { return "PlumbTestFailingDisk"; }
  const char* Name() const override { return kClassName(); }

  rocksdb::IOStatus NewWritableFile(const std::string& name, const rocksdb::FileOptions& options,
                                    std::unique_ptr<rocksdb::FSWritableFile>* out,
                                    rocksdb::IODebugContext* dbg) override {
    if (full_->load()) return FullDisk("While open a file for appending: " + name);
    rocksdb::IOStatus s = target()->NewWritableFile(name, options, out, dbg);
    if (s.ok()) *out = std::make_unique<FailingFile>(std::move(*out), name, full_);
    return s;
  }

 private:
  std::shared_ptr<std::atomic<bool>> full_;
};

}  // namespace

struct StoreTestAccess {
  static Status OpenPrimary(const std::string& dir, const StoreOptions& options,
                            std::unique_ptr<rocksdb::Env> env, std::unique_ptr<Store>* out) {
    return Store::Impl::OpenPrimary(dir, options, std::move(env), out);
  }
};

Status testing::OpenPrimaryOnFailingDisk(const std::string& dir, const StoreOptions& options,
                                         std::shared_ptr<std::atomic<bool>> full,
                                         std::unique_ptr<Store>* out) {
  std::unique_ptr<rocksdb::Env> env =
      rocksdb::NewCompositeEnv(std::make_shared<FailingFileSystem>(std::move(full)));
  return StoreTestAccess::OpenPrimary(dir, options, std::move(env), out);
}

}  // namespace plumb::store
