#include "server/fold_in.h"

#include <Eigen/Cholesky>
#include <Eigen/Core>
#include <cmath>

namespace plumb::server {

namespace {

using RowMajorF = Eigen::Matrix<float, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;

// Rows of the item matrix per step of the Gram accumulation: large enough for Eigen's
// matrix-product kernels, small enough that the float partial sums stay accurate before
// they are added into the double total.
constexpr size_t kGramChunkRows = 8192;

}  // namespace

Status item_gram(MatrixView items, std::span<double> gram) {
  const size_t d = items.dim;
  if (gram.size() != d * d) return Status::InvalidArgument("gram must hold dim x dim values");
  Eigen::Map<Eigen::MatrixXd> total(gram.data(), d, d);
  total.setZero();
  Eigen::MatrixXf part(d, d);
  for (size_t start = 0; start < items.rows; start += kGramChunkRows) {
    const size_t n = std::min(kGramChunkRows, items.rows - start);
    Eigen::Map<const RowMajorF> chunk(items.data + start * d, n, d);
    part.setZero();
    part.selfadjointView<Eigen::Lower>().rankUpdate(chunk.transpose());
    total += part.cast<double>();
  }
  // rankUpdate fills the lower triangle only.
  total.triangularView<Eigen::StrictlyUpper>() = total.transpose();
  return Status::Ok();
}

Status fold_in_user(MatrixView items, std::span<const double> gram, std::span<const uint32_t> rows,
                    const FoldInOptions& options, std::span<float> user) {
  const size_t d = items.dim;
  if (rows.empty()) return Status::InvalidArgument("fold-in needs at least one item");
  if (gram.size() != d * d || user.size() != d) {
    return Status::InvalidArgument("fold-in: gram or user vector has the wrong size");
  }
  for (uint32_t r : rows) {
    if (r >= items.rows) return Status::InvalidArgument("fold-in: item row out of range");
  }
  // Thread-local so that steady-state requests reuse the same storage.
  thread_local Eigen::MatrixXd a;
  thread_local Eigen::VectorXd b;
  thread_local Eigen::VectorXd qd;
  thread_local Eigen::LLT<Eigen::MatrixXd> llt;
  a = Eigen::Map<const Eigen::MatrixXd>(gram.data(), d, d);
  b.setZero(d);
  const double alpha = options.confidence;
  const double lambda = options.l2 * (a.trace() / static_cast<double>(d));
  a.diagonal().array() += lambda > 0 ? lambda : 1e-6;
  for (uint32_t r : rows) {
    Eigen::Map<const Eigen::VectorXf> q(items.data + static_cast<size_t>(r) * d, d);
    qd = q.cast<double>();
    a.selfadjointView<Eigen::Lower>().rankUpdate(qd, alpha);
    b += (1.0 + alpha) * qd;
  }
  llt.compute(a);  // reads the lower triangle, the one rankUpdate kept current
  if (llt.info() != Eigen::Success) {
    return Status::FailedPrecondition("fold-in system is not positive definite");
  }
  b = llt.solve(b);
  for (size_t k = 0; k < d; ++k) {
    user[k] = static_cast<float>(b[k]);
    if (!std::isfinite(user[k]))
      return Status::FailedPrecondition("fold-in gave a non-finite vector");
  }
  return Status::Ok();
}

}  // namespace plumb::server
