// Single-unit Gibbs / Metropolis chains with incrementally maintained local fields, optional
// parallel tempering, automatic burn-in and thinning, and convergence diagnostics.
#include <algorithm>
#include <array>
#include <cstring>
#include <chrono>
#include <cmath>
#include <functional>
#include <limits>
#include <memory>
#include <sstream>
#include <stdexcept>
#include <tuple>

#if defined(__linux__)
#include <sys/mman.h>
#endif

#include "sampler_engine.hpp"
#include "aligned_vector.hpp"
#include "integer_fields.hpp"
#include "sampler_groups.hpp"
#include "sampler_integer_groups.hpp"
#include "sampler_uniform_groups.hpp"
#include "sampler_kernels.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/rng.hpp"
#include "spinfer/threads.hpp"

namespace spinfer {
namespace detail {
namespace {

// ---- couplings ---------------------------------------------------------------------------------

struct Couplings {
  bool sparse = false;
  double density = 0;
  // Column-major N x N: column k holds J_jk for all j (symmetric, zero diagonal); cache-line
  // aligned, as the lock-step kernels read columns as 64-byte vectors.
  AlignedVector<double> dense;
  Eigen::Map<const Eigen::MatrixXd> dense_matrix(std::int64_t N) const { return {dense.data(), N, N}; }
  std::vector<std::int64_t> offsets;   // CSR: neighbours of k at [offsets[k], offsets[k+1])
  std::vector<std::int32_t> index;
  std::vector<double> value;
};

Couplings make_couplings(const IsingModel& m, const std::string& storage, double threshold) {
  Couplings c;
  const std::int64_t N = m.size();
  std::int64_t nnz = 0;
  for (std::int64_t k = 0; k < N; ++k)
    for (std::int64_t j = 0; j < N; ++j) nnz += (j != k && m.couplings(j, k) != 0.0);
  c.density = N > 1 ? double(nnz) / (double(N) * double(N - 1)) : 0.0;
  c.sparse = storage == "sparse" || (storage == "auto" && c.density < threshold);
  if (!c.sparse) {
    c.dense.assign(m.couplings.data(), m.couplings.data() + N * N);
    return c;
  }
  c.offsets.assign(std::size_t(N + 1), 0);
  c.index.reserve(std::size_t(nnz));
  c.value.reserve(std::size_t(nnz));
  for (std::int64_t k = 0; k < N; ++k) {
    for (std::int64_t j = 0; j < N; ++j) {
      const double v = m.couplings(j, k);
      if (j != k && v != 0.0) {
        c.index.push_back(std::int32_t(j));
        c.value.push_back(v);
      }
    }
    c.offsets[std::size_t(k + 1)] = std::int64_t(c.index.size());
  }
  return c;
}

/// Greedy colouring in unit order: each unit takes the smallest colour none of its earlier
/// neighbours has. Returns the units grouped by colour (ascending within a colour) and the
/// start of each colour in that list.
void colour_units(std::int64_t N, const std::function<void(std::int64_t, std::vector<std::int64_t>&)>& neighbours,
                  std::vector<std::int32_t>* order, std::vector<std::int64_t>* starts) {
  std::vector<std::int32_t> colour(std::size_t(N), -1);
  std::vector<std::int64_t> nb, last_seen;
  std::int32_t colours = 0;
  for (std::int64_t k = 0; k < N; ++k) {
    neighbours(k, nb);
    last_seen.assign(std::size_t(colours) + 1, -1);
    for (auto j : nb)
      if (colour[std::size_t(j)] >= 0) last_seen[std::size_t(colour[std::size_t(j)])] = k;
    std::int32_t c = 0;
    while (last_seen[std::size_t(c)] == k) ++c;
    colour[std::size_t(k)] = c;
    colours = std::max(colours, c + 1);
  }
  starts->assign(std::size_t(colours) + 1, 0);
  for (auto c : colour) ++(*starts)[std::size_t(c) + 1];
  for (std::size_t c = 0; c < std::size_t(colours); ++c) (*starts)[c + 1] += (*starts)[c];
  order->assign(std::size_t(N), 0);
  std::vector<std::int64_t> fill(starts->begin(), starts->end() - 1);
  for (std::int64_t k = 0; k < N; ++k) (*order)[std::size_t(fill[std::size_t(colour[std::size_t(k)])]++)] = std::int32_t(k);
}

// ---- replicas and chains -----------------------------------------------------------------------

struct Group;

struct Replica {
  // Unit values in the model's convention. The uniform kernel updates only `small` and marks v
  // stale; Engine::values() rewrites v when it is read (kept samples), so v is mutable.
  mutable std::vector<double> v;
  mutable bool stale = false;
  AlignedVector<double> H;  // local fields h_i + sum_j J_ij v_j
  std::vector<std::int32_t> small;  // uniform couplings: v by scan position, then a 0 (padding)
  // In a lock-step group of uniform couplings or integer fields (`group` set) the values live in
  // the group's storage (uniform: packed[position].v[lane], instead of `small`; integer fields:
  // Group::lane_values). Engine::unpacked transposes them for all the group's stale replicas at
  // once (Group::unpacked, by scan position; kept samples are read from there) and marks v as
  // behind (`v_behind`) until it is read.
  UniformLine* packed = nullptr;
  mutable bool v_behind = false;
  std::int64_t lane = 0;
  Group* group = nullptr;
  double E = 0;
  // Dense couplings with integer fields (integer_fields.hpp): fields by scan position in units of
  // 2^-s, and the energy in units of 2^-(s+1) (E is its double value); H is not used then.
  AlignedVector<std::int32_t> Hq;
  std::int64_t E2 = 0;
};

struct Chain {
  Rng rng;
  std::vector<Replica> replicas;
  std::vector<std::size_t> at_slot;  // ladder slot -> replica
  std::vector<std::int64_t> slot_flips, slot_updates, swap_tries, swap_accepts;
  std::int64_t steps = 0;
  // A sweep's (or one colour's) random bits and their generators, seeded from `rng`; uniform
  // couplings: per ladder slot the integer thresholds by neighbour sum, split into the parts of
  // the 16-bit draw, the draw's pieces and the tie stream (Engine::sweep_uniform,
  // sampler_kernels.hpp).
  std::vector<std::uint64_t> draws;
  Lanes lanes{};
  std::vector<std::uint64_t> level_thresholds;
  std::vector<std::uint32_t> threshold_high;
  std::vector<std::uint64_t> threshold_low;
  std::vector<std::uint16_t> pieces;
  std::uint64_t tie[4] = {};
};

/// Chains advanced in lock-step: single-temperature runs with the sequential or coloured scan;
/// up to kGroupWidth chains (sampler_groups.hpp), or kUniformWidth for uniform couplings
/// (sampler_uniform_groups.hpp). The group owns its chains' generators from its creation on (the
/// chains' own `lanes` and tie streams are no longer used) and, for uniform couplings, their
/// values.
struct Group {
  std::vector<std::size_t> members;   // chain indices; member m runs in lane m
  GroupLanes lanes{};
  std::vector<std::uint64_t> draws;   // kGroupChunk x kGroupWidth scratch
  std::vector<double> spare;          // other models: N readable doubles for empty lanes
  // Uniform couplings: the members' generators and tie streams, values [N + 1] by position
  // (member m in byte lane uniform_lane(m)) and the kernel's scratch.
  std::unique_ptr<UniformLanes> wide;
  std::vector<std::array<std::uint64_t, 4>> ties;
  std::vector<UniformLine> packed;
  std::vector<Replica*> replicas;     // the members' replicas
  std::vector<std::int8_t> unpacked;  // values by lane (group_uniform_unpack, group_integer_unpack)
  std::vector<UniformWords> words;
  std::vector<std::uint16_t> pieces;
  // Integer fields (sampler_integer_groups.hpp): the members' generators (tie streams in `ties`),
  // their values by position [N][16], and NP readable fields for the empty lanes.
  std::unique_ptr<IntegerLanes> integer_lanes;
  std::vector<std::int8_t> lane_values;
  AlignedVector<std::int32_t> spare_fields;
};

/// A group's generators are held [state word][generator][lane] (GroupLanes, UniformLanes,
/// IntegerLanes): lane m from chain c's own (Lanes), or from a saved copy of the group's.
template <class GroupGenerators>
void take_generators(GroupGenerators& g, std::size_t m, const Lanes& from) {
  for (std::size_t w = 0; w < 4; ++w)
    for (std::size_t l = 0; l < std::size_t(Lanes::kWidth); ++l) g.s[w][l][m] = from.s[w][l];
}
template <class GroupGenerators>
void restore_generators(GroupGenerators& g, std::size_t m, const GroupGenerators& saved) {
  for (std::size_t w = 0; w < 4; ++w)
    for (std::size_t l = 0; l < std::size_t(Lanes::kWidth); ++l) g.s[w][l][m] = saved.s[w][l][m];
}

class Engine {
 public:
  Engine(const IsingModel& model, const SamplerOptions& o, std::vector<double> ladder)
      : N_(model.size()),
        h_(model.fields),
        lo_(model.convention == Convention::binary ? 0.0 : -1.0),
        hi_(1.0),
        gibbs_(o.method == "gibbs"),
        random_scan_(o.scan == "random"),
        coloured_(o.scan == "coloured"),
        start_(o.start),
        couplings_(make_couplings(model, o.storage, o.sparse_density_threshold)),
        ladder_(std::move(ladder)) {
    for (double T : ladder_) betas_.push_back(1.0 / T);
    if (coloured_) {
      const Couplings& c = couplings_;
      colour_units(N_, [&](std::int64_t k, std::vector<std::int64_t>& nb) {
        nb.clear();
        if (c.sparse) {
          for (auto p = c.offsets[std::size_t(k)]; p < c.offsets[std::size_t(k + 1)]; ++p) nb.push_back(c.index[std::size_t(p)]);
        } else {
          for (std::int64_t j = 0; j < N_; ++j)
            if (j != k && c.dense[std::size_t(k * N_ + j)] != 0.0) nb.push_back(j);
        }
      }, &order_, &colour_start_);
    }
    // One coupling value K and one field value h0: H_k = h0 + K S_k with S_k the sum of the
    // neighbours' values, an integer in [-dmax, dmax], so the acceptance thresholds can be
    // tabulated by S_k. Used by the coloured scan and by the sequential scan (one "colour" of all
    // units in order: a sweep's draws do not depend on the state, so they can come in one batch),
    // when the padded neighbour table costs at most twice the CSR list.
    const Couplings& c = couplings_;
    std::int64_t degree = 0;
    for (std::int64_t k = 0; k < N_ && c.sparse; ++k)
      degree = std::max(degree, c.offsets[std::size_t(k + 1)] - c.offsets[std::size_t(k)]);
    uniform_ = !random_scan_ && c.sparse && !c.value.empty() && N_ > 0 &&
               N_ * degree <= 2 * std::int64_t(c.index.size()) &&
               std::all_of(c.value.begin(), c.value.end(), [&](double x) { return x == c.value[0]; }) &&
               (h_.array() == h_(0)).all();
    // Dense lock-step groups may add a field update as one fused multiply-add when every product
    // dl J_jk is exact (|dl| = hi - lo in {1, 2}; no |J_jk| near the overflow threshold).
    fused_products_ = !c.sparse && (hi_ - lo_ == 1.0 || hi_ - lo_ == 2.0) &&
                      std::all_of(c.dense.begin(), c.dense.end(),
                                          [](double x) { return std::abs(x) < std::ldexp(1.0, 1000); });
    // Dense couplings: exact integer fields unless the model needs a resolution coarser than
    // 2^-20 (then the double kernels run).
    if (!c.sparse) {
      const std::vector<std::int32_t> none;
      integer_ = quantise(h_, c.dense.data(), N_, std::int32_t(lo_), std::int32_t(hi_), coloured_ ? order_ : none);
      if (integer_) {
        for (double beta : betas_) integer_bounds_.push_back(integer_bounds(*integer_, beta, gibbs_));
        couplings_.dense = AlignedVector<double>();  // only the double kernels read it
      }
    }
    if (uniform_) {
      K_ = c.value[0];
      h0_ = h_(0);
      dmax_ = degree;
      if (!coloured_) {
        order_.resize(std::size_t(N_));
        for (std::int64_t k = 0; k < N_; ++k) order_[std::size_t(k)] = std::int32_t(k);
        colour_start_ = {0, N_};
      }
      // Neighbours by scan position: nb_[j * N + i] is the position of the j-th neighbour of the
      // unit at position i; rows shorter than dmax point at position N (value 0).
      std::vector<std::int32_t> position(static_cast<std::size_t>(N_));
      for (std::int64_t i = 0; i < N_; ++i) position[std::size_t(order_[std::size_t(i)])] = std::int32_t(i);
      nb_.assign(std::size_t(N_ * dmax_), std::int32_t(N_));
      for (std::int64_t i = 0; i < N_; ++i) {
        const std::int64_t k = order_[std::size_t(i)];
        for (auto p = c.offsets[std::size_t(k)]; p < c.offsets[std::size_t(k + 1)]; ++p)
          nb_[std::size_t((p - c.offsets[std::size_t(k)]) * N_ + i)] = position[std::size_t(c.index[std::size_t(p)])];
      }
    }
  }

