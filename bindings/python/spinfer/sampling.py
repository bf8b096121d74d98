"""Monte Carlo sampling of a pairwise model given as plain arrays.

The model is P_T(v) ∝ exp(-E(v)/T) with E(v) = -sum_i h_i v_i - sum_{i<j} J_ij v_i v_j, where v is
in {0, 1} (``convention="binary"``) or {-1, +1} (``convention="spin"``). ``couplings`` is the full
symmetric (N, N) matrix with a zero diagonal; each pair is counted once in E.

Common keyword arguments (all functions):
  method       "gibbs" (heat bath) or "metropolis"
  scan         order of single-unit updates within a sweep: "sequential", "random", or
               "coloured" (the colours of a greedy colouring of the coupling graph in turn;
               a batched, exp-free kernel when all couplings and all fields are equal, e.g.
               lattices: several times faster there)
  chains       independent chains, run in parallel over ``threads``
  seed         the same seed gives the same samples for every thread count
  temperature  target T (default 1: the model itself)
  ladder       temperatures for parallel tempering (T is added when absent); None = no tempering
  burn_in      sweeps discarded first; None = automatic (a pilot of >= 50 energy
               autocorrelation times)
  thin         sweeps between kept samples; None = automatic (ceil of the energy
               autocorrelation time)
  storage      couplings "auto" (by density), "dense" or "sparse" (neighbour lists)
  start        initial states "random", "active" (all units active) or "inactive"
  threads      worker threads (<= 0: automatic)
  progress     optional callable(dict) -> bool; return False to stop (KeyboardInterrupt)
Ctrl-C interrupts a running call within about a second (KeyboardInterrupt).
"""
from __future__ import annotations

from typing import Callable, Optional, Sequence

import numpy as np

from . import _core

_OPTION_NAMES = (
    "method", "scan", "chains", "burn_in", "thin", "pilot_sweeps", "max_pilot_sweeps", "ladder",
    "storage", "start", "sparse_density_threshold", "seed", "threads", "progress",
)


def _arrays(fields, couplings):
    h = np.ascontiguousarray(np.asarray(fields, dtype=np.float64))
    J = np.asarray(couplings, dtype=np.float64)
    if h.ndim != 1:
        raise ValueError(f"fields: expected a 1-D array, got {h.ndim} dimensions")
    if J.ndim != 2:
        raise ValueError(f"couplings: expected a 2-D array, got {J.ndim} dimensions")
    return h, J


def _options(n, temperature, kwargs):
    unknown = set(kwargs) - set(_OPTION_NAMES)
    if unknown:
        raise TypeError(f"unexpected keyword argument(s): {', '.join(sorted(unknown))}")
    opts = {k: v for k, v in kwargs.items()}
    opts["samples"] = int(n)
    opts["temperature"] = float(temperature)
    if opts.get("ladder") is not None:
        opts["ladder"] = [float(t) for t in opts["ladder"]]
    return opts


def sample(fields, couplings, convention: str, n: int, *, seed: int = 0, method: str = "gibbs",
           chains: int = 4, temperature: float = 1.0, threads: int = 1,
           burn_in: Optional[int] = None, thin: Optional[int] = None, scan: str = "sequential",
           ladder: Optional[Sequence[float]] = None, storage: str = "auto", start: str = "random",
           progress: Optional[Callable[[dict], bool]] = None, **more):
    """Draw ``n`` samples (shared out over the chains) from the model at ``temperature``.

    Returns ``(samples, diagnostics)``: ``samples`` is (n, N), ``uint8`` 0/1 for the binary
    convention or ``int8`` -1/+1 for spins, rows grouped chain by chain. ``diagnostics`` holds the
    per-sample ``energy`` E(v) and ``chain`` index, the split R-hat / ESS / autocorrelation time
    (in kept samples) of the energy and the magnetisation, acceptance rates, the burn-in and thin
    used, the coupling storage chosen, and under parallel tempering the ladder and swap rates.
    """
    h, J = _arrays(fields, couplings)
    opts = _options(n, temperature, dict(seed=seed, method=method, chains=chains, threads=threads,
                                         burn_in=burn_in, thin=thin, scan=scan, ladder=ladder,
                                         storage=storage, start=start, progress=progress, **more))
    return _core.sample(h, J, convention, opts)


def model_statistics(fields, couplings, convention: str, n: int = 10000, *,
                     temperature: float = 1.0, **kwargs) -> dict:
    """Means, raw and connected pair correlations, P(K), <E> and C = Var(E)/(N T^2) of the model.

    Every statistic comes with a standard error (key ``<name>_error``) from batch means: each
    chain's samples are cut into ceil(32 / chains) consecutive batches, the statistic is computed
    per batch, and error = sd(batch values) / sqrt(number of batches). Values are in the model's
    convention. ``diagnostics`` describes the run (see :func:`sample`).
    """
    h, J = _arrays(fields, couplings)
    return _core.model_statistics(h, J, convention, _options(n, temperature, kwargs))


def temperature_scan(fields, couplings, convention: str, temperatures: Sequence[float],
                     n: int = 10000, *, parallel_tempering: bool = False, **kwargs) -> dict:
    """Energy and specific heat, with batch-means errors, at each temperature.

    With ``parallel_tempering=True`` one run uses the temperatures as its ladder and gives all of
    them at once; otherwise each temperature is sampled separately. Returns the sorted
    ``temperatures``, ``energy``, ``energy_error``, ``specific_heat``, ``specific_heat_error``,
    the peak of C(T) (``peak_index``, ``peak_temperature`` refined by a parabola through the
    neighbours, ``peak_at_edge``), and per-run ``runs`` diagnostics.
    """
    h, J = _arrays(fields, couplings)
    temps = [float(t) for t in temperatures]
    opts = _options(n, temps[0] if temps else 1.0, kwargs)
    return _core.temperature_scan(h, J, convention, temps, bool(parallel_tempering), opts)
