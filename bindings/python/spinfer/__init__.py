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

from ._data import (  # noqa: E402
    as_matrix,
    moments,
    active_count_distribution,
    connected_triplets,
    unique_patterns,
    bootstrap_noise,
)
from .models import (  # noqa: E402
    IsingModel,
    convert_model,
    exact_statistics,
    exact_log_partition,
    exact_state_probabilities,
    exact_log_likelihood,
    closed_form_methods,
    fit_closed_form,
    save_model,
    load_model,
    couplings_sibling_path,
    INLINE_COUPLINGS_MAX_UNITS,
)
from .io import MatrixFile, read_matrix, write_matrix, read_spikes, bin_spikes  # noqa: E402
from .checking import check, check_table  # noqa: E402
from .estimate import fit, fit_units, fit_methods, significance, significance_table, benjamini_hochberg  # noqa: E402
from .sampling import sample, model_statistics, temperature_scan  # noqa: E402
from .plots import (  # noqa: E402
    cluster_order,
    plot_couplings,
    plot_model_vs_data,
    plot_active_counts,
    plot_specific_heat,
    plot_coupling_histogram,
    plot_recovered_vs_true,
)
from .network import edge_table, write_edge_list, network_graph, write_graphml  # noqa: E402
from .scoring import score_against_gold  # noqa: E402
from .report import write_report  # noqa: E402
from .likelihood import (  # noqa: E402
    log_partition,
    log_likelihood,
    entropy,
    multi_information,
    independent_entropy,
)
from .fitting import (  # noqa: E402
    fit_pseudo_likelihood, fit_screening, penalty_path, default_penalty_grid, pseudo_log_likelihood,
)
from .refinement import refine  # noqa: E402
from .estimator import PairwiseNetwork  # noqa: E402
from .readers import read_nwb_units, bin_nwb_units, read_h5ad_binary  # noqa: E402


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
    "bootstrap_noise",
    "check",
    "check_table",
    "fit",
    "fit_units",
    "fit_methods",
    "significance",
    "significance_table",
    "benjamini_hochberg",
    "IsingModel",
    "convert_model",
    "exact_statistics",
    "exact_log_partition",
    "exact_state_probabilities",
    "exact_log_likelihood",
    "closed_form_methods",
    "fit_closed_form",
    "save_model",
    "load_model",
    "couplings_sibling_path",
    "INLINE_COUPLINGS_MAX_UNITS",
    "MatrixFile",
    "read_matrix",
    "write_matrix",
    "read_spikes",
    "bin_spikes",
    "sample",
    "model_statistics",
    "temperature_scan",
    "cluster_order",
    "plot_couplings",
    "plot_model_vs_data",
    "plot_active_counts",
    "plot_specific_heat",
    "plot_coupling_histogram",
    "plot_recovered_vs_true",
    "edge_table",
    "write_edge_list",
    "network_graph",
    "write_graphml",
    "score_against_gold",
    "write_report",
    "log_partition",
    "log_likelihood",
    "entropy",
    "multi_information",
    "independent_entropy",
    "fit_pseudo_likelihood",
    "fit_screening",
    "penalty_path",
    "default_penalty_grid",
    "pseudo_log_likelihood",
    "refine",
    "PairwiseNetwork",
    "read_nwb_units",
    "bin_nwb_units",
    "read_h5ad_binary",
]