  /// Per ladder slot, the thresholds of the uniform coloured kernel: [slot][old value][S + dmax]
  /// (Metropolis) or [slot][S + dmax] (heat bath); a draw m (53 bits) accepts iff m < threshold.
  std::vector<std::uint64_t> level_thresholds() const {
    std::vector<std::uint64_t> t;
    if (!uniform_) return t;
    const double span = hi_ - lo_, both = hi_ + lo_;
    for (double beta : betas_)
      for (int old = 0; old < (gibbs_ ? 1 : 2); ++old)
        for (std::int64_t S = -dmax_; S <= dmax_; ++S) {
          const double Hk = h0_ + K_ * double(S);
          if (gibbs_) {
            t.push_back(heat_bath_threshold(beta * span * Hk));
          } else {
            const double was = old ? hi_ : lo_, flipped = both - was;
            t.push_back(metropolis_threshold(beta * (was - flipped) * Hk));
          }
        }
    return t;
  }

  std::int64_t units() const { return N_; }
  std::size_t slots() const { return ladder_.size(); }
  const Couplings& couplings() const { return couplings_; }
  double low() const { return lo_; }

  Chain make_chain(std::uint64_t seed, std::uint64_t index) const {
    Chain c;
    c.rng = Rng(seed, index);
    const std::size_t K = slots();
    c.replicas.resize(K);
    for (std::size_t r = 0; r < K; ++r) {
      Replica& rep = c.replicas[r];
      rep.v.resize(std::size_t(N_));
      for (auto& x : rep.v)
        x = start_ == "active" ? hi_ : start_ == "inactive" ? lo_ : (c.rng.next() >> 63) ? hi_ : lo_;
      refresh(rep);
      c.at_slot.push_back(r);
    }
    for (auto& word : c.lanes.s)
      for (auto& lane : word) lane = c.rng.next();
    c.draws.assign(std::size_t(N_ + Lanes::kWidth), 0);
    if (uniform_) {
      c.level_thresholds = level_thresholds();
      split_thresholds(c.level_thresholds, &c.threshold_high, &c.threshold_low);
      c.pieces.assign(std::size_t(N_), 0);
    }
    if (uniform_ || integer_) {
      // The tie stream: splitmix64 of one output, so its four words are never all zero.
      std::uint64_t x = c.rng.next();
      for (auto& word : c.tie) word = splitmix64(x);
    }
    c.slot_flips.assign(K, 0);
    c.slot_updates.assign(K, 0);
    c.swap_tries.assign(K > 0 ? K - 1 : 0, 0);
    c.swap_accepts.assign(K > 0 ? K - 1 : 0, 0);
    return c;
  }

