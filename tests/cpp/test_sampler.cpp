// Monte Carlo sampler against exact results: brute-force enumeration written here, the 1D
// transfer-matrix correlations, the 2D Ising model (Onsager 1944 / Yang 1952 magnetisation and
// energy; Kaufman 1949 finite-torus values), the finite-N Curie-Weiss sum. Statistical checks are
// |estimate - exact| <= 5 standard errors, with fixed seeds (so they are deterministic).
#include <doctest/doctest.h>

#include <cmath>
#include <vector>

#include "random_models.hpp"
#include "spinfer/chain_diagnostics.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/rng.hpp"
#include "spinfer/sampler.hpp"

using namespace spinfer;

namespace {

// ---- exact enumeration (independent of the library: its own energy loop) -----------------------

struct Exact {
  Eigen::VectorXd mean, pk;
  Eigen::MatrixXd second, connected;
  double E = 0, C = 0, abs_m = 0, m2 = 0;
};

Exact enumerate(const IsingModel& m, double T) {
  const int N = int(m.size());
  const double lo = m.convention == Convention::binary ? 0.0 : -1.0;
  const std::int64_t S = std::int64_t(1) << N;
  std::vector<double> E(static_cast<std::size_t>(S));
  double Emin = 1e300;
  for (std::int64_t s = 0; s < S; ++s) {
    double e = 0;
    for (int i = 0; i < N; ++i) {
      const double vi = (s >> i) & 1 ? 1.0 : lo;
      e -= m.fields(i) * vi;
      for (int j = i + 1; j < N; ++j) e -= m.couplings(i, j) * vi * ((s >> j) & 1 ? 1.0 : lo);
    }
    E[std::size_t(s)] = e;
    Emin = std::min(Emin, e);
  }
  Exact x;
  x.mean = Eigen::VectorXd::Zero(N);
  x.pk = Eigen::VectorXd::Zero(N + 1);
  x.second = Eigen::MatrixXd::Zero(N, N);
  double Z = 0, E2 = 0;
  Eigen::VectorXd v(N);
  for (std::int64_t s = 0; s < S; ++s) {
    const double w = std::exp(-(E[std::size_t(s)] - Emin) / T);
    int k = 0;
    for (int i = 0; i < N; ++i) {
      v(i) = (s >> i) & 1 ? 1.0 : lo;
      k += int((s >> i) & 1);
    }
    Z += w;
    x.mean += w * v;
    x.second += w * v * v.transpose();
    x.pk(k) += w;
    x.E += w * E[std::size_t(s)];
    E2 += w * E[std::size_t(s)] * E[std::size_t(s)];
    const double mag = v.mean();
    x.abs_m += w * std::abs(mag);
    x.m2 += w * mag * mag;
  }
  x.mean /= Z;
  x.second /= Z;
  x.pk /= Z;
  x.E /= Z;
  x.abs_m /= Z;
  x.m2 /= Z;
  x.connected = x.second - x.mean * x.mean.transpose();
  x.C = (E2 / Z - x.E * x.E) / (N * T * T);
  return x;
}

IsingModel random_model(int N, Convention c, std::uint64_t seed, double h_scale, double j_scale) {
  return testing::uniform_random_model(N, c, seed, h_scale, j_scale);
}

/// Periodic L x L square lattice, coupling K between nearest neighbours, no field, spins.
IsingModel torus(int L, double K) {
  IsingModel m;
  const int N = L * L;
  m.fields = Eigen::VectorXd::Zero(N);
  m.couplings = Eigen::MatrixXd::Zero(N, N);
  for (int r = 0; r < L; ++r)
    for (int c = 0; c < L; ++c) {
      const int i = r * L + c, right = r * L + (c + 1) % L, down = ((r + 1) % L) * L + c;
      m.couplings(i, right) = m.couplings(right, i) = K;
      m.couplings(i, down) = m.couplings(down, i) = K;
    }
  return m;
}

IsingModel chain_model(int N, double K, bool ring) {
  IsingModel m;
  m.fields = Eigen::VectorXd::Zero(N);
  m.couplings = Eigen::MatrixXd::Zero(N, N);
  for (int i = 0; i + 1 < N + (ring ? 1 : 0); ++i) {
    const int j = (i + 1) % N;
    m.couplings(i, j) = m.couplings(j, i) = K;
  }
  return m;
}

/// Curie-Weiss: J_ij = J/N for all pairs, field h.
IsingModel curie_weiss(int N, double J, double h) {
  IsingModel m;
  m.fields = Eigen::VectorXd::Constant(N, h);
  m.couplings = Eigen::MatrixXd::Constant(N, N, J / N);
  m.couplings.diagonal().setZero();
  return m;
}

void near(double estimate, double error, double exact, double max_error, const char* what) {
  INFO(what << ": estimate " << estimate << " +- " << error << ", exact " << exact);
  CHECK(error > 0);
  CHECK(error < max_error);  // an error bar this large would make the check meaningless
  CHECK(std::abs(estimate - exact) <= 5 * error);
}

/// Per-chain series of an observable computed from each kept sample.
template <typename F>
ChainSeries per_chain(const SampleSet& s, std::int64_t chains, F f) {
  ChainSeries out(static_cast<std::size_t>(chains));
  for (std::int64_t t = 0; t < s.samples.rows(); ++t)
    out[std::size_t(s.chain[std::size_t(t)])].push_back(f(t));
  return out;
}

double magnetisation(const SampleSet& s, std::int64_t t) {
  double m = 0;
  for (std::int64_t i = 0; i < s.samples.cols(); ++i) m += s.samples.value(t, i);
  return m / double(s.samples.cols());
}

void check_against_exact(const ModelStatistics& st, const Exact& x, const char* label) {
  INFO(label);
  const auto N = x.mean.size();
  for (Eigen::Index i = 0; i < N; ++i) near(st.means.value(i), st.means.error(i), x.mean(i), 0.03, "mean");
  for (Eigen::Index i = 0; i < N; ++i)
    for (Eigen::Index j = i + 1; j < N; ++j) {
      near(st.connected.value(i, j), st.connected.error(i, j), x.connected(i, j), 0.03, "connected");
      near(st.second.value(i, j), st.second.error(i, j), x.second(i, j), 0.03, "second");
    }
  for (Eigen::Index k = 0; k <= N; ++k)
    if (x.pk(k) > 1e-3) near(st.active_count.value(k), st.active_count.error(k), x.pk(k), 0.02, "P(K)");
  near(st.energy.value, st.energy.error, x.E, 0.1, "energy");
  near(st.specific_heat.value, st.specific_heat.error, x.C, 0.1, "specific heat");
}

}  // namespace

