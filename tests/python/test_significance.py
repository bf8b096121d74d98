"""Coupling significance: Benjamini-Hochberg against scipy.stats.false_discovery_control, the
circular-shift surrogate's invariants, and detection/false-positive behaviour on data drawn from
known models (fixed seeds)."""
import numpy as np
import pytest
from scipy import stats as sps

import spinfer


def test_benjamini_hochberg_matches_scipy(rng):
    for m in (1, 7, 200):
        p = rng.random(m) ** 3
        p[::5] = p[0]  # ties
        np.testing.assert_allclose(spinfer.benjamini_hochberg(p),
                                   sps.false_discovery_control(p, method="bh"), atol=1e-14)


def test_shift_surrogate_keeps_each_unit_and_breaks_synchrony(rng):
    T = 2000
    base = rng.random(T) < 0.2
    X = np.stack([base, base, rng.random(T) < 0.5], axis=1).astype(np.uint8)
    for rep in range(20):
        S, group = spinfer._core.circular_shift_surrogate(spinfer.as_matrix(X), 50, 3, rep)
        S = S.to_numpy()
        group = np.asarray(group)
        assert 0 < group.sum() < 3
        shifts = [k for k in range(50, T - 49) if np.array_equal(np.roll(X[:, group == 1], k, axis=0), S[:, group == 1])]
        assert shifts                                     # the shifted group moved as one block
        np.testing.assert_array_equal(S[:, group == 0], X[:, group == 0])
        if group[0] != group[1]:
            assert np.corrcoef(S[:, 0], S[:, 1])[0, 1] < 0.1   # the identical pair is decoupled
        else:
            np.testing.assert_array_equal(S[:, 0], S[:, 1])     # kept together


def chain_model(n=8, strong=1.0):
    J = np.zeros((n, n))
    for i in range(0, n - 1, 2):   # disjoint strongly coupled pairs (0,1), (2,3), ...
        J[i, i + 1] = J[i + 1, i] = strong
    return spinfer.IsingModel(fields=np.full(n, -0.3), couplings=J, convention="spin")


def test_true_couplings_are_found_and_null_pairs_mostly_not(rng):
    model = chain_model()
    X, _ = spinfer.sample(model.fields, model.couplings, "spin", 6000, seed=4, chains=4)
    res = spinfer.significance(X, "mean-field", bootstrap=60, nulls=15, seed=5, fdr=0.05, copy=True)
    sig = res["significant"].astype(bool)
    truth = model.couplings != 0
    iu = np.triu_indices(8, 1)
    assert sig[iu][truth[iu]].all()                            # all 4 true pairs detected
    false = sig[iu][~truth[iu]].sum()
    assert false <= 2                                          # of 24 null pairs; FDR 5%
    lo, hi = res["lower"], res["upper"]
    assert np.all(lo[iu] <= res["estimate"][iu]) and np.all(res["estimate"][iu] <= hi[iu])
    table = spinfer.significance_table(res)
    assert len(table) == 28 and table["significant"].sum() == sig[iu].sum()


def test_independent_units_give_few_discoveries(rng):
    X = (rng.random((4000, 10)) < 0.3).astype(np.uint8)
    res = spinfer.significance(X, "mean-field", bootstrap=20, nulls=20, seed=6, fdr=0.1)
    iu = np.triu_indices(10, 1)
    assert res["significant"][iu].sum() <= 3
    # Under the null the p-values are roughly uniform: their mean is near 1/2 (45 pairs).
    assert 0.3 < res["p_value"][iu].mean() < 0.7


def test_bad_options_are_value_errors(rng):
    X = (rng.random((500, 4)) < 0.3).astype(np.uint8)
    with pytest.raises(ValueError, match="false discovery"):
        spinfer.significance(X, "mean-field", fdr=1.5)
    with pytest.raises(ValueError, match="unknown method"):
        spinfer.significance(X, "magic")
