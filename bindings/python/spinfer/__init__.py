"""spinfer: pairwise maximum-entropy (inverse Ising) networks from binary activity recordings.

Data are (n_samples, n_units) arrays: rows are time bins or cells, columns are neurons or genes.
Values are 0/1 ("binary" convention) or -1/+1 ("spin" convention).
"""
from ._version import __version__
from . import _core

if _core.__version__ != __version__:  # a stale extension next to newer Python code
    raise ImportError(
        f"spinfer: the compiled extension is version {_core.__version__} but the package is "
        f"{__version__}; rebuild with `pip install .`"
    )

from ._data import as_matrix, moments, active_count_distribution, connected_triplets, unique_patterns  # noqa: E402
from .fitting import (  # noqa: E402
    fit_pseudo_likelihood, fit_screening, penalty_path, default_penalty_grid, pseudo_log_likelihood,
)


def build_info() -> str:
    """Compiler, BLAS, OpenMP and Eigen of the compiled core."""
    return _core.build_info()


__all__ = [
    "__version__",
    "build_info",
    "as_matrix",
    "moments",
    "active_count_distribution",
    "connected_triplets",
    "unique_patterns",
    "fit_pseudo_likelihood",
    "fit_screening",
    "penalty_path",
    "default_penalty_grid",
    "pseudo_log_likelihood",
]
