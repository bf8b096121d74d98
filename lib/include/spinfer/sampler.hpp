// Monte Carlo sampling of an IsingModel, and the model statistics computed from the samples.
//
// Target: P_T(v) ∝ exp(-E(v) / T), E(v) = -sum_i h_i v_i - sum_{i<j} J_ij v_i v_j, with v in the
// model's own convention ({0,1} or {-1,+1}); T = 1 is the fitted model itself.
//
// Moves: single-unit updates with incrementally maintained local fields H_i = h_i + sum_j J_ij v_j.
// Changing unit k by delta changes the energy by -delta * H_k and every H_j by J_jk * delta.
//   gibbs       heat bath: v_k is redrawn from P(v_k | rest), P(active) = 1 / (1 + exp(-(a-b)H_k/T))
//               with a-b = 1 (binary) or 2 (spin).
//   metropolis  the flip of v_k is accepted with probability min(1, exp(-dE / T)).
// A sweep is N updates: units in order ("sequential"), N uniformly drawn units ("random"), or
// "coloured": the coupling graph is coloured greedily (unit k takes the smallest colour not used by
// a neighbour j < k) and a sweep visits the colours in turn, each colour's units in ascending
// order. That is a fixed systematic scan like "sequential" (same stationary distribution P_T, a
// different update order, so different samples from the same seed; reproducible for any thread
// count like the others).
// Random numbers and tests: a sweep's (or one colour's) uniforms are drawn up front in one batch
// from eight xoshiro256** generators stepped together (seeded from the chain's stream; the draws
// do not depend on the state), and the acceptance tests are decided from tabulated brackets of
// the logistic / exponential function, evaluating exp only for draws inside a bracket: the same
// decisions as the plain double tests, so the chain is exact. Fast path for the sequential and
// coloured scans: CSR storage with a single coupling value K and a single field value h
// (lattices, regular graphs): each field is h + K S with S the (integer) sum of the neighbours'
// values, read from an int32 copy of the state, and u < p is decided by comparing the 53 random
// bits of u with an integer threshold tabulated by S: the same decision as the double test,
// without exp or unpredictable branches. Units of one colour are not coupled, so the coloured
// scan updates a colour as vectors (AVX-512 / AVX2 when the CPU has them); on a dense model every
// unit gets its own colour, so "coloured" is "sequential" there.
// Couplings are held dense (one contiguous column per unit) or as a CSR neighbour list; "auto"
// takes the list when fewer than `sparse_density_threshold` of the off-diagonal couplings are
// non-zero. The choice is reported.
//
// Chains: `chains` independent chains, run in parallel over `threads`. Chain c draws from its own
// random stream Rng(seed, c), so a seed gives identical samples for every thread count. Chains
// start from independent uniformly random states (or all-active / all-inactive states).
// Without parallel tempering and with the sequential or coloured scan, the chains of a thread run
// in lock-step groups of up to 8, or 16 on dense couplings with integer fields (below; AVX-512
// CPUs only), or 64 on uniform couplings (at least one group per thread when there are enough
// chains; groups of fewer than 3 chains, or 7 for the coloured scan on uniform couplings, are not
// worth forming and those chains run alone):
// the group's chains update the same unit together, their draws, fields and accept decisions
// held as vectors across the chains. Every chain still does its own arithmetic in the same order,
// so its samples are the same bits in any group and for any number of chains, threads or ranks;
// grouping only changes the speed (16 chains per thread make full groups on dense models).
//
// Integer fields (dense couplings): the couplings and fields are rounded once to multiples of a
// resolution 2^-s (s the largest <= 40 that keeps every |h_i| + sum_j |J_ij| below 2^30 units)
// and the local fields are exact int32 sums in those units, so the order of the additions does
// not matter and a group may add a block of flips in any order. The sampled model is the rounded
// one: each h_i and J_ij moves by at most 2^-(s+1) (s = 25, 1.5e-8, for an N = 200 model with
// couplings of size 1/sqrt(N)), and kept energies are the rounded model's, within
// (N + N (N - 1) / 2) 2^-(s+1) of the given model's. Models that would need s < 20 (fields or
// coupling sums beyond about 1000) keep double fields. SamplerDiagnostics::field_resolution
// reports 2^-s (0: double fields). Updates then take 16 random bits (53 on about one update in
// a thousand), as on uniform couplings; the probabilities are those of the exact tests.
//
// Burn-in and thinning (in sweeps). A negative value means automatic: a pilot run of
// `pilot_sweeps` sweeps per chain records the energy after every sweep, and the integrated
// autocorrelation time tau of the energy is estimated on the pilot's second half with the
// multi-chain Geyer initial-monotone-sequence estimator (chain_diagnostics.hpp). The pilot is
// doubled until it spans at least 50 tau (or reaches `max_pilot_sweeps`, with a warning).
// Automatic burn-in = the pilot's length (the chains continue from where the pilot stopped);
// automatic thin = ceil(tau). A fixed burn-in with automatic thinning runs the pilot after the
// fixed burn-in and discards it too.
//
// Parallel tempering (temperature_ladder set): each chain holds one replica per ladder
// temperature; after every sweep of all replicas, neighbouring temperatures attempt to exchange
// configurations with probability min(1, exp((1/T_a - 1/T_b)(E_a - E_b))) (Swendsen & Wang, PRL
// 57:2607, 1986; Hukushima & Nemoto, J. Phys. Soc. Jpn. 65:1604, 1996). Samples are kept at
// `temperature`, which is added to the ladder when absent.
//
// Diagnostics are computed from the kept samples of the target temperature: split R-hat, ESS and
// integrated autocorrelation time (chain_diagnostics.hpp) of the energy and the magnetisation
// (mean unit value in the model's convention), and acceptance (flip) rates.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include <Eigen/Dense>