  /// One step: a sweep of every replica at its slot's temperature, then neighbour exchanges.
  void step(Chain& c) const {
    const std::size_t K = slots();
    for (std::size_t s = 0; s < K; ++s) {
      Replica& r = c.replicas[c.at_slot[s]];
      c.slot_flips[s] += sweep(r, betas_[s], s, c);
      c.slot_updates[s] += N_;
    }
    for (std::size_t s = 0; s + 1 < K; ++s) {
      const Replica& a = c.replicas[c.at_slot[s]];
      const Replica& b = c.replicas[c.at_slot[s + 1]];
      const double x = (betas_[s] - betas_[s + 1]) * (a.E - b.E);
      ++c.swap_tries[s];
      if (x >= 0 || c.rng.uniform() < std::exp(x)) {
        std::swap(c.at_slot[s], c.at_slot[s + 1]);
        ++c.swap_accepts[s];
      }
    }
    // Recompute fields and energies now and then so rounding never accumulates (integer fields
    // are exact).
    if (++c.steps % kRefreshEvery == 0 && !integer_)
      for (auto& r : c.replicas) refresh(r);
  }

  /// A group member's values by scan position (Group::unpacked). Transposes the group's storage
  /// when this member changed since: every stale member of the group at once, as the members'
  /// samples are kept at the same steps (the other members' rows are rewritten unchanged).
  const std::int8_t* unpacked(const Replica& r) const {
    Group& g = *r.group;
    const std::int64_t stride = std::int64_t(g.unpacked.size()) / (integer_ ? kIntegerWidth : kUniformWidth);
    if (r.stale) {
      if (integer_)
        group_integer_unpack(g.lane_values.data(), N_, g.unpacked.data(), stride);
      else
        group_uniform_unpack(g.packed.data(), N_, g.unpacked.data(), stride);
      for (const Replica* s : g.replicas)
        if (s->stale) {
          s->stale = false;
          s->v_behind = true;
        }
    }
    return g.unpacked.data() + r.lane * stride;
  }

  /// The replica's unit values (by unit), brought up to date from the group's or the uniform
  /// kernel's copy.
  const std::vector<double>& values(const Replica& r) const {
    if (r.group) {
      const std::int8_t* from = unpacked(r);
      if (r.v_behind) {
        double* to = r.v.data();
        if (coloured_) {
          for (std::int64_t i = 0; i < N_; ++i) to[order_[std::size_t(i)]] = double(from[i]);
        } else {
          for (std::int64_t i = 0; i < N_; ++i) to[i] = double(from[i]);
        }
        r.v_behind = false;
      }
      return r.v;
    }
    if (r.stale) {
      for (std::int64_t i = 0; i < N_; ++i)
        r.v[std::size_t(order_[std::size_t(i)])] = double(r.small[std::size_t(i)]);
      r.stale = false;
    }
    return r.v;
  }

  /// Sets the replica to the given active bits (N of them) and recomputes its fields and energy.
  void load(Replica& r, const std::uint8_t* active) const {
    for (std::int64_t k = 0; k < N_; ++k) r.v[std::size_t(k)] = active[k] ? hi_ : lo_;
    r.stale = false;
    refresh(r);
  }

  /// A kept sample: the mean value and (if `active` is not null) the active bits by unit. Every
  /// value is lo or hi, so the sum of the values is the integer (count of hi) hi + (rest) lo, the
  /// same double as the sum in any order; counting vectorises where the sum would not. Replicas of
  /// a uniform-coupling or integer-field group are read from the group's transposed bytes.
  double kept_state(const Replica& r, std::uint8_t* active) const {
    std::int64_t high;
    if (r.group) {
      const std::int8_t* x = unpacked(r);
      high = count_equal(x, std::int8_t(hi_), N_);
      if (active) mark_unequal(x, std::int8_t(lo_), coloured_ ? order_.data() : nullptr, active, N_);
    } else {
      const double* v = values(r).data();
      high = count_equal(v, hi_, N_);
      if (active) mark_unequal(v, lo_, active, N_);
    }
    return (double(high) * hi_ + double(N_ - high) * lo_) / double(N_);
  }

  /// Whether chains can run in lock-step groups: one temperature (no replica exchanges, whose
  /// outcomes differ between chains) and a scan order shared by all chains (not "random").
  /// Integer fields: only where the CPU runs the integer-field group kernel (AVX-512); elsewhere
  /// those chains run alone.
  bool lock_step() const { return slots() == 1 && !random_scan_ && (!integer_ || group_integer_available()); }

  /// Smallest group worth forming (measured on dense N = 200 and a 64 x 64 lattice): a group's
  /// step costs about the same with one chain as with a full group, and the uniform coloured
  /// kernel already runs one chain as vectors over the sites; smaller groups run their chains
  /// alone. Uniform couplings, one thread: 2 chains in a group 210 M updates/s against 162 M
  /// alone (sequential scan); coloured, 4 chains 500 M against 487 M alone, 3 chains 381 M.
  std::int64_t min_group() const { return uniform_ ? (coloured_ ? 4 : 2) : 3; }

  /// Most chains in one group.
  std::int64_t group_width() const { return uniform_ ? kUniformWidth : integer_ ? kIntegerWidth : kGroupWidth; }
  bool uniform() const { return uniform_; }
  /// 2^-s with integer fields (the sampled model is the rounded one), else 0.
  double field_resolution() const { return integer_ ? integer_->resolution() : 0.0; }

  /// Takes the chains chains[members] into a group: their generators and (uniform couplings)
  /// values move into the group's storage; each chain's bits continue unchanged.
  void form_group(Group& g, std::vector<Chain>& chains) const {
    if (uniform_) {
      g.wide = std::make_unique<UniformLanes>();
      g.ties.assign(std::size_t(kUniformWidth), {0, 0, 0, 0});
      UniformLine fill{};
      std::fill(std::begin(fill.v), std::end(fill.v), std::int8_t(lo_));
      g.packed.assign(std::size_t(N_ + 1), fill);
      g.packed.back() = UniformLine{};
      g.words.assign(std::size_t(kUniformChunk / 4), UniformWords{});
      g.pieces.assign(std::size_t(kUniformChunk * kUniformWidth), 0);
      // Rows of N rounded up to 8, plus 72 bytes: lanes a power of two apart would share L1 sets.
      g.unpacked.assign(std::size_t(((N_ + 7) / 8 * 8 + 72) * kUniformWidth), 0);
      for (std::size_t m = 0; m < g.members.size(); ++m) {
        Chain& c = chains[g.members[m]];
        take_generators(*g.wide, m, c.lanes);
        std::copy(std::begin(c.tie), std::end(c.tie), g.ties[m].begin());
        Replica& r = c.replicas[0];
        values(r);
        r.packed = g.packed.data();
        r.lane = uniform_lane(std::int64_t(m));
        r.group = &g;
        r.stale = true;  // Group::unpacked is filled on the first read
        g.replicas.push_back(&r);
        for (std::int64_t i = 0; i < N_; ++i)
          r.packed[i].v[r.lane] = std::int8_t(r.v[std::size_t(order_[std::size_t(i)])]);
        r.small.clear();
      }
    } else if (integer_) {
      g.integer_lanes = std::make_unique<IntegerLanes>();
      g.ties.assign(std::size_t(kIntegerWidth), {0, 0, 0, 0});
      g.lane_values.assign(std::size_t(N_ * kIntegerWidth), std::int8_t(lo_));
      g.draws.assign(std::size_t(kIntegerChunk / 4 * kIntegerWidth), 0);
      g.spare_fields.assign(std::size_t(integer_->NP), 0);
      // Rows of NP + 64 bytes: lanes a power of two apart would share L1 sets.
      g.unpacked.assign(std::size_t((integer_->NP + 64) * kIntegerWidth), 0);
      for (std::size_t m = 0; m < g.members.size(); ++m) {
        Chain& c = chains[g.members[m]];
        take_generators(*g.integer_lanes, m, c.lanes);
        std::copy(std::begin(c.tie), std::end(c.tie), g.ties[m].begin());
        Replica& r = c.replicas[0];
        for (std::int64_t p = 0; p < N_; ++p)
          g.lane_values[std::size_t(p * kIntegerWidth) + m] = std::int8_t(r.v[std::size_t(integer_->unit[std::size_t(p)])]);
        r.lane = std::int64_t(m);
        r.group = &g;
        r.stale = true;  // Group::unpacked is filled on the first read
        g.replicas.push_back(&r);
      }
    } else {
      const auto W = std::size_t(kGroupWidth);
      g.draws.assign(std::size_t(kGroupChunk) * W, 0);
      for (std::size_t m = 0; m < g.members.size(); ++m) take_generators(g.lanes, m, chains[g.members[m]].lanes);
      g.spare.assign(std::size_t(N_), 0.0);
    }
  }

