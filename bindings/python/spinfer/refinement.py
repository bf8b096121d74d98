"""Moment-matching refinement of a fitted model (Boltzmann learning).

Fields and couplings move along the gradient of the mean log-likelihood, which is the mismatch
between the data's moments and the model's (``dh_i ~ m_i^data - m_i^model``,
``dJ_ij ~ <s_i s_j>^data - <s_i s_j>^model``), until the model reproduces the data's means and
pair correlations within their sampling noise. The model's moments come from exact enumeration
(N <= 20; Newton steps to the exact maximum-likelihood estimate) or from persistent Monte Carlo
chains. See lib/include/spinfer/refine.hpp for the formulas and every choice.
"""
from __future__ import annotations

from typing import Callable, Optional

from . import _core
from ._data import as_matrix
from .models import IsingModel

_OPTION_NAMES = (
    "expectations", "l2", "max_iterations", "max_seconds", "threads", "seed", "threshold", "noise",
    "bootstrap_replicates", "block_length", "preconditioner", "learning_rate", "momentum",
    "max_step", "samples", "chains", "sweeps_between_samples", "burn_in", "sampler",
    "monte_carlo_ratio", "max_check_samples", "patience", "exact_tolerance", "progress",
)


def refine(X, start_model: IsingModel, *, expectations: str = "auto", threshold: float = 1.0,
           noise: str = "bootstrap", l2: float = 0.0, max_iterations: int = 1000,
           max_seconds: Optional[float] = None, seed: int = 0, threads: int = 1,
           convention: Optional[str] = None, weights=None, copy: bool = True,
           progress: Optional[Callable[[dict], bool]] = None, **more):
    """Refine ``start_model`` so its means and correlations match those of the data ``X``.

    ``X`` is a (n_samples, n_units) array of 0/1 or -1/+1 values (``convention`` may state which;
    ``weights`` are optional per-sample weights). ``start_model`` is a :class:`spinfer.IsingModel`
    with the same number of units, for example a pseudo-likelihood or closed-form fit; the result
    comes back in its convention. Returns ``(model, report)``.

    expectations  "exact" (enumerate all 2^N states; N <= 20), "sampled" (persistent Monte Carlo
                  chains) or "auto" (exact when N <= 16)
    threshold     sampled: stop when both normalised errors epsilon_m and epsilon_c
                  (sqrt(mean(((model - data) / sigma)^2))) are below it, measured with Monte Carlo
                  error small against sigma
    noise         sigma of the data statistics: "bootstrap" (block bootstrap, for time series) or
                  "iid" ((1 - x^2) / n_samples)
    l2            penalty (l2 / 2) sum_{i<j} J_ij^2 (spin-convention couplings) on the mean
                  log-likelihood per sample
    max_iterations, max_seconds   budgets (the run then stops with ``converged = False``)
    seed, threads the same seed gives the same result for every thread count
    progress      optional callable(dict) -> bool called every iteration (keys stage, done, total,
                  objective, elapsed_s); return False to stop (KeyboardInterrupt). Ctrl-C stops too.
    more          sampled-mode tuning: preconditioner ("auto", "full", "diagonal", "none"),
                  learning_rate, momentum, max_step, samples (per iteration; None = automatic),
                  chains, sweeps_between_samples, burn_in, sampler ("gibbs", "metropolis"),
                  monte_carlo_ratio, max_check_samples, patience; bootstrap_replicates,
                  block_length; exact_tolerance (exact mode).

    The report holds ``converged``, ``stop_reason``, ``iterations``, the final ``epsilon_mean``,
    ``epsilon_correlation``, ``max_z_mean``, ``max_z_correlation``, ``monte_carlo_ratio``,
    ``max_gradient``, the per-iteration ``trajectory`` (dict of arrays), the data noise used
    (``mean_sigma``, ``correlation_sigma``, spin convention), ``log_likelihood`` (exact mode),
    ``warnings`` and more; the model's provenance records method "boltzmann-learning", the start
    method, seed and samples per iteration.
    """
    if not isinstance(start_model, IsingModel):
        raise TypeError("start_model must be a spinfer.IsingModel")
    unknown = set(more) - set(_OPTION_NAMES)
    if unknown:
        raise TypeError(f"unexpected keyword argument(s): {', '.join(sorted(unknown))}")
    data = as_matrix(X, convention=convention, copy=copy, weights=weights)
    opts = dict(expectations=expectations, threshold=float(threshold), noise=noise, l2=float(l2),
                max_iterations=int(max_iterations), max_seconds=max_seconds, seed=int(seed),
                threads=int(threads), progress=progress, **more)
    model, report = _core.refine(data, start_model._to_core(), opts)
    return IsingModel._from_core(model), report


__all__ = ["refine"]