#include "spinfer/model.hpp"
#include "spinfer/progress.hpp"
#include "spinfer/spin_matrix.hpp"
#include "spinfer/team.hpp"

namespace spinfer {

struct SamplerOptions {
  std::string method = "gibbs";        ///< "gibbs" (heat bath) or "metropolis"
  std::string scan = "sequential";     ///< "sequential", "random" or "coloured"
  std::int64_t chains = 4;             ///< independent chains (>= 1)
  std::int64_t samples = 10000;        ///< samples kept in total, shared out over the chains
  std::int64_t burn_in = -1;           ///< sweeps discarded first; < 0: automatic (see above)
  std::int64_t thin = -1;              ///< sweeps between kept samples (>= 1); < 0: automatic
  std::int64_t pilot_sweeps = 500;     ///< first pilot length for automatic burn-in / thinning
  std::int64_t max_pilot_sweeps = 100000;
  double temperature = 1.0;            ///< target temperature T (> 0)
  std::optional<std::vector<double>> temperature_ladder;  ///< set: parallel tempering
  std::string storage = "auto";        ///< couplings "auto", "dense" or "sparse"
  std::string start = "random";        ///< initial states: "random", "active" (all units
                                       ///< active; a cold start) or "inactive"
  double sparse_density_threshold = 0.1;
  std::uint64_t seed = 0;
  int threads = 1;                     ///< <= 0: automatic (resolve_threads)
  ProgressCallback progress;           ///< called about every 0.2 s, on the calling thread
  /// sample() only: ranks sharing the chains (team.hpp; null = this process alone). Rank r runs
  /// its contiguous block of chains (Team::share), each still on its own stream Rng(seed, c), so
  /// the samples equal the single-process ones bit for bit; automatic burn-in and thinning are
  /// tuned on the pilot energies of all chains. The samples matrix is complete on rank 0 only
  /// (0 rows elsewhere); energies, chain indices and diagnostics are complete on every rank.
  /// Every rank must make the same call. model_statistics(), temperature_scan() and
  /// continue_chains() ignore it.
  const Team* team = nullptr;
};

struct SamplerDiagnostics {
  std::string method, scan;
  std::string storage;                 ///< "dense" or "sparse" (what was used)
  double coupling_density = 0;         ///< fraction of non-zero off-diagonal couplings
  /// Dense couplings are sampled with exact integer fields in units of this resolution (2^-s,
  /// see "Integer fields" above; the sampled model is the one rounded to it); 0: double fields.
  double field_resolution = 0;
  std::int64_t units = 0;
  std::int64_t chains = 0;
  std::int64_t burn_in = 0;            ///< sweeps discarded per chain before the first kept sample
  std::int64_t thin = 0;               ///< sweeps between kept samples
  bool automatic_burn_in = false, automatic_thin = false;
  std::int64_t pilot_sweeps = 0;       ///< 0 when no pilot ran
  double pilot_tau_energy = 0;         ///< energy autocorrelation time in sweeps from the pilot
  std::int64_t sweeps_per_chain = 0;   ///< all sweeps per chain (burn-in + sampling)
  double temperature = 1;
  /// Per-sample observables at the target temperature; tau in kept samples (x thin = sweeps).
  double rhat_energy = 0, rhat_magnetisation = 0;
  double ess_energy = 0, ess_magnetisation = 0;
  double tau_energy = 0, tau_magnetisation = 0;
  std::vector<double> acceptance_rate;  ///< per chain: fraction of updates at the target
                                        ///< temperature that changed a unit
  double mean_acceptance_rate = 0;
  std::vector<double> ladder;           ///< parallel tempering temperatures, ascending
  std::vector<double> swap_acceptance;  ///< between ladder[k] and ladder[k+1], all chains pooled
  std::vector<double> ladder_acceptance;  ///< flip rate at each ladder temperature
  double seconds = 0;
  double updates = 0;                   ///< single-unit updates performed (all replicas)
  /// Lock-step groups the chains ran in (all ranks together; 0: every chain alone). Groups of
  /// up to 8 chains update the same unit together (see "Chains" above); a speed matter only.
  std::int64_t lock_step_groups = 0;
  std::vector<std::string> warnings;
};

struct SampleSet {
  SpinMatrix samples;                   ///< rows chain by chain; active bits; model's convention
  std::vector<double> energies;         ///< E(v) of each row (not divided by T)
  std::vector<std::int32_t> chain;      ///< chain index of each row
  SamplerDiagnostics diagnostics;
};

/// Draws options.samples configurations from P_T. Throws InputError on a bad model or options,
/// Interrupted when the progress callback returns false.
SampleSet sample(const IsingModel& model, const SamplerOptions& options);

/// Persistent chains: the configuration each chain ended in, kept between calls of
/// continue_chains so successive runs (for example under slowly changing parameters, as in
/// Boltzmann learning) need no new burn-in. Stored as active bits, so the states do not depend on
/// the model's convention.
struct ChainStates {
  std::int64_t chains = 0;
  std::int64_t units = 0;
  std::vector<std::uint8_t> active;  ///< chains x units, chain by chain (1 = active)
  bool empty() const { return active.empty(); }
};

/// Like sample() without parallel tempering, but the chains start from `states` (when it is not
/// empty; else from options.start) and `states` receives the final configuration of every chain.
/// options.burn_in must be >= 0 and options.thin >= 1 (no automatic tuning: the pilot would waste
/// the point of continuing). Chain c draws from Rng(options.seed, c), so give every call its own
/// seed; the result is identical for every thread count. Throws InputError when `states` does not
/// have options.chains chains of model.size() units, or options.temperature_ladder is set.
SampleSet continue_chains(const IsingModel& model, ChainStates& states, const SamplerOptions& options);

/// A value and its standard error, elementwise.
template <typename T>
struct Estimate {
  T value;
  T error;
};

/// Statistics of P_T in the model's convention. Standard errors are batch means: the kept samples
/// of each chain are cut into ceil(32 / chains) consecutive batches, the statistic is computed
/// on every batch, and error = sd(batch values) / sqrt(batches). Point values use all samples.
struct ModelStatistics {
  Convention convention = Convention::spin;
  double temperature = 1;
  Estimate<Eigen::VectorXd> means;           ///< <v_i>
  Estimate<Eigen::MatrixXd> second;          ///< <v_i v_j> (diagonal <v_i^2>)
  Estimate<Eigen::MatrixXd> connected;       ///< <v_i v_j> - <v_i><v_j>
  Estimate<Eigen::VectorXd> active_count;    ///< P(K), K = number of active units, 0..N
  Estimate<double> energy;                   ///< <E>
  Estimate<double> specific_heat;            ///< Var(E) / (N T^2)
  std::int64_t batches = 0;
  std::string error_method = "batch means";
  SamplerDiagnostics diagnostics;
};

ModelStatistics model_statistics(const IsingModel& model, const SamplerOptions& options);

/// Energy and specific heat over a set of temperatures. With `parallel_tempering`, one run with
/// the (sorted) temperatures as the ladder samples every temperature at once; otherwise each
/// temperature gets its own run with stream-separated seeds. options.temperature and
/// options.temperature_ladder are ignored. The peak of C(T) is the largest scanned value, refined
/// by the vertex of the parabola through it and its two neighbours when it is interior.
struct TemperatureScan {
  std::vector<double> temperatures;          ///< ascending
  std::vector<double> energy, energy_error;  ///< <E> and its batch-means standard error
  std::vector<double> specific_heat, specific_heat_error;  ///< Var(E)/(N T^2)
  std::int64_t peak_index = 0;
  double peak_temperature = 0;               ///< parabola vertex (or the grid point at an edge)
  bool peak_at_edge = false;
  bool parallel_tempering = false;
  std::vector<double> swap_acceptance;       ///< parallel tempering only
  std::vector<SamplerDiagnostics> runs;      ///< one per run
};

TemperatureScan temperature_scan(const IsingModel& model, const std::vector<double>& temperatures,
                                 const SamplerOptions& options, bool parallel_tempering = false);

}  // namespace spinfer