  /// One step of a uniform-coupling group's chains in `active` (bit m: member m): what step()
  /// does for each.
  void step_uniform_group(Group& g, std::vector<Chain>& chains, std::uint64_t active) const {
    const std::size_t n = g.members.size();
    const std::uint64_t all = n == 64 ? ~std::uint64_t(0) : (std::uint64_t(1) << n) - 1;
    // Chains that sit this step out keep their generators (the kernel steps them with the others).
    std::unique_ptr<UniformLanes> saved;
    if (active != all) saved = std::make_unique<UniformLanes>(*g.wide);
    GroupUniform a;
    a.x = g.packed.data();
    a.nb = nb_.data();
    a.stride = N_;
    a.degree = dmax_;
    a.colour_start = colour_start_.data();
    a.colours = std::int64_t(colour_start_.size()) - 1;
    const Chain& first = chains[g.members[0]];
    a.high = first.threshold_high.data();
    a.low = first.threshold_low.data();
    a.lo = std::int8_t(lo_);
    a.hi = std::int8_t(hi_);
    a.gibbs = gibbs_;
    a.active = active;
    a.members = std::int64_t(n);
    a.lanes = g.wide.get();
    a.ties = reinterpret_cast<std::uint64_t(*)[4]>(g.ties.data());
    a.words = g.words.data();
    a.pieces = g.pieces.data();
    group_uniform_sweep(a);
    for (std::size_t m = 0; m < n; ++m) {
      Chain& c = chains[g.members[m]];
      if (!(active >> m & 1)) {
        restore_generators(*g.wide, m, *saved);
        continue;
      }
      Replica& r = c.replicas[0];
      r.stale = true;
      r.E -= h0_ * double(a.dv[m]) + K_ * double(a.dv_S[m]);
      end_group_step(c, a.flips[m]);
    }
  }

  /// One step of the group's chains in `active` (bit m: member m): what step() does for each.
  void step_group(Group& g, std::vector<Chain>& chains, unsigned active) const {
    if (integer_) return step_integer_group(g, chains, active);
    const std::size_t n = g.members.size();
    const unsigned all = (1u << n) - 1;
    GroupLanes saved;
    if (active != all) saved = g.lanes;  // chains that sit this step out keep their generators
    GroupGeneral a;
    for (std::size_t m = 0; m < std::size_t(kGroupWidth); ++m) {
      Replica* r = m < n ? &chains[g.members[m]].replicas[0] : nullptr;
      a.v[m] = r ? r->v.data() : g.spare.data();
      a.H[m] = r ? r->H.data() : g.spare.data();
      a.E[m] = r ? r->E : 0.0;
    }
    a.active = active;
    a.N = N_;
    a.order = coloured_ ? order_.data() : nullptr;
    if (couplings_.sparse) {
      a.offsets = couplings_.offsets.data();
      a.index = couplings_.index.data();
      a.value = couplings_.value.data();
    } else {
      a.dense = couplings_.dense.data();
    }
    a.lo = lo_;
    a.hi = hi_;
    a.beta = betas_[0];
    a.gibbs = gibbs_;
    a.fused = fused_products_;
    a.lanes = &g.lanes;
    a.draws = g.draws.data();
    group_general_sweep(a);
    for (std::size_t m = 0; m < n; ++m) {
      Chain& c = chains[g.members[m]];
      if (active >> m & 1) {
        c.replicas[0].E = a.E[m];
        end_group_step(c, a.flips[m]);
      } else {
        restore_generators(g.lanes, m, saved);
      }
    }
  }

 private:
  /// step_group for integer fields.
  void step_integer_group(Group& g, std::vector<Chain>& chains, unsigned active) const {
    const std::size_t n = g.members.size();
    const unsigned all = (1u << n) - 1;
    std::unique_ptr<IntegerLanes> saved;
    if (active != all) saved = std::make_unique<IntegerLanes>(*g.integer_lanes);  // sitting out
    const IntegerModel& im = *integer_;
    const IntegerBounds& b = integer_bounds_[0];
    GroupInteger a;
    a.N = N_;
    a.NP = im.NP;
    a.lo = std::int8_t(im.lo);
    a.hi = std::int8_t(im.hi);
    a.columns = im.columns.data();
    a.unit = im.unit.data();
    a.pass = b.pass;
    a.fail = b.fail;
    a.c = b.c;
    a.gibbs = b.gibbs;
    for (std::size_t m = 0; m < std::size_t(kIntegerWidth); ++m) {
      Replica* r = m < n ? &chains[g.members[m]].replicas[0] : nullptr;
      a.H[m] = r ? r->Hq.data() : g.spare_fields.data();
      a.E2[m] = r ? r->E2 : 0;
    }
    a.V = g.lane_values.data();
    a.active = active;
    a.lanes = g.integer_lanes.get();
    a.ties = reinterpret_cast<std::uint64_t(*)[4]>(g.ties.data());
    a.draws = g.draws.data();
    group_integer_sweep(a);
    for (std::size_t m = 0; m < n; ++m) {
      Chain& c = chains[g.members[m]];
      if (active >> m & 1) {
        Replica& r = c.replicas[0];
        r.E2 = a.E2[m];
        r.E = im.energy(r.E2);
        r.stale = true;
        end_group_step(c, a.flips[m]);
      } else {
        restore_generators(*g.integer_lanes, m, *saved);
      }
    }
  }

  /// Steps between recomputations of a chain's fields and energies (rounding never accumulates).
  static constexpr std::int64_t kRefreshEvery = 1024;

  /// A group member's counters after one group step (one temperature, one replica): what step()
  /// records for it.
  void end_group_step(Chain& c, std::int64_t flips) const {
    c.slot_flips[0] += flips;
    c.slot_updates[0] += N_;
    if (++c.steps % kRefreshEvery == 0 && !integer_) refresh(c.replicas[0]);
  }

  void refresh(Replica& r) const {
    values(r);
    if (integer_) {
      r.Hq.resize(std::size_t(integer_->NP));
      integer_fields(*integer_, r.v.data(), r.Hq.data(), &r.E2);
      r.E = integer_->energy(r.E2);
      return;
    }
    if (uniform_ && r.packed) {
      for (std::int64_t i = 0; i < N_; ++i)
        r.packed[i].v[r.lane] = std::int8_t(r.v[std::size_t(order_[std::size_t(i)])]);
    } else if (uniform_) {
      r.small.assign(std::size_t(N_ + 1), 0);
      for (std::int64_t i = 0; i < N_; ++i) r.small[std::size_t(i)] = std::int32_t(r.v[std::size_t(order_[std::size_t(i)])]);
    }
    r.H.assign(std::size_t(N_), 0.0);
    if (couplings_.sparse) {
      for (std::int64_t k = 0; k < N_; ++k) {
        double s = h_(k);
        for (auto p = couplings_.offsets[std::size_t(k)]; p < couplings_.offsets[std::size_t(k + 1)]; ++p)
          s += couplings_.value[std::size_t(p)] * r.v[std::size_t(couplings_.index[std::size_t(p)])];
        r.H[std::size_t(k)] = s;
      }
    } else {
      const Eigen::Map<const Eigen::VectorXd> v(r.v.data(), N_);
      Eigen::Map<Eigen::VectorXd>(r.H.data(), N_) = h_ + couplings_.dense_matrix(N_) * v;
    }
    // E = -sum_i h_i v_i - 1/2 sum_i v_i (H_i - h_i) = -1/2 sum_i v_i (H_i + h_i)
    double e = 0;
    for (std::int64_t i = 0; i < N_; ++i) e -= 0.5 * r.v[std::size_t(i)] * (r.H[std::size_t(i)] + h_(i));
    r.E = e;
  }

