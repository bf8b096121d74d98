"""The fitted couplings as a network: ranked edge tables, edge-list CSV and GraphML files.

Couplings are undirected, so each unordered pair i < j appears once. Files are written
atomically (a temporary file beside the target, then a rename): a failed write never leaves a
partial file behind.
"""
from __future__ import annotations

from typing import Optional, Sequence

import numpy as np

from ._atomic import atomic_output


def _couplings(J) -> np.ndarray:
    J = np.asarray(J, dtype=np.float64)
    if J.ndim != 2 or J.shape[0] != J.shape[1]:
        raise ValueError(f"J: expected a square (N, N) matrix, got shape {J.shape}")
    bad = ~np.isfinite(J)
    if bad.any():
        i, j = np.argwhere(bad)[0]
        raise ValueError(f"J: non-finite value at row {i}, column {j}")
    asym = np.abs(J - J.T)
    tol = 1e-9 * max(1.0, float(np.abs(J).max(initial=0.0)))
    if asym.max(initial=0.0) > tol:
        i, j = np.unravel_index(np.argmax(asym), asym.shape)
        raise ValueError(f"J: not symmetric (J[{i},{j}] = {J[i, j]:.6g} but J[{j},{i}] = {J[j, i]:.6g});"
                         " couplings of an undirected network must be symmetric")
    return J


def _names(names, n: int) -> list:
    if names is None:
        return [str(i) for i in range(n)]
    names = [str(x) for x in names]
    if len(names) != n:
        raise ValueError(f"names: {len(names)} names for {n} units")
    seen = set()
    for x in names:
        if x in seen:
            raise ValueError(f"names: {x!r} appears more than once (node names must be unique)")
        seen.add(x)
    return names


def _pair_matrix(x, n: int, what: str, dtype=np.float64) -> np.ndarray:
    x = np.asarray(x, dtype=dtype)
    if x.shape != (n, n):
        raise ValueError(f"{what}: expected shape ({n}, {n}) like J, got {x.shape}")
    return x


def edge_table(J, names: Optional[Sequence] = None, intervals=None, p_values=None, decisions=None,
               threshold: Optional[float] = 0.0, top: Optional[int] = None):
    """One row per unordered pair i < j, sorted by |J_ij| from strongest to weakest.

    Columns: ``i``, ``j`` (0-based indices), ``source``, ``target`` (names, default the indices
    as strings), ``coupling`` (J_ij), ``abs_coupling``, ``sign`` (+1, -1 or 0), ``rank`` (1 =
    strongest over all pairs, ties broken by (i, j)); and, when given as (N, N) matrices,
    ``ci_low``/``ci_high`` from ``intervals`` (a pair of matrices, or an array of shape (2, N, N)
    or (N, N, 2)), ``p_value`` from ``p_values`` and ``significant`` from ``decisions`` (bool).

    Rows with |J_ij| <= ``threshold`` are left out (so exact zeros are dropped by default;
    ``threshold=None`` keeps every pair). ``top`` keeps only the first ``top`` remaining rows.
    Returns a pandas DataFrame.
    """
    import pandas as pd

    J = _couplings(J)
    n = J.shape[0]
    labels = np.asarray(_names(names, n), dtype=object)
    iu, ju = np.triu_indices(n, k=1)
    w = J[iu, ju]
    a = np.abs(w)
    order = np.lexsort((ju, iu, -a))  # |J| descending, then i, then j
    rank = np.empty(order.size, dtype=np.int64)
    rank[order] = np.arange(1, order.size + 1)
    columns = {
        "i": iu, "j": ju, "source": labels[iu], "target": labels[ju], "coupling": w,
        "abs_coupling": a, "sign": np.sign(w).astype(np.int64), "rank": rank,
    }
    if intervals is not None:
        if isinstance(intervals, (tuple, list)) and len(intervals) == 2:
            low, high = (_pair_matrix(m, n, "intervals") for m in intervals)
        else:
            arr = np.asarray(intervals, dtype=np.float64)
            if arr.shape == (2, n, n):
                low, high = arr[0], arr[1]
            elif arr.shape == (n, n, 2):
                low, high = arr[..., 0], arr[..., 1]
            else:
                raise ValueError(f"intervals: expected (low, high) matrices or shape (2, {n}, {n}) or"
                                 f" ({n}, {n}, 2), got {arr.shape}")
        columns["ci_low"], columns["ci_high"] = low[iu, ju], high[iu, ju]
    if p_values is not None:
        columns["p_value"] = _pair_matrix(p_values, n, "p_values")[iu, ju]
    if decisions is not None:
        columns["significant"] = _pair_matrix(decisions, n, "decisions", dtype=bool)[iu, ju]
    table = pd.DataFrame(columns).iloc[order]
    if threshold is not None:
        table = table[table["abs_coupling"] > float(threshold)]
    if top is not None:
        if int(top) < 0:
            raise ValueError(f"top: expected a count >= 0, got {top}")
        table = table.iloc[: int(top)]
    return table.reset_index(drop=True)


