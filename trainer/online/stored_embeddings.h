// ReadEmbeddings: a stored version's two matrices as a trainer::Embeddings, for every reader
// that trains on or scores with a kept version (the online loop's warm start and its active
// model, the `plumb` command line's LoadModel).
#pragma once

#include <cstdint>

#include "core/status.h"
#include "store/version_reader.h"
#include "trainer/embeddings.h"

namespace plumb::online {

// Reads the version `reader` opened into *out (seeded with `seed` for the rows it grows
// later). Errors as VersionReader::ReadMatrix and Embeddings::FromMatrices; *out is unchanged
// on error.
Status ReadEmbeddings(const store::VersionReader& reader, uint64_t seed, trainer::Embeddings* out);

}  // namespace plumb::online