  std::int64_t sweep(Replica& r, double beta, std::size_t slot, Chain& c) const {
    // Dispatch once per sweep so the inner loop is specialised.
    if (integer_) {
      draw_lanes(c.lanes, c.draws.data(), (N_ + 3) / 4);
      const std::int64_t flips = integer_sweep(*integer_, integer_bounds_[slot], r.v.data(), r.Hq.data(), &r.E2,
                                               c.draws.data(), c.tie, random_scan_ ? &c.rng : nullptr);
      r.E = integer_->energy(r.E2);
      return flips;
    }
    if (uniform_) return gibbs_ ? sweep_uniform<true>(r, slot, c) : sweep_uniform<false>(r, slot, c);
    if (coloured_) {
      if (couplings_.sparse)
        return gibbs_ ? sweep_t<true, true, false, true>(r, beta, c) : sweep_t<true, false, false, true>(r, beta, c);
      return gibbs_ ? sweep_t<false, true, false, true>(r, beta, c) : sweep_t<false, false, false, true>(r, beta, c);
    }
    if (couplings_.sparse) {
      if (gibbs_) return random_scan_ ? sweep_t<true, true, true>(r, beta, c) : sweep_t<true, true, false>(r, beta, c);
      return random_scan_ ? sweep_t<true, false, true>(r, beta, c) : sweep_t<true, false, false>(r, beta, c);
    }
    if (gibbs_) return random_scan_ ? sweep_t<false, true, true>(r, beta, c) : sweep_t<false, true, false>(r, beta, c);
    return random_scan_ ? sweep_t<false, false, true>(r, beta, c) : sweep_t<false, false, false>(r, beta, c);
  }

  /// Uniform couplings (one value K, one field h0), coloured or sequential scan. Each field is
  /// h0 + K S_k with S_k the sum of the neighbours' values, a small integer computed from the
  /// int32 copy of the values held by scan position; the test "53-bit draw < the tabulated
  /// integer threshold for S_k" (the double test u < p of heat_bath_threshold /
  /// metropolis_threshold exactly, with no exp) is decided from 16 random bits and, on one
  /// update in 2^16, 37 more from the tie stream (uniform_pass, sampler_kernels.hpp). The bits of a
  /// colour (the coloured scan: its units are not coupled, so update_uniform_colour runs them as
  /// vectors) or of the sweep (sequential: one "colour" in unit order, one unit at a time) come
  /// in one batch, as they do not depend on the state. The energy change sum_k -dv_k H_k is
  /// accumulated as the integers sum dv_k and sum dv_k S_k (exact). v is rewritten from the copy
  /// when next read (values()).
  template <bool kGibbs>
  std::int64_t sweep_uniform(Replica& r, std::size_t slot, Chain& c) const {
    const std::int64_t levels = 2 * dmax_ + 1;
    const std::size_t at = std::size_t(slot) * std::size_t(levels) * (kGibbs ? 1 : 2);
    UniformSums sums;
    if (coloured_) {
      UniformColour a;
      a.x = r.small.data();
      a.nb = nb_.data();
      a.stride = N_;
      a.degree = dmax_;
      a.pieces = c.pieces.data();
      a.th = c.threshold_high.data() + at;
      a.tl = c.threshold_low.data() + at;
      a.tie = c.tie;
      a.lo = std::int32_t(lo_);
      a.hi = std::int32_t(hi_);
      a.gibbs = kGibbs;
      for (std::size_t col = 0; col + 1 < colour_start_.size(); ++col) {
        a.begin = colour_start_[col];
        a.end = colour_start_[col + 1];
        draw_lanes(c.lanes, c.draws.data(), (a.end - a.begin + 3) / 4);
        split_pieces(c.draws.data(), c.pieces.data(), a.end - a.begin);
        update_uniform_colour(a, sums);
      }
    } else {
      sequential_uniform<kGibbs>(r.small.data(), at, c, sums);
    }
    r.stale = true;
    r.E -= h0_ * double(sums.dv) + K_ * double(sums.dv_S);
    return sums.flips;
  }

  /// The sequential scan's uniform kernel: positions are units; each update sees the previous.
  /// Update i takes the 16 bits i % 4 of word i / 4 of the sweep's batch (uniform_pass).
  template <bool kGibbs>
  void sequential_uniform(std::int32_t* __restrict x, std::size_t at, Chain& c, UniformSums& sums) const {
    const std::int32_t* __restrict nb = nb_.data();
    const std::uint64_t* __restrict m = c.draws.data();
    const std::uint32_t* __restrict high = c.threshold_high.data() + at;
    const std::uint64_t* __restrict low = c.threshold_low.data() + at;
    const std::int64_t levels = 2 * dmax_ + 1, d = dmax_, n = N_;
    const std::int64_t lo = std::int64_t(lo_), hi = std::int64_t(hi_), both = lo + hi;
    draw_lanes(c.lanes, c.draws.data(), (n + 3) / 4);
    std::int64_t flips = 0, sum_dv = 0, sum_dv_S = 0;
    for (std::int64_t i = 0; i < n; ++i) {
      std::int64_t S = 0;
      for (std::int64_t j = 0; j < d; ++j) S += x[nb[j * n + i]];
      const std::int64_t old = x[i];
      const std::int64_t level = (kGibbs ? 0 : levels * std::int64_t(old == hi)) + S + d;
      const std::int64_t pass = uniform_pass(draw_piece(m[i >> 2], i), high[level], low[level], c.tie);
      const std::int64_t next = kGibbs ? lo + pass * (hi - lo) : old + pass * (both - 2 * old);
      const std::int64_t dv = next - old;
      x[i] = std::int32_t(next);
      sum_dv += dv;
      sum_dv_S += dv * S;
      flips += dv != 0;
    }
    sums.dv += sum_dv;
    sums.dv_S += sum_dv_S;
    sums.flips += flips;
  }

  /// The general kernel. Update `step` of a sweep draws its uniform from the sweep's batch (one
  /// per update, drawn up front: they do not depend on the state; Metropolis leaves the draw of
  /// an update with dE <= 0 unused), and decides through the acceptance table (exact tests).
  template <bool kSparse, bool kGibbs, bool kRandom, bool kOrdered = false>
  std::int64_t sweep_t(Replica& r, double beta, Chain& c) const {
    double* v = r.v.data();
    double* H = r.H.data();
    const double span = hi_ - lo_, both = hi_ + lo_;
    const AcceptanceTable& accept = acceptance_table();
    const std::uint64_t* draws = c.draws.data();
    draw_lanes(c.lanes, c.draws.data(), N_);
    std::int64_t flips = 0;
    double E = r.E;
    for (std::int64_t step = 0; step < N_; ++step) {
      const std::int64_t k = kRandom ? std::int64_t(c.rng.below(std::uint64_t(N_)))
                             : kOrdered ? std::int64_t(order_[std::size_t(step)]) : step;
      const double Hk = H[k];
      const std::uint64_t u = draws[step] >> 11;  // 53 bits: the uniform is u 2^-53
      // delta = new value - old value, 0 when unchanged; selected by arithmetic, not branches.
      double delta;
      if constexpr (kGibbs) {
        // Heat bath: P(active | rest) = 1 / (1 + exp(-x)), x = beta (hi - lo) H_k.
        const double active = double(accept.heat_bath(beta * span * Hk, u));
        delta = lo_ + active * span - v[k];
      } else {
        const double d = both - 2.0 * v[k];  // the flip
        delta = double(accept.metropolis(-beta * d * Hk, u)) * d;
      }
      if (delta != 0.0) {
        ++flips;
        v[k] += delta;
        E -= delta * Hk;
        if constexpr (kSparse) {
          const auto end = couplings_.offsets[std::size_t(k + 1)];
          for (auto p = couplings_.offsets[std::size_t(k)]; p < end; ++p)
            H[couplings_.index[std::size_t(p)]] += couplings_.value[std::size_t(p)] * delta;
        } else {
          add_scaled(H, couplings_.dense.data() + k * N_, delta, N_);
        }
      }
    }
    r.E = E;
    return flips;
  }

