"""Model-versus-data check.

References: for a correct model and independent samples, each z-score is ~N(0, 1), so the
normalised error eps = sqrt(mean z^2) is distributed as sqrt(chi2_k / k) (scipy.stats.chi2) and
about 95% of |z| fall below 2; P(K) of independent units is the Poisson-binomial distribution,
checked against brute-force enumeration in numpy.
"""
import itertools

import numpy as np
import pytest
from scipy import stats as sps

import spinfer


def random_model(rng, n, scale=0.6):
    J = np.triu(rng.normal(0, scale, (n, n)), 1)
    J = J + J.T
    return spinfer.IsingModel(fields=rng.normal(-0.8, 0.4, n), couplings=J, convention="binary")


def exact_samples(model, T, rng):
    """iid samples drawn from the exact state probabilities (numpy.random.Generator.choice)."""
    p = spinfer.exact_state_probabilities(model)
    idx = rng.choice(len(p), size=T, p=p / p.sum())
    n = model.n_units
    return ((idx[:, None] >> np.arange(n)) & 1).astype(np.uint8)


def test_poisson_binomial_matches_enumeration(rng):
    p = rng.random(6)
    expected = np.zeros(7)
    for x in itertools.product([0, 1], repeat=6):
        x = np.array(x)
        expected[x.sum()] += np.prod(np.where(x == 1, p, 1 - p))
    np.testing.assert_allclose(_poisson_binomial(p), expected, atol=1e-15)


def _poisson_binomial(p):
    return np.asarray(spinfer._core.poisson_binomial(np.asarray(p, float)))


def test_true_model_fits_within_noise_and_independent_model_does_not(rng):
    model = random_model(rng, 8)
    X = exact_samples(model, 20000, rng)
    res = spinfer.check(model, X, block_length=1, replicates=200, triplets=40, seed=1)
    assert res["model_statistics"] == "exact"
    s = res["summary"]
    k = s["correlations"]["count"]
    assert k == 28
    # eps^2 ~ chi2_k / k under a correct model (with a bootstrap estimate of sigma, whose own
    # relative error ~ 1/sqrt(2 R) = 5% widens it slightly): central 99.8% interval, widened 10%.
    lo, hi = np.sqrt(sps.chi2.ppf([0.001, 0.999], k) / k)
    assert 0.9 * lo < s["correlations"]["normalised_error"] < 1.1 * hi
    assert s["correlations"]["within_2sigma"] >= 0.75
    assert s["correlations"]["normalised_error_independent"] > 5
    assert s["means"]["normalised_error"] < 2.5
    assert res["log_likelihood_per_sample"]["exact"] is True
    assert res["log_likelihood_per_sample"]["model"] > res["log_likelihood_per_sample"]["independent"]


def test_wrong_model_is_flagged(rng):
    model = random_model(rng, 7)
    X = exact_samples(model, 20000, rng)
    wrong = spinfer.IsingModel(fields=model.fields, couplings=0.5 * model.couplings, convention="binary")
    res = spinfer.check(wrong, X, block_length=1, replicates=100, triplets=0, seed=2)
    assert res["summary"]["correlations"]["normalised_error"] > 3


def test_sampled_model_statistics_agree_with_exact(rng):
    model = random_model(rng, 9, scale=0.4)
    X = exact_samples(model, 5000, rng)
    exact = spinfer.check(model, X, triplets=20, replicates=30, seed=3)
    mc = spinfer.check(model, X, triplets=20, replicates=30, seed=3, exact_limit=0, model_samples=40000)
    assert mc["model_statistics"] == "sampled"
    for key in ("means", "correlations", "triplets"):
        m = np.array(mc[key]["model"], float)
        se = np.array(mc[key]["model_se"], float)
        e = np.array(exact[key]["model"], float)
        assert np.all(se > 0)
        assert np.all(np.abs(m - e) < 5 * se + 1e-12), key      # within 5 Monte Carlo SE


def test_spin_data_are_compared_in_spin_units(rng):
    model = random_model(rng, 6)
    X = exact_samples(model, 3000, rng)
    a = spinfer.check(model, X, triplets=5, replicates=20, seed=4)
    b = spinfer.check(model, 2 * X.astype(np.int8) - 1, triplets=5, replicates=20, seed=4, copy=True)
    assert b["convention"] == "spin"
    np.testing.assert_allclose(np.array(b["correlations"]["model"]), 4 * np.array(a["correlations"]["model"]), atol=1e-12)
    np.testing.assert_allclose(b["summary"]["correlations"]["normalised_error"],
                               a["summary"]["correlations"]["normalised_error"], rtol=1e-9)


def test_shape_mismatch_is_a_value_error(rng):
    model = random_model(rng, 5)
    with pytest.raises(ValueError, match="5 units but the data have 4"):
        spinfer.check(model, (rng.random((100, 4)) < 0.3).astype(np.uint8))


def test_check_table_is_a_dataframe(rng):
    pytest.importorskip("pandas")
    model = random_model(rng, 5)
    X = exact_samples(model, 2000, rng)
    t = spinfer.check_table(spinfer.check(model, X, triplets=5, replicates=20))
    assert list(t.index) == ["means", "correlations", "triplets", "active_counts"]
