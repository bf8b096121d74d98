"""Binary data in, sufficient statistics out (numpy arrays)."""
from __future__ import annotations

from typing import Optional, Sequence

import numpy as np

from . import _core


def as_matrix(X, convention: Optional[str] = None, copy: bool = False, weights=None, names=None):
    """Wrap a (n_samples, n_units) array as the core's compact binary matrix.

    A C-contiguous ``uint8`` or ``bool`` array holding 0/1 is used without a copy. Any other dtype
    (ints, floats holding 0/1 or -1/+1) or layout needs ``copy=True``; otherwise ``ValueError``.
    ``convention`` is ``"binary"`` ({0,1}), ``"spin"`` ({-1,+1}) or None to detect it from the values.
    A pandas DataFrame's column names become unit names; DataFrames are always copied, because
    pandas stores columns separately.
    """
    if isinstance(X, _core.SpinMatrix):
        return X
    if names is None and hasattr(X, "columns") and hasattr(X, "to_numpy"):
        names = [str(c) for c in X.columns]
        X = X.to_numpy()
        copy = True
    X = np.asarray(X)
    return _core.matrix(X, convention, copy, weights, None if names is None else list(names))


def moments(X, convention: str = "binary", threads: int = 1, kernel: str = "auto", copy: bool = False):
    """Means, raw second moments and connected correlations (covariances) of the data.

    Returns a dict with ``mean`` (N,), ``second`` (N, N), ``connected`` (N, N), ``total_weight``,
    ``samples``, ``convention`` and the pair ``kernel`` used ("sparse" or "dense").
    """
    return _core.moments(as_matrix(X, copy=copy), convention, threads, kernel)


def active_count_distribution(X, threads: int = 1, copy: bool = False) -> np.ndarray:
    """P(K) for K = 0..N: the fraction of samples with exactly K active units."""
    return _core.active_count_distribution(as_matrix(X, copy=copy), threads)


def connected_triplets(X, triples: Sequence[Sequence[int]], convention: str = "binary",
                       threads: int = 1, copy: bool = False) -> np.ndarray:
    """Connected third-order correlations <dv_i dv_j dv_k> for each (i, j, k) triple."""
    t = [tuple(int(v) for v in tr) for tr in triples]
    return np.asarray(_core.connected_triplets(as_matrix(X, copy=copy), t, convention, threads))


def unique_patterns(X, copy: bool = False):
    """Distinct rows (uint8), their counts (or summed weights), and each row's pattern index."""
    return _core.unique_patterns(as_matrix(X, copy=copy))


def bootstrap_noise(X, convention: str = "binary", triples=(), replicates: int = 200,
                    block_length: int = 0, seed: int = 0, threads: int = 1, copy: bool = False):
    """Block-bootstrap standard errors of means, connected correlations, P(K) and triplets.

    Bins of a recording are correlated in time, so whole blocks of ``block_length`` consecutive
    samples are resampled (0 = automatic: ten times the integrated autocorrelation time of the number
    of active units). Returns a dict with ``mean_se``, ``connected_se``, ``second_se`` (raw
    second moments), ``count_se``, ``triplet_se``, ``block_length`` and ``replicates``.
    """
    t = [tuple(int(v) for v in tr) for tr in triples]
    return _core.bootstrap_noise(as_matrix(X, copy=copy), convention, t, replicates, block_length,
                                 seed, threads)
