"""Matplotlib figures for fitted models and their checks.

Every function draws into ``ax`` when given (a new figure is made only when ``ax`` is None), never
calls ``plt.show()``, forwards extra keyword arguments to the main matplotlib call, and returns the
Axes. pyplot is imported on first use, so the rest of the package works without matplotlib.
"""
from __future__ import annotations

from typing import Callable, Optional, Sequence, Union

import numpy as np

# Shown on heat maps only up to this many units; beyond it the labels overlap.
MAX_TICK_LABELS = 50


def _pyplot():
    try:
        import matplotlib.pyplot as plt
    except ImportError as e:  # pragma: no cover - depends on the installation
        raise ImportError("spinfer.plots needs matplotlib: pip install matplotlib") from e
    return plt


def _axes(ax):
    if ax is None:
        _, ax = _pyplot().subplots()
    return ax


def _square(J, what: str = "J") -> np.ndarray:
    J = np.asarray(J, dtype=np.float64)
    if J.ndim != 2 or J.shape[0] != J.shape[1]:
        raise ValueError(f"{what}: expected a square (N, N) matrix, got shape {J.shape}")
    if not np.all(np.isfinite(J)):
        i, j = np.argwhere(~np.isfinite(J))[0]
        raise ValueError(f"{what}: non-finite value at row {i}, column {j}")
    return J


def _upper(J) -> np.ndarray:
    """The pairs i < j of a square matrix, in row-major order."""
    return J[np.triu_indices(J.shape[0], k=1)]


def _vector(x, what: str) -> np.ndarray:
    x = np.asarray(x, dtype=np.float64)
    if x.ndim != 1:
        raise ValueError(f"{what}: expected a 1-D array, got shape {x.shape}")
    return x


def cluster_order(J, method: str = "average") -> np.ndarray:
    """Unit order from hierarchical clustering of |J| (strongly coupled units end up adjacent).

    The distance between units i and j is 1 - |J_ij| / max|J| (0 for the strongest pair, 1 for
    uncoupled pairs); ``method`` is the scipy linkage rule. Returns a permutation of 0..N-1.
    """
    from scipy.cluster.hierarchy import leaves_list, linkage
    from scipy.spatial.distance import squareform

    A = np.abs(_square(J))
    n = A.shape[0]
    if n < 3:
        return np.arange(n)
    A = 0.5 * (A + A.T)
    top = _upper(A).max()
    D = 1.0 - A / top if top > 0 else np.ones_like(A)
    np.fill_diagonal(D, 0.0)
    return leaves_list(linkage(squareform(D, checks=False), method=method))


def plot_couplings(J, names: Optional[Sequence] = None, order: Optional[Sequence[int]] = None,
                   cluster: bool = False, *, groups: Optional[Sequence] = None, ax=None,
                   colorbar: bool = True, **kwargs):
    """Heat map of the coupling matrix, diverging colours symmetric around 0, diagonal masked.

    ``order`` is a permutation of the units (indices) to show them in; ``cluster=True`` orders them
    by :func:`cluster_order` instead. ``groups`` (one label per unit, e.g. brain area or cell type)
    sorts units by group, keeping ``order`` within each group, and draws lines between blocks.
    Tick labels (``names``, else the original indices) are shown only for N <= 50.
    Extra keyword arguments go to ``ax.imshow`` (e.g. ``cmap``, ``vmax``). Returns the Axes; the
    image is ``ax.images[0]`` and the order used is stored as ``ax.spinfer_order``.
    """
    J = _square(J)
    n = J.shape[0]
    if names is not None and len(names) != n:
        raise ValueError(f"names: {len(names)} names for {n} units")
    if order is not None and cluster:
        raise ValueError("give either order or cluster=True, not both")
    if cluster:
        perm = cluster_order(J)
    elif order is not None:
        perm = np.asarray(order, dtype=np.int64)
        if perm.shape != (n,) or not np.array_equal(np.sort(perm), np.arange(n)):
            raise ValueError(f"order: expected a permutation of 0..{n - 1}")
    else:
        perm = np.arange(n)
    boundaries = []
    if groups is not None:
        groups = np.asarray([str(g) for g in groups])
        if groups.shape != (n,):
            raise ValueError(f"groups: {groups.size} labels for {n} units")
        rank = {g: k for k, g in enumerate(dict.fromkeys(groups[perm]))}  # first-seen order
        perm = perm[np.argsort([rank[g] for g in groups[perm]], kind="stable")]
        g = groups[perm]
        boundaries = [k for k in range(1, n) if g[k] != g[k - 1]]

    shown = J[np.ix_(perm, perm)]
    mask = np.eye(n, dtype=bool)
    off = shown[~mask]
    vmax = float(np.abs(off).max()) if off.size and np.abs(off).max() > 0 else 1.0
    opts = dict(cmap="RdBu_r", vmin=-vmax, vmax=vmax, interpolation="nearest")
    opts.update(kwargs)
    ax = _axes(ax)
    image = ax.imshow(np.ma.masked_array(shown, mask=mask), **opts)
    for b in boundaries:
        ax.axhline(b - 0.5, color="black", linewidth=0.8)
        ax.axvline(b - 0.5, color="black", linewidth=0.8)
    if n <= MAX_TICK_LABELS:
        labels = [str(names[p]) if names is not None else str(p) for p in perm]
        ax.set_xticks(np.arange(n), labels, rotation=90, fontsize="small")
        ax.set_yticks(np.arange(n), labels, fontsize="small")
    else:
        ax.set_xticks([])
        ax.set_yticks([])
    ax.set_xlabel("unit j")
    ax.set_ylabel("unit i")
    if colorbar:
        ax.figure.colorbar(image, ax=ax, label="coupling $J_{ij}$")
    ax.spinfer_order = perm
    return ax


