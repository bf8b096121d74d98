// Private: the two memory-bound loops of the sparse pseudo-likelihood / screening kernel
// (local_fields.cpp), for rows given as active lists (ActiveLists: offsets, indices).
// Compiled once per instruction set (target clones: AVX-512, AVX2, baseline) and chosen when the
// library loads. Sums are formed in index order for every element, so each instruction set gives
// the same bits (plain additions, no reassociation).
#pragma once

#include <cstdint>

namespace spinfer::detail {

/// For every row b of [0, nb): H[:, b] = base + sum over the row's active j of T[:, j], the sum
/// taken in list order. T is nc x N and H is nc x nb, both column-major (columns contiguous);
/// `offsets` points at the block's first row (offsets[b] .. offsets[b + 1] index `indices`).
void gather_active_columns(const double* base, const double* T, std::int64_t nc,
                           const std::int32_t* indices, const std::int64_t* offsets,
                           std::int64_t nb, double* H);

/// For every row b of [0, nb) and each of its active j in list order: A[:, j] += R[:, b].
/// A is nc x N, R is nc x nb, both column-major.
void scatter_active_columns(double* A, const double* R, std::int64_t nc,
                            const std::int32_t* indices, const std::int64_t* offsets,
                            std::int64_t nb);

}  // namespace spinfer::detail
