"""On/off gene matrices from AnnData ``.h5ad`` files, read with h5py alone (anndata not needed).

Layout (the AnnData on-disk format, anndata 0.8+, and the older h5sparse attributes): ``X`` is a
dense 2-D dataset (cells x genes) or a sparse group with ``encoding-type`` "csr_matrix" or
"csc_matrix" (older files: ``h5sparse_format`` "csr"/"csc"), a ``shape`` attribute and the
datasets ``data``, ``indices``, ``indptr``. ``obs`` and ``var`` are dataframe groups whose
``_index`` attribute names the index column (older files: a ``_index`` dataset; oldest: a
compound dataset with an ``index`` field); columns are string/number datasets or categorical
groups (``codes`` into ``categories``). ``layers/<name>`` and ``raw/X`` (with ``raw/var``) hold
other matrices with the same encodings.

Binarisation: gene g is active in a cell when its value is strictly above the gene's threshold.
"""
from __future__ import annotations

import numbers
from collections import Counter
from typing import List, NamedTuple, Optional, Sequence

import numpy as np

from ._hdf5 import BLOCK_VALUES, Where, attribute_text, child, is_group, open_file, strings


class BinarizedExpression(NamedTuple):
    """An on/off gene matrix read from an .h5ad file.

    ``X``: (n_cells, n_genes) uint8, 1 = value above the gene's threshold; ``genes`` and ``cells``:
    names; ``thresholds``: the threshold used for each kept gene; ``dropped``: names of genes that
    were constant after binarisation and removed (only with ``drop_constant=True``).
    """

    X: np.ndarray
    genes: List[str]
    cells: List[str]
    thresholds: np.ndarray
    dropped: List[str]


def _column(frame, name: str, where: Where) -> list:
    """One column of a dataframe group as strings (string, number or categorical encodings)."""
    if name not in frame:
        raise ValueError(where(f"{frame.name}/{name}", "missing"))
    obj = frame[name]
    if is_group(obj):
        kind = attribute_text(obj, "encoding-type")
        if kind != "categorical":
            raise ValueError(where(obj.name, f"cannot be read as names (encoding {kind!r})"))
        codes = np.asarray(child(obj, "codes", where)[()], dtype=np.int64)
        categories = strings(child(obj, "categories", where), where)
        if codes.size and (codes.min() < 0 or codes.max() >= len(categories)):
            raise ValueError(where(obj.name, "has missing values or codes outside its categories"))
        return [categories[c] for c in codes]
    return strings(obj, where)


def _frame_index(parent, name: str, where: Where, column: Optional[str] = None) -> list:
    """Row names of the dataframe ``parent[name]`` (obs or var), or one of its columns."""
    if name not in parent:
        raise ValueError(where(f"{parent.name.rstrip('/')}/{name}", "missing (no row names)"))
    frame = parent[name]
    if not is_group(frame):  # anndata < 0.7: a compound dataset with an "index" field
        fields = frame.dtype.names or ()
        field = column or "index"
        if field not in fields:
            raise ValueError(where(frame.name, f"has no field {field!r}"))
        return [v.decode("utf-8") if isinstance(v, bytes) else str(v) for v in frame[field]]
    if column is not None:
        return _column(frame, column, where)
    index = attribute_text(frame, "_index")
    if index is None:
        if "_index" not in frame:
            raise ValueError(where(frame.name, "has neither an _index attribute nor an _index "
                                   "dataset naming its rows"))
        index = "_index"
    return _column(frame, index, where)


