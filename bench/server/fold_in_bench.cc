// bench_server's fold-in section: which fold-in recovers a simulated user's own top-20 best
// (see server/fold_in.h and bench_world.h).
#include <Eigen/Dense>
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <random>
#include <set>
#include <span>
#include <vector>

#include "bench/server/bench_world.h"
#include "server/fold_in.h"
#include "server/snapshot.h"

namespace plumb::server::bench {

// Simulated users in a catalogue with a popularity direction: q_i = g_i/sqrt(d) + w·a_i·v
// with a_i ~ Gamma(1,1) along one unit vector v (w = 0 or 0.5), true user vectors
// p_u ~ N(0, 4/d), interactions drawn without replacement with probability ∝ exp(8<p_u,q_i>).
void FoldInSection() {
  const uint32_t n = 20000, d = 64, users = 150;
  std::printf(
      "\n[fold-in] overlap@20 of a folded-in user's top-20 with their own (both without the\n"
      "  interacted items); %u items x %u dims, %u users per row; higher is better\n",
      n, d, users);
  std::printf("  %6s %4s %10s %12s %12s %10s\n", "pop_w", "M", "served", "ls_pos_best", "bpr_steps",
              "random");
  std::mt19937_64 rng(3);
  std::normal_distribution<double> gauss(0, 1);
  std::gamma_distribution<double> gamma(1.0, 1.0);
  for (double pop_w : {0.0, 0.5}) {
    ItemMatrix items(n, d);
    Eigen::VectorXd v(d);
    for (uint32_t k = 0; k < d; ++k) v[k] = gauss(rng);
    v.normalize();
    for (uint32_t i = 0; i < n; ++i) {
      const double a = gamma(rng);
      for (uint32_t k = 0; k < d; ++k)
        items.mutable_row(i)[k] = static_cast<float>(gauss(rng) / std::sqrt(d) + pop_w * a * v[k]);
    }
    std::vector<double> gram(d * d);
    if (!item_gram(items.view(), gram).ok()) std::abort();
    using MatF = Eigen::Matrix<float, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;
    Eigen::Map<const MatF> q(items.data(), n, d);
    for (uint32_t m_count : {5u, 20u, 100u}) {
      double sums[4] = {};
      double ls_sums[3] = {};
      const float kRidges[3] = {0.01f, 0.1f, 1.0f};
      for (uint32_t u = 0; u < users; ++u) {
        Eigen::VectorXf p(d);
        for (uint32_t k = 0; k < d; ++k) p[k] = static_cast<float>(gauss(rng) * 2 / std::sqrt(d));
        Eigen::VectorXf s = q * p;
        std::vector<double> w(n);
        const float top = s.maxCoeff();
        for (uint32_t i = 0; i < n; ++i) w[i] = std::exp(8.0 * (s[i] - top));
        std::vector<uint32_t> rows;
        while (rows.size() < m_count) {
          std::discrete_distribution<uint32_t> draw(w.begin(), w.end());
          const uint32_t i = draw(rng);
          rows.push_back(i);
          w[i] = 0;
        }
        std::sort(rows.begin(), rows.end());
        auto top20 = [&](const Eigen::VectorXf& vec) {
          Eigen::VectorXf sc = q * vec;
          for (uint32_t i : rows) sc[i] = -1e30f;
          std::vector<uint32_t> idx(n);
          for (uint32_t i = 0; i < n; ++i) idx[i] = i;
          std::partial_sort(idx.begin(), idx.begin() + 20, idx.end(),
                            [&](uint32_t a, uint32_t b) { return sc[a] > sc[b]; });
          return std::set<uint32_t>(idx.begin(), idx.begin() + 20);
        };
        const std::set<uint32_t> truth = top20(p);
        auto overlap = [&](const Eigen::VectorXf& vec) {
          int hits = 0;
          for (uint32_t i : top20(vec)) hits += truth.count(i);
          return hits / 20.0;
        };
        // 1. served: implicit-feedback least squares with the whole catalogue.
        Eigen::VectorXf served(d);
        if (!fold_in_user(items.view(), gram, rows, FoldInOptions{},
                          std::span<float>(served.data(), d))
                 .ok())
          std::abort();
        sums[0] += overlap(served);
        // 2. least squares on the user's items only, with a ridge of 0.01, 0.1 or 1 times the
        //    mean eigenvalue of QᵣᵀQᵣ; the table shows the best of the three for each row.
        Eigen::MatrixXf qr(rows.size(), d);
        for (size_t j = 0; j < rows.size(); ++j) qr.row(j) = q.row(rows[j]);
        const Eigen::MatrixXf qtq = qr.transpose() * qr;
        const Eigen::VectorXf rhs = qr.transpose() * Eigen::VectorXf::Ones(rows.size());
        for (int r = 0; r < 3; ++r) {
          Eigen::MatrixXf a = qtq;
          a.diagonal().array() += kRidges[r] * qtq.trace() / d + 1e-6f;
          ls_sums[r] += overlap(Eigen::VectorXf(a.ldlt().solve(rhs)));
        }
        // 3. 30 BPR gradient steps from zero, one uniform negative per positive per step.
        Eigen::VectorXf g = Eigen::VectorXf::Zero(d);
        std::uniform_int_distribution<uint32_t> any(0, n - 1);
        for (int step = 0; step < 30; ++step) {
          Eigen::VectorXf grad = Eigen::VectorXf::Zero(d);
          for (uint32_t i : rows) {
            Eigen::VectorXf diff = q.row(i).transpose() - q.row(any(rng)).transpose();
            const float margin = g.dot(diff);
            grad += diff / (1.0f + std::exp(margin));
          }
          g += 5.0f * (grad / static_cast<float>(rows.size()) - 0.01f * g);
        }
        sums[2] += overlap(g);
        // 4. reference: an unrelated random vector.
        Eigen::VectorXf r(d);
        for (uint32_t k = 0; k < d; ++k) r[k] = static_cast<float>(gauss(rng));
        sums[3] += overlap(r);
      }
      sums[1] = *std::max_element(ls_sums, ls_sums + 3);
      std::printf("  %6.1f %4u %10.3f %12.3f %12.3f %10.3f\n", pop_w, m_count, sums[0] / users,
                  sums[1] / users, sums[2] / users, sums[3] / users);
    }
  }
}

}  // namespace plumb::server::bench
