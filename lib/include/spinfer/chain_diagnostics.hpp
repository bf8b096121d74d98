// Convergence and error diagnostics for Markov chains: several chains of one scalar observable,
// each given as its time series (chain[m][t]).
//
//  * split R-hat: Gelman, Carlin, Stern, Dunson, Vehtari, Rubin, "Bayesian Data Analysis", 3rd ed.
//    (2013), §11.4, eqs. 11.2-11.4. Each chain is cut into halves; with W the mean within-half
//    variance and B/n the variance of the half means, var+ = (n-1)/n W + B/n and R = sqrt(var+/W).
//    (This is the classic, non-rank-normalised statistic; Vehtari et al. 2021 add rank
//    normalisation and folding on top of it.)
//  * integrated autocorrelation time and effective sample size: the multi-chain estimator of BDA3
//    §11.5 with Geyer's initial monotone sequence (Geyer, "Practical Markov chain Monte Carlo",
//    Statist. Sci. 7:473, 1992): rho_t = 1 - (W - mean_m acov_m(t)) / var+, summed in adjacent
//    pairs while the pair sums stay positive, each pair capped by the previous one;
//    tau = -1 + 2 sum_k (rho_2k + rho_2k+1), ESS = (total draws) / tau.
//  * batch means: each chain is cut into equal consecutive batches; the standard error of the
//    mean is sd(batch means) / sqrt(number of batches). Valid when a batch is much longer than
//    the autocorrelation time.
// Chains of unequal length are truncated to the shortest for R-hat and ESS.
#pragma once

#include <cstdint>
#include <vector>

namespace spinfer {

using ChainSeries = std::vector<std::vector<double>>;  ///< [chain][time]

/// Split R-hat; 1 for a constant observable, +inf when every half is constant but the halves
/// differ; NaN when the shortest chain has fewer than 4 draws.
double split_rhat(const ChainSeries& chains);

struct AutocorrelationTime {
  double tau = 1;   ///< integrated autocorrelation time, in draws (1 = independent draws)
  double ess = 0;   ///< effective sample size over all chains
  std::int64_t lags = 0;  ///< autocorrelation lags summed
};

/// Multi-chain Geyer estimate. `split` cuts each chain in halves first (as for R-hat), which
/// makes a chain that drifts show up as a long autocorrelation time. A constant observable gives
/// tau = 1 and ess = total draws. NaN when fewer than 4 draws per chain.
AutocorrelationTime autocorrelation_time(const ChainSeries& chains, bool split = true);

struct MeanWithError {
  double mean = 0;
  double error = 0;  ///< standard error
  std::int64_t batches = 0;
};

/// Batch-means estimate of the mean of one observable over all chains (each chain contributes
/// `batches_per_chain` batches; draws left over after equal division join the mean only).
MeanWithError batch_means(const ChainSeries& chains, std::int64_t batches_per_chain);

}  // namespace spinfer
