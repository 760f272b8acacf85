// Item availability: Store::SetItemsWithdrawn, ListWithdrawnItems, GetAvailability (store.h has
// the contracts). The withdrawn set lives in the meta family, one value per item
// ("plumb.withdrawn/" + external id -> Fixed64 ms of the withdrawal), beside a record with the
// set's size and a generation that every change advances: followers read the record on each
// catch-up and reload the set only when the generation moved. Keyed by external id, not index,
// so that an item can be withdrawn before the trainer has seen it.
#include <rocksdb/db.h>
#include <rocksdb/write_batch.h>

#include <set>

#include "store/keys.h"
#include "store/records.h"
#include "store/store_impl.h"

namespace plumb::store {

using namespace internal;

namespace {

std::string WithdrawnKey(std::string_view item_id) {
  std::string key(keys::kMetaWithdrawnPrefix);
  key.append(item_id);
  return key;
}

}  // namespace

Status Store::Impl::ReadAvailability(const rocksdb::ReadOptions& ro, uint64_t* generation,
                                     uint64_t* withdrawn) const {
  const Impl& d = *this;
  *generation = *withdrawn = 0;
  std::string value;
  Status s = d.Get(ro, d.meta, keys::kMetaAvailability, &value, "meta: availability");
  if (s.IsNotFound()) return Status::Ok();
  PLUMB_RETURN_IF_ERROR(s);
  if (!records::DecodeAvailability(value, generation, withdrawn)) {
    return Status::Corruption("meta: the availability record does not parse");
  }
  return Status::Ok();
}

Status Store::SetItemsWithdrawn(std::span<const std::string> item_ids, bool withdrawn,
                                AvailabilityChange* result) {
  *result = AvailabilityChange();
  PLUMB_RETURN_IF_ERROR(impl_->RequirePrimary("SetItemsWithdrawn"));
  for (size_t j = 0; j < item_ids.size(); ++j) {
    if (item_ids[j].empty()) {
      return Status::InvalidArgument("item id " + std::to_string(j) + " is empty");
    }
  }
  Impl& d = *impl_;
  std::lock_guard lock(d.availability_mu);
  // Only this thread changes the set: plain reads see its latest state.
  const rocksdb::ReadOptions ro;
  uint64_t generation = 0, count = 0;
  PLUMB_RETURN_IF_ERROR(d.ReadAvailability(ro, &generation, &count));

  rocksdb::WriteBatch batch;
  std::set<std::string_view> seen;
  std::string value;
  const std::string stamp = keys::Fixed64(static_cast<uint64_t>(NowMs()));
  AvailabilityChange r;
  for (const std::string& id : item_ids) {
    if (!seen.insert(id).second) {
      ++r.unchanged;
      continue;
    }
    const std::string key = WithdrawnKey(id);
    Status s = d.Get(ro, d.meta, key, &value, "meta: withdrawn item '" + id + "'");
    if (!s.ok() && !s.IsNotFound()) return s;
    const bool is_withdrawn = s.ok();
    if (is_withdrawn == withdrawn) {
      ++r.unchanged;
      continue;
    }
    if (withdrawn) {
      batch.Put(d.meta, AsSlice(key), AsSlice(stamp));
      ++count;
    } else {
      batch.Delete(d.meta, AsSlice(key));
      --count;
    }
    ++r.changed;
  }
  if (r.changed > 0) {
    ++generation;
    batch.Put(d.meta, AsSlice(keys::kMetaAvailability),
              AsSlice(records::EncodeAvailability(generation, count)));
    PLUMB_RETURN_IF_ERROR(d.Write(&batch, withdrawn ? "withdrawing items" : "restoring items"));
  }
  r.withdrawn = count;
  r.generation = generation;
  *result = r;
  return Status::Ok();
}

Status Store::ListWithdrawnItems(std::string_view start_after, size_t limit,
                                 std::vector<WithdrawnItem>* out) const {
  out->clear();
  const Impl& d = *impl_;
  Impl::ReadView view(d);
  const std::string prefix(keys::kMetaWithdrawnPrefix);
  std::unique_ptr<rocksdb::Iterator> it(d.db->NewIterator(view.options(), d.meta));
  const std::string from = WithdrawnKey(start_after);
  for (it->Seek(AsSlice(from)); it->Valid() && StartsWith(it->key(), prefix); it->Next()) {
    if (!start_after.empty() && AsView(it->key()) == from) continue;
    if (limit > 0 && out->size() >= limit) break;
    auto ms = keys::ParseFixed64(AsView(it->value()));
    const std::string_view id = AsView(it->key()).substr(prefix.size());
    if (!ms || id.empty()) {
      return Status::Corruption("meta: the withdrawn item record '" + std::string(id) +
                                "' is malformed");
    }
    out->push_back({std::string(id), static_cast<int64_t>(*ms)});
  }
  return FromRocks(it->status(), "meta: listing withdrawn items");
}

Status Store::GetAvailability(uint64_t* generation, uint64_t* withdrawn) const {
  Impl::ReadView view(*impl_);
  return impl_->ReadAvailability(view.options(), generation, withdrawn);
}

}  // namespace plumb::store