  std::int64_t N_;
  Eigen::VectorXd h_;
  double lo_, hi_;
  bool gibbs_, random_scan_, coloured_, uniform_ = false;
  bool fused_products_ = false;   // dense: see GroupGeneral::fused
  std::optional<IntegerModel> integer_;        // dense couplings with integer fields
  std::vector<IntegerBounds> integer_bounds_;  // by ladder slot
  double K_ = 0, h0_ = 0;         // uniform couplings: the one coupling and field value
  std::int64_t dmax_ = 0;         // uniform couplings: the largest degree
  std::string start_;
  Couplings couplings_;
  std::vector<double> ladder_, betas_;
  std::vector<std::int32_t> nb_;            // uniform couplings: neighbours by scan position
  std::vector<std::int32_t> order_;         // coloured scan: units grouped by colour
  std::vector<std::int64_t> colour_start_;  // start of each colour in order_, then N
};

double seconds_since(std::chrono::steady_clock::time_point t0) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
}

/// Runs chains[c] for steps[c] steps each; `after(c, i)` runs after step i of chain c. Work goes
/// in rounds sized from the measured speed to last about 0.2 s; between rounds the progress
/// callback runs on the calling thread (returning false throws Interrupted). Round boundaries
/// never change results: each chain only depends on its own stream. With lock-step groups the
/// groups are the parallel work items; a group steps the members that still have steps to do.
class Driver {
 public:
  Driver(const Engine& e, std::vector<Chain>& chains, std::vector<Group>& groups,
         const SamplerOptions& o)
      : engine_(e), chains_(chains), groups_(groups), o_(o), threads_(resolve_threads(o.threads)),
        t0_(std::chrono::steady_clock::now()) {}

  void run(const std::string& stage, const std::vector<std::int64_t>& steps,
           const std::function<void(std::size_t, std::int64_t)>& after) {
    const std::int64_t C = std::int64_t(chains_.size());
    if (C == 0) return;  // a rank of a team with no chain of its own
    const double updates_per_step = double(engine_.units()) * double(engine_.slots()) * double(C);
    // First round: about 2e5 single-unit updates in all, then scale to the measured rate.
    std::int64_t round = std::max<std::int64_t>(1, std::int64_t(2e5 / updates_per_step));
    std::int64_t longest = 0;
    for (auto s : steps) longest = std::max(longest, s);
    for (std::int64_t begin = 0; begin < longest;) {
      const std::int64_t end = std::min(longest, begin + round);
      const auto t = std::chrono::steady_clock::now();
      if (groups_.empty()) {
        parallel_for(C, threads_, [&](std::int64_t c) {
          Chain& ch = chains_[std::size_t(c)];
          const std::int64_t stop = std::min(end, steps[std::size_t(c)]);
          for (std::int64_t i = begin; i < stop; ++i) {
            engine_.step(ch);
            after(std::size_t(c), i);
          }
        });
      } else {
        parallel_for(std::int64_t(groups_.size()), threads_, [&](std::int64_t gi) {
          Group& g = groups_[std::size_t(gi)];
          for (std::int64_t i = begin; i < end; ++i) {
            std::uint64_t active = 0;
            for (std::size_t m = 0; m < g.members.size(); ++m)
              if (steps[g.members[m]] > i) active |= std::uint64_t(1) << m;
            if (!active) break;
            if (engine_.uniform())
              engine_.step_uniform_group(g, chains_, active);
            else
              engine_.step_group(g, chains_, unsigned(active));
            for (std::size_t m = 0; m < g.members.size(); ++m)
              if (active >> m & 1) after(g.members[m], i);
          }
        });
      }
      const double took = seconds_since(t);
      const double factor = took > 0 ? std::clamp(0.2 / took, 0.25, 4.0) : 4.0;
      round = std::max<std::int64_t>(1, std::int64_t(double(end - begin) * factor));
      begin = end;
      report(stage, longest, end);
    }
  }

  void report(const std::string& stage, std::int64_t total, std::int64_t done) {
    if (!o_.progress) return;
    Progress p;
    p.stage = stage;
    p.done = done;
    p.total = total;
    p.elapsed_s = seconds_since(t0_);
    if (!o_.progress(p)) throw Interrupted("sampling interrupted during " + stage);
  }

  double elapsed() const { return seconds_since(t0_); }