TEST_CASE("rng: streams are reproducible, distinct and uniform") {
  Rng a(42, 3), b(42, 3), c(42, 4), d(43, 3);
  bool differ_c = false, differ_d = false;
  for (int i = 0; i < 100; ++i) {
    const auto x = a.next();
    CHECK(x == b.next());
    differ_c |= x != c.next();
    differ_d |= x != d.next();
  }
  CHECK(differ_c);
  CHECK(differ_d);
  // Uniform [0,1): mean 1/2, variance 1/12. below(7): each value with probability 1/7.
  Rng r(7, 0);
  const int n = 200000;
  double s = 0, s2 = 0;
  std::vector<int> counts(7, 0);
  for (int i = 0; i < n; ++i) {
    const double u = r.uniform();
    REQUIRE(u >= 0.0);
    REQUIRE(u < 1.0);
    s += u;
    s2 += u * u;
    const auto k = r.below(7);
    REQUIRE(k < 7);
    ++counts[std::size_t(k)];
  }
  CHECK(std::abs(s / n - 0.5) < 5 * std::sqrt(1.0 / 12 / n));
  CHECK(std::abs(s2 / n - 1.0 / 3) < 5 * std::sqrt(4.0 / 45 / n));  // Var(u^2) = 1/5 - 1/9
  for (int c7 : counts) CHECK(std::abs(c7 - n / 7.0) < 5 * std::sqrt(n * (1.0 / 7) * (6.0 / 7)));
}

