"""Sufficient statistics against numpy (reference: numpy.mean, numpy.cov-style products, numpy.bincount)."""
import numpy as np
import pytest

import spinfer


def reference_moments(X01, w=None, spin=False):
    """Weighted means, raw second moments and covariances computed directly with numpy."""
    V = (2.0 * X01 - 1.0) if spin else X01.astype(np.float64)
    w = np.ones(len(V)) if w is None else np.asarray(w, float)
    p = w / w.sum()
    mean = p @ V
    second = (V * p[:, None]).T @ V
    return mean, second, second - np.outer(mean, mean)


@pytest.mark.parametrize("density", [0.03, 0.4])
@pytest.mark.parametrize("kernel", ["auto", "sparse", "dense"])
@pytest.mark.parametrize("convention", ["binary", "spin"])
def test_moments_match_numpy(rng, density, kernel, convention):
    X = (rng.random((3000, 37)) < density).astype(np.uint8)
    got = spinfer.moments(X, convention=convention, kernel=kernel, threads=2)
    mean, second, conn = reference_moments(X, spin=convention == "spin")
    np.testing.assert_allclose(got["mean"], mean, rtol=0, atol=1e-13)
    np.testing.assert_allclose(got["second"], second, rtol=0, atol=1e-13)
    np.testing.assert_allclose(got["connected"], conn, rtol=0, atol=1e-13)
    assert got["samples"] == 3000


def test_weighted_moments_match_numpy(rng):
    X = (rng.random((2000, 15)) < 0.2).astype(np.uint8)
    w = rng.exponential(size=2000)
    for kernel in ("sparse", "dense"):
        got = spinfer.moments(spinfer.as_matrix(X, weights=w), kernel=kernel)
        mean, second, conn = reference_moments(X, w)
        np.testing.assert_allclose(got["mean"], mean, atol=1e-12)
        np.testing.assert_allclose(got["connected"], conn, atol=1e-12)
        assert got["total_weight"] == pytest.approx(w.sum())


def test_thread_count_does_not_change_unweighted_results(rng):
    X = (rng.random((5000, 30)) < 0.1).astype(np.uint8)
    a = spinfer.moments(X, threads=1)
    b = spinfer.moments(X, threads=2)
    assert np.array_equal(a["second"], b["second"])


def test_active_count_distribution_matches_bincount(rng):
    X = (rng.random((4000, 12)) < 0.15).astype(np.uint8)
    expected = np.bincount(X.sum(axis=1), minlength=13) / 4000  # numpy.bincount
    np.testing.assert_allclose(spinfer.active_count_distribution(X), expected, atol=1e-15)


def test_connected_triplets_match_numpy(rng):
    X = (rng.random((3000, 8)) < 0.3).astype(np.uint8)
    triples = [(0, 1, 2), (3, 5, 7), (1, 1, 4)]
    for convention in ("binary", "spin"):
        V = (2.0 * X - 1.0) if convention == "spin" else X.astype(float)
        D = V - V.mean(axis=0)
        expected = [np.mean(D[:, i] * D[:, j] * D[:, k]) for i, j, k in triples]
        got = spinfer.connected_triplets(X, triples, convention=convention)
        np.testing.assert_allclose(got, expected, atol=1e-13)


def test_unique_patterns_agree_with_numpy_unique(rng):
    X = (rng.random((500, 6)) < 0.2).astype(np.uint8)
    pats, counts, index = spinfer.unique_patterns(X)
    ref, ref_counts = np.unique(X, axis=0, return_counts=True)  # numpy.unique(axis=0)
    assert len(pats) == len(ref)
    order = np.lexsort(pats.T[::-1])
    ref_order = np.lexsort(ref.T[::-1])
    np.testing.assert_array_equal(pats[order], ref[ref_order])
    np.testing.assert_array_equal(counts[order], ref_counts[ref_order])
    np.testing.assert_array_equal(pats[index], X)


def test_zero_copy_for_uint8_and_bool_and_clear_error_otherwise(rng):
    X = (rng.random((50, 4)) < 0.5)
    assert not spinfer.as_matrix(X).owns_data           # bool: viewed, not copied
    assert not spinfer.as_matrix(X.astype(np.uint8)).owns_data
    with pytest.raises(ValueError, match="copy=True"):
        spinfer.as_matrix(X.astype(np.float64))
    with pytest.raises(ValueError, match="not C-contiguous"):
        spinfer.as_matrix(np.asfortranarray(X.astype(np.uint8)))
    m = spinfer.as_matrix(np.asfortranarray(2 * X.astype(np.int8) - 1), copy=True)
    assert m.convention == "spin"
    np.testing.assert_array_equal(m.to_numpy(), X.astype(np.uint8))


@pytest.mark.parametrize("bad, message", [
    (np.array([[0, 1], [2, 0]], float), "row 2, column 1: value 2 is not binary"),
    (np.array([[0, np.nan], [1, 0]]), "row 1, column 2: value nan is not finite"),
    (np.array([[0, 1], [-1, 1]]), "mix 0 and -1"),
    (np.zeros((0, 3)), "empty"),
    (np.zeros(5), "2-D"),
])
def test_bad_arrays_raise_value_error(bad, message):
    with pytest.raises(ValueError, match=message):
        spinfer.as_matrix(bad, copy=True)


def test_uint8_holding_other_values_is_rejected():
    with pytest.raises(ValueError, match="row 1, column 2: value 3"):
        spinfer.as_matrix(np.array([[0, 3]], np.uint8))


def test_pandas_names_are_carried(rng):
    pd = pytest.importorskip("pandas")
    df = pd.DataFrame((rng.random((20, 3)) < 0.5).astype(np.uint8), columns=["gA", "gB", "gC"])
    assert spinfer.as_matrix(df).names == ["gA", "gB", "gC"]