_edge_table = edge_table  # reachable where a parameter of the same name hides it

# Edge-list files use the attribute names network tools expect for edge weights.
_FILE_COLUMNS = {"coupling": "weight", "abs_coupling": "abs_weight"}


def write_edge_list(path, table) -> None:
    """Write an edge table (from :func:`edge_table`, or a coupling matrix) as CSV, atomically.

    The header starts ``source,target,weight,abs_weight,sign,rank`` (``weight`` is J_ij), then any
    of ``ci_low,ci_high,p_value,significant``, then the indices ``i,j``. It loads with
    ``networkx.from_pandas_edgelist(pandas.read_csv(path), "source", "target", edge_attr=True)``.
    """
    import pandas as pd

    if not isinstance(table, pd.DataFrame):
        table = edge_table(table)
    missing = [c for c in ("source", "target", "coupling") if c not in table.columns]
    if missing:
        raise ValueError(f"table: missing column(s) {', '.join(missing)} (make it with edge_table)")
    out = table.rename(columns=_FILE_COLUMNS)
    first = [c for c in ("source", "target", "weight", "abs_weight", "sign", "rank") if c in out]
    last = [c for c in ("i", "j") if c in out]
    out = out[first + [c for c in out.columns if c not in first + last] + last]
    with atomic_output(path, "w", newline="", encoding="utf-8") as f:
        out.to_csv(f, index=False, float_format="%.17g")


def _python(v):
    """numpy scalars as plain Python values (GraphML writers know only those)."""
    if isinstance(v, (np.bool_, bool)):
        return bool(v)
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, (np.floating, float)):
        return float(v)
    return v


def network_graph(J, names: Optional[Sequence] = None, fields=None, threshold: Optional[float] = 0.0,
                  edge_table=None):
    """The couplings as an undirected ``networkx.Graph``.

    Nodes are the unit names (strings) with attributes ``index`` and, when given, ``field`` (h_i).
    Edges are the rows of ``edge_table`` (default: :func:`edge_table` of ``J`` with ``threshold``)
    with attributes ``weight`` (J_ij), ``abs_weight`` (|J_ij|, for layout tools that need
    positive weights), ``sign``, ``rank`` and any of ``ci_low``, ``ci_high``, ``p_value``,
    ``significant``.
    """
    import networkx as nx

    J = _couplings(J)
    n = J.shape[0]
    labels = _names(names, n)
    if edge_table is None:
        edge_table = _edge_table(J, labels, threshold=threshold)
    h = None
    if fields is not None:
        h = np.asarray(fields, dtype=np.float64)
        if h.shape != (n,):
            raise ValueError(f"fields: expected shape ({n},) like J, got {h.shape}")
    G = nx.Graph()
    for k, name in enumerate(labels):
        attrs = {"index": k}
        if h is not None:
            attrs["field"] = float(h[k])
        G.add_node(name, **attrs)
    table = edge_table.rename(columns=_FILE_COLUMNS)
    for column in ("source", "target", "weight"):
        if column not in table.columns:
            raise ValueError(f"edge_table: missing column {column!r} (make it with edge_table)")
    unknown = sorted((set(map(str, table["source"])) | set(map(str, table["target"]))) - set(labels))
    if unknown:
        raise ValueError(f"edge_table: node(s) not in names: {', '.join(unknown[:10])}")
    attrs = [c for c in table.columns if c not in ("source", "target", "i", "j")]
    for d in table.to_dict("records"):
        G.add_edge(str(d["source"]), str(d["target"]), **{c: _python(d[c]) for c in attrs})
    return G


def write_graphml(path, J, names: Optional[Sequence] = None, fields=None,
                  threshold: Optional[float] = 0.0, edge_table=None) -> None:
    """Write the couplings as an undirected GraphML network (see :func:`network_graph`), atomically.

    Readable by networkx (``networkx.read_graphml``), igraph, Cytoscape and Gephi.
    """
    import networkx as nx

    G = network_graph(J, names, fields, threshold, edge_table)
    with atomic_output(path, "wb") as f:
        nx.write_graphml(G, f, encoding="utf-8")


__all__ = ["edge_table", "write_edge_list", "network_graph", "write_graphml"]
