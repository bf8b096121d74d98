"""Does a fitted model explain the data? Model versus data within sampling noise.

``check(model, X)`` compares means, connected correlations, a random set of connected triplets
and P(K) (the distribution of the number of active units) between the data and the model, with
the data's block-bootstrap noise, and the independent (fields-only) model as a baseline. The
result is the documented CHECK.json layout (also written by ``spinfer check``):

  summary[statistic] -> normalised_error (≈1: fits within noise), within_2sigma, max_abs_z,
                        and the same for the independent model (…_independent)
  means / correlations / triplets / active_counts -> data, data_se, model, model_se,
                        independent, z, z_independent (lists; correlations also have "pairs",
                        triplets "triples")
  log_likelihood_per_sample -> model (exact for N <= 24, else None), independent
"""
from __future__ import annotations

from typing import Callable, Optional

from . import _core
from ._data import as_matrix


def _model_dict(model):
    if hasattr(model, "_to_core"):
        return model._to_core()
    if isinstance(model, dict):
        return model
    raise TypeError("model: expected a spinfer.IsingModel or its dict form")


def check(model, X, *, triplets: int = 200, replicates: int = 100, block_length: int = 0,
          exact_limit: int = 20, model_samples: int = 0, method: str = "gibbs", chains: int = 4,
          seed: int = 0, threads: int = 1, convention: Optional[str] = None, copy: bool = False,
          progress: Optional[Callable[[dict], bool]] = None) -> dict:
    """Compare ``model`` with the data ``X`` (n_samples, n_units); see the module docstring.

    Statistics are in the data's convention. Model values are exact for N <= ``exact_limit``,
    otherwise from ``model_samples`` Monte Carlo samples (default max(20000, 2 T)) with
    batch-means errors. ``block_length`` 0 chooses the bootstrap blocks from the data's
    autocorrelation. The independent baseline uses the checked data's own means.
    """
    data = as_matrix(X, convention=convention, copy=copy)
    return _core.check_model(_model_dict(model), data, triplets, replicates, block_length,
                             exact_limit, model_samples, method, chains, seed, threads, progress)


def check_table(result: dict):
    """The summary of a check as a pandas DataFrame (one row per statistic)."""
    import pandas as pd

    rows = []
    order = ["means", "correlations", "triplets", "active_counts"]
    for name in sorted(result["summary"], key=lambda n: order.index(n) if n in order else len(order)):
        s = result["summary"][name]
        rows.append({"statistic": name, "count": s["count"],
                     "normalised_error": s["normalised_error"],
                     "normalised_error_independent": s["normalised_error_independent"],
                     "within_2sigma": s["within_2sigma"],
                     "within_2sigma_independent": s["within_2sigma_independent"],
                     "max_abs_z": s["max_abs_z"]})
    return pd.DataFrame(rows).set_index("statistic")
