"""Scoring inferred couplings against a gold-standard network (e.g. known gene regulation).

Every unordered pair i < j of units is a candidate edge, scored by |J_ij| (or J_ij itself with
``signed=True``) and labelled true when the gold standard holds the pair in either direction.
Self-edges are not candidates.
"""
from __future__ import annotations

import numbers
from typing import Iterable, Optional, Sequence

import numpy as np


def _gold_pairs(gold_edges, names: Optional[Sequence], n: int):
    """Gold edges as a set of (i, j) with i < j (self-edges dropped), and the set of units named."""
    if hasattr(gold_edges, "columns") and hasattr(gold_edges, "to_numpy"):  # a DataFrame
        gold_edges = gold_edges.iloc[:, :2].to_numpy().tolist()
    lookup = None if names is None else {str(x): k for k, x in enumerate(names)}
    pairs, nodes, unknown, out_of_range = set(), set(), [], []

    def index(v):
        if lookup is not None:  # with names, every entry is a name (numeric ids included)
            k = lookup.get(str(v))
            if k is None:
                unknown.append(str(v))
            return k
        if not isinstance(v, numbers.Integral) or isinstance(v, bool):
            raise ValueError(f"gold_edges: {v!r} is not a unit index; give names to use unit names")
        if not 0 <= int(v) < n:
            out_of_range.append(int(v))
            return None
        return int(v)

    for edge in gold_edges:
        edge = list(edge)
        if len(edge) < 2:
            raise ValueError(f"gold_edges: expected pairs (a, b), got {edge!r}")
        a, b = index(edge[0]), index(edge[1])
        if a is not None and b is not None:
            nodes.update((a, b))
            if a != b:
                pairs.add((min(a, b), max(a, b)))
    if unknown:
        shown = sorted(set(unknown))
        more = f" and {len(shown) - 20} more" if len(shown) > 20 else ""
        raise ValueError(f"gold_edges: unknown unit name(s) {', '.join(map(repr, shown[:20]))}{more}")
    if out_of_range:
        raise ValueError(f"gold_edges: unit index(es) {sorted(set(out_of_range))[:20]} outside 0..{n - 1}")
    return pairs, nodes


def roc_auc(labels, scores) -> float:
    """Area under the ROC curve; tied scores count one half (the Mann-Whitney statistic).

    Equals scikit-learn's ``roc_auc_score`` (trapezoids between distinct thresholds).
    """
    y = np.asarray(labels, dtype=bool)
    s = np.asarray(scores, dtype=np.float64)
    pos, neg = int(y.sum()), int((~y).sum())
    if pos == 0 or neg == 0:
        raise ValueError("AUROC needs both true and false candidate edges")
    from scipy.stats import rankdata

    # Mann & Whitney (1947): U = sum of positive ranks - pos (pos + 1) / 2, mid-ranks for ties.
    r = rankdata(s, method="average")
    return float((r[y].sum() - pos * (pos + 1) / 2.0) / (pos * neg))


def average_precision(labels, scores) -> float:
    """Step-wise area under the precision-recall curve: sum_k (R_k - R_{k-1}) P_k.

    One step per distinct score (tied candidates enter together), as scikit-learn's
    ``average_precision_score``; no interpolation between points.
    """
    y = np.asarray(labels, dtype=bool)
    s = np.asarray(scores, dtype=np.float64)
    pos = int(y.sum())
    if pos == 0:
        raise ValueError("average precision needs at least one true candidate edge")
    order = np.argsort(-s, kind="stable")
    s, y = s[order], y[order]
    last = np.r_[np.flatnonzero(np.diff(s)), s.size - 1]  # last candidate of each tie group
    tp = np.cumsum(y)[last]
    precision = tp / (last + 1.0)
    recall_step = np.diff(np.r_[0, tp]) / pos
    return float(np.sum(recall_step * precision))


