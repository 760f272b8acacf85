#include "core/scan.h"

#include <algorithm>
#include <bit>
#include <cmath>
#include <cstring>
#if defined(__x86_64__)
#include <immintrin.h>
#endif
#include <limits>
#include <string>
#include <type_traits>

namespace plumb {
namespace {

// Eight float lanes as a GCC/Clang vector type: the compiler lowers it to two SSE registers on
// baseline x86-64 and to one AVX register in the AVX2 clone below. Plain loops would not
// vectorise a float reduction without -ffast-math (reassociation changes rounding); with
// explicit lanes the summation order is ours and fixed.
typedef float Lanes __attribute__((vector_size(32)));
constexpr std::size_t kLanes = 8;

// The helpers take and give Lanes by reference: passing a 32-byte vector by value has an ABI
// that differs with and without AVX, which GCC warns about (-Wpsabi).
inline void LoadLanes(const float* p, Lanes& v) {
  std::memcpy(&v, p, sizeof(v));  // unaligned-safe; compiles to vector loads
}

// Lane sum in a fixed tree, ((v0+v1)+(v2+v3)) + ((v4+v5)+(v6+v7)): the same tree that
// SumEightRows applies to each of its rows, so a row scores identically on either path.
inline float SumLanes(const Lanes& v) {
  return ((v[0] + v[1]) + (v[2] + v[3])) + ((v[4] + v[5]) + (v[6] + v[7]));
}

// Out lane i = SumLanes(a[i]) for eight accumulators at once, by a transpose-and-add tree
// (7 vector adds, 14 shuffles) instead of eight separate horizontal sums.
inline void SumEightRows(const Lanes (&a)[8], Lanes& out) {
#if defined(__clang__)
  // Clang spells the shuffle differently; the plain form rounds the same way.
  for (int i = 0; i < 8; ++i) out[i] = SumLanes(a[i]);
#else
  typedef int Index __attribute__((vector_size(32)));
  const Index even = {0, 8, 2, 10, 4, 12, 6, 14}, odd = {1, 9, 3, 11, 5, 13, 7, 15};
  // t01 = [x0+x1, y0+y1, x2+x3, y2+y3, x4+x5, y4+y5, x6+x7, y6+y7] for rows x = 0, y = 1.
  const Lanes t01 = __builtin_shuffle(a[0], a[1], even) + __builtin_shuffle(a[0], a[1], odd);
  const Lanes t23 = __builtin_shuffle(a[2], a[3], even) + __builtin_shuffle(a[2], a[3], odd);
  const Lanes t45 = __builtin_shuffle(a[4], a[5], even) + __builtin_shuffle(a[4], a[5], odd);
  const Lanes t67 = __builtin_shuffle(a[6], a[7], even) + __builtin_shuffle(a[6], a[7], odd);
  // u = [(r0 low half), r1, r2, r3, (r0 high half), r1, r2, r3], each half summed in pairs.
  const Index lo = {0, 1, 8, 9, 4, 5, 12, 13}, hi = {2, 3, 10, 11, 6, 7, 14, 15};
  const Lanes u = __builtin_shuffle(t01, t23, lo) + __builtin_shuffle(t01, t23, hi);
  const Lanes v = __builtin_shuffle(t45, t67, lo) + __builtin_shuffle(t45, t67, hi);
  const Index first = {0, 1, 2, 3, 8, 9, 10, 11}, second = {4, 5, 6, 7, 12, 13, 14, 15};
  out = __builtin_shuffle(u, v, first) + __builtin_shuffle(u, v, second);
#endif
}

// The scoring kernel: out[r] = <rows[r], q> for r < n, eight rows at a time with one
// accumulator each and one transposed horizontal sum per eight rows. The item rows are read
// once, front to back, so the scan runs close to the speed of reading memory.
// Not under the sanitizers: the loader runs the clones' resolver before the sanitizer's runtime
// is set up, and an instrumented resolver can crash there (every Tsan test binary did).
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__) && \
    !defined(__SANITIZE_ADDRESS__) && !defined(__SANITIZE_THREAD__)
// One clone for AVX2 machines (x86-64-v3), one for baseline x86-64; the dynamic loader picks
// one at start-up, so a generic build still uses the wide registers where they exist. FMA
// contraction is off for this file (see CMakeLists.txt), so both clones round identically.
#define PLUMB_SCAN_CLONES __attribute__((target_clones("arch=x86-64-v3", "default")))
#else
#define PLUMB_SCAN_CLONES
#endif

PLUMB_SCAN_CLONES
void ScoreRows(const float* rows, std::size_t n, std::size_t dim, const float* q, float* out) {
  const std::size_t full = dim - dim % kLanes;
  std::size_t r = 0;
  for (; r + 8 <= n; r += 8) {
    const float* base = rows + r * dim;
    Lanes a[8] = {};
    // Row by row, so each row's 4 cache lines (at dim 64) are read consecutively, which the
    // hardware prefetcher follows best; the eight independent accumulators still let the
    // out-of-order core overlap the rows' add chains. Measured ~15% faster than stepping
    // all eight rows together through the dimensions.
    for (std::size_t i = 0; i < 8; ++i) {
      const float* row = base + i * dim;
      for (std::size_t d = 0; d < full; d += kLanes) {
        Lanes x, qv;
        LoadLanes(row + d, x);
        LoadLanes(q + d, qv);
        a[i] += x * qv;
      }
    }
    Lanes sums;
    SumEightRows(a, sums);
    for (std::size_t i = 0; i < 8; ++i) {
      float s = sums[i];
      for (std::size_t d = full; d < dim; ++d) s += base[i * dim + d] * q[d];
      out[r + i] = s;
    }
  }
  for (; r < n; ++r) {
    const float* row = rows + r * dim;
    Lanes a = {};
    for (std::size_t d = 0; d < full; d += kLanes) {
      Lanes x, qv;
      LoadLanes(row + d, x);
      LoadLanes(q + d, qv);
      a += x * qv;
    }
    float s = SumLanes(a);
    for (std::size_t d = full; d < dim; ++d) s += row[d] * q[d];
    out[r] = s;
  }
}

// One dot product with the same arithmetic as ScoreRows (same lanes, same order), so a
// gathered score equals the scanned score of the same row bit for bit.
float DotRow(const float* row, std::size_t dim, const float* q) {
  float s;
  ScoreRows(row, 1, dim, q, &s);
  return s;
}

constexpr float kNaN = std::numeric_limits<float>::quiet_NaN();

// Integer dot products of int8 rows (stride bytes each, zero padded) with an int8 query:
// exact in int32, so every code path below gives the same sums.
//
// Portable path: plain loops the compiler vectorises in each clone.
PLUMB_SCAN_CLONES
void CodeDotsPortable(const int8_t* codes, std::size_t n, std::size_t stride, const int8_t* q,
                      int32_t* out) {
  for (std::size_t r = 0; r < n; ++r) {
    const int8_t* row = codes + r * stride;
    int32_t acc = 0;
    for (std::size_t j = 0; j < stride; ++j) acc += int32_t{row[j]} * int32_t{q[j]};
    out[r] = acc;
  }
}

#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
#define PLUMB_HAVE_AVX2_CODE_DOTS 1
// AVX2 path for strides that are multiples of 32 (the compiler's own vectorisation of the
// loop above was measured 3x slower: it reduces every row horizontally on its own).
// maddubs multiplies unsigned by signed bytes, so each row chunk a enters as |a| and the
// query as sign(p, a) (p negated where a < 0, zeroed where a == 0): |a| * sign(p, a) = a * p.
// Adjacent pairs sum to int16 without saturation since |a|, |p| <= 127 (2 * 127^2 < 2^15);
// madd with ones widens them to int32. Eight rows are reduced together by horizontal adds.
__attribute__((target("avx2"))) void CodeDotsAvx2(const int8_t* codes, std::size_t n,
                                                  std::size_t stride, const int8_t* q,
                                                  int32_t* out) {
  const __m256i ones = _mm256_set1_epi16(1);
  std::size_t r = 0;
  for (; r + 8 <= n; r += 8) {
    __m256i acc[8];
    for (std::size_t i = 0; i < 8; ++i) {
      const int8_t* row = codes + (r + i) * stride;
      acc[i] = _mm256_setzero_si256();
      for (std::size_t c = 0; c < stride; c += 32) {
        const __m256i a = _mm256_loadu_si256(reinterpret_cast<const __m256i*>(row + c));
        const __m256i p = _mm256_loadu_si256(reinterpret_cast<const __m256i*>(q + c));
        const __m256i pairs = _mm256_maddubs_epi16(_mm256_abs_epi8(a), _mm256_sign_epi8(p, a));
        acc[i] = _mm256_add_epi32(acc[i], _mm256_madd_epi16(pairs, ones));
      }
    }
    const __m256i s01 = _mm256_hadd_epi32(acc[0], acc[1]);
    const __m256i s23 = _mm256_hadd_epi32(acc[2], acc[3]);
    const __m256i s45 = _mm256_hadd_epi32(acc[4], acc[5]);
    const __m256i s67 = _mm256_hadd_epi32(acc[6], acc[7]);
    // Each 128-bit half of s0123 holds partial sums of rows 0..3; of s4567, rows 4..7.
    const __m256i s0123 = _mm256_hadd_epi32(s01, s23);
    const __m256i s4567 = _mm256_hadd_epi32(s45, s67);
    const __m256i lo = _mm256_permute2x128_si256(s0123, s4567, 0x20);
    const __m256i hi = _mm256_permute2x128_si256(s0123, s4567, 0x31);
    _mm256_storeu_si256(reinterpret_cast<__m256i*>(out + r), _mm256_add_epi32(lo, hi));
  }
  if (r < n) CodeDotsPortable(codes + r * stride, n - r, stride, q, out + r);
}
#endif

void CodeDots(const int8_t* codes, std::size_t n, std::size_t stride, const int8_t* q,
              int32_t* out) {
#if defined(PLUMB_HAVE_AVX2_CODE_DOTS)
  static const bool avx2 = __builtin_cpu_supports("avx2");
  if (avx2 && stride % 32 == 0) {
    CodeDotsAvx2(codes, n, stride, q, out);
    return;
  }
#endif
  CodeDotsPortable(codes, n, stride, q, out);
}

// x rounded to the nearest int8 code of step `scale` (> 0), within [-127, 127].
int8_t Code(double x, double scale) {
  const double c = std::nearbyint(x / scale);
  return static_cast<int8_t>(std::clamp(c, -127.0, 127.0));
}

// A float no smaller than the non-negative double v.
float RoundUp(double v) {
  float f = static_cast<float>(v);
  if (static_cast<double>(f) < v) f = std::nextafter(f, std::numeric_limits<float>::infinity());
  return f;
}

// Walks the exclusions alongside the blocks: both are visited in ascending row order, so the
// sorted-list cursor only moves forward over the whole scan.
class ExclusionCursor {
 public:
  explicit ExclusionCursor(const Exclusions& e) : e_(e) {}