def _pair_values(x, what: str) -> np.ndarray:
    """1-D values; a square matrix stands for pairs and gives its upper triangle i < j."""
    x = np.asarray(x, dtype=np.float64)
    if x.ndim == 2 and x.shape[0] == x.shape[1]:
        return _upper(x)
    if x.ndim != 1:
        raise ValueError(f"{what}: expected a 1-D array or a square pair matrix, got shape {x.shape}")
    return x


def _noise_band(x, se, bins: int = 20):
    """Sorted x and a smooth SE(x): per-point SEs averaged (root mean square) in quantile bins."""
    order = np.argsort(x, kind="stable")
    xs, ss = x[order], se[order]
    edges = np.unique(np.quantile(xs, np.linspace(0, 1, min(bins, xs.size) + 1)))
    if edges.size < 2:
        return xs, ss
    which = np.clip(np.searchsorted(edges, xs, side="right") - 1, 0, edges.size - 2)
    centres, rms = [], []
    for b in range(edges.size - 1):
        sel = which == b
        if sel.any():
            centres.append(xs[sel].mean())
            rms.append(np.sqrt(np.mean(ss[sel] ** 2)))
    return xs, np.interp(xs, centres, rms)


def plot_model_vs_data(data_values, model_values, noise: Union[None, float, Sequence, Callable] = None,
                       *, independent=None, ax=None, label: str = "pairwise model",
                       independent_label: str = "independent model", noise_style: str = "band",
                       xlabel: str = "data", ylabel: str = "model", log: bool = False, **kwargs):
    """Scatter of model predictions against data values on the identity line.

    Values are 1-D, or square (N, N) matrices (e.g. connected correlations), of which only the
    pairs i < j are used. ``noise`` is the sampling standard error of the data: a scalar, an array
    shaped like the data (e.g. bootstrap SEs), or a function of the data value. It is drawn as the
    band data ± 2 SE around the identity line (``noise_style="band"``; per-point SEs are smoothed
    by root-mean-square averaging in 20 quantile bins of the data value) or as horizontal ±2 SE
    error bars on each point (``"errorbar"``). ``independent`` adds a second series (e.g. the
    independent model's predictions). ``log=True`` uses log-log axes (pattern probabilities).
    Extra keyword arguments go to the main ``ax.scatter``. Returns the Axes.
    """
    x = _pair_values(data_values, "data_values")
    y = _pair_values(model_values, "model_values")
    if x.shape != y.shape:
        raise ValueError(f"data_values has {x.size} values but model_values has {y.size}")
    if noise_style not in ("band", "errorbar"):
        raise ValueError(f"noise_style: expected 'band' or 'errorbar', got {noise_style!r}")
    ax = _axes(ax)
    finite = np.isfinite(x)
    series = [x, y]

    if noise is not None:
        if callable(noise):
            se = np.asarray(noise(x), dtype=np.float64) * np.ones_like(x)
        else:
            se = _pair_values(noise, "noise") if np.ndim(noise) else np.full_like(x, float(noise))
        if se.shape != x.shape:
            raise ValueError(f"noise has {se.size} values but data_values has {x.size}")
        if noise_style == "band":
            xs, band = _noise_band(x[finite], np.abs(se[finite]))
            ax.fill_between(xs, xs - 2 * band, xs + 2 * band, color="0.85", linewidth=0,
                            label="data ± 2 SE", zorder=0)
        else:
            ax.errorbar(x, y, xerr=2 * np.abs(se), fmt="none", ecolor="0.6", linewidth=0.7,
                        zorder=1, label="data ± 2 SE")

    if independent is not None:
        yi = _pair_values(independent, "independent")
        if yi.shape != x.shape:
            raise ValueError(f"independent has {yi.size} values but data_values has {x.size}")
        ax.scatter(x, yi, s=10, marker="s", color="tab:orange", alpha=0.6, label=independent_label,
                   zorder=2)
        series.append(yi)
    opts = dict(s=12, color="tab:blue", alpha=0.8, label=label, zorder=3)
    opts.update(kwargs)
    ax.scatter(x, y, **opts)
    shown = np.concatenate(series)
    shown = shown[np.isfinite(shown) & (shown > 0 if log else True)]
    lo, hi = (float(shown.min()), float(shown.max())) if shown.size else (0.1 if log else 0.0, 1.0)
    if log:
        ax.set_xscale("log")
        ax.set_yscale("log")
    ax.plot([lo, hi], [lo, hi], color="black", linewidth=0.8, label="identity", zorder=1)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.legend(fontsize="small")
    return ax


