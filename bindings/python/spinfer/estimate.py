"""Fit any estimator by name, and judge which couplings are significant.

Method names (trade names, kebab-case): "pseudo-likelihood" (``symmetric=True`` for the joint
objective), "screening" (``logarithmic=True`` for log-RISE), and the closed forms "mean-field",
"tap", "independent-pair", "sessak-monasson", "bethe". Penalties ``l1``/``l2`` are per-sample
numbers or "auto" (chosen on held-out data with contiguous folds).
"""
from __future__ import annotations

from typing import Callable, Optional

import numpy as np

from . import _core
from ._data import as_matrix
from .models import IsingModel

_FIT_KEYS = ("method", "symmetric", "logarithmic", "l1", "l2", "shrinkage", "mean_field_fallback",
             "max_iterations", "tolerance", "threads", "representation", "convention",
             "warm_start", "progress")


def _fit_options(method, kwargs):
    unknown = set(kwargs) - set(_FIT_KEYS)
    if unknown:
        raise TypeError(f"unexpected keyword argument(s): {', '.join(sorted(unknown))}")
    opts = dict(kwargs)
    opts["method"] = method
    ws = opts.get("warm_start")
    if ws is not None and hasattr(ws, "_to_core"):
        opts["warm_start"] = ws._to_core()
    return opts


def fit_methods():
    """Names accepted by :func:`fit`."""
    return list(_core.fit_methods())


def fit(X, method: str = "pseudo-likelihood", *, data_convention: Optional[str] = None,
        weights=None, copy: bool = False, **options) -> IsingModel:
    """Fit a pairwise model to ``X`` (n_samples, n_units) and return a :class:`spinfer.IsingModel`.

    ``options``: symmetric, logarithmic, l1, l2, shrinkage, mean_field_fallback, max_iterations,
    tolerance, threads, representation, convention (of the result; default: the data's),
    warm_start (an IsingModel), progress (callable(dict) -> bool; False stops with
    KeyboardInterrupt). Ctrl-C stops a long fit.
    """
    data = as_matrix(X, convention=data_convention, copy=copy, weights=weights)
    return IsingModel._from_core(_core.fit_model(data, _fit_options(method, options)))


def fit_units(X, units, method: str = "pseudo-likelihood", *, data_convention: Optional[str] = None,
              weights=None, copy: bool = False, **options) -> dict:
    """Fit only the per-variable problems of ``units`` (0-based), before the pair averaging.

    For per-variable pseudo-likelihood and screening, each unit's problem is solved with its own
    optimiser state, so the result for a unit is the same whether it is fitted alone, in a shard
    or with all units. Returns a dict in the spin convention: ``coefficients`` (N x K, column k =
    couplings into ``units[k]``, its own entry 0), ``fields`` (K), per-unit ``iterations`` and
    ``objective``, ``unconverged`` units, the penalties used (``l1``, ``l2``) and ``extra``.
    Options as in :func:`fit` (``symmetric`` and closed-form methods are refused).
    """
    data = as_matrix(X, convention=data_convention, copy=copy, weights=weights)
    res = _core.fit_units(data, _fit_options(method, options), [int(u) for u in units])
    res["coefficients"] = np.asarray(res["coefficients"])
    res["fields"] = np.asarray(res["fields"])
    return res


def significance(X, method: str = "pseudo-likelihood", *, bootstrap: int = 100, nulls: int = 20,
                 block_length: int = 0, confidence: float = 0.95, fdr: float = 0.05,
                 convention: str = "spin", seed: int = 0,
                 progress: Optional[Callable[[dict], bool]] = None, data_convention=None,
                 copy: bool = False, **options) -> dict:
    """Bootstrap confidence intervals, a circular-shift null and Benjamini-Hochberg decisions.

    Every replicate refits the whole model with ``method`` and ``options`` (as in :func:`fit`).
    Returns a dict of (N, N) arrays ``estimate, standard_error, lower, upper, p_value, q_value,
    significant`` plus the pooled ``null_abs`` values and the settings used. See
    lib/include/spinfer/significance.hpp for the method and its assumptions.
    """
    data = as_matrix(X, convention=data_convention, copy=copy)
    res = _core.coupling_significance(data, _fit_options(method, options), bootstrap, nulls,
                                      block_length, confidence, fdr, convention, seed, progress)
    res["names"] = list(data.names) if data.names else None
    return res


def significance_table(result: dict, names=None):
    """The significance result as an edge table DataFrame (one row per pair, strongest first)."""
    from .network import edge_table

    names = names if names is not None else result.get("names")
    return edge_table(result["estimate"], names=names,
                      intervals=(result["lower"], result["upper"]),
                      p_values=result["q_value"], decisions=result["significant"].astype(bool),
                      threshold=None)


def benjamini_hochberg(p) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (as scipy.stats.false_discovery_control)."""
    return np.asarray(_core.benjamini_hochberg([float(v) for v in np.ravel(p)]))
