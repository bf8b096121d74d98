"""Pseudo-likelihood and interaction-screening fits, penalty paths and the pseudo-log-likelihood score.

Models are returned as plain dicts::

    {"fields": (N,), "couplings": (N, N) symmetric, zero diagonal,
     "convention": "spin", "names": [...], "provenance": {...}}

in the spin convention (s = 2x - 1), for P(s) ∝ exp(sum_i h_i s_i + sum_{i<j} J_ij s_i s_j).
Penalties are per-sample (the objectives are averages over samples), so a fixed prior means a
penalty falling like 1/T. ``"auto"`` chooses the penalty on held-out data (see penalty_path).
"""
from __future__ import annotations

from typing import Callable, Optional, Sequence, Union

import numpy as np

from . import _core
from ._data import as_matrix

Penalty = Union[float, str, None]


def _model_parts(model, convention: Optional[str] = None):
    """(fields, couplings, convention) from a dict, an (h, J) pair, or an object with attributes."""
    if model is None:
        return None, None, "spin"
    if isinstance(model, dict):
        return (np.asarray(model["fields"], float), np.asarray(model["couplings"], float),
                model.get("convention", convention or "spin"))
    if isinstance(model, (tuple, list)) and len(model) == 2:
        return np.asarray(model[0], float), np.asarray(model[1], float), convention or "spin"
    if hasattr(model, "fields") and hasattr(model, "couplings"):
        conv = getattr(model, "convention", convention or "spin")
        return np.asarray(model.fields, float), np.asarray(model.couplings, float), str(conv)
    raise ValueError("model: expected a dict with fields/couplings, an (h, J) pair or a model object")


def fit_pseudo_likelihood(X, l2: Penalty = "auto", l1: Penalty = 0.0, symmetric: bool = False,
                          max_iterations: int = 1000, tolerance: float = 1e-5, threads: int = 0,
                          warm_start=None, progress: Optional[Callable[[dict], bool]] = None,
                          representation: str = "auto", convention: Optional[str] = None,
                          weights=None, copy: bool = False) -> dict:
    """Pseudo-likelihood fit (per-variable logistic regressions averaged, or ``symmetric``).

    For each unit i it minimises ``-mean_b[s_i H_i - log 2cosh H_i] + l2 sum_j J_ij^2 + l1 sum_j |J_ij|``
    with ``H_i = h_i + sum_j J_ij s_j`` (fields unpenalised); per-variable estimates of a pair are
    averaged. ``l2="auto"`` chooses it on held-out data (last 20 % of rows, short grid), ``l1="auto"``
    likewise. ``progress(dict)`` is called every iteration; returning False raises KeyboardInterrupt.
    ``warm_start``: a previous result (dict, (h, J) in spin convention, or a model object).
    """
    h0, J0, c0 = _model_parts(warm_start)
    data = as_matrix(X, convention=convention, copy=copy, weights=weights)
    return _core.fit_pseudo_likelihood(data, l1, l2, symmetric, max_iterations, tolerance, threads,
                                       h0, J0, c0, progress, representation)


def fit_screening(X, l1: Penalty = "auto", l2: Penalty = 0.0, logarithmic: bool = False,
                  symmetric: bool = False, max_iterations: int = 1000, tolerance: float = 1e-5,
                  threads: int = 0, warm_start=None, progress: Optional[Callable[[dict], bool]] = None,
                  representation: str = "auto", convention: Optional[str] = None, weights=None,
                  copy: bool = False) -> dict:
    """Interaction screening: RISE, or log-RISE with ``logarithmic=True`` (Vuffray et al. 2016).

    Per unit minimises ``mean_b exp(-s_i H_i)`` (or its log) ``+ l1 sum_j |J_ij| + l2 sum_j J_ij^2``;
    the two estimates of a pair are averaged. ``l1="auto"`` chooses it on held-out data.
    """
    h0, J0, c0 = _model_parts(warm_start)
    data = as_matrix(X, convention=convention, copy=copy, weights=weights)
    return _core.fit_screening(data, logarithmic, l1, l2, symmetric, max_iterations, tolerance,
                               threads, h0, J0, c0, progress, representation)


def penalty_path(X, estimator: str = "pseudo-likelihood", kind: str = "l2",
                 penalties: Optional[Sequence[float]] = None, grid_points: int = 9, folds: int = 5,
                 one_standard_error: bool = False, symmetric: bool = False,
                 other_penalty: float = 0.0, max_iterations: int = 1000, tolerance: float = 1e-5,
                 threads: int = 0, representation: str = "auto",
                 progress: Optional[Callable[[dict], bool]] = None,
                 convention: Optional[str] = None, weights=None, copy: bool = False) -> dict:
    """k-fold held-out pseudo-log-likelihood over a penalty grid, with contiguous folds.

    ``estimator``: "pseudo-likelihood", "screening" or "log-screening"; ``kind``: "l1" or "l2".
    Returns ``{"penalties", "mean_score", "se_score", "chosen", "kind", "rule", "folds"}``; the
    grid is decreasing; ``chosen`` maximises the mean score, or with ``one_standard_error`` is the
    largest penalty within one standard error of the best. Penalties are per-sample values for
    training folds of ``T (k-1)/k`` rows.
    """
    data = as_matrix(X, convention=convention, copy=copy, weights=weights)
    grid = [] if penalties is None else [float(p) for p in penalties]
    d = _core.penalty_path(data, estimator, kind, grid, grid_points, folds, one_standard_error,
                           symmetric, other_penalty, max_iterations, tolerance, threads,
                           representation, progress)
    for k in ("penalties", "mean_score", "se_score"):
        d[k] = np.asarray(d[k])
    return d


def default_penalty_grid(kind: str, samples: int, units: int, points: int = 9) -> np.ndarray:
    """The default decreasing grid: l2 = a N/T, a in [1e-3, 10]; l1 = a sqrt(log N / T), a in [10^-2.5, 10^0.5]."""
    return np.asarray(_core.default_penalty_grid(kind, samples, units, points))


def pseudo_log_likelihood(model, X, convention: Optional[str] = None, threads: int = 0,
                          model_convention: Optional[str] = None, weights=None,
                          copy: bool = False) -> float:
    """Mean per-sample pseudo-log-likelihood ``mean_b sum_i [s_i H_i - log 2cosh H_i]`` (higher is better).

    ``model``: a fit result dict, an ``(h, J)`` pair (spin convention unless ``model_convention``
    says "binary"), or an object with ``fields``, ``couplings`` and ``convention``.
    """
    h, J, c = _model_parts(model, model_convention)
    data = as_matrix(X, convention=convention, copy=copy, weights=weights)
    return _core.pseudo_log_likelihood(h, J, c, data, threads)