def plot_active_counts(pk_data, pk_model=None, pk_independent=None, errors=None, *, ax=None,
                       **kwargs):
    """P(K), the probability that K units are active in a bin, on a log y-axis.

    Data (with ±2 SE error bars from ``errors``), pairwise model and independent model, each a 1-D
    array indexed by K = 0, 1, ...; zero probabilities are left out of the log plot. Extra keyword
    arguments go to the data's ``ax.errorbar``. Returns the Axes.
    """
    ax = _axes(ax)
    pk = _vector(pk_data, "pk_data")
    k = np.arange(pk.size)
    shown = pk > 0
    positive = [pk[shown]]
    err = None
    if errors is not None:
        err = _vector(errors, "errors")
        if err.shape != pk.shape:
            raise ValueError(f"errors has {err.size} values but pk_data has {pk.size}")
        # a log axis cannot show a bar reaching below 0: clip the lower half at the value itself
        err = np.vstack([np.minimum(2 * err, pk * (1 - 1e-9)), 2 * err])[:, shown]
    opts = dict(fmt="o", color="black", markersize=4, capsize=2, label="data")
    opts.update(kwargs)
    ax.errorbar(k[shown], pk[shown], yerr=err, **opts)
    for values, label, style in ((pk_model, "pairwise model", dict(color="tab:blue")),
                                 (pk_independent, "independent model",
                                  dict(color="tab:orange", linestyle="--"))):
        if values is None:
            continue
        v = _vector(values, label)
        kv = np.arange(v.size)
        ax.plot(kv[v > 0], v[v > 0], label=label, **style)
        positive.append(v[v > 0])
    ax.set_yscale("log")
    lowest = np.concatenate(positive)
    if lowest.size:  # error bars reaching zero would otherwise stretch the axis down to ~1e-9 P
        ax.set_ylim(bottom=0.3 * lowest.min())
    ax.set_xlabel("K (active units per bin)")
    ax.set_ylabel("P(K)")
    ax.legend(fontsize="small")
    return ax


