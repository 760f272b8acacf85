// Store's id dictionaries: external id <-> dense index, per space, append-only.
#include <unordered_set>

#include "store/keys.h"
#include "store/store_impl.h"

namespace plumb::store {

using namespace internal;

Status Store::LookupId(IdSpace space, std::string_view external, uint32_t* index) const {
  Impl::ReadView view(*impl_);
  std::string value;
  const std::string what =
      std::string(keys::SpaceName(space)) + " id '" + std::string(external) + "'";
  Status s =
      impl_->Get(view.options(), impl_->ids, keys::IdByExternalKey(space, external), &value, what);
  if (s.IsNotFound()) return Status::NotFound("no " + what);
  PLUMB_RETURN_IF_ERROR(s);
  auto parsed = keys::ParseFixed32(value);
  if (!parsed) return Status::Corruption("ids: " + what + " maps to a malformed index");
  *index = *parsed;
  return Status::Ok();
}

uint32_t Store::IdCount(IdSpace space) const { return impl_->Count(space).load(); }

Status Store::LoadIds(IdSpace space, uint32_t count, std::vector<std::string>* out) const {
  out->clear();
  // The count first: the view taken after it holds at least that many entries (the count
  // grows only after the write that adds them).
  const uint32_t stored = IdCount(space);
  Impl::ReadView view(*impl_);
  const std::string name(keys::SpaceName(space));
  if (count > stored) {
    return Status::InvalidArgument("asked for " + std::to_string(count) + " " + name +
                                   " ids; the dictionary holds " + std::to_string(stored));
  }
  out->reserve(count);
  const std::string prefix = keys::ExternalByIdPrefix(space);
  std::unique_ptr<rocksdb::Iterator> it(impl_->db->NewIterator(view.options(), impl_->ids));
  it->Seek(AsSlice(prefix));
  for (uint32_t expect = 0; expect < count; ++expect, it->Next()) {
    if (!it->Valid() || !StartsWith(it->key(), prefix) || it->key().size() != prefix.size() + 4) {
      PLUMB_RETURN_IF_ERROR(FromRocks(it->status(), "ids: loading " + name + " ids"));
      return Status::Corruption("ids: " + name + " index " + std::to_string(expect) +
                                " is missing");
    }
    const uint32_t index = keys::ReadBigEndian32(it->key().data() + prefix.size());
    if (index != expect) {
      return Status::Corruption("ids: " + name + " index " + std::to_string(expect) +
                                " is missing");
    }
    if (it->value().empty()) {
      return Status::Corruption("ids: " + name + " index " + std::to_string(expect) +
                                " has an empty external id");
    }
    out->emplace_back(it->value().data(), it->value().size());
  }
  return FromRocks(it->status(), "ids: loading " + name + " ids");
}

Status Store::Impl::CheckNewIds(
    IdSpace space, uint32_t count,
    const std::vector<std::pair<uint32_t, std::string>>& entries) const {
  const std::string name(keys::SpaceName(space));
  std::unordered_set<std::string_view> seen;
  std::string value;
  for (size_t k = 0; k < entries.size(); ++k) {
    const auto& [index, external] = entries[k];
    const uint64_t expect = uint64_t{count} + k;
    if (expect >= UINT32_MAX) return Status::InvalidArgument(name + " dictionary is full");
    if (index != expect) {
      return Status::InvalidArgument("new " + name + " '" + external + "' has index " +
                                     std::to_string(index) + "; the next free index is " +
                                     std::to_string(expect));
    }
    if (external.empty()) {
      return Status::InvalidArgument("new " + name + " index " + std::to_string(index) +
                                     " has an empty external id");
    }
    if (!seen.insert(external).second) {
      return Status::InvalidArgument(name + " id '" + external + "' is added twice");
    }
    Status s = Get(rocksdb::ReadOptions(), ids, keys::IdByExternalKey(space, external), &value,
                   name + " id '" + external + "'");
    if (s.ok()) {
      return Status::InvalidArgument(name + " id '" + external + "' already has an index");
    }
    if (!s.IsNotFound()) return s;
  }
  return Status::Ok();
}

}  // namespace plumb::store
