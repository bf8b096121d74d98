#include "sparse_rows.hpp"

namespace spinfer::detail {

#if defined(__x86_64__) && defined(__GNUC__)
#define SPINFER_SPARSE_CLONES __attribute__((target_clones("avx512f", "avx2", "default")))
#else
#define SPINFER_SPARSE_CLONES
#endif

namespace {

// Elements handled per register block: the running sums (gather) or the row of R (scatter)
// stay in registers while the row's active columns stream past (4 AVX-512 or 8 AVX2 registers).
constexpr std::int64_t kBlock = 32;

}  // namespace

SPINFER_SPARSE_CLONES
void gather_active_columns(const double* base, const double* T, std::int64_t nc,
                           const std::int32_t* indices, const std::int64_t* offsets,
                           std::int64_t nb, double* H) {
  for (std::int64_t b = 0; b < nb; ++b) {
    const std::int32_t* first = indices + offsets[b];
    const std::int32_t* last = indices + offsets[b + 1];
    double* out = H + b * nc;
    std::int64_t i = 0;
    for (; i + kBlock <= nc; i += kBlock) {
      double acc[kBlock];
      for (std::int64_t e = 0; e < kBlock; ++e) acc[e] = base[i + e];
      for (const std::int32_t* j = first; j < last; ++j) {
        const double* col = T + std::int64_t(*j) * nc + i;
        for (std::int64_t e = 0; e < kBlock; ++e) acc[e] += col[e];
      }
      for (std::int64_t e = 0; e < kBlock; ++e) out[i + e] = acc[e];
    }
    for (; i < nc; ++i) {
      double acc = base[i];
      for (const std::int32_t* j = first; j < last; ++j) acc += T[std::int64_t(*j) * nc + i];
      out[i] = acc;
    }
  }
}

SPINFER_SPARSE_CLONES
void scatter_active_columns(double* A, const double* R, std::int64_t nc,
                            const std::int32_t* indices, const std::int64_t* offsets,
                            std::int64_t nb) {
  for (std::int64_t b = 0; b < nb; ++b) {
    const std::int32_t* first = indices + offsets[b];
    const std::int32_t* last = indices + offsets[b + 1];
    const double* r = R + b * nc;
    std::int64_t i = 0;
    for (; i + kBlock <= nc; i += kBlock) {
      double row[kBlock];
      for (std::int64_t e = 0; e < kBlock; ++e) row[e] = r[i + e];
      for (const std::int32_t* j = first; j < last; ++j) {
        double* col = A + std::int64_t(*j) * nc + i;
        for (std::int64_t e = 0; e < kBlock; ++e) col[e] += row[e];
      }
    }
    for (; i < nc; ++i)
      for (const std::int32_t* j = first; j < last; ++j) A[std::int64_t(*j) * nc + i] += r[i];
  }
}

}  // namespace spinfer::detail
