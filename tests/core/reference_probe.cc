// Evaluates plumb's metrics on cases read from standard input, one per line, so that
// reference_check.py can compare them with scikit-learn, numpy and scipy:
//   ndcg K N r_1..r_N M e_1..e_M   -> "ndcg recall" (ranked list r, relevant set e, sorted)
//   gini N c_1..c_N                -> gini
//   js N p_1..p_N q_1..q_N         -> js_divergence
// Prints one line of results per case with 17 significant digits. Exit code 2 on bad input.
#include <cstdint>
#include <cstdio>
#include <iostream>
#include <string>
#include <vector>

#include "core/metrics.h"

namespace {

template <typename T>
bool ReadVector(std::istream& in, std::vector<T>* v) {
  std::size_t n;
  if (!(in >> n)) return false;
  v->resize(n);
  for (auto& x : *v)
    if (!(in >> x)) return false;
  return true;
}

}  // namespace

int main() {
  std::string kind;
  while (std::cin >> kind) {
    if (kind == "ndcg") {
      std::size_t k;
      std::vector<uint32_t> ranked, relevant;
      if (!(std::cin >> k) || !ReadVector(std::cin, &ranked) || !ReadVector(std::cin, &relevant))
        return 2;
      std::printf("%.17g %.17g\n", plumb::ndcg_at_k(ranked, relevant, k),
                  plumb::recall_at_k(ranked, relevant, k));
    } else if (kind == "gini") {
      std::vector<uint64_t> counts;
      if (!ReadVector(std::cin, &counts)) return 2;
      std::printf("%.17g\n", plumb::gini(counts));
    } else if (kind == "js") {
      std::size_t n;
      if (!(std::cin >> n)) return 2;
      std::vector<double> p(n), q(n);
      for (auto& x : p)
        if (!(std::cin >> x)) return 2;
      for (auto& x : q)
        if (!(std::cin >> x)) return 2;
      std::printf("%.17g\n", plumb::js_divergence(p, q));
    } else {
      return 2;
    }
  }
  return 0;
}
