// Fold-in: a user vector for a user the active version does not know, solved from the
// items the request says they interacted with, the item embeddings held fixed.
//
// Method (implicit-feedback least squares, as in the alternating-least-squares user step
// of Hu, Koren & Volinsky, ICDM 2008): every item is a weak negative with confidence 1 and
// the user's items are positives with confidence 1 + alpha, which gives
//
//     p = (QᵀQ + alpha·QᵣᵀQᵣ + λI)⁻¹ (1 + alpha)·Qᵣᵀ1
//
// with Q all item vectors (QᵀQ precomputed once per version, see item_gram) and Qᵣ the
// user's items. Compared on simulated users (bench/server, "fold-in" section) with
// positives-only least squares p = (QᵣᵀQᵣ + λI)⁻¹Qᵣᵀ1 and with a few BPR gradient
// steps on sampled negatives: positives-only least squares recovers clearly less of a user's own
// top-20 (it ignores what the rest of the catalogue looks like), while this method and the
// gradient steps recover about the same; this one is deterministic and costs one d x d
// Cholesky solve, so it is the one served.
#pragma once

#include <cstdint>
#include <span>

#include "core/aligned.h"
#include "core/status.h"

namespace plumb::server {

struct FoldInOptions {
  // Confidence weight alpha of the user's own items. Measured best around 10 on simulated
  // users (larger values drift toward positives-only least squares).
  float confidence = 10.0f;
  // Ridge term λ as a fraction of the mean eigenvalue of QᵀQ (trace / dim), so that it
  // means the same for any catalogue size and embedding scale.
  float l2 = 0.01f;
};

// gram = QᵀQ (dim x dim, row-major, double) for the item matrix Q. Runs once per version.
// Errors: InvalidArgument if gram.size() != dim * dim. Thread-safe.
Status item_gram(MatrixView items, std::span<double> gram);

// Solves the fold-in user vector into `user` (dim values) from the item rows `rows` (at
// least one; duplicates count once each time they appear). `gram` comes from item_gram.
// Uses thread-local scratch: no allocation in steady state for a fixed dim. Thread-safe.
// Errors: InvalidArgument for empty rows, a row out of range or mismatched sizes;
// FailedPrecondition if the system is not positive definite (cannot happen with l2 > 0
// and finite items).
Status fold_in_user(MatrixView items, std::span<const double> gram, std::span<const uint32_t> rows,
                    const FoldInOptions& options, std::span<float> user);

}  // namespace plumb::server