  // Marks excluded rows of block [begin, end) with NaN in scores (scores[0] is row begin);
  // TopKSelector never keeps a NaN.
  void MarkBlock(std::size_t begin, std::size_t end, float* scores) {
    const std::size_t bits = e_.bitmap.size() * 64;
    if (begin < bits) {
      const std::size_t stop = std::min(end, bits);
      std::size_t r = begin;
      while (r < stop) {
        const std::size_t word_index = r / 64;
        uint64_t word = e_.bitmap[word_index] >> (r % 64);
        const std::size_t word_end = std::min(stop, (word_index + 1) * 64);
        while (word != 0) {
          const std::size_t hit = r + static_cast<std::size_t>(std::countr_zero(word));
          if (hit >= word_end) break;
          scores[hit - begin] = kNaN;
          word &= word - 1;
        }
        r = word_end;
      }
    }
    const auto& list = e_.sorted_rows;
    while (next_ < list.size() && list[next_] < begin) ++next_;
    while (next_ < list.size() && list[next_] < end) {
      scores[list[next_] - begin] = kNaN;
      ++next_;
    }
  }

 private:
  const Exclusions& e_;
  std::size_t next_ = 0;
};

Status CheckScanArgs(MatrixView items, std::span<const float> query, std::span<float> scratch,
                     TopKSelector* selector, ScanOutcome* outcome) {
  if (selector == nullptr || outcome == nullptr) {
    return Status::InvalidArgument("scan needs a selector and an outcome");
  }
  if (query.size() != items.dim) {
    return Status::InvalidArgument("query has " + std::to_string(query.size()) +
                                   " dimensions, items have " + std::to_string(items.dim));
  }
  if (items.rows > std::size_t{std::numeric_limits<uint32_t>::max()} + 1) {
    return Status::InvalidArgument("scan indexes rows with 32 bits; " + std::to_string(items.rows) +
                                   " rows are too many");
  }
  if (scratch.empty() && items.rows > 0) {
    return Status::InvalidArgument("scan needs a non-empty scratch buffer");
  }
  return Status::Ok();
}

// Pushes the final scores of rows [begin, begin + n) into the selector; excluded rows
// carry NaN by now and are rejected.
void PushBlock(std::size_t begin, std::size_t n, const float* scores, TopKSelector* selector) {
  // The threshold is held in a local: through the pointer the compiler would reload it
  // for every row, since scores and the selector's float could alias.
  float threshold = selector->threshold();
  for (std::size_t i = 0; i < n; ++i) {
    if (scores[i] < threshold) continue;  // NaN falls through and Push rejects it
    selector->Push(static_cast<uint32_t>(begin + i), scores[i]);
    threshold = selector->threshold();
  }
}

// The shared block loop. `adjust(begin, n, scores)` turns raw dot products of rows
// [begin, begin + n) into final scores (identity for dot, normalisation for cosine).
template <typename Adjust>
void ScanBlocks(MatrixView items, std::span<const float> query, const Exclusions& excluded,
                std::span<float> scratch, TopKSelector* selector, ScanOutcome* outcome,
                StopCheck should_stop, Adjust adjust) {
  *outcome = ScanOutcome{};
  const std::size_t block = scratch.size();
  float* scores = scratch.data();
  ExclusionCursor cursor(excluded);
  for (std::size_t begin = 0; begin < items.rows; begin += block) {
    if (begin > 0 && should_stop()) {
      outcome->stopped_early = true;
      return;
    }
    const std::size_t n = std::min(block, items.rows - begin);
    ScoreRows(items.data + begin * items.dim, n, items.dim, query.data(), scores);
    adjust(begin, n, scores);
    cursor.MarkBlock(begin, begin + n, scores);
    PushBlock(begin, n, scores, selector);
    outcome->rows_scanned = begin + n;
    outcome->rows_scored_exactly = begin + n;
  }
}

// A row's cosine score from its float dot product, the same expression (hence the same bits)
// in the full and the pruned scan. A zero row scores 0.
inline float CosineScore(float dot, float inv_query_norm, float norm) {
  return norm > 0.0f ? dot * inv_query_norm / norm : 0.0f;
}

Status CheckNorms(MatrixView items, std::span<const float> norms) {
  if (norms.size() < items.rows) {
    return Status::InvalidArgument("norms hold " + std::to_string(norms.size()) +
                                   " values, items have " + std::to_string(items.rows) + " rows");
  }
  return Status::Ok();
}

// 1 / |query| for cosine scores, the same float for the full and the pruned scan.
Status InverseQueryNorm(std::span<const float> query, float* inv) {
  double qq = 0.0;
  for (float v : query) qq += double{v} * double{v};
  const double query_norm = std::sqrt(qq);
  if (!(query_norm > 0.0) || !std::isfinite(query_norm)) {
    return Status::InvalidArgument("cosine similarity needs a finite, non-zero query");
  }
  *inv = static_cast<float>(1.0 / query_norm);
  return Status::Ok();
}

struct CodeView {
  const int8_t* codes;
  std::size_t stride;
  const float* scale;
  const float* residual_norm;
  const float* norm;
};

// The shared body of the pruned scans. `finish(r, upper_dot)` turns a bound on row r's float
// dot product into a bound on its final score (identity for dot, the cosine normalisation with
// its rounding for cosine); `exact(r)` is the row's final score exactly as the full scan
// computes it.
template <typename Finish, typename Exact>
Status PrunedScan(MatrixView items, const CodeView& codes, std::span<const float> query,
                  const Exclusions& excluded, std::span<float> scratch, TopKSelector* selector,
                  ScanOutcome* outcome, StopCheck should_stop, Finish finish, Exact exact) {
  // The query in int8 the same way: u = t p + d.
  double max_abs = 0.0, uu = 0.0;
  for (float v : query) {
    if (!std::isfinite(v)) return Status::InvalidArgument("query has a non-finite value");
    max_abs = std::max(max_abs, double{std::fabs(v)});
    uu += double{v} * double{v};
  }
  const float t = static_cast<float>(max_abs / 127.0);
  alignas(64) int8_t p[1024];   // the quantised query; larger dims use p_large
  std::vector<int8_t> p_large;  // allocates, but only for dim > 1024
  int8_t* pq = p;
  if (codes.stride > sizeof(p)) {
    p_large.assign(codes.stride, 0);
    pq = p_large.data();
  } else {
    std::fill(p, p + codes.stride, int8_t{0});
  }
  double pp = 0.0, dd = 0.0;
  for (std::size_t j = 0; j < query.size(); ++j) {
    if (t > 0.0f) pq[j] = Code(query[j], t);
    const double d = static_cast<double>(query[j]) - static_cast<double>(t) * pq[j];
    pp += static_cast<double>(pq[j]) * pq[j];
    dd += d * d;
  }
  // x.u = s t (q.p) + t (e.p) + x.d, with e = x - s q and d = u - t p, so
  // |x.u - s t (q.p)| <= |e| t |p| + |x| |d| (Cauchy-Schwarz on each term).
  const float tp_norm = RoundUp(double{t} * std::sqrt(pp) * (1.0 + 1e-12));
  const float d_norm = RoundUp(std::sqrt(dd) * (1.0 + 1e-12));
  const float u_norm = RoundUp(std::sqrt(uu) * (1.0 + 1e-12));
  // The exact scan's own float rounding: a dot product of n terms summed in float is within
  // about n * 2^-24 * sum |x_j u_j| <= n * 2^-24 |x| |u| of the real value; twice that, with
  // the lane tree's depth added, covers ScoreRows' order of summation.
  const float scan_slack =
      static_cast<float>((2.0 * static_cast<double>(items.dim) + 16.0) * std::ldexp(1.0, -24)) *
      u_norm;

  *outcome = ScanOutcome{};
  const std::size_t block = scratch.size();
  float* upper = scratch.data();
  // Integer sums of one block; on the stack in chunks so that the call allocates nothing.
  constexpr std::size_t kChunk = 256;
  int32_t dots[kChunk];
  ExclusionCursor cursor(excluded);
  for (std::size_t begin = 0; begin < items.rows; begin += block) {
    if (begin > 0 && should_stop()) {
      outcome->stopped_early = true;
      return Status::Ok();
    }
    const std::size_t n = std::min(block, items.rows - begin);
    for (std::size_t c = 0; c < n; c += kChunk) {
      const std::size_t m = std::min(kChunk, n - c);
      const std::size_t first = begin + c;
      CodeDots(codes.codes + first * codes.stride, m, codes.stride, pq, dots);
      for (std::size_t i = 0; i < m; ++i) {
        const std::size_t r = first + i;
        const float estimate = codes.scale[r] * t * static_cast<float>(dots[i]);
        const float bound =
            codes.residual_norm[r] * tp_norm + codes.norm[r] * d_norm + codes.norm[r] * scan_slack;
        // The estimate's and the bound's own float rounding (a few ulps each): 1e-6 relative.
        upper[c + i] = finish(r, estimate + bound + 1e-6f * (std::fabs(estimate) + bound) + 1e-30f);
      }
    }
    cursor.MarkBlock(begin, begin + n, upper);
    float threshold = selector->threshold();
    for (std::size_t i = 0; i < n; ++i) {
      if (!(upper[i] >= threshold)) continue;  // cannot reach the K-th best, or excluded (NaN)
      const std::size_t r = begin + i;
      selector->Push(static_cast<uint32_t>(r), exact(r));
      ++outcome->rows_scored_exactly;
      threshold = selector->threshold();
    }
    outcome->rows_scanned = begin + n;
  }
  return Status::Ok();
}

Status CheckCodes(MatrixView items, std::size_t rows, std::size_t dim) {
  if (rows != items.rows || dim != items.dim) {
    return Status::InvalidArgument("quantised copy has " + std::to_string(rows) + " x " +
                                   std::to_string(dim) + ", items have " +
                                   std::to_string(items.rows) + " x " + std::to_string(items.dim));
  }
  return Status::Ok();
}

}  // namespace

