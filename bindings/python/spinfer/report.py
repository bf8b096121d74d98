"""A one-file HTML report of a fitted model, its checks and its caveats.

The file is self-contained (figures are inline base64 PNG images, the style sheet is inline, there
are no scripts and no external links), so it can be mailed, archived or opened offline.
"""
from __future__ import annotations

import base64
import datetime
import html
import io
import json
from typing import Optional, Sequence, Union

import numpy as np

from . import plots
from ._atomic import atomic_output
from ._version import __version__

_STYLE = """
body { font-family: sans-serif; max-width: 60em; margin: 2em auto; padding: 0 1em; color: #222; }
h1 { font-size: 1.6em; } h2 { font-size: 1.25em; border-bottom: 1px solid #ccc; margin-top: 2em; }
table { border-collapse: collapse; margin: 0.8em 0; font-size: 0.9em; }
th, td { border: 1px solid #ccc; padding: 0.2em 0.6em; text-align: right; }
th { background: #f2f2f2; } td.text, th.text { text-align: left; }
figure { display: inline-block; margin: 0.5em; vertical-align: top; }
figcaption { font-size: 0.85em; color: #555; max-width: 30em; }
img { max-width: 100%; } .note { color: #555; font-size: 0.9em; }
"""

CAUTIONS = (
    "Couplings are statistical dependencies between the recorded units, not anatomical synapses "
    "or regulatory interactions. A strong coupling says that two units are active together (or "
    "apart) more often than their other couplings and fields explain; it does not say that one "
    "drives the other, nor in which direction.",
    "Everything that was not recorded is folded into the couplings: a common input from unobserved "
    "units or from a stimulus shows up as couplings between the units that share it. Adding or "
    "removing units changes the couplings of the others.",
    "Nonstationarity (rates drifting over the session, changes of behavioural state) creates "
    "apparent couplings; so does pooling different conditions. Fit stationary stretches separately "
    "when in doubt.",
    "The bin width (or, for expression data, the cell grouping and binarisation threshold) is part of "
    "the model: couplings, and their signs, change with it. Compare networks only at the same bin "
    "width.",
    "A peak of the specific heat near T = 1 is not by itself evidence of criticality: peaks of this "
    "kind also arise from subsampling a larger network and from the finite number of samples.",
    "The result is a statistical model with stated assumptions (stationary samples, independent "
    "bins, pairwise interactions only). Where the model departs from the data beyond the sampling "
    "noise (shaded bands and tables above), conclusions drawn from it are less reliable.",
)


def _get(obj, *keys):
    """The first present key of a dict, or attribute of an object; None if none is present."""
    for k in keys:
        if isinstance(obj, dict):
            if obj.get(k) is not None:
                return obj[k]
        elif getattr(obj, k, None) is not None:
            return getattr(obj, k)
    return None


def _fmt(v) -> str:
    if isinstance(v, (bool, np.bool_)):
        return str(bool(v))
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        return f"{float(v):.4g}"
    if isinstance(v, (dict, list, tuple)):
        return json.dumps(v, default=str)
    return str(v)


def _table(rows: Sequence[Sequence], header: Optional[Sequence[str]] = None) -> str:
    def cell(tag, v):
        numeric = isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool)
        cls = "" if numeric else ' class="text"'
        return f"<{tag}{cls}>{html.escape(_fmt(v))}</{tag}>"

    out = ["<table>"]
    if header:
        out.append("<tr>" + "".join(cell("th", h) for h in header) + "</tr>")
    for r in rows:
        out.append("<tr>" + "".join(cell("td", v) for v in r) + "</tr>")
    out.append("</table>")
    return "\n".join(out)


