"""Log partition function, log-likelihood, entropy and multi-information of a pairwise model.

The model is an :class:`spinfer.IsingModel` or a tuple ``(h, J)`` / ``(h, J, convention)``
(convention "spin" by default). Energies and ln Z are in the model's convention; entropies and
log-likelihoods are in nats.

``method`` chooses how ln Z is computed:
  "exact"          enumeration of the 2^N states (N <= 24)
  "ais"            annealed importance sampling from an independent model (a stochastic lower
                   bound: its expectation is <= ln Z; check ``effective_runs``)
  "thermodynamic"  thermodynamic integration with Gauss-Legendre nodes in alpha
  "auto"           exact for N <= ``exact_max_units`` (default 20), else "ais"

Keyword options (all functions):
  base             independent reference model: "mean-field" (naive mean-field effective fields;
                   the default) or "fields" (the model's own fields, couplings off)
  ais_runs, ais_steps, ais_sweeps, bootstrap   AIS: runs, intermediate distributions, Gibbs
                   sweeps per distribution, bootstrap replicates of the runs
  ti_nodes         thermodynamic integration: Gauss-Legendre nodes
  samples, chains, burn_in, thin   Monte Carlo per node and for <E>_model (None = automatic)
  exact_max_units  largest N that "auto" enumerates
  seed             the same seed gives the same result for every thread count
  threads          worker threads (<= 0: automatic)
  progress         optional callable(dict) -> bool; return False to stop (KeyboardInterrupt)
Ctrl-C interrupts a running call (KeyboardInterrupt).
"""
from __future__ import annotations

from typing import Callable, Optional

import numpy as np

from . import _core
from ._data import as_matrix
from .models import IsingModel

_OPTION_NAMES = (
    "method", "exact_max_units", "base", "ais_runs", "ais_steps", "ais_sweeps", "bootstrap",
    "ti_nodes", "samples", "chains", "burn_in", "thin", "seed", "threads", "progress",
)


def _model_arrays(model):
    if isinstance(model, IsingModel):
        return (np.asarray(model.fields, dtype=np.float64), np.asarray(model.couplings, dtype=np.float64),
                model.convention)
    if isinstance(model, (tuple, list)) and len(model) in (2, 3):
        h = np.ascontiguousarray(np.asarray(model[0], dtype=np.float64))
        J = np.asarray(model[1], dtype=np.float64)
        if h.ndim != 1:
            raise ValueError(f"model fields: expected a 1-D array, got {h.ndim} dimensions")
        if J.ndim != 2:
            raise ValueError(f"model couplings: expected a 2-D array, got {J.ndim} dimensions")
        return h, J, (str(model[2]) if len(model) == 3 else "spin")
    raise TypeError("model must be a spinfer.IsingModel or a tuple (h, J) or (h, J, convention)")


def _options(kwargs) -> dict:
    unknown = set(kwargs) - set(_OPTION_NAMES)
    if unknown:
        raise TypeError(f"unexpected keyword argument(s): {', '.join(sorted(unknown))}")
    return dict(kwargs)


def log_partition(model, method: str = "auto", *, seed: int = 0, threads: int = 1,
                  progress: Optional[Callable[[dict], bool]] = None, **options) -> dict:
    """ln Z of the model with its standard error.

    Returns a dict: ``value``, ``error`` (standard error; 0 when exact), ``method`` used,
    ``lower_bound`` (True for AIS), the reference model (``base``, ``base_fields``,
    ``base_log_partition``), AIS diagnostics (``log_weights`` per run, ``effective_runs``,
    ``bootstrap_error``), thermodynamic-integration diagnostics (``nodes``, ``node_weights``,
    ``node_mean`` = <E_1 - E_0> at each node, ``node_error``, ``node_rhat``), ``warnings`` and
    ``seconds``.
    """
    h, J, conv = _model_arrays(model)
    opts = _options(dict(method=method, seed=seed, threads=threads, progress=progress, **options))
    return _core.log_partition(h, J, conv, opts)


def log_likelihood(model, X, method: str = "auto", *, weights=None, copy: bool = True, seed: int = 0,
                   threads: int = 1, progress: Optional[Callable[[dict], bool]] = None,
                   **options) -> dict:
    """Mean log-probability per sample (nats) of the rows of ``X``: -<E>_data - ln Z.

    ``X`` is (n_samples, n_units), 0/1 or -1/+1 (the bits are read as states), optionally with
    sample ``weights``. Returns a dict: ``value``, ``error`` (from ln Z only: <E>_data is exact),
    ``mean_energy`` (<E>_data), ``total_weight``, ``log_partition`` (as :func:`log_partition`),
    ``warnings``.
    """
    h, J, conv = _model_arrays(model)
    data = as_matrix(X, copy=copy, weights=weights)
    opts = _options(dict(method=method, seed=seed, threads=threads, progress=progress, **options))
    return _core.log_likelihood(h, J, conv, data, opts)


def entropy(model, method: str = "auto", *, seed: int = 0, threads: int = 1,
            progress: Optional[Callable[[dict], bool]] = None, **options) -> dict:
    """Entropy S = ln Z + <E>_model of the model (nats).

    Exact when ln Z is enumerated; otherwise <E>_model is sampled (``samples``, ``chains``).
    Returns a dict: ``value``, ``error``, ``mean_energy``, ``mean_energy_error``,
    ``log_partition``, ``energy_rhat``, ``energy_ess``, ``warnings``.
    """
    h, J, conv = _model_arrays(model)
    opts = _options(dict(method=method, seed=seed, threads=threads, progress=progress, **options))
    return _core.entropy(h, J, conv, opts)


def multi_information(model, X, method: str = "auto", *, weights=None, copy: bool = True,
                      seed: int = 0, threads: int = 1,
                      progress: Optional[Callable[[dict], bool]] = None, **options) -> dict:
    """Fraction of the multi-information captured by the pairwise ``model`` fitted to ``X``.

    I_2 / I_N = (S_1 - S_2) / (S_1 - S_N) (Schneidman, Berry, Segev, Bialek, Nature 440:1007,
    2006): S_1 is the independent entropy at the data's means, S_2 the model's entropy and S_N the
    empirical entropy of the distinct patterns. Returns a dict with ``ratio`` and ``ratio_error``,
    ``ratio_corrected`` (Miller-Madow S_N), ``reliable`` (False when S_N is unreliable, i.e.
    fewer than 10 samples per distinct pattern, or when I_N is not above 3 standard errors),
    the entropies (``independent_entropy``, ``pairwise_entropy`` dict, ``pattern_entropy`` with
    ``pattern_entropy_error`` and ``pattern_entropy_corrected``), ``multi_information`` (I_N) with
    its error and corrected value, ``pairwise_information`` (I_2), ``distinct_patterns``,
    ``samples`` and ``warnings``.
    """
    h, J, conv = _model_arrays(model)
    data = as_matrix(X, copy=copy, weights=weights)
    opts = _options(dict(method=method, seed=seed, threads=threads, progress=progress, **options))
    return _core.multi_information(h, J, conv, data, opts)


def independent_entropy(means, convention: str = "binary") -> float:
    """S_1 = sum_i H2(p_i) in nats; ``means`` are P(active) ("binary") or <s_i> ("spin")."""
    return _core.independent_entropy(np.asarray(means, dtype=np.float64), convention)


__all__ = ["log_partition", "log_likelihood", "entropy", "multi_information", "independent_entropy"]