class _Matrix:
    """Column blocks of a dense or sparse (CSR/CSC) matrix in an .h5ad file, as float64."""

    def __init__(self, obj, where: Where):
        self.where, self.name = where, obj.name
        if not is_group(obj):
            if obj.ndim != 2:
                raise ValueError(where(obj.name, f"expected a 2-D matrix, got shape {obj.shape}"))
            self._check_dtype(obj.dtype)
            self.dense, self.shape = obj, tuple(int(s) for s in obj.shape)
            return
        self.dense = None
        kind = attribute_text(obj, "encoding-type")
        layout = {"csr_matrix": "csr", "csc_matrix": "csc"}.get(kind or "")
        shape = obj.attrs.get("shape")
        if layout is None:  # older files
            layout = attribute_text(obj, "h5sparse_format")
            shape = obj.attrs.get("h5sparse_shape")
        if layout not in ("csr", "csc"):
            raise ValueError(where(obj.name, f"is a group but not a CSR/CSC sparse matrix "
                                   f"(encoding-type {kind!r})"))
        if shape is None or len(shape) != 2:
            raise ValueError(where(obj.name, "has no 2-D shape attribute"))
        self.shape = (int(shape[0]), int(shape[1]))
        data_ds = child(obj, "data", where)
        self._check_dtype(data_ds.dtype)
        data = np.asarray(data_ds[()], dtype=np.float64)
        indices = child(obj, "indices", where)
        indptr = child(obj, "indptr", where)
        if indices.dtype.kind not in "iu" or indptr.dtype.kind not in "iu":
            raise ValueError(where(obj.name, "indices and indptr must be integers"))
        indices = np.asarray(indices[()]).astype(np.int64)
        indptr = np.asarray(indptr[()]).astype(np.int64)
        major, minor = self.shape if layout == "csr" else self.shape[::-1]
        if data.ndim != 1 or indices.shape != data.shape:
            raise ValueError(where(obj.name, f"data ({data.shape}) and indices ({indices.shape}) "
                                   f"must be 1-D of the same length"))
        if indptr.shape != (major + 1,) or indptr[0] != 0 or indptr[-1] != data.size \
                or np.any(np.diff(indptr) < 0):
            raise ValueError(where(f"{obj.name}/indptr", f"expected {major + 1} non-decreasing "
                                   f"entries from 0 to {data.size}"))
        if indices.size and (indices.min() < 0 or indices.max() >= minor):
            raise ValueError(where(f"{obj.name}/indices", f"entries must lie in 0..{minor - 1}"))
        owner = np.repeat(np.arange(major, dtype=np.int64), np.diff(indptr))
        rows, cols = (owner, indices) if layout == "csr" else (indices, owner)
        order = np.argsort(cols, kind="stable")  # group the entries by gene
        self.rows, self.cols, self.values = rows[order], cols[order], data[order]
        self.col_ptr = np.searchsorted(self.cols, np.arange(self.shape[1] + 1))

    def _check_dtype(self, dtype):
        if dtype.kind not in "fiub":
            raise ValueError(self.where(self.name, f"expected numbers, got dtype {dtype}"))

    def columns(self, which: np.ndarray) -> np.ndarray:
        """The columns ``which`` (strictly increasing gene indices) as (n_cells, k) float64."""
        if self.dense is not None:
            contiguous = which.size and which[-1] - which[0] == which.size - 1
            cols = slice(int(which[0]), int(which[-1]) + 1) if contiguous else which
            return np.asarray(self.dense[:, cols], dtype=np.float64)
        out = np.zeros((self.shape[0], which.size))
        for k, j in enumerate(which):
            a, b = self.col_ptr[j], self.col_ptr[j + 1]
            np.add.at(out[:, k], self.rows[a:b], self.values[a:b])  # duplicates add, as in scipy
        return out


def _threshold_rule(threshold, n: int):
    """(kind, value): kind 'fixed' with an array of n thresholds, or 'quantile' with q."""
    if isinstance(threshold, str):
        rule = threshold.strip().lower()
        if rule == "median":
            return "quantile", 0.5
        if rule.startswith("quantile:"):
            try:
                q = float(rule.split(":", 1)[1])
            except ValueError:
                q = float("nan")
            if not 0.0 <= q < 1.0:
                raise ValueError(f"threshold: {threshold!r}: the quantile must be in [0, 1)")
            return "quantile", q
        raise ValueError(f"threshold: expected a number, one number per gene, 'median' or "
                         f"'quantile:Q', got {threshold!r}")
    if isinstance(threshold, numbers.Real):
        values = np.full(n, float(threshold))
    else:
        values = np.asarray(threshold, dtype=np.float64)
        if values.shape != (n,):
            raise ValueError(f"threshold: {values.size} values for {n} genes")
    if not np.all(np.isfinite(values)):
        raise ValueError("threshold: thresholds must be finite")
    return "fixed", values