TEST_CASE("chain diagnostics: AR(1) autocorrelation time, R-hat and batch means") {
  // AR(1) x_t = phi x_{t-1} + sqrt(1-phi^2) e_t has rho_t = phi^t and integrated time
  // tau = (1+phi)/(1-phi) (Sokal, "Monte Carlo methods in statistical mechanics", 1997; from memory).
  const double phi = 0.8;
  Rng rng(11, 0);
  auto gauss = [&] {  // Box-Muller
    const double u = 1.0 - rng.uniform(), w = rng.uniform();
    return std::sqrt(-2 * std::log(u)) * std::cos(2 * M_PI * w);
  };
  ChainSeries chains(4);
  for (auto& c : chains) {
    double x = gauss();
    for (int t = 0; t < 40000; ++t) {
      x = phi * x + std::sqrt(1 - phi * phi) * gauss();
      c.push_back(x);
    }
  }
  const AutocorrelationTime tau = autocorrelation_time(chains);
  CHECK(tau.tau == doctest::Approx(9.0).epsilon(0.15));
  CHECK(tau.ess == doctest::Approx(160000 / tau.tau));
  CHECK(split_rhat(chains) < 1.01);
  // Batch means: SE of the mean = sqrt(tau / n) for unit variance.
  const MeanWithError bm = batch_means(chains, 10);
  CHECK(bm.batches == 40);
  CHECK(bm.error == doctest::Approx(std::sqrt(9.0 / 160000)).epsilon(0.35));
  CHECK(std::abs(bm.mean) < 5 * bm.error);
  // Shifted chains do not mix: R-hat well above 1.1.
  chains[0] = std::vector<double>(chains[1].begin(), chains[1].end());
  for (double& x : chains[0]) x += 3;
  CHECK(split_rhat(chains) > 1.1);
  // Degenerate inputs.
  CHECK(split_rhat({{1, 1, 1, 1}, {1, 1, 1, 1}}) == 1.0);
  CHECK(std::isinf(split_rhat({{1, 1, 1, 1}, {2, 2, 2, 2}})));
  CHECK(std::isnan(split_rhat({{1, 2, 3}})));
}

TEST_CASE("sampler: random models in both conventions match exact enumeration") {
  for (Convention c : {Convention::binary, Convention::spin}) {
    const IsingModel m = random_model(9, c, c == Convention::binary ? 1 : 2, 1.0, c == Convention::binary ? 1.2 : 0.4);
    const Exact x = enumerate(m, 1.0);
    SamplerOptions o;
    o.samples = 40000;
    o.seed = 5;
    o.threads = 2;
    check_against_exact(model_statistics(m, o), x, "gibbs sequential");
    o.method = "metropolis";
    o.scan = "random";
    o.storage = "sparse";
    o.seed = 6;
    const ModelStatistics st = model_statistics(m, o);
    CHECK(st.diagnostics.storage == "sparse");
    check_against_exact(st, x, "metropolis random sparse");
    // At another temperature.
    o.temperature = 2.0;
    check_against_exact(model_statistics(m, o), enumerate(m, 2.0), "T = 2");
  }
}

TEST_CASE("sampler: 1D chain correlations match the transfer matrix") {
  // Sheet §3.5: open chain <s_i s_{i+r}> = tanh(K)^r; ring of N: (t^r + t^{N-r}) / (1 + t^N).
  const double K = 0.7, t = std::tanh(K);
  SamplerOptions o;
  o.samples = 40000;
  o.seed = 9;
  const ModelStatistics open = model_statistics(chain_model(12, K, false), o);
  for (int r = 1; r <= 4; ++r)
    near(open.second.value(3, 3 + r), open.second.error(3, 3 + r), std::pow(t, r), 0.03, "open chain");
  const int N = 10;
  o.storage = "sparse";
  const ModelStatistics ring = model_statistics(chain_model(N, K, true), o);
  CHECK(ring.diagnostics.storage == "sparse");
  CHECK(std::abs((std::pow(t, 3) + std::pow(t, 7)) / (1 + std::pow(t, 10)) - 0.248587049985) < 1e-11);  // computed value
  for (int r = 1; r <= 5; ++r) {
    const double exact = (std::pow(t, r) + std::pow(t, N - r)) / (1 + std::pow(t, N));
    near(ring.second.value(0, r), ring.second.error(0, r), exact, 0.03, "ring");
    near(ring.second.value(5, (5 + r) % N), ring.second.error(5, (5 + r) % N), exact, 0.03, "ring");
  }
}

