"""Exact enumeration against a brute-force numpy reference: a plain Python loop over
itertools.product of all states (N <= 8), computing log Z, moments, P(K), entropy and specific heat
directly from their definitions."""
import itertools
import math

import numpy as np
import pytest

import spinfer


def random_model(n, seed, scale=1.0, convention="spin"):
    rng = np.random.default_rng(seed)
    h = rng.normal(0, 0.5, n)
    J = np.triu(rng.normal(0, scale / math.sqrt(n), (n, n)), 1)
    return h, J + J.T


def brute_force(h, J, convention, temperature):
    """Definitions, one state at a time (no vectorisation shortcuts)."""
    n = len(h)
    lo = 0.0 if convention == "binary" else -1.0
    states, energies = [], []
    for bits in itertools.product([0, 1], repeat=n):
        v = np.array([1.0 if b else lo for b in bits])
        e = -sum(h[i] * v[i] for i in range(n)) - sum(
            J[i, j] * v[i] * v[j] for i in range(n) for j in range(i + 1, n))
        states.append(np.array(bits, dtype=float))
        energies.append(e)
    E = np.array(energies)
    X = np.array(states)  # active bits
    a = -E / temperature
    log_z = a.max() + math.log(np.exp(a - a.max()).sum())
    p = np.exp(a - log_z)
    mean_x = p @ X
    second_x = (X * p[:, None]).T @ X
    k = X.sum(axis=1).astype(int)
    pk = np.bincount(k, weights=p, minlength=n + 1)
    entropy = -(p * np.log(p)).sum()
    mean_e = p @ E
    var_e = p @ (E - mean_e) ** 2
    return dict(log_z=log_z, p=p, mean_x=mean_x, second_x=second_x, pk=pk, entropy=entropy,
                mean_e=mean_e, c=var_e / (n * temperature ** 2), X=X)


@pytest.mark.parametrize("convention", ["spin", "binary"])
@pytest.mark.parametrize("temperature", [1.0, 0.6, 2.5])
def test_exact_statistics_match_brute_force(convention, temperature):
    h, J = random_model(7, seed=3, scale=1.5)
    ref = brute_force(h, J, convention, temperature)
    s = spinfer.exact_statistics(h, J, convention, temperature=temperature, moments_convention="binary")
    assert s["log_partition"] == pytest.approx(ref["log_z"], rel=1e-13)
    np.testing.assert_allclose(s["mean"], ref["mean_x"], atol=1e-13)
    np.testing.assert_allclose(s["second"], ref["second_x"], atol=1e-13)
    np.testing.assert_allclose(s["connected"], ref["second_x"] - np.outer(ref["mean_x"], ref["mean_x"]),
                               atol=1e-13)
    np.testing.assert_allclose(s["active_count"], ref["pk"], atol=1e-13)
    assert s["entropy"] == pytest.approx(ref["entropy"], rel=1e-12)
    assert s["mean_energy"] == pytest.approx(ref["mean_e"], rel=1e-12, abs=1e-12)
    assert s["specific_heat"] == pytest.approx(ref["c"], rel=1e-10)
    # Spin-convention moments: s = 2x - 1.
    sp = spinfer.exact_statistics(h, J, convention, temperature=temperature, moments_convention="spin")
    S = 2 * ref["X"] - 1
    np.testing.assert_allclose(sp["mean"], ref["p"] @ S, atol=1e-13)
    np.testing.assert_allclose(sp["second"], (S * ref["p"][:, None]).T @ S, atol=1e-13)
    # State probabilities: bit i of the index k is unit i (itertools.product puts unit 0 first,
    # i.e. most significant, so reverse the bit order).
    p = spinfer.exact_state_probabilities(h, J, convention, temperature=temperature)
    order = [int("".join(str(int(b)) for b in row[::-1]), 2) for row in ref["X"]]
    np.testing.assert_allclose(p[order], ref["p"], rtol=1e-12)


def test_log_likelihood_matches_numpy():
    h, J = random_model(6, seed=8)
    ref = brute_force(h, J, "binary", 1.0)
    rng = np.random.default_rng(1)
    rows = rng.integers(0, 64, 50)
    X = ref["X"][rows].astype(np.uint8)
    w = rng.random(50)
    expected = np.average(np.log(ref["p"][rows]), weights=w)
    model = spinfer.IsingModel(h, J, "binary")
    assert spinfer.exact_log_likelihood(model, X, weights=w) == pytest.approx(expected, rel=1e-12)
    # The same rows written as -1/+1 are the same states.
    assert spinfer.exact_log_likelihood(model, 2 * X.astype(np.int8) - 1, weights=w) == pytest.approx(
        expected, rel=1e-12)


def test_convention_twins_are_the_same_distribution():
    h, J = random_model(8, seed=4, scale=2.0)
    spin = spinfer.IsingModel(h, J, "spin")
    binary = spin.to_convention("binary")
    np.testing.assert_allclose(spinfer.exact_state_probabilities(binary),
                               spinfer.exact_state_probabilities(spin), rtol=1e-11, atol=1e-14)
    shift = spin.log_partition_shift("binary")
    assert spinfer.exact_log_partition(binary) - spinfer.exact_log_partition(spin) == pytest.approx(shift, abs=1e-12)
    # Round trip back to spin is exact up to rounding.
    back = binary.to_convention("spin")
    np.testing.assert_allclose(back.couplings, J, atol=1e-15)
    np.testing.assert_allclose(back.fields, h, atol=1e-14)


def test_exact_rejects_bad_input():
    with pytest.raises(ValueError, match="N <= 24"):
        spinfer.exact_log_partition(np.zeros(25), np.zeros((25, 25)))
    with pytest.raises(ValueError, match="temperature"):
        spinfer.exact_statistics(np.zeros(2), np.zeros((2, 2)), temperature=-1)
    with pytest.raises(ValueError, match="not symmetric"):
        spinfer.IsingModel(np.zeros(2), np.array([[0, 1.0], [0.5, 0]]))
    with pytest.raises(ValueError, match="diagonal"):
        spinfer.IsingModel(np.zeros(2), np.eye(2))
