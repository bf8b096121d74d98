"""Block-bootstrap noise against the exact variance of the mean of a two-state Markov chain.

Reference (textbook, e.g. Brockwell & Davis 1991, long-run variance of a stationary sequence): a
symmetric two-state chain that keeps its state with probability q has lag-k autocorrelation
rho^k with rho = 2q - 1, so Var(mean of T steps) ~ p(1-p)/T * (1 + rho)/(1 - rho) for large T.
"""
import numpy as np
import pytest

import spinfer


def markov_chain(rng, T, units, stay):
    X = np.empty((T, units), np.uint8)
    X[0] = rng.random(units) < 0.5
    flips = rng.random((T, units)) > stay
    for t in range(1, T):
        X[t] = X[t - 1] ^ flips[t]
    return X


def test_iid_data_give_the_binomial_standard_error(rng):
    T = 20000
    X = (rng.random((T, 4)) < 0.3).astype(np.uint8)
    noise = spinfer.bootstrap_noise(X, replicates=400, block_length=1, seed=3)
    p = X.mean(axis=0)
    expected = np.sqrt(p * (1 - p) / T)
    # A bootstrap SD from R replicates has relative error ~ 1/sqrt(2R) = 3.5%; allow 5 of those.
    np.testing.assert_allclose(noise["mean_se"], expected, rtol=0.18)


def test_blocks_capture_autocorrelation(rng):
    T, stay = 40000, 0.9
    X = markov_chain(rng, T, 3, stay)
    rho = 2 * stay - 1
    expected = np.sqrt(0.25 / T * (1 + rho) / (1 - rho))
    auto = spinfer.bootstrap_noise(X, replicates=300, seed=5)
    # integrated autocorrelation time of the population count: 1/2 + sum_k rho^k = 4.5 bins
    assert 30 <= auto["block_length"] <= 60   # ten times that
    np.testing.assert_allclose(auto["mean_se"], expected, rtol=0.15)
    naive = spinfer.bootstrap_noise(X, replicates=300, block_length=1, seed=5)
    assert np.all(naive["mean_se"] < 0.6 * expected)   # iid resampling underestimates the noise


def test_same_seed_same_result_for_any_thread_count(rng):
    X = (rng.random((3000, 5)) < 0.2).astype(np.uint8)
    a = spinfer.bootstrap_noise(X, replicates=20, seed=9, threads=1, triples=[(0, 1, 2)])
    b = spinfer.bootstrap_noise(X, replicates=20, seed=9, threads=2, triples=[(0, 1, 2)])
    np.testing.assert_allclose(a["connected_se"], b["connected_se"], rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(a["triplet_se"], b["triplet_se"], rtol=1e-12, atol=1e-15)


def test_too_few_replicates_is_an_error(rng):
    with pytest.raises(ValueError, match="at least 2 replicates"):
        spinfer.bootstrap_noise((rng.random((10, 2)) < 0.5), replicates=1)