TEST_CASE("sampler: 4x4 torus at K_c matches the exact values") {
  // Sheet §3.2/§3.4 (Kaufman / brute force): u = -1.5656237876, c = 0.7832668259,
  // <|m|> = 0.8438604448, <m^2> = 0.7613589086 at K_c = ln(1+sqrt 2)/2.
  const double Kc = 0.5 * std::log(1 + std::sqrt(2.0));
  const IsingModel m = torus(4, Kc);
  const Exact x = enumerate(m, 1.0);  // and our own enumeration agrees with Kaufman's values
  CHECK(x.E / (16 * Kc) == doctest::Approx(-1.5656237876).epsilon(1e-9));
  CHECK(x.C == doctest::Approx(0.7832668259).epsilon(1e-9));
  for (const char* scan : {"sequential", "coloured"})
    for (const char* method : {"gibbs", "metropolis"}) {
      if (std::string(scan) == "sequential" && std::string(method) == "metropolis") continue;
      INFO(scan << " " << method);
      SamplerOptions o;
      o.samples = 40000;
      o.seed = 3;
      o.threads = 2;
      o.scan = scan;
      o.method = method;
      o.storage = "sparse";  // (a 4x4 torus is denser than the automatic threshold)
      const ModelStatistics st = model_statistics(m, o);
      CHECK(st.diagnostics.storage == "sparse");
      near(st.energy.value / (16 * Kc), st.energy.error / (16 * Kc), -1.5656237876, 0.02, "u");
      near(st.specific_heat.value, st.specific_heat.error, 0.7832668259, 0.05, "c");
      const SampleSet s = sample(m, o);
      const auto am = batch_means(per_chain(s, o.chains, [&](std::int64_t t) { return std::abs(magnetisation(s, t)); }), 8);
      const auto m2 = batch_means(per_chain(s, o.chains, [&](std::int64_t t) { return std::pow(magnetisation(s, t), 2); }), 8);
      near(am.mean, am.error, 0.8438604448, 0.02, "<|m|>");
      near(m2.mean, m2.error, 0.7613589086, 0.02, "<m^2>");
    }
}

TEST_CASE("sampler: 32x32 torus against Onsager") {
  // Sheet §3.1 infinite-lattice values. Finite-size corrections at L = 32 are exponentially small
  // in L / xi away from K_c (xi of order one lattice spacing here); we allow 0.002 for them on top
  // of 5 standard errors.
  const double allowance = 0.002;
  for (const char* scan : {"sequential", "coloured"}) {
  INFO(scan);
  SamplerOptions o;
  o.scan = scan;
  o.samples = 2000;
  o.chains = 4;
  o.threads = 2;
  o.seed = 21;
  {
    // Ordered phase, K = 0.6: spontaneous magnetisation (1 - sinh^-4(2K))^(1/8) = 0.973608667440301
    // and u = -1.90908617768408. A cold start keeps the chain in one of the two phases.
    const double K = 0.6;
    CHECK(std::pow(1 - std::pow(std::sinh(2 * K), -4), 0.125) == doctest::Approx(0.973608667440301));
    o.start = "active";
    const SampleSet s = sample(torus(32, K), o);
    CHECK(s.diagnostics.storage == "sparse");
    const auto am = batch_means(per_chain(s, o.chains, [&](std::int64_t t) { return std::abs(magnetisation(s, t)); }), 8);
    const auto u = batch_means(per_chain(s, o.chains, [&](std::int64_t t) { return s.energies[std::size_t(t)] / (1024 * K); }), 8);
    CHECK(std::abs(am.mean - 0.973608667440301) <= 5 * am.error + allowance);
    CHECK(std::abs(u.mean - -1.90908617768408) <= 5 * u.error + allowance);
    CHECK(am.error < 0.002);
    CHECK(u.error < 0.002);
  }
  {
    // Disordered phase, K = 0.2: u = -0.428228833240348.
    const double K = 0.2;
    o.start = "random";
    const SampleSet s = sample(torus(32, K), o);
    const auto u = batch_means(per_chain(s, o.chains, [&](std::int64_t t) { return s.energies[std::size_t(t)] / (1024 * K); }), 8);
    CHECK(std::abs(u.mean - -0.428228833240348) <= 5 * u.error + allowance);
    CHECK(u.error < 0.002);
  }
  }
}

