"""Reading and writing data matrices, and binning spike times.

Matrix files: ``.npy`` (one 2-D array), ``.npz`` (a named array, or "X" with "names" as written
here, or the only array), ``.csv`` / ``.tsv`` / ``.txt`` (delimited text with an optional header
row of unit names). Missing or unreadable files raise ``OSError``; bad content raises
``ValueError`` naming the file and, for text, the line and column.
"""
from __future__ import annotations

import json
import os
from typing import NamedTuple, Optional, Sequence, Tuple

import numpy as np

from . import _core


class MatrixFile(NamedTuple):
    """A matrix read from a file: ``X`` holds the active bits (uint8 0/1) whatever the file's
    convention; ``convention`` ("binary" or "spin") says how the file wrote them."""

    X: np.ndarray
    names: list
    convention: str


def read_matrix(path, convention: Optional[str] = None, member: Optional[str] = None) -> MatrixFile:
    """Read a (n_samples, n_units) 0/1 or -1/+1 matrix from .npy, .npz, .csv, .tsv or .txt.

    ``convention`` ("binary" or "spin") states how the values are written; None detects it.
    ``member`` selects an array of an .npz archive ("name" or "name.npy").
    """
    X, names, conv = _core.read_matrix(os.fspath(path), convention, member or "")
    return MatrixFile(X, list(names), conv)


def write_matrix(path, X, names: Optional[Sequence[str]] = None, convention: Optional[str] = None) -> None:
    """Write a 0/1 or -1/+1 matrix atomically, in the format its extension names.

    ``convention`` chooses how values are written (0/1 or -1/+1); None keeps the one the values
    are in. Names are stored in .npz (array "names") and text headers, not in .npy.
    A pandas DataFrame's column names are used when ``names`` is None.
    """
    if names is None and hasattr(X, "columns") and hasattr(X, "to_numpy"):
        names = [str(c) for c in X.columns]
        X = X.to_numpy()
    _core.write_matrix(os.fspath(path), np.asarray(X), None if names is None else [str(n) for n in names],
                       convention)


def read_spikes(path) -> Tuple[np.ndarray, np.ndarray]:
    """Read a spike table (.csv/.tsv/.txt, columns unit and time in seconds, header optional).

    Returns (units, times): per-spike unit ids as a string array and times as float64.
    """
    ids, index, times = _core.read_spike_table(os.fspath(path))
    return np.asarray(ids, dtype=object)[index].astype(str), times


def bin_spikes(units, times, bin_width: float, start: Optional[float] = None,
               stop: Optional[float] = None, gaps: Sequence[Tuple[float, float]] = (),
               min_rate_hz: float = 0.0):
    """Bin spike times (seconds) into a (n_bins, n_units) uint8 matrix.

    Bins are [start + k w, start + (k+1) w); only whole bins inside [start, stop) and outside every
    gap [a, b) are kept (gap bins are dropped, not zero-filled). A unit is 1 in a bin holding at
    least one of its spikes. start/stop default to the first/last spike. Units firing below
    ``min_rate_hz`` are dropped.

    Returns (X, names, report): names are the unit ids as strings (sorted numerically when all are
    numbers, else lexicographically); report is a dict with bins kept, bins dropped for gaps,
    spikes outside the window, bins with 2+ spikes, and per-unit rates.
    """
    units = np.asarray(units)
    times = np.asarray(times, dtype=np.float64)
    if units.ndim != 1 or times.ndim != 1:
        raise ValueError("units and times must be 1-D sequences of the same length")
    if units.shape != times.shape:
        raise ValueError(f"{units.size} unit labels but {times.size} spike times")
    ids, index = np.unique(units, return_inverse=True)
    X, names, report = _core.bin_spikes([str(u) for u in ids], index.astype(np.int32).ravel(),
                                        times, float(bin_width), start, stop,
                                        [(float(a), float(b)) for a, b in gaps], float(min_rate_hz))
    return X, list(names), json.loads(report)