def precision_at(labels, scores, k: int) -> float:
    """Fraction of true edges among the ``k`` highest scores.

    When a group of tied scores straddles position k, its candidates count in proportion (the
    expected precision over random orderings of the tie).
    """
    y = np.asarray(labels, dtype=bool)
    s = np.asarray(scores, dtype=np.float64)
    if not 1 <= k <= s.size:
        raise ValueError(f"k: expected 1..{s.size}, got {k}")
    kth = np.sort(s)[::-1][k - 1]
    above = s > kth
    tied = s == kth
    taken = k - int(above.sum())
    hits = y[above].sum() + taken * y[tied].sum() / tied.sum()
    return float(hits / k)


def score_against_gold(J, gold_edges: Iterable, names: Optional[Sequence] = None,
                       signed: bool = False, k: Optional[int] = None,
                       universe: str = "all") -> dict:
    """AUROC, AUPR and early precision of the couplings against gold-standard edges.

    ``gold_edges``: pairs (a, b) of unit names when ``names`` is given (entries are compared as
    strings), else of 0-based indices; or a DataFrame whose first two columns hold them. Direction
    and duplicates are ignored, self-edges dropped. Unknown names raise ``ValueError`` naming them.
    ``signed``: rank pairs by J_ij itself (most positive first) instead of |J_ij|; use it when the
    gold standard lists only activating interactions (pass -J for repressing ones).
    ``k``: cut-off of the early precision (default: the number of true edges).
    ``universe``: "all" (every pair i < j) or "gold" (only pairs of units that appear in the gold
    list, self-edges included, for gold standards that cover part of the units).

    Returns a dict: ``auroc``; ``aupr`` (step-wise average precision, as scikit-learn's
    ``average_precision_score``); ``prevalence`` (true edges / candidate pairs, the AUPR of a random
    ranking); ``aupr_ratio`` = aupr / prevalence; ``precision_at_k``, ``precision_at_k_ratio`` =
    precision_at_k / prevalence, ``k``; ``n_true``, ``n_pairs``; ``score`` ("abs" or "signed").
    """
    J = np.asarray(J, dtype=np.float64)
    if J.ndim != 2 or J.shape[0] != J.shape[1]:
        raise ValueError(f"J: expected a square (N, N) matrix, got shape {J.shape}")
    n = J.shape[0]
    if names is not None and len(names) != n:
        raise ValueError(f"names: {len(names)} names for {n} units")
    if not np.all(np.isfinite(J)):
        i, j = np.argwhere(~np.isfinite(J))[0]
        raise ValueError(f"J: non-finite value at row {i}, column {j}")
    if universe not in ("all", "gold"):
        raise ValueError(f"universe: expected 'all' or 'gold', got {universe!r}")
    gold, gold_nodes = _gold_pairs(gold_edges, names, n)
    iu, ju = np.triu_indices(n, k=1)
    # undirected: J_ij and J_ji both estimate the pair; average them if J is not exactly symmetric
    w = 0.5 * (J[iu, ju] + J[ju, iu])
    scores = w if signed else np.abs(w)
    labels = np.zeros(iu.size, dtype=bool)
    if gold:
        gi, gj = np.array(sorted(gold)).T
        labels[np.searchsorted(iu * n + ju, gi * n + gj)] = True  # iu * n + ju is increasing
    if universe == "gold":
        in_gold = np.zeros(n, dtype=bool)
        in_gold[list(gold_nodes)] = True
        keep = in_gold[iu] & in_gold[ju]
        scores, labels = scores[keep], labels[keep]
    n_true, n_pairs = int(labels.sum()), int(labels.size)
    if n_true == 0:
        raise ValueError("gold_edges: no gold edge among the candidate pairs")
    if n_true == n_pairs:
        raise ValueError("gold_edges: every candidate pair is a gold edge; nothing to score")
    k = n_true if k is None else int(k)
    prevalence = n_true / n_pairs
    aupr = average_precision(labels, scores)
    pk = precision_at(labels, scores, k)
    return {
        "auroc": roc_auc(labels, scores),
        "aupr": aupr,
        "aupr_ratio": aupr / prevalence,
        "precision_at_k": pk,
        "precision_at_k_ratio": pk / prevalence,
        "k": k,
        "prevalence": prevalence,
        "n_true": n_true,
        "n_pairs": n_pairs,
        "score": "signed" if signed else "abs",
    }


__all__ = ["score_against_gold", "roc_auc", "average_precision", "precision_at"]
