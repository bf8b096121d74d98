"""Small HDF5 helpers shared by the NWB and AnnData readers (h5py is imported on first use).

Errors name the file and the object inside it: ``ValueError`` for content (missing or malformed
datasets), ``OSError`` for files that cannot be opened, ``ImportError`` when h5py is missing.
"""
from __future__ import annotations

import os

import numpy as np

# Column blocks of at most this many values (float64) are held in memory at once.
BLOCK_VALUES = 1 << 23


def h5py_module():
    """h5py, or an ImportError saying how to get it."""
    try:
        import h5py
    except ImportError as e:
        raise ImportError(
            "spinfer's NWB and .h5ad readers need h5py: pip install h5py "
            "(or install spinfer with the 'readers' extra: pip install 'spinfer[readers]')"
        ) from e
    return h5py


def open_file(path):
    """Open ``path`` read-only; OSError naming the file if it is missing or not HDF5."""
    h5py = h5py_module()
    path = os.fspath(path)
    if not os.path.exists(path):
        raise FileNotFoundError(f"{path}: no such file")
    try:
        return h5py.File(path, "r")
    except OSError as e:
        raise OSError(f"{path}: cannot be read as an HDF5 file ({e})") from e


class Where:
    """Names an object for messages: '<file>: /units/spike_times: ...'."""

    def __init__(self, path):
        self.path = os.fspath(path)

    def __call__(self, obj: str, message: str) -> str:
        return f"{self.path}: {obj}: {message}"


def child(group, name: str, where: Where, kind: str = "dataset", hint: str = ""):
    """``group[name]`` checked to be a dataset, a group or either (``kind`` "dataset", "group",
    "any"); ValueError naming it when absent."""
    h5py = h5py_module()
    full = f"{group.name.rstrip('/')}/{name}"
    if name not in group:
        raise ValueError(where(full, f"missing{hint}"))
    obj = group[name]
    want = {"dataset": h5py.Dataset, "group": h5py.Group, "any": (h5py.Dataset, h5py.Group)}[kind]
    if not isinstance(obj, want):
        raise ValueError(where(full, f"expected an HDF5 {kind}, found {type(obj).__name__}"))
    return obj


def is_group(obj) -> bool:
    return isinstance(obj, h5py_module().Group)


def attribute_text(obj, name: str):
    """A string attribute as str (h5py returns bytes or str depending on how it was written)."""
    v = obj.attrs.get(name)
    if v is None:
        return None
    if isinstance(v, np.ndarray) and v.shape == ():
        v = v[()]
    if isinstance(v, bytes):
        return v.decode("utf-8")
    return v if isinstance(v, str) else str(v)


def strings(ds, where: Where) -> list:
    """A 1-D dataset of strings (variable or fixed length) or numbers, as a list of str."""
    if ds.ndim != 1:
        raise ValueError(where(ds.name, f"expected a 1-D column, got shape {ds.shape}"))
    kind = ds.dtype.kind
    if kind == "O" or kind in "SU":
        values = ds[()]
        return [v.decode("utf-8") if isinstance(v, bytes) else str(v) for v in values]
    if kind in "iu":
        return [str(int(v)) for v in ds[()]]
    if kind == "f":
        return [repr(float(v)) for v in ds[()]]
    if kind == "b":
        return [str(bool(v)) for v in ds[()]]
    raise ValueError(where(ds.name, f"cannot be read as names (dtype {ds.dtype})"))


def ragged_index(ds, n_rows: int, n_data: int, where: Where) -> np.ndarray:
    """A ragged-column index (row k owns data[idx[k-1]:idx[k]], idx[-1] = 0) as int64, checked.

    Any signed or unsigned integer width is accepted. The entries must not decrease and the last
    one must equal the length of the data it indexes.
    """
    if ds.ndim != 1:
        raise ValueError(where(ds.name, f"expected a 1-D index, got shape {ds.shape}"))
    if ds.dtype.kind not in "iu":
        raise ValueError(where(ds.name, f"expected integers, got dtype {ds.dtype}"))
    raw = np.asarray(ds[()])
    if raw.size != n_rows:
        raise ValueError(where(ds.name, f"{raw.size} entries for {n_rows} rows"))
    if raw.size and raw.dtype.kind == "i" and raw.min() < 0:
        k = int(np.flatnonzero(raw < 0)[0])
        raise ValueError(where(ds.name, f"entry {k + 1} is negative ({int(raw[k])})"))
    if raw.size and int(raw.max()) > n_data:  # compare before a uint64 -> int64 cast can wrap
        k = int(np.flatnonzero(raw > n_data)[0])
        raise ValueError(where(ds.name, f"entry {k + 1} ({int(raw[k])}) points beyond the "
                                        f"{n_data} elements of the data it indexes"))
    idx = raw.astype(np.int64)
    down = np.flatnonzero(np.diff(idx) < 0)
    if down.size:
        k = int(down[0]) + 1
        raise ValueError(where(ds.name, f"entry {k + 1} ({idx[k]}) is below entry {k} "
                                        f"({idx[k - 1]}); the index must not decrease"))
    last = int(idx[-1]) if idx.size else 0
    if last != n_data:
        raise ValueError(where(ds.name, f"the last entry is {last} but the data it indexes has "
                                        f"{n_data} elements"))
    return idx


def segments(idx: np.ndarray):
    """(begin, end) of every row of a checked ragged index."""
    ends = idx
    begins = np.concatenate([[0], idx[:-1]]).astype(np.int64)
    return begins, ends