Status dot_scores(MatrixView items, std::span<const float> query, std::span<float> scores) {
  if (query.size() != items.dim) {
    return Status::InvalidArgument("query has " + std::to_string(query.size()) +
                                   " dimensions, items have " + std::to_string(items.dim));
  }
  if (scores.size() < items.rows) {
    return Status::InvalidArgument("scores buffer holds " + std::to_string(scores.size()) +
                                   " values, need " + std::to_string(items.rows));
  }
  if (items.rows > 0) ScoreRows(items.data, items.rows, items.dim, query.data(), scores.data());
  return Status::Ok();
}

Status gather_dot_scores(MatrixView items, std::span<const uint32_t> rows,
                         std::span<const float> query, std::span<float> scores) {
  if (query.size() != items.dim) {
    return Status::InvalidArgument("query has " + std::to_string(query.size()) +
                                   " dimensions, items have " + std::to_string(items.dim));
  }
  if (scores.size() < rows.size()) {
    return Status::InvalidArgument("scores buffer holds " + std::to_string(scores.size()) +
                                   " values, need " + std::to_string(rows.size()));
  }
  for (uint32_t r : rows) {
    if (r >= items.rows) {
      return Status::InvalidArgument("row " + std::to_string(r) + " out of range (" +
                                     std::to_string(items.rows) + " rows)");
    }
  }
  for (std::size_t j = 0; j < rows.size(); ++j) {
    scores[j] = DotRow(items.data + std::size_t{rows[j]} * items.dim, items.dim, query.data());
  }
  return Status::Ok();
}

