// Store's interaction sets and live item degrees.
#include "store/keys.h"
#include "store/store_impl.h"

namespace plumb::store {

using namespace internal;

Status Store::ForEachInteraction(const std::function<void(uint32_t, uint32_t)>& fn) const {
  Impl::ReadView view(*impl_);
  std::unique_ptr<rocksdb::Iterator> it(
      impl_->db->NewIterator(view.options(), impl_->interactions));
  for (it->SeekToFirst(); it->Valid(); it->Next()) {
    if (it->key().size() != 8) return Status::Corruption("interactions: a key is not 8 bytes");
    fn(keys::ReadBigEndian32(it->key().data()), keys::ReadBigEndian32(it->key().data() + 4));
  }
  return FromRocks(it->status(), "reading interactions");
}

Status Store::UserItems(uint32_t user, std::vector<uint32_t>* items) const {
  items->clear();
  Impl::ReadView view(*impl_);
  const std::string prefix = keys::InteractionPrefix(user);
  std::unique_ptr<rocksdb::Iterator> it(
      impl_->db->NewIterator(view.options(), impl_->interactions));
  for (it->Seek(AsSlice(prefix)); it->Valid() && StartsWith(it->key(), prefix); it->Next()) {
    if (it->key().size() != 8) return Status::Corruption("interactions: a key is not 8 bytes");
    items->push_back(keys::ReadBigEndian32(it->key().data() + 4));
  }
  return FromRocks(it->status(), "reading the items of user " + std::to_string(user));
}

Status Store::LoadItemDegrees(std::vector<uint32_t>* degrees) const {
  Impl::ReadView view(*impl_);
  const uint32_t count = IdCount(IdSpace::kItem);
  degrees->assign(count, 0);
  std::unique_ptr<rocksdb::Iterator> it(impl_->db->NewIterator(view.options(), impl_->degrees));
  for (it->SeekToFirst(); it->Valid(); it->Next()) {
    if (it->key().size() != 4) return Status::Corruption("degrees: a key is not 4 bytes");
    const uint32_t item = keys::ReadBigEndian32(it->key().data());
    auto degree = keys::ParseFixed32(AsView(it->value()));
    if (!degree) {
      return Status::Corruption("degrees: item " + std::to_string(item) + " has a malformed value");
    }
    if (item >= count) {
      return Status::Corruption("degrees: item " + std::to_string(item) +
                                " is beyond the item dictionary (" + std::to_string(count) + ")");
    }
    (*degrees)[item] = *degree;
  }
  return FromRocks(it->status(), "reading item degrees");
}

}  // namespace plumb::store