def read_h5ad_binary(path, threshold=0.0, *, genes: Optional[Sequence[str]] = None,
                     layer: Optional[str] = None, use_raw: bool = False,
                     gene_column: Optional[str] = None,
                     drop_constant: bool = False) -> BinarizedExpression:
    """Read an .h5ad expression matrix and turn it into an on/off (cells x genes) matrix.

    A gene is active in a cell when its value is strictly greater than the gene's threshold.
    ``threshold``: a number for every gene (default 0: active = detected, a nonzero count), an
    array with one number per gene read, "median" (active = above the gene's median over the cells;
    for a gene detected in fewer than half the cells this is the same as > 0) or "quantile:Q"
    (above the gene's Q-quantile, numpy.quantile's linear rule).

    ``genes``: gene names to read, in that order (default: all). ``layer``: read
    ``layers/<layer>`` instead of X (e.g. raw counts kept in a "counts" layer); ``use_raw``: read
    ``raw/X`` with the gene names of ``raw/var``. ``gene_column``: a column of var with the names
    to use (e.g. gene symbols) instead of var's index.

    Expression levels must be non-negative: a matrix with negative values looks scaled or centred
    (z-scores, residuals) and is refused (ValueError naming the file), since scaled values carry
    no on/off expression level to threshold. Genes that end up constant (never or always active)
    are refused by name, as the fitters would refuse them; ``drop_constant=True`` removes them and
    lists them in the result's ``dropped``.
    """
    where = Where(path)
    if layer is not None and use_raw:
        raise ValueError("give either layer or use_raw, not both")
    with open_file(path) as f:
        if use_raw:
            raw = child(f, "raw", where, kind="group", hint=" (use_raw=True needs raw/X)")
            source, var_parent, matrix_name = child(raw, "X", where, kind="any"), raw, "/raw/X"
        elif layer is not None:
            layers = child(f, "layers", where, kind="group", hint=f" (no layers; asked for {layer!r})")
            source, var_parent, matrix_name = (child(layers, layer, where, kind="any"), f,
                                               f"/layers/{layer}")
        else:
            source, var_parent, matrix_name = child(f, "X", where, kind="any"), f, "/X"
        matrix = _Matrix(source, where)
        n_cells, n_genes = matrix.shape
        all_genes = _frame_index(var_parent, "var", where, gene_column)
        cells = _frame_index(f, "obs", where)
        if len(all_genes) != n_genes:
            raise ValueError(where(matrix_name, f"has {n_genes} columns but var names "
                                   f"{len(all_genes)} genes"))
        if len(cells) != n_cells:
            raise ValueError(where(matrix_name, f"has {n_cells} rows but obs names {len(cells)} "
                                   f"cells"))
        if n_cells == 0 or n_genes == 0:
            raise ValueError(where(matrix_name, f"is empty ({n_cells} x {n_genes})"))

        var_name = f"{var_parent.name.rstrip('/')}/var"
        copies = Counter(all_genes)
        if genes is None:
            pick = np.arange(n_genes)
        else:
            position = {g: k for k, g in enumerate(all_genes)}
            wanted = [str(g) for g in genes]
            unknown = [g for g in wanted if g not in position]
            if unknown:
                raise ValueError(where(var_name, f"no gene named {', '.join(map(repr, unknown[:20]))}"))
            if len(set(wanted)) != len(wanted) or not wanted:
                raise ValueError("genes: expected distinct gene names, at least one")
            pick = np.array([position[g] for g in wanted], dtype=np.int64)
        names = [all_genes[k] for k in pick]
        duplicated = sorted({g for g in names if copies[g] > 1})
        if duplicated:
            raise ValueError(where(var_name, f"gene name(s) {', '.join(map(repr, duplicated[:20]))} "
                                   f"occur more than once; choose unique names with gene_column= "
                                   f"or genes="))
        kind, rule = _threshold_rule(threshold, pick.size)

        # Genes are read in blocks of columns, in file order (h5py needs increasing indices).
        X = np.empty((n_cells, pick.size), dtype=np.uint8)
        used = np.empty(pick.size)
        order = np.argsort(pick, kind="stable")
        width = max(1, BLOCK_VALUES // n_cells)
        for b in range(0, pick.size, width):
            out = order[b:b + width]
            block = matrix.columns(pick[out])
            bad = ~np.isfinite(block)
            if bad.any():
                i, j = np.argwhere(bad)[0]
                raise ValueError(where(matrix_name, f"cell {cells[i]!r}, gene {names[out[j]]!r}: "
                                       f"value {float(block[i, j])!r} is not finite"))
            if block.min() < 0:
                i, j = np.argwhere(block < 0)[0]
                raise ValueError(where(matrix_name, f"holds negative values (e.g. {block[i, j]:.4g} "
                                       f"for cell {cells[i]!r}, gene {names[out[j]]!r}): the data "
                                       f"look scaled or centred, and scaled data cannot be "
                                       f"binarized by expression level; read raw or normalised "
                                       f"counts (layer=..., use_raw=True)"))
            t = rule[out] if kind == "fixed" else np.quantile(block, rule, axis=0)
            X[:, out] = block > t
            used[out] = t

    active = X.sum(axis=0)
    never, always = active == 0, active == n_cells
    constant = never | always
    dropped: List[str] = []
    if constant.any():
        listing = "; ".join(f"{label}: {', '.join(repr(names[k]) for k in np.flatnonzero(sel)[:20])}"
                            + (" ..." if sel.sum() > 20 else "")
                            for label, sel in (("never active", never), ("always active", always))
                            if sel.any())
        if not drop_constant:
            raise ValueError(where(matrix_name, f"{int(constant.sum())} gene(s) are constant after "
                                   f"binarisation ({listing}); the fitters refuse constant units: "
                                   f"pass drop_constant=True to drop them (they are listed in the "
                                   f"result's 'dropped'), or change the threshold"))
        if constant.all():
            raise ValueError(where(matrix_name, f"every gene is constant after binarisation "
                                   f"({listing})"))
        dropped = [names[k] for k in np.flatnonzero(constant)]
        keep = np.flatnonzero(~constant)
        X = np.ascontiguousarray(X[:, keep])
        names = [names[k] for k in keep]
        used = used[keep]
    return BinarizedExpression(X, names, cells, used, dropped)