Status row_norms(MatrixView items, std::span<float> norms) {
  if (norms.size() < items.rows) {
    return Status::InvalidArgument("norms buffer holds " + std::to_string(norms.size()) +
                                   " values, need " + std::to_string(items.rows));
  }
  for (std::size_t r = 0; r < items.rows; ++r) {
    // Accumulate in double: norms are computed once per version, so precision is cheap.
    double s = 0.0;
    for (float v : items.row(r)) s += double{v} * double{v};
    norms[r] = static_cast<float>(std::sqrt(s));
  }
  return Status::Ok();
}

Status top_k_by_dot(MatrixView items, std::span<const float> query, const Exclusions& excluded,
                    std::span<float> scratch, TopKSelector* selector, ScanOutcome* outcome,
                    StopCheck should_stop) {
  PLUMB_RETURN_IF_ERROR(CheckScanArgs(items, query, scratch, selector, outcome));
  ScanBlocks(items, query, excluded, scratch, selector, outcome, should_stop,
             [](std::size_t, std::size_t, float*) {});
  return Status::Ok();
}

Status QuantizedItems::Build(MatrixView items, QuantizedItems* out) {
  if (items.dim > 65536) {
    return Status::InvalidArgument("quantised scoring supports at most 65536 dimensions, got " +
                                   std::to_string(items.dim));
  }
  QuantizedItems q;
  q.rows_ = items.rows;
  q.dim_ = items.dim;
  q.stride_ = (items.dim + 15) / 16 * 16;
  try {
    q.codes_.assign(q.rows_ * q.stride_, 0);
    q.scale_.resize(q.rows_);
    q.residual_norm_.resize(q.rows_);
    q.norm_.resize(q.rows_);
  } catch (const std::bad_alloc&) {
    return Status::ResourceExhausted("cannot allocate the int8 copy of " +
                                     std::to_string(items.rows) + " rows");
  }
  for (std::size_t r = 0; r < q.rows_; ++r) {
    const std::span<const float> row = items.row(r);
    float max_abs = 0.0f;
    for (float v : row) {
      if (!std::isfinite(v)) {
        return Status::InvalidArgument("row " + std::to_string(r) + " has a non-finite value");
      }
      max_abs = std::max(max_abs, std::fabs(v));
    }
    const float scale = max_abs / 127.0f;
    int8_t* codes = q.codes_.data() + r * q.stride_;
    double residual = 0.0, norm = 0.0;
    for (std::size_t j = 0; j < row.size(); ++j) {
      const double x = row[j];
      norm += x * x;
      if (scale > 0.0f) codes[j] = Code(x, scale);
      const double e = x - static_cast<double>(scale) * codes[j];  // exact in double
      residual += e * e;
    }
    q.scale_[r] = scale;
    // sqrt in double is correctly rounded; a relative 1e-12 covers the sums' rounding.
    q.residual_norm_[r] = RoundUp(std::sqrt(residual) * (1.0 + 1e-12));
    q.norm_[r] = RoundUp(std::sqrt(norm) * (1.0 + 1e-12));
  }
  *out = std::move(q);
  return Status::Ok();
}

