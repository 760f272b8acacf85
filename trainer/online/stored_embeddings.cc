#include "trainer/online/stored_embeddings.h"

#include <span>
#include <utility>

namespace plumb::online {

Status ReadEmbeddings(const store::VersionReader& reader, uint64_t seed, trainer::Embeddings* out) {
  const store::VersionManifest& m = reader.manifest();
  trainer::RowMatrix users(m.num_users, m.dim);
  trainer::RowMatrix items(m.num_items, m.dim);
  PLUMB_RETURN_IF_ERROR(
      reader.ReadMatrix(store::MatrixKind::kUsers, std::span<float>(users.data(), users.size())));
  PLUMB_RETURN_IF_ERROR(
      reader.ReadMatrix(store::MatrixKind::kItems, std::span<float>(items.data(), items.size())));
  return trainer::Embeddings::FromMatrices(std::move(users), std::move(items), seed, out);
}

}  // namespace plumb::online