def _figure(draw, caption: str, size=(5.0, 4.0)) -> str:
    """Render ``draw(ax)`` into an inline PNG <figure>. No pyplot: the figure is never global."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=size, layout="constrained")
    draw(fig.subplots())
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100)
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return (f'<figure><img alt="{html.escape(caption)}" src="data:image/png;base64,{data}">'
            f"<figcaption>{html.escape(caption)}</figcaption></figure>")


def _array(x) -> Optional[np.ndarray]:
    return None if x is None else np.asarray(x, dtype=np.float64)


def _flat(x) -> np.ndarray:
    """Pair matrices give their upper triangle, anything else is flattened."""
    x = np.asarray(x, dtype=np.float64)
    if x.ndim == 2 and x.shape[0] == x.shape[1]:
        return x[np.triu_indices(x.shape[0], k=1)]
    return x.ravel()


def _agreement(block: dict, section: str) -> list:
    """Rows (series, values compared, RMS of (model - data)/SE, fraction within 2 SE, max |z|).

    Only entries with a positive data SE count (a zero SE, e.g. a never-seen K, gives no z-score).
    """
    data, se = block.get("data"), block.get("data_se")
    if data is None or se is None:
        return []
    d, s = _flat(data), _flat(se)
    if d.shape != s.shape:
        raise ValueError(f"check[{section!r}]: data has {d.size} values but data_se has {s.size}")
    rows = []
    for key, label in (("model", "pairwise model"), ("independent", "independent model")):
        if block.get(key) is None:
            continue
        m = _flat(block[key])
        if m.shape != d.shape:
            raise ValueError(f"check[{section!r}]: data has {d.size} values but {key} has {m.size}")
        ok = (s > 0) & np.isfinite(s) & np.isfinite(d) & np.isfinite(m)
        if not ok.any():
            continue
        z = (m[ok] - d[ok]) / s[ok]
        rows.append([section, label, int(ok.sum()), float(np.sqrt(np.mean(z ** 2))),
                     float(np.mean(np.abs(z) <= 2.0)), float(np.max(np.abs(z)))])
    return rows


def _summary_table(summary: dict) -> str:
    """{name: value} as two columns, or {model: {name: value}} as one column per model."""
    if summary and all(isinstance(v, dict) for v in summary.values()):
        models = list(summary)
        names = list(dict.fromkeys(k for v in summary.values() for k in v))
        rows = [[n] + [summary[m].get(n, "") for m in models] for n in names]
        return _table(rows, ["quantity"] + models)
    return _table([[k, v] for k, v in summary.items()], ["quantity", "value"])


_CHECK_FIGURES = (
    ("means", "mean activity", "Means: model against data"),
    ("correlations", "connected correlation", "Connected pair correlations (pairs i < j): model "
                                              "against data"),
    ("triplets", "connected triplet correlation", "Connected third-order correlations (not fitted):"
                                                  " model against data"),
)


def write_report(path, *, title: str, model=None, check: Optional[dict] = None,
                 scan: Optional[dict] = None, truth=None, edges=None,
                 notes: Union[None, str, Sequence[str]] = None, data_shape=None,
                 provenance: Optional[dict] = None, top_edges: int = 25) -> None:
    """Write a self-contained HTML report to ``path`` (atomically).

    ``model``: a dict or object with ``fields``, ``couplings`` (or ``h``, ``J``), optional
    ``names``, ``convention`` and ``provenance`` (e.g. :class:`spinfer.IsingModel`).
    ``check``: model-vs-data comparisons, all keys optional: ``summary`` ({name: value}, or
    {model: {name: value}}), and ``means``, ``correlations``, ``triplets``, ``active_counts``, each
    {"data", "model", "independent", "data_se"} (arrays; correlations may be (N, N) matrices).
    ``scan``: {"temperatures", "specific_heat", "specific_heat_error", "peak"} (the output of
    :func:`spinfer.temperature_scan` works too). ``truth``: true couplings (N, N) for a synthetic
    check. ``edges``: a table from :func:`spinfer.edge_table` (default: built from the model).
    ``notes``: text paragraphs. ``data_shape``: (samples, units) of the data, else taken from the
    model's provenance. ``provenance``: more key/value pairs for the header.
    Sections appear only for the inputs given; a "How to read this" section is always included.
    """
    if not isinstance(title, str) or not title:
        raise ValueError("title: a non-empty string is required")
    check = dict(check or {})
    J = h = names = None
    prov = {}
    if model is not None:
        J = _array(_get(model, "couplings", "J"))
        h = _array(_get(model, "fields", "h"))
        names = _get(model, "names")
        prov.update(_get(model, "provenance") or {})
        conv = _get(model, "convention")
        if conv is not None:
            prov.setdefault("convention", conv)
        if J is None:
            raise ValueError("model: no couplings (expected 'couplings' or 'J')")
    prov.update(provenance or {})
    if data_shape is None and "samples" in prov and "units" in prov:
        data_shape = (prov["samples"], prov["units"])

    parts = [f"<h1>{html.escape(title)}</h1>"]
    stamp = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    head = [["written", f"{stamp} by spinfer {__version__}"]]
    if data_shape is not None:
        head.append(["data shape (samples × units)", " × ".join(str(int(v)) for v in data_shape)])
    if J is not None:
        head.append(["units in the model", J.shape[0]])
    head += [[str(k), v] for k, v in prov.items()]
    parts += ["<h2>Data and provenance</h2>", _table(head)]
    if notes:
        for p in [notes] if isinstance(notes, str) else notes:
            parts.append(f"<p>{html.escape(str(p))}</p>")

    figures = []

    def add(section, draw, caption, size=(5.0, 4.0)):
        try:
            figures.append(_figure(draw, caption, size))
        except (ValueError, KeyError, TypeError) as e:
            raise ValueError(f"report: cannot draw {section}: {e}") from e

    if J is not None:
        add("the couplings", lambda ax: plots.plot_couplings(J, names, cluster=J.shape[0] > 2, ax=ax),
            "Couplings J_ij, units ordered by hierarchical clustering of |J| (red positive, blue "
            "negative, diagonal blank).", (6.0, 5.0))
        add("the coupling histogram", lambda ax: plots.plot_coupling_histogram(J, ax=ax),
            "Distribution of the couplings over pairs i < j.")
    if truth is not None:
        if J is None:
            raise ValueError("truth: a model is needed to compare with the true couplings")
        add("recovered couplings", lambda ax: plots.plot_recovered_vs_true(truth, J, ax=ax),
            "Fitted against true couplings (synthetic check).")
    for key, what, caption in _CHECK_FIGURES:
        block = check.get(key)
        if isinstance(block, dict) and block.get("data") is not None and block.get("model") is not None:
            add(key, lambda ax, b=block, w=what: plots.plot_model_vs_data(
                b["data"], b["model"], b.get("data_se"), independent=b.get("independent"), ax=ax,
                xlabel=f"{w}, data", ylabel=f"{w}, model"),
                caption + "; grey band: data ± 2 bootstrap SE.")
    block = check.get("active_counts")
    if isinstance(block, dict) and block.get("data") is not None:
        add("active counts", lambda ax: plots.plot_active_counts(
            block["data"], block.get("model"), block.get("independent"), block.get("data_se"), ax=ax),
            "P(K): probability that K units are active in the same bin (error bars ± 2 SE).")
    if scan:
        temps = scan.get("temperatures")
        heat = scan.get("specific_heat")
        if temps is None or heat is None:
            raise ValueError("scan: 'temperatures' and 'specific_heat' are required")
        peak = scan.get("peak", scan.get("peak_temperature"))
        add("the specific heat", lambda ax: plots.plot_specific_heat(
            temps, heat, scan.get("specific_heat_error"), peak, ax=ax),
            "Specific heat C(T) per unit against temperature (error bars ± 2 SE); see the caution "
            "on peaks below.")
    if figures:
        parts += ["<h2>Figures</h2>"] + figures

    rows = []
    for key in ("means", "correlations", "triplets", "active_counts"):
        if isinstance(check.get(key), dict):
            rows += _agreement(check[key], key)
    if check.get("summary") or rows:
        parts.append("<h2>Model against data</h2>")
        if check.get("summary"):
            parts.append(_summary_table(dict(check["summary"])))
        if rows:
            parts.append(_table(rows, ["statistic", "model", "values", "RMS of (model − data)/SE",
                                       "fraction within 2 SE", "max |model − data|/SE"]))
            parts.append('<p class="note">With a correct model and independent errors the RMS is '
                         "near 1 and about 95% of values lie within 2 SE. Values whose data SE is "
                         "zero are left out.</p>")
    if truth is not None:
        t = np.asarray(truth, dtype=np.float64)
        iu = np.triu_indices(J.shape[0], k=1)
        x, y = t[iu], J[iu]
        r = float(np.corrcoef(x, y)[0, 1]) if x.size > 1 and x.std() > 0 and y.std() > 0 else float("nan")
        parts += ["<h2>Recovery of the true couplings</h2>",
                  _table([["pairs", x.size], ["RMS error", float(np.sqrt(np.mean((y - x) ** 2)))],
                          ["Pearson correlation", r]])]
    if scan:
        srows = [["temperatures scanned", len(scan["temperatures"])]]
        peak = scan.get("peak", scan.get("peak_temperature"))
        if peak is not None:
            srows.append(["peak temperature", float(peak)])
        if scan.get("peak_at_edge"):
            srows.append(["peak at the edge of the scan", "yes: widen the temperature range"])
        parts += ["<h2>Temperature scan</h2>", _table(srows)]

    n_edges = None if edges is None else len(edges)
    if edges is None and J is not None:
        from .network import edge_table
        edges = edge_table(J, names, top=top_edges)
        n_edges = int(np.count_nonzero(J[np.triu_indices(J.shape[0], k=1)]))
    if edges is not None and len(edges):
        shown = edges.head(top_edges)
        cols = [c for c in shown.columns if c not in ("i", "j")]
        parts += [f"<h2>Strongest couplings ({len(shown)} of {n_edges} edges)</h2>",
                  _table(shown[cols].itertuples(index=False, name=None), cols)]

    parts.append("<h2>How to read this</h2>")
    parts += [f"<p>{html.escape(c)}</p>" for c in CAUTIONS]

    doc = ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
           f"<title>{html.escape(title)}</title>\n<style>{_STYLE}</style>\n</head>\n<body>\n"
           + "\n".join(parts) + "\n</body>\n</html>\n")
    with atomic_output(path, "w", encoding="utf-8") as f:
        f.write(doc)


__all__ = ["write_report", "CAUTIONS"]