TEST_CASE("sampler: coloured scan matches exact enumeration on graphs with several colours") {
  // An odd ring with random fields and couplings of both signs needs 3 colours (greedy: 0,1,0,..,2);
  // a random dense model gets one colour per unit, and dense storage takes the ordered kernel.
  Rng rng(31, 0);
  IsingModel ring = chain_model(9, 0.0, true);  // couplings set below
  for (int i = 0; i < 9; ++i) {
    ring.fields(i) = 2 * rng.uniform() - 1;
    const int j = (i + 1) % 9;
    ring.couplings(i, j) = ring.couplings(j, i) = 1.6 * rng.uniform() - 0.8;
  }
  IsingModel dense = random_model(8, Convention::binary, 7, 1.0, 1.0);
  for (const IsingModel* m : {&ring, &dense})
    for (const char* storage : {"sparse", "dense"})
      for (const char* method : {"gibbs", "metropolis"}) {
        INFO(storage << " " << method << " units " << m->size());
        SamplerOptions o;
        o.samples = 40000;
        o.seed = 13;
        o.threads = 2;
        o.scan = "coloured";
        o.storage = storage;
        o.method = method;
        const ModelStatistics st = model_statistics(*m, o);
        CHECK(st.diagnostics.scan == "coloured");
        CHECK(st.diagnostics.storage == storage);
        check_against_exact(st, enumerate(*m, 1.0), "coloured");
      }
}

TEST_CASE("sampler: uniform binary lattice with a field, coloured and sequential: enumeration and reproducibility") {
  // One coupling value and one field value: the batched kernel with tabulated thresholds (used by
  // the coloured scan and, in unit order, by the sequential scan), here with neighbour sums S in
  // [0, 4] (binary) and a field.
  IsingModel m = torus(4, 0.5);
  m.convention = Convention::binary;
  m.fields = Eigen::VectorXd::Constant(16, -1.0);
  const Exact x = enumerate(m, 1.0);
  for (const char* scan : {"coloured", "sequential"})
  for (const char* method : {"gibbs", "metropolis"}) {
    INFO(scan << " " << method);
    SamplerOptions o;
    o.samples = 40000;
    o.seed = 15;
    o.threads = 2;
    o.scan = scan;
    o.method = method;
    o.storage = "sparse";
    check_against_exact(model_statistics(m, o), x, "uniform binary lattice");
    // Same seed, any thread count, with and without tempering: identical samples.
    o.samples = 600;
    for (bool tempering : {false, true}) {
      if (tempering) o.temperature_ladder = std::vector<double>{1.0, 1.5, 2.5};
      o.threads = 1;
      const SampleSet a = sample(m, o);
      o.threads = 2;
      const SampleSet b = sample(m, o);
      CHECK(std::equal(a.samples.data(), a.samples.data() + a.samples.rows() * 16, b.samples.data()));
      CHECK(a.energies == b.energies);
      for (std::int64_t t = 0; t < 20; ++t)
        CHECK(a.energies[std::size_t(t)] == doctest::Approx(energy(m, a.samples.row(t))).epsilon(1e-12));
    }
  }
}

TEST_CASE("sampler: coloured scan at another temperature and with parallel tempering") {
  const IsingModel m = torus(4, 1.0);
  SamplerOptions o;
  o.samples = 40000;
  o.seed = 14;
  o.scan = "coloured";
  o.storage = "sparse";
  o.temperature = 2.5;
  check_against_exact(model_statistics(m, o), enumerate(m, 2.5), "coloured T = 2.5");
  o.temperature = 1.0;
  o.temperature_ladder = std::vector<double>{1.0, 1.6, 2.5, 4.0};
  o.thin = 2;
  check_against_exact(model_statistics(m, o), enumerate(m, 1.0), "coloured tempering");
}

