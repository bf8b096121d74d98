// Convention conversion of model parameters, checked by exact enumeration of all 2^N states:
// the binary and spin parameterisations must give identical probabilities (
// change of variables s = 2x - 1).
#include <doctest/doctest.h>

#include <cmath>
#include <random>

#include "spinfer/model.hpp"

using namespace spinfer;

namespace {

IsingModel random_model(int N, Convention c, unsigned seed) {
  std::mt19937_64 gen(seed);
  std::normal_distribution<double> g(0.0, 0.7);
  IsingModel m;
  m.convention = c;
  m.fields = Eigen::VectorXd(N);
  m.couplings = Eigen::MatrixXd::Zero(N, N);
  for (int i = 0; i < N; ++i) {
    m.fields(i) = g(gen);
    for (int j = i + 1; j < N; ++j) m.couplings(i, j) = m.couplings(j, i) = g(gen);
  }
  return m;
}

// log Z and the normalised probability of every state, by brute force.
std::vector<double> probabilities(const IsingModel& m, double* log_z) {
  const int N = int(m.size());
  std::vector<double> logp(std::size_t(1) << N);
  std::vector<std::uint8_t> s(std::size_t(N), 0);
  double mx = -1e300;
  for (std::size_t k = 0; k < logp.size(); ++k) {
    for (int i = 0; i < N; ++i) s[std::size_t(i)] = (k >> i) & 1;
    logp[k] = -energy(m, s.data());
    mx = std::max(mx, logp[k]);
  }
  double z = 0;
  for (double v : logp) z += std::exp(v - mx);
  *log_z = mx + std::log(z);
  for (double& v : logp) v = std::exp(v - *log_z);
  return logp;
}

}  // namespace

TEST_CASE("binary and spin parameterisations give identical probabilities for every state") {
  for (int N : {2, 5, 9}) {
    for (Convention from : {Convention::binary, Convention::spin}) {
      const IsingModel a = random_model(N, from, 17u + unsigned(N));
      const Convention to = from == Convention::binary ? Convention::spin : Convention::binary;
      const IsingModel b = convert_model(a, to);
      double lza = 0, lzb = 0;
      const auto pa = probabilities(a, &lza), pb = probabilities(b, &lzb);
      double worst = 0;
      for (std::size_t k = 0; k < pa.size(); ++k) worst = std::max(worst, std::abs(pa[k] - pb[k]));
      CHECK(worst < 1e-12);
      CHECK(lzb - lza == doctest::Approx(log_partition_shift(a, to)).epsilon(1e-12));
      // Round trip is exact up to rounding.
      const IsingModel back = convert_model(b, from);
      CHECK((back.couplings - a.couplings).cwiseAbs().maxCoeff() < 1e-12);
      CHECK((back.fields - a.fields).cwiseAbs().maxCoeff() < 1e-12);
    }
  }
}

TEST_CASE("validate_model rejects asymmetric couplings and non-zero diagonals") {
  IsingModel m = random_model(3, Convention::spin, 3);
  validate_model(m);
  m.couplings(0, 1) += 0.1;
  CHECK_THROWS_AS(validate_model(m), std::invalid_argument);
  m = random_model(3, Convention::spin, 3);
  m.couplings(2, 2) = 1;
  CHECK_THROWS_AS(validate_model(m), std::invalid_argument);
}
