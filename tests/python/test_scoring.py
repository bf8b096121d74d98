"""Scoring couplings against a gold-standard network, checked against scikit-learn."""
import itertools

import numpy as np
import pytest

metrics = pytest.importorskip("sklearn.metrics")

import spinfer  # noqa: E402
from spinfer import scoring  # noqa: E402


def symmetric(rng, n, decimals=1):
    A = np.round(rng.normal(size=(n, n)), decimals)  # coarse rounding: many ties in |J|
    J = np.triu(A, 1)
    return J + J.T


def labels_and_scores(J, gold, signed=False):
    """Reference candidate list in the scorer's order: pairs i < j, label from the gold set."""
    n = J.shape[0]
    pairs = [(i, j) for i in range(n) for j in range(i + 1, n)]
    y = np.array([(i, j) in gold or (j, i) in gold for i, j in pairs])
    s = np.array([J[i, j] if signed else abs(J[i, j]) for i, j in pairs])
    return y, s


@pytest.mark.parametrize("seed", range(5))
def test_metrics_equal_scikit_learn_with_ties(seed):
    rng = np.random.default_rng(1000 + seed)
    n = 15
    J = symmetric(rng, n)
    iu = list(zip(*np.triu_indices(n, 1)))
    gold = {iu[k] for k in rng.choice(len(iu), size=20, replace=False)}
    # the gold list mixes directions and repeats an edge: both must not matter
    listed = [(j, i) if k % 2 else (i, j) for k, (i, j) in enumerate(sorted(gold))] + [sorted(gold)[0]]
    y, s = labels_and_scores(J, gold)
    assert len(np.unique(s)) < len(s)  # the test really has ties
    r = spinfer.score_against_gold(J, listed)
    # scikit-learn roc_auc_score / average_precision_score as the external reference
    assert r["auroc"] == pytest.approx(metrics.roc_auc_score(y, s), abs=1e-12)
    assert r["aupr"] == pytest.approx(metrics.average_precision_score(y, s), abs=1e-12)
    assert r["n_true"] == 20 and r["n_pairs"] == n * (n - 1) // 2
    assert r["prevalence"] == 20 / r["n_pairs"]
    assert r["aupr_ratio"] == pytest.approx(r["aupr"] / r["prevalence"], rel=1e-15)
    assert r["k"] == 20 and r["score"] == "abs"

    ys, ss = labels_and_scores(J, gold, signed=True)
    rs = spinfer.score_against_gold(J, listed, signed=True)
    assert rs["auroc"] == pytest.approx(metrics.roc_auc_score(ys, ss), abs=1e-12)
    assert rs["aupr"] == pytest.approx(metrics.average_precision_score(ys, ss), abs=1e-12)


def test_raw_metrics_on_continuous_scores_equal_scikit_learn(rng):
    y = rng.uniform(size=300) < 0.2
    s = np.round(rng.normal(size=300) + y, 1)
    assert scoring.roc_auc(y, s) == pytest.approx(metrics.roc_auc_score(y, s), abs=1e-12)
    assert scoring.average_precision(y, s) == pytest.approx(metrics.average_precision_score(y, s),
                                                            abs=1e-12)


def test_precision_at_k_is_the_expectation_over_tie_orders():
    y = np.array([1, 0, 1, 0, 0, 1, 0], dtype=bool)
    s = np.array([5, 4, 3, 3, 3, 2, 1], dtype=float)
    for k in range(1, 8):
        # brute force: average over every ordering of the tied group {2, 3, 4}
        values = []
        for perm in itertools.permutations([2, 3, 4]):
            order = [0, 1, *perm, 5, 6]
            values.append(y[order[:k]].mean())
        assert scoring.precision_at(y, s, k) == pytest.approx(np.mean(values), abs=1e-15)
    with pytest.raises(ValueError, match="k"):
        scoring.precision_at(y, s, 0)


def test_names_k_and_universe(rng):
    n = 8
    J = symmetric(rng, n, decimals=6)
    names = [f"G{k}" for k in range(n)]
    gold = [("G0", "G3"), ("G5", "G1"), ("G2", "G2")]  # the self-edge is dropped
    r = spinfer.score_against_gold(J, gold, names=names, k=5)
    y, s = labels_and_scores(J, {(0, 3), (1, 5)})
    top5 = np.argsort(-s, kind="stable")[:5]
    assert r["n_true"] == 2 and r["k"] == 5
    assert r["precision_at_k"] == pytest.approx(y[top5].mean(), abs=1e-15)
    assert r["auroc"] == pytest.approx(metrics.roc_auc_score(y, s), abs=1e-12)
    # universe="gold": only pairs among units named in the gold standard (0, 1, 2, 3, 5)
    rg = spinfer.score_against_gold(J, gold, names=names, universe="gold")
    keep = [k for k, (i, j) in enumerate((i, j) for i in range(n) for j in range(i + 1, n))
            if {i, j} <= {0, 1, 2, 3, 5}]
    assert rg["n_pairs"] == 10
    assert rg["auroc"] == pytest.approx(metrics.roc_auc_score(y[keep], s[keep]), abs=1e-12)
    # a DataFrame of gold edges uses its first two columns
    pd = pytest.importorskip("pandas")
    df = pd.DataFrame({"regulator": ["G0", "G5"], "target": ["G3", "G1"], "confidence": [1, 1]})
    assert spinfer.score_against_gold(J, df, names=names)["auroc"] == r["auroc"]


def test_bad_gold_edges(rng):
    J = symmetric(rng, 5)
    names = list("abcde")
    with pytest.raises(ValueError, match=r"unknown unit name\(s\) 'x', 'zz'"):
        spinfer.score_against_gold(J, [("a", "x"), ("zz", "b"), ("a", "b")], names=names)
    with pytest.raises(ValueError, match="outside 0..4"):
        spinfer.score_against_gold(J, [(0, 7)])
    with pytest.raises(ValueError, match="not a unit index"):
        spinfer.score_against_gold(J, [("a", "b")])
    with pytest.raises(ValueError, match="no gold edge"):
        spinfer.score_against_gold(J, [(1, 1)])
    with pytest.raises(ValueError, match="every candidate pair"):
        spinfer.score_against_gold(J[:2, :2], [(0, 1)])
    with pytest.raises(ValueError, match="universe"):
        spinfer.score_against_gold(J, [(0, 1)], universe="some")