TEST_CASE("sampler: Curie-Weiss <m^2> matches the finite-N sum") {
  // Sheet §3.6: Z = sum_k C(N,k) exp(beta (J M^2 / (2N) + h M)), M = 2k - N. The pairwise form
  // sum_{i<j} (J/N) s_i s_j = J (M^2 - N) / (2N) differs by a constant only.
  const int N = 40;
  for (double beta : {0.5, 1.0, 1.5}) {
    double Z = 0, m2 = 0;
    for (int k = 0; k <= N; ++k) {
      const double M = 2 * k - N;
      const double w = std::exp(std::lgamma(N + 1) - std::lgamma(k + 1) - std::lgamma(N - k + 1) + beta * M * M / (2.0 * N));
      Z += w;
      m2 += w * (M / N) * (M / N);
    }
    m2 /= Z;
    SamplerOptions o;
    o.samples = 20000;
    o.seed = 17;
    o.method = "metropolis";
    o.scan = "random";
    o.temperature = 1.0 / beta;
    const SampleSet s = sample(curie_weiss(N, 1.0, 0.0), o);
    const auto est = batch_means(per_chain(s, o.chains, [&](std::int64_t t) { return std::pow(magnetisation(s, t), 2); }), 8);
    INFO("beta " << beta << ": " << est.mean << " +- " << est.error << " exact " << m2);
    CHECK(std::abs(est.mean - m2) <= 5 * est.error);
    CHECK(est.error < 0.02);
  }
}

TEST_CASE("sampler: the same seed gives the same samples for any thread count") {
  const IsingModel m = random_model(30, Convention::binary, 4, 1.0, 0.3);
  for (const char* scan : {"sequential", "coloured"}) {
  INFO(scan);
  SamplerOptions o;
  o.samples = 1000;
  o.seed = 99;
  o.scan = scan;
  o.storage = std::string(scan) == "coloured" ? "sparse" : "auto";
  for (bool tempering : {false, true}) {
    if (tempering) o.temperature_ladder = std::vector<double>{1.0, 1.5, 2.0};
    o.threads = 1;
    const SampleSet a = sample(m, o);
    o.threads = 2;
    const SampleSet b = sample(m, o);
    REQUIRE(a.samples.rows() == b.samples.rows());
    CHECK(std::equal(a.samples.data(), a.samples.data() + a.samples.rows() * 30, b.samples.data()));
    CHECK(a.energies == b.energies);
    CHECK(a.chain == b.chain);
    o.seed = 100;
    const SampleSet c = sample(m, o);
    CHECK(!std::equal(a.samples.data(), a.samples.data() + a.samples.rows() * 30, c.samples.data()));
    o.seed = 99;
  }
  }
}

TEST_CASE("sampler: energies are those of the kept states; Gibbs and Metropolis agree") {
  const IsingModel m = random_model(40, Convention::spin, 8, 0.5, 0.2);
  SamplerOptions o;
  o.samples = 20000;
  o.seed = 1;
  const ModelStatistics g = model_statistics(m, o);
  o.method = "metropolis";
  const ModelStatistics mh = model_statistics(m, o);
  auto agree = [](double a, double ea, double b, double eb) {
    return std::abs(a - b) <= 5 * std::sqrt(ea * ea + eb * eb);
  };
  CHECK(agree(g.energy.value, g.energy.error, mh.energy.value, mh.energy.error));
  CHECK(agree(g.specific_heat.value, g.specific_heat.error, mh.specific_heat.value, mh.specific_heat.error));
  for (int i = 0; i < 40; ++i) CHECK(agree(g.means.value(i), g.means.error(i), mh.means.value(i), mh.means.error(i)));
  CHECK(mh.diagnostics.mean_acceptance_rate > g.diagnostics.mean_acceptance_rate);  // Metropolis flips more
  const SampleSet s = sample(m, o);
  // Dense couplings run on integer fields: the sampled model is (h, J) rounded to multiples of
  // the resolution 2^-s, s the largest <= 40 with 2^s max_i (|h_i| + sum_j |J_ij|) <= 2^30 - (N + 1)
  // (integer_fields.hpp), and the kept energies are that model's, exactly. Against the model as
  // given they differ by at most (N + N (N - 1) / 2) 2^-(s+1) (each term moved by <= 2^-(s+1)).
  const double resolution = s.diagnostics.field_resolution;
  REQUIRE(resolution > 0);
  double widest = 0;
  for (int i = 0; i < 40; ++i) widest = std::max(widest, std::abs(m.fields(i)) + m.couplings.row(i).cwiseAbs().sum());
  int scale = 40;
  while (std::ldexp(widest, scale) > std::ldexp(1.0, 30) - 41) --scale;
  CHECK(resolution == std::ldexp(1.0, -scale));
  IsingModel rounded = m;
  auto round_to_grid = [&](double x) { return std::ldexp(double(std::lround(std::ldexp(x, scale))), -scale); };
  rounded.fields = m.fields.unaryExpr(round_to_grid);
  rounded.couplings = m.couplings.unaryExpr(round_to_grid);
  const double bound = (40 + 40 * 39 / 2) * resolution / 2;
  for (std::int64_t t = 0; t < 50; ++t) {
    CHECK(s.energies[std::size_t(t)] == doctest::Approx(energy(rounded, s.samples.row(t))).epsilon(1e-12));
    CHECK(std::abs(s.energies[std::size_t(t)] - energy(m, s.samples.row(t))) <= bound);
  }
  // Sparse storage keeps double fields: the energies are the given model's.
  o.storage = "sparse";
  const SampleSet sparse = sample(m, o);
  CHECK(sparse.diagnostics.field_resolution == 0);
  for (std::int64_t t = 0; t < 50; ++t)
    CHECK(sparse.energies[std::size_t(t)] == doctest::Approx(energy(m, sparse.samples.row(t))).epsilon(1e-10));
}