std::size_t QuantizedItems::bytes() const {
  return codes_.size() + sizeof(float) * (scale_.size() + residual_norm_.size() + norm_.size());
}

Status top_k_by_dot_pruned(MatrixView items, const QuantizedItems& codes,
                           std::span<const float> query, const Exclusions& excluded,
                           std::span<float> scratch, TopKSelector* selector, ScanOutcome* outcome,
                           StopCheck should_stop) {
  PLUMB_RETURN_IF_ERROR(CheckScanArgs(items, query, scratch, selector, outcome));
  PLUMB_RETURN_IF_ERROR(CheckCodes(items, codes.rows_, codes.dim_));
  const CodeView view{codes.codes_.data(), codes.stride_, codes.scale_.data(),
                      codes.residual_norm_.data(), codes.norm_.data()};
  return PrunedScan(
      items, view, query, excluded, scratch, selector, outcome, should_stop,
      [](std::size_t, float upper) { return upper; },
      [&](std::size_t r) { return DotRow(items.data + r * items.dim, items.dim, query.data()); });
}

Status top_k_by_cosine_pruned(MatrixView items, const QuantizedItems& codes,
                              std::span<const float> norms, std::span<const float> query,
                              const Exclusions& excluded, std::span<float> scratch,
                              TopKSelector* selector, ScanOutcome* outcome, StopCheck should_stop) {
  PLUMB_RETURN_IF_ERROR(CheckScanArgs(items, query, scratch, selector, outcome));
  PLUMB_RETURN_IF_ERROR(CheckCodes(items, codes.rows_, codes.dim_));
  PLUMB_RETURN_IF_ERROR(CheckNorms(items, norms));
  float inv_query_norm = 0.0f;
  PLUMB_RETURN_IF_ERROR(InverseQueryNorm(query, &inv_query_norm));
  const CodeView view{codes.codes_.data(), codes.stride_, codes.scale_.data(),
                      codes.residual_norm_.data(), codes.norm_.data()};
  return PrunedScan(
      items, view, query, excluded, scratch, selector, outcome, should_stop,
      // cos = dot / (|u| |x|) is increasing in dot, so a bound on dot bounds it; the two float
      // operations round by at most an ulp each, covered by 1e-6 relative. Zero rows score 0.
      [&](std::size_t r, float upper) {
        const float norm = norms[r];
        if (!(norm > 0.0f)) return 0.0f;
        const float c = upper * inv_query_norm / norm;
        return c + 1e-6f * std::fabs(c) + 1e-30f;
      },
      [&](std::size_t r) {
        return CosineScore(DotRow(items.data + r * items.dim, items.dim, query.data()),
                           inv_query_norm, norms[r]);
      });
}

Status top_k_by_cosine(MatrixView items, std::span<const float> norms, std::span<const float> query,
                       const Exclusions& excluded, std::span<float> scratch, TopKSelector* selector,
                       ScanOutcome* outcome, StopCheck should_stop) {
  PLUMB_RETURN_IF_ERROR(CheckScanArgs(items, query, scratch, selector, outcome));
  PLUMB_RETURN_IF_ERROR(CheckNorms(items, norms));
  float inv_query_norm = 0.0f;
  PLUMB_RETURN_IF_ERROR(InverseQueryNorm(query, &inv_query_norm));
  ScanBlocks(items, query, excluded, scratch, selector, outcome, should_stop,
             [&](std::size_t begin, std::size_t n, float* scores) {
               for (std::size_t i = 0; i < n; ++i) {
                 scores[i] = CosineScore(scores[i], inv_query_norm, norms[begin + i]);
               }
             });
  return Status::Ok();
}

}  // namespace plumb