 private:
  const Engine& engine_;
  std::vector<Chain>& chains_;
  std::vector<Group>& groups_;
  const SamplerOptions& o_;
  int threads_;
  std::chrono::steady_clock::time_point t0_;
};

double finite_or(double x, double fallback) { return std::isfinite(x) ? x : fallback; }

/// Asks the kernel for 2 MB pages over [p, p + n) where the system leaves that to the program
/// (Linux transparent huge pages in "madvise" mode). The kept samples of fast runs are written at
/// hundreds of MB/s, where faulting in 4 KB pages costs about as much as the sampling itself.
/// Advice only: the memory and its contents are the same either way.
void prefer_huge_pages(void* p, std::size_t n) {
#if defined(__linux__) && defined(MADV_HUGEPAGE)
  const std::uintptr_t page = std::uintptr_t(1) << 21;
  const std::uintptr_t begin = (reinterpret_cast<std::uintptr_t>(p) + page - 1) & ~(page - 1);
  const std::uintptr_t end = (reinterpret_cast<std::uintptr_t>(p) + n) & ~(page - 1);
  if (end > begin) madvise(reinterpret_cast<void*>(begin), end - begin, MADV_HUGEPAGE);
#else
  (void)p;
  (void)n;
#endif
}

}  // namespace

void check_sampler_options(const SamplerOptions& o) {
  if (o.method != "gibbs" && o.method != "metropolis")
    throw InputError("sampler: method must be \"gibbs\" or \"metropolis\", got \"" + o.method + "\"");
  if (o.scan != "sequential" && o.scan != "random" && o.scan != "coloured")
    throw InputError("sampler: scan must be \"sequential\", \"random\" or \"coloured\", got \"" +
                     o.scan + "\"");
  if (o.storage != "auto" && o.storage != "dense" && o.storage != "sparse")
    throw InputError("sampler: storage must be \"auto\", \"dense\" or \"sparse\", got \"" +
                     o.storage + "\"");
  if (o.start != "random" && o.start != "active" && o.start != "inactive")
    throw InputError("sampler: start must be \"random\", \"active\" or \"inactive\", got \"" +
                     o.start + "\"");
  if (o.chains < 1) throw InputError("sampler: chains must be >= 1");
  if (o.samples < o.chains)
    throw InputError("sampler: samples (" + std::to_string(o.samples) +
                     ") must be at least the number of chains (" + std::to_string(o.chains) + ")");
  if (o.thin == 0) throw InputError("sampler: thin must be >= 1 (or negative for automatic)");
  if (o.pilot_sweeps < 8) throw InputError("sampler: pilot_sweeps must be >= 8");
  if (o.max_pilot_sweeps < o.pilot_sweeps)
    throw InputError("sampler: max_pilot_sweeps must be >= pilot_sweeps");
  if (!(o.temperature > 0) || !std::isfinite(o.temperature))
    throw InputError("sampler: temperature must be positive and finite");
  if (!(o.sparse_density_threshold >= 0) || !(o.sparse_density_threshold <= 1))
    throw InputError("sampler: sparse_density_threshold must be in [0, 1]");
}

std::vector<double> normalise_ladder(std::vector<double> ladder, double target,
                                     std::size_t* target_slot) {
  for (std::size_t k = 0; k < ladder.size(); ++k)
    if (!(ladder[k] > 0) || !std::isfinite(ladder[k]))
      throw InputError("sampler: temperature_ladder entry " + std::to_string(k + 1) +
                       " must be positive and finite");
  ladder.push_back(target);
  std::sort(ladder.begin(), ladder.end());
  std::vector<double> out;
  for (double T : ladder)
    if (out.empty() || std::abs(T - out.back()) > 1e-12 * T) out.push_back(T);
  *target_slot = 0;
  for (std::size_t k = 0; k < out.size(); ++k)
    if (std::abs(out[k] - target) <= 1e-12 * target) *target_slot = k;
  out[*target_slot] = target;
  return out;
}

namespace {

// Team runs (SamplerOptions::team): each rank holds the series of its own chains [c0, c1) of
// `series`; afterwards every rank holds every chain's series, in chain order.
void share_series(const Team& team, ChainSeries& series, std::int64_t c0, std::int64_t c1) {
  std::vector<double> lengths, values;
  for (std::int64_t c = c0; c < c1; ++c) {
    const auto& x = series[std::size_t(c)];
    lengths.push_back(double(x.size()));
    values.insert(values.end(), x.begin(), x.end());
  }
  lengths = team.all_gather(lengths);
  values = team.all_gather(values);
  std::size_t at = 0;
  for (std::size_t c = 0; c < series.size(); ++c) {
    const auto n = std::size_t(lengths[c]);
    series[c].assign(values.begin() + std::ptrdiff_t(at), values.begin() + std::ptrdiff_t(at + n));
    at += n;
  }
}

// Team runs: the counters the diagnostics read, of every chain in chain order (the other fields
// of the returned chains are left empty).
std::vector<Chain> share_counters(const Team& team, const std::vector<Chain>& mine,
                                  std::int64_t C, std::size_t slots) {
  std::vector<double> local;
  for (const Chain& ch : mine) {
    local.push_back(double(ch.steps));
    for (const auto* v : {&ch.slot_flips, &ch.slot_updates, &ch.swap_tries, &ch.swap_accepts})
      for (auto x : *v) local.push_back(double(x));
  }
  const std::vector<double> all = team.all_gather(local);
  std::vector<Chain> out(static_cast<std::size_t>(C));
  const double* x = all.data();
  for (Chain& ch : out) {
    ch.steps = std::int64_t(*x++);
    ch.slot_flips.resize(slots);
    ch.slot_updates.resize(slots);
    ch.swap_tries.resize(slots - 1);
    ch.swap_accepts.resize(slots - 1);
    for (auto* v : {&ch.slot_flips, &ch.slot_updates, &ch.swap_tries, &ch.swap_accepts})
      for (auto& y : *v) y = std::int64_t(*x++);
  }
  return out;
}

}  // namespace

EngineResult run_engine(const IsingModel& model, const SamplerOptions& o, const EngineRequest& rq) {
  validate_model(model, "model");
  check_sampler_options(o);
  if (model.size() < 1) throw InputError("model: no units");
  const Engine engine(model, o, rq.ladder);
  const std::int64_t N = engine.units(), C = o.chains;
  const std::size_t K = engine.slots(), target = rq.target_slot;
  const auto nC = static_cast<std::size_t>(C);

  // This process runs chains [c0, c1) (all of them without a team); chains[c - c0] is chain c and
  // draws from stream c whichever rank runs it.
  const Team* team = shared_work(rq.team) ? rq.team : nullptr;
  if (team && (rq.persistent || rq.all_slot_energies))
    throw std::logic_error("sampler: a team run keeps no chain states or per-slot energies");
  std::int64_t c0 = 0, c1 = C;
  if (team) std::tie(c0, c1) = team->my_share(C);
  const auto nL = static_cast<std::size_t>(c1 - c0);
  std::vector<Chain> chains;
  chains.reserve(nL);
  for (std::int64_t c = c0; c < c1; ++c) chains.push_back(engine.make_chain(o.seed, std::uint64_t(c)));
  if (rq.persistent && !rq.persistent->empty()) {
    const ChainStates& st = *rq.persistent;
    if (st.chains != C || st.units != N || std::int64_t(st.active.size()) != C * N)
      throw InputError("sampler: the chain states hold " + std::to_string(st.chains) + " chains of " +
                       std::to_string(st.units) + " units, expected " + std::to_string(C) +
                       " chains of " + std::to_string(N) + " units");
    for (std::int64_t c = 0; c < C; ++c)
      for (auto& rep : chains[std::size_t(c)].replicas) engine.load(rep, st.active.data() + c * N);
  }
  // Lock-step groups: at least one per thread when there are enough chains, at most
  // engine.group_width() chains each, sizes as equal as possible. Grouping never changes a
  // chain's samples.
  std::vector<Group> groups;
  if (rq.lock_step && engine.lock_step() && nL > 0) {
    const auto count = std::int64_t(nL), width = engine.group_width();
    const std::int64_t n_groups = std::max((count + width - 1) / width,
                                           std::min<std::int64_t>(resolve_threads(o.threads), count));
    if (count / n_groups >= (rq.smallest_group > 0 ? rq.smallest_group : engine.min_group())) {
      groups.resize(std::size_t(n_groups));
      for (std::int64_t c = 0; c < count; ++c)
        groups[std::size_t(c * n_groups / count)].members.push_back(std::size_t(c));
      for (Group& g : groups) engine.form_group(g, chains);
    }
  }
  Driver driver(engine, chains, groups, o);

  EngineResult res;
  SamplerDiagnostics& d = res.set.diagnostics;
  d.method = o.method;
  d.scan = o.scan;
  d.storage = engine.couplings().sparse ? "sparse" : "dense";
  d.coupling_density = engine.couplings().density;
  d.field_resolution = engine.field_resolution();
  d.units = N;
  d.chains = C;
  d.temperature = rq.ladder[target];
  d.automatic_burn_in = o.burn_in < 0;
  d.automatic_thin = o.thin < 0;

  // ---- burn-in ----
  const std::int64_t fixed_burn = std::max<std::int64_t>(o.burn_in, 0);
  if (fixed_burn > 0)
    driver.run("burn-in", std::vector<std::int64_t>(nL, fixed_burn),
               [](std::size_t, std::int64_t) {});
  std::int64_t thin = o.thin;
  std::int64_t pilot = 0;
  if (o.burn_in < 0 || o.thin < 0) {
    // Pilot: record the energy after every step; tune on its second half.
    std::vector<ChainSeries> trace(K, ChainSeries(nC));
    std::int64_t length = o.pilot_sweeps;
    double tau = 1;
    for (;;) {
      const std::int64_t more = length - pilot;
      driver.run("burn-in (pilot)", std::vector<std::int64_t>(nL, more),
                 [&](std::size_t c, std::int64_t) {
                   for (std::size_t s = 0; s < K; ++s) {
                     if (!rq.all_slot_energies && s != target) continue;
                     const Chain& ch = chains[c];
                     trace[s][c + std::size_t(c0)].push_back(ch.replicas[ch.at_slot[s]].E);
                   }
                 });
      if (team) share_series(*team, trace[target], c0, c1);  // every rank tunes on all chains
      pilot = length;
      tau = 0;
      for (std::size_t s = 0; s < K; ++s) {
        if (!rq.all_slot_energies && s != target) continue;
        ChainSeries half(nC);
        for (std::int64_t c = 0; c < C; ++c) {
          const auto& x = trace[s][std::size_t(c)];
          half[std::size_t(c)].assign(x.begin() + std::ptrdiff_t(x.size() / 2), x.end());
        }
        tau = std::max(tau, finite_or(autocorrelation_time(half, false).tau, 1.0));
      }
      if (50.0 * tau <= double(pilot)) break;
      if (pilot >= o.max_pilot_sweeps) {
        std::ostringstream w;
        w << "the pilot run reached max_pilot_sweeps (" << o.max_pilot_sweeps
          << ") with an energy autocorrelation time of " << tau
          << " sweeps, more than 1/50 of the pilot: the chains may not have converged";
        d.warnings.push_back(w.str());
        break;
      }
      length = std::min(2 * length, o.max_pilot_sweeps);
    }
    d.pilot_sweeps = pilot;
    d.pilot_tau_energy = tau;
    if (thin < 0) thin = std::max<std::int64_t>(1, std::int64_t(std::ceil(tau)));
  }
  d.burn_in = fixed_burn + pilot;
  d.thin = thin;

  // ---- sampling ----
  std::vector<std::int64_t> kept(nC), offset(nC + 1, 0), steps(nC);
  for (std::int64_t c = 0; c < C; ++c) {
    kept[std::size_t(c)] = o.samples / C + (c < o.samples % C ? 1 : 0);
    offset[std::size_t(c) + 1] = offset[std::size_t(c)] + kept[std::size_t(c)];
    steps[std::size_t(c)] = kept[std::size_t(c)] * thin;
  }
  const std::int64_t rows = o.samples;
  const std::int64_t row0 = offset[std::size_t(c0)];  // first row of this process's chains
  const std::int64_t my_rows = offset[std::size_t(c1)] - row0;
  std::vector<std::uint8_t> bits;
  if (rq.keep_states) {
    bits.reserve(std::size_t(my_rows * N));
    prefer_huge_pages(bits.data(), bits.capacity());
    bits.resize(std::size_t(my_rows * N));
  }
  res.set.energies.assign(std::size_t(rows), 0.0);
  res.set.chain.assign(std::size_t(rows), 0);
  std::vector<double> magnetisation(std::size_t(rows), 0.0);
  if (rq.all_slot_energies)
    for (std::size_t s = 0; s < K; ++s) {
      res.slot_energies.emplace_back(nC);
      for (std::int64_t c = 0; c < C; ++c) res.slot_energies[s][std::size_t(c)].reserve(std::size_t(kept[std::size_t(c)]));
    }
  // Acceptance counts from here on only.
  for (auto& ch : chains) {
    std::fill(ch.slot_flips.begin(), ch.slot_flips.end(), 0);
    std::fill(ch.slot_updates.begin(), ch.slot_updates.end(), 0);
    std::fill(ch.swap_tries.begin(), ch.swap_tries.end(), 0);
    std::fill(ch.swap_accepts.begin(), ch.swap_accepts.end(), 0);
  }
  const double lo = engine.low();
  driver.run("sampling", std::vector<std::int64_t>(steps.begin() + c0, steps.begin() + c1),
             [&](std::size_t c, std::int64_t i) {
    if ((i + 1) % thin != 0) return;
    const Chain& ch = chains[c];
    const std::int64_t row = offset[c + std::size_t(c0)] + (i + 1) / thin - 1;
    const Replica& r = ch.replicas[ch.at_slot[target]];
    res.set.energies[std::size_t(row)] = r.E;
    res.set.chain[std::size_t(row)] = std::int32_t(c + std::size_t(c0));
    magnetisation[std::size_t(row)] =
        engine.kept_state(r, rq.keep_states ? bits.data() + (row - row0) * N : nullptr);
    if (rq.all_slot_energies)
      for (std::size_t s = 0; s < K; ++s) res.slot_energies[s][c].push_back(ch.replicas[ch.at_slot[s]].E);
  });
  d.sweeps_per_chain = d.burn_in + steps[0];
  std::int64_t kept_rows = rq.keep_states ? rows : 0;
  if (team) {
    // Rows are chain by chain and ranks hold consecutive chains, so the rank-order
    // concatenation of the local rows is the whole table.
    auto mine = [&](const std::vector<double>& v) {
      return std::vector<double>(v.begin() + row0, v.begin() + row0 + my_rows);
    };
    res.set.energies = team->all_gather(mine(res.set.energies));
    magnetisation = team->all_gather(mine(magnetisation));
    for (std::int64_t c = 0; c < C; ++c)
      std::fill(res.set.chain.begin() + offset[std::size_t(c)],
                res.set.chain.begin() + offset[std::size_t(c) + 1], std::int32_t(c));
    if (rq.keep_states) {
      bits = team->gather(bits);
      if (!team->root()) kept_rows = 0;
    }
    chains = share_counters(*team, chains, C, K);
  }
  res.set.samples = SpinMatrix(std::move(bits), kept_rows, N, model.convention);

  // ---- diagnostics ----
  ChainSeries energy(nC), mag(nC);
  for (std::int64_t c = 0; c < C; ++c) {
    const auto b = std::size_t(offset[std::size_t(c)]), e = std::size_t(offset[std::size_t(c) + 1]);
    energy[std::size_t(c)].assign(res.set.energies.begin() + std::ptrdiff_t(b), res.set.energies.begin() + std::ptrdiff_t(e));
    mag[std::size_t(c)].assign(magnetisation.begin() + std::ptrdiff_t(b), magnetisation.begin() + std::ptrdiff_t(e));
  }
  d.rhat_energy = split_rhat(energy);
  d.rhat_magnetisation = split_rhat(mag);
  const AutocorrelationTime te = autocorrelation_time(energy), tm = autocorrelation_time(mag);
  d.tau_energy = te.tau;
  d.ess_energy = te.ess;
  d.tau_magnetisation = tm.tau;
  d.ess_magnetisation = tm.ess;
  double flips = 0, updates = 0;
  for (const auto& ch : chains) {
    const double f = double(ch.slot_flips[target]), u = double(ch.slot_updates[target]);
    d.acceptance_rate.push_back(u > 0 ? f / u : 0.0);
    flips += f;
    updates += u;
  }
  d.mean_acceptance_rate = updates > 0 ? flips / updates : 0.0;
  if (K > 1) {
    d.ladder = rq.ladder;
    for (std::size_t s = 0; s < K; ++s) {
      double f = 0, u = 0;
      for (const auto& ch : chains) {
        f += double(ch.slot_flips[s]);
        u += double(ch.slot_updates[s]);
      }
      d.ladder_acceptance.push_back(u > 0 ? f / u : 0.0);
    }
    for (std::size_t s = 0; s + 1 < K; ++s) {
      double a = 0, t = 0;
      for (const auto& ch : chains) {
        a += double(ch.swap_accepts[s]);
        t += double(ch.swap_tries[s]);
      }
      d.swap_acceptance.push_back(t > 0 ? a / t : 0.0);
    }
  }
  if (rq.persistent) {
    ChainStates& st = *rq.persistent;
    st.chains = C;
    st.units = N;
    st.active.assign(std::size_t(C * N), 0);
    for (std::int64_t c = 0; c < C; ++c) {
      const Chain& ch = chains[std::size_t(c)];
      const Replica& r = ch.replicas[ch.at_slot[target]];
      const std::vector<double>& v = engine.values(r);
      for (std::int64_t k = 0; k < N; ++k) st.active[std::size_t(c * N + k)] = v[std::size_t(k)] != lo;
    }
  }
  d.lock_step_groups = team ? std::int64_t(team->sum_value(double(groups.size())))
                            : std::int64_t(groups.size());
  d.seconds = driver.elapsed();
  for (const auto& ch : chains) d.updates += double(ch.steps) * double(N) * double(K);
  return res;
}

}  // namespace detail

SampleSet sample(const IsingModel& model, const SamplerOptions& options) {
  detail::check_sampler_options(options);
  detail::EngineRequest rq;
  if (options.temperature_ladder) {
    rq.ladder = detail::normalise_ladder(*options.temperature_ladder, options.temperature,
                                         &rq.target_slot);
  } else {
    rq.ladder = {options.temperature};
  }
  rq.team = options.team;
  return detail::run_engine(model, options, rq).set;
}

SampleSet continue_chains(const IsingModel& model, ChainStates& states, const SamplerOptions& options) {
  detail::check_sampler_options(options);
  if (options.temperature_ladder)
    throw InputError("sampler: continue_chains does not run parallel tempering (temperature_ladder is set)");
  if (options.burn_in < 0 || options.thin < 1)
    throw InputError("sampler: continue_chains needs a fixed burn_in (>= 0) and thin (>= 1)");
  detail::EngineRequest rq;
  rq.ladder = {options.temperature};
  rq.persistent = &states;
  return detail::run_engine(model, options, rq).set;
}

}  // namespace spinfer