TEST_CASE("sampler: parallel tempering crosses between the two phases of a cold ferromagnet") {
  // N = 8, all pairs J = 0.4: the barrier between the all-up and all-down states is 12.8, so a
  // single-flip chain at T = 1 practically never crosses; a ladder up to T = 12 does.
  const IsingModel m = curie_weiss(8, 3.2, 0.0);
  const Exact x = enumerate(m, 1.0);
  SamplerOptions o;
  o.samples = 16000;
  o.thin = 5;
  o.seed = 12;
  o.threads = 2;
  o.temperature_ladder = std::vector<double>{1.0, 1.5, 2.2, 3.2, 4.5, 6.5, 9.0, 12.0};
  const ModelStatistics st = model_statistics(m, o);
  check_against_exact(st, x, "parallel tempering");
  CHECK(st.diagnostics.swap_acceptance.size() == 7);
  for (double a : st.diagnostics.swap_acceptance) CHECK(a > 0.05);
  CHECK(st.diagnostics.rhat_magnetisation < 1.1);
  const SampleSet s = sample(m, o);
  const auto mag = per_chain(s, o.chains, [&](std::int64_t t) { return magnetisation(s, t); });
  for (const auto& c : mag) {
    CHECK(*std::max_element(c.begin(), c.end()) > 0.5);
    CHECK(*std::min_element(c.begin(), c.end()) < -0.5);
  }
}

TEST_CASE("sampler: R-hat near 1 for mixed chains and above 1.1 for stuck chains") {
  SamplerOptions o;
  o.samples = 8000;
  o.seed = 2;
  const SampleSet mixed = sample(random_model(20, Convention::spin, 3, 0.5, 0.2), o);
  CHECK(mixed.diagnostics.rhat_energy < 1.05);
  CHECK(mixed.diagnostics.rhat_magnetisation < 1.05);
  CHECK(mixed.diagnostics.ess_energy > 1000);
  // A colder ferromagnet than above (barrier 32) without tempering: each chain stays in the phase
  // it fell into.
  o.method = "metropolis";
  o.chains = 8;
  o.burn_in = 100;
  o.thin = 1;
  const SampleSet stuck = sample(curie_weiss(8, 8.0, 0.0), o);
  CHECK(stuck.diagnostics.rhat_magnetisation > 1.1);
}