def plot_specific_heat(temperatures, heat=None, errors=None, peak: Optional[float] = None, *,
                       ax=None, label: Optional[str] = None, **kwargs):
    """Specific heat C(T) with ±2 SE error bars and the peak marked by a dashed line and a star.

    ``temperatures`` may also be the dict returned by :func:`spinfer.temperature_scan` (then
    ``heat``, ``errors`` and ``peak`` default to its entries). ``peak`` is a temperature; the star
    sits on C interpolated linearly at it. Extra keyword arguments go to ``ax.errorbar``.
    Returns the Axes.
    """
    if isinstance(temperatures, dict):
        scan = temperatures
        heat = scan["specific_heat"] if heat is None else heat
        errors = scan.get("specific_heat_error") if errors is None else errors
        peak = scan.get("peak_temperature") if peak is None else peak
        temperatures = scan["temperatures"]
    if heat is None:
        raise ValueError("heat: the specific heat values are required")
    t = _vector(temperatures, "temperatures")
    c = _vector(heat, "heat")
    if t.shape != c.shape:
        raise ValueError(f"{t.size} temperatures but {c.size} specific-heat values")
    order = np.argsort(t)
    t, c = t[order], c[order]
    err = None
    if errors is not None:
        err = _vector(errors, "errors")
        if err.shape != c.shape:
            raise ValueError(f"errors has {err.size} values but heat has {c.size}")
        err = 2 * err[order]
    ax = _axes(ax)
    opts = dict(fmt="o-", color="tab:blue", markersize=4, capsize=2, label=label)
    opts.update(kwargs)
    ax.errorbar(t, c, yerr=err, **opts)
    if peak is not None and np.isfinite(peak):
        peak = float(peak)
        ax.axvline(peak, color="tab:red", linestyle="--", linewidth=0.8)
        ax.plot([peak], [np.interp(peak, t, c)], marker="*", markersize=12, color="tab:red",
                linestyle="none", label=f"peak T = {peak:.3g}")
    ax.set_xlabel("temperature T")
    ax.set_ylabel("specific heat C(T) per unit")
    if label is not None or peak is not None:
        ax.legend(fontsize="small")
    return ax


def plot_coupling_histogram(J, *, ax=None, bins=50, **kwargs):
    """Histogram of the couplings J_ij over the pairs i < j (each pair once, no diagonal).

    Extra keyword arguments go to ``ax.hist``. Returns the Axes.
    """
    values = _upper(_square(J))
    ax = _axes(ax)
    opts = dict(bins=bins, color="tab:blue", edgecolor="white", linewidth=0.3)
    opts.update(kwargs)
    ax.hist(values, **opts)
    ax.axvline(0.0, color="black", linewidth=0.8)
    ax.set_xlabel("coupling $J_{ij}$")
    ax.set_ylabel("pairs")
    return ax


def plot_recovered_vs_true(J_true, J_fit, *, ax=None, **kwargs):
    """Fitted against true couplings (pairs i < j) on the identity line.

    The legend gives the number of pairs, the RMS error sqrt(mean((J_fit - J_true)^2)) and the
    Pearson correlation. Extra keyword arguments go to ``ax.scatter``. Returns the Axes.
    """
    A, B = _square(J_true, "J_true"), _square(J_fit, "J_fit")
    if A.shape != B.shape:
        raise ValueError(f"J_true is {A.shape} but J_fit is {B.shape}")
    x, y = _upper(A), _upper(B)
    rmse = float(np.sqrt(np.mean((y - x) ** 2))) if x.size else float("nan")
    r = float(np.corrcoef(x, y)[0, 1]) if x.size > 1 and x.std() > 0 and y.std() > 0 else float("nan")
    ax = _axes(ax)
    opts = dict(s=12, color="tab:blue", alpha=0.8,
                label=f"{x.size} pairs: RMS error {rmse:.3g}, r = {r:.3f}")
    opts.update(kwargs)
    ax.scatter(x, y, **opts)
    both = np.concatenate([x, y]) if x.size else np.array([0.0, 1.0])
    lo, hi = float(both.min()), float(both.max())
    ax.plot([lo, hi], [lo, hi], color="black", linewidth=0.8, label="identity")
    ax.set_xlabel("true $J_{ij}$")
    ax.set_ylabel("fitted $J_{ij}$")
    ax.legend(fontsize="small")
    ax.spinfer_rmse, ax.spinfer_correlation = rmse, r
    return ax


__all__ = [
    "cluster_order",
    "plot_couplings",
    "plot_model_vs_data",
    "plot_active_counts",
    "plot_specific_heat",
    "plot_coupling_histogram",
    "plot_recovered_vs_true",
]