TEST_CASE("sampler: automatic burn-in and thinning follow the energy autocorrelation time") {
  SamplerOptions o;
  o.samples = 4000;
  o.seed = 4;
  const double Kc = 0.5 * std::log(1 + std::sqrt(2.0));
  const SampleSet slow = sample(torus(8, Kc), o);
  const SampleSet fast = sample(torus(8, 0.1), o);
  CHECK(slow.diagnostics.automatic_burn_in);
  CHECK(slow.diagnostics.pilot_sweeps >= 50 * slow.diagnostics.pilot_tau_energy);
  CHECK(slow.diagnostics.burn_in == slow.diagnostics.pilot_sweeps);
  CHECK(slow.diagnostics.thin == std::int64_t(std::ceil(slow.diagnostics.pilot_tau_energy)));
  CHECK(slow.diagnostics.thin > fast.diagnostics.thin);
  // Thinned samples are nearly independent: tau per kept sample is small.
  CHECK(slow.diagnostics.tau_energy < 3);
  CHECK(slow.diagnostics.warnings.empty());
  // A pilot capped too short gives a warning instead of running on.
  o.pilot_sweeps = 8;
  o.max_pilot_sweeps = 8;
  const SampleSet capped = sample(curie_weiss(60, 1.0, 0.0), o);
  CHECK(capped.diagnostics.warnings.size() == 1);
}

TEST_CASE("temperature scan: 4x4 torus energy and specific heat match enumeration") {
  const IsingModel m = torus(4, 1.0);
  const std::vector<double> temps{3.5, 1.5, 2.0, 2.5, 3.0};  // unsorted on purpose
  SamplerOptions o;
  o.samples = 20000;
  o.seed = 8;
  o.threads = 2;
  for (bool pt : {false, true}) {
    INFO("parallel tempering " << pt);
    const TemperatureScan scan = temperature_scan(m, temps, o, pt);
    REQUIRE(scan.temperatures.size() == 5);
    CHECK(scan.temperatures.front() == 1.5);
    std::vector<double> exact_c;
    for (std::size_t i = 0; i < 5; ++i) {
      const Exact x = enumerate(m, scan.temperatures[i]);
      exact_c.push_back(x.C);
      near(scan.energy[i], scan.energy_error[i], x.E, 0.2, "E(T)");
      near(scan.specific_heat[i], scan.specific_heat_error[i], x.C, 0.05, "C(T)");
    }
    // Exact C: 0.200, 0.606, ~0.81, 0.603, 0.376: the peak is the middle grid point, and the exact
    // maximum of C(T) for the 4x4 torus lies near T = 2.45 (enumeration on a fine grid).
    CHECK(scan.peak_index == 2);
    CHECK(!scan.peak_at_edge);
    CHECK(scan.peak_temperature > 2.2);
    CHECK(scan.peak_temperature < 2.8);
    CHECK(scan.runs.size() == (pt ? 1u : 5u));
    if (pt) CHECK(scan.swap_acceptance.size() == 4);
  }
}

TEST_CASE("sampler: bad input and interruption") {
  const IsingModel m = random_model(5, Convention::spin, 1, 0.5, 0.5);
  SamplerOptions o;
  o.samples = 100;
  auto bad = [&](auto edit) {
    SamplerOptions b = o;
    edit(b);
    CHECK_THROWS_AS(sample(m, b), InputError);
  };
  bad([](SamplerOptions& b) { b.method = "wolff"; });
  bad([](SamplerOptions& b) { b.scan = "diagonal"; });
  bad([](SamplerOptions& b) { b.storage = "packed"; });
  bad([](SamplerOptions& b) { b.start = "hot"; });
  bad([](SamplerOptions& b) { b.chains = 0; });
  bad([](SamplerOptions& b) { b.samples = 3; });
  bad([](SamplerOptions& b) { b.thin = 0; });
  bad([](SamplerOptions& b) { b.temperature = 0; });
  bad([](SamplerOptions& b) { b.temperature = std::nan(""); });
  bad([](SamplerOptions& b) { b.temperature_ladder = std::vector<double>{1.0, -2.0}; });
  IsingModel asym = m;
  asym.couplings(0, 1) += 0.1;
  CHECK_THROWS_WITH_AS(sample(asym, o), "model couplings: row 1, column 2: couplings are not symmetric", InputError);
  CHECK_THROWS_AS(temperature_scan(m, {}, o), InputError);
  int calls = 0;
  o.samples = 1000000;
  o.progress = [&](const Progress& p) {
    ++calls;
    CHECK(p.total > 0);
    return false;
  };
  CHECK_THROWS_AS(sample(m, o), Interrupted);
  CHECK(calls == 1);
}
