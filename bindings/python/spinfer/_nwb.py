"""Spike times from the units table of an NWB 2.x file, read with h5py alone.

Layout (NWB 2.x core schema, the ``Units`` table, a ``DynamicTable``): the group ``/units`` holds
``id`` (one integer per unit), ``spike_times`` (all spike times in seconds, unit after unit) with
the ragged index ``spike_times_index`` (unit k owns ``spike_times[index[k-1]:index[k]]``), and
optionally ``obs_intervals`` (n x 2 [start, end] in seconds) with ``obs_intervals_index``, the
times during which each unit was observed. Other columns (e.g. a string column of labels) may name
the units.

Observation intervals are turned into recording gaps for the core binning (spikes.hpp): a bin is
kept only when every selected unit was observed throughout it, so a unit is never counted as
silent where it was not recorded; the other bins are dropped, as for any recording gap.
"""
from __future__ import annotations

import json
from typing import List, NamedTuple, Optional, Sequence, Tuple

import numpy as np

from . import _core
from ._hdf5 import Where, child, open_file, ragged_index, segments, strings


class NwbUnits(NamedTuple):
    """Units of an NWB file: names, per-unit spike times (s), and per-unit observation intervals
    ((k, 2) arrays of [start, end) in s; None when the file has no ``obs_intervals`` column)."""

    names: List[str]
    spike_times: List[np.ndarray]
    intervals: Optional[List[np.ndarray]]


def _times(ds, where: Where) -> np.ndarray:
    if ds.ndim != 1 or ds.dtype.kind not in "fiu":
        raise ValueError(where(ds.name, f"expected a 1-D numeric dataset, got shape {ds.shape}, "
                                        f"dtype {ds.dtype}"))
    return np.asarray(ds[()], dtype=np.float64)


def _unit_names(units, n: int, name_column: Optional[str], where: Where) -> List[str]:
    if name_column is None:
        names = strings(child(units, "id", where, hint=" (the table's unit ids)"), where)
        what = "/units/id"
    else:
        if f"{name_column}_index" in units:
            raise ValueError(where(f"/units/{name_column}", "is a ragged column (one value per "
                                   "unit is needed to name the units)"))
        names = strings(child(units, name_column, where), where)
        what = f"/units/{name_column}"
    if len(names) != n:
        raise ValueError(where(what, f"{len(names)} names for {n} units"))
    seen = set()
    for k, s in enumerate(names):
        if not s:
            raise ValueError(where(what, f"unit {k + 1} has an empty name"))
        if s in seen:
            raise ValueError(where(what, f"the name {s!r} is used by more than one unit"))
        seen.add(s)
    return names


def read_nwb_units(path, *, name_column: Optional[str] = None,
                   units: Optional[Sequence[str]] = None) -> NwbUnits:
    """Read the spike times (and observation intervals) of the units in an NWB file's ``/units``.

    ``name_column``: a one-value-per-unit column of ``/units`` to name the units (e.g. a string
    label column); default: the unit ids. ``units``: names of the units to keep, in that order;
    default: every unit in table order.

    Raises ``OSError`` when the file cannot be opened and ``ValueError`` naming the file and
    dataset for a missing ``/units`` or ``spike_times``, an index that decreases or does not end
    at the data length, negative or NaN spike times, and intervals ending before they start.
    """
    where = Where(path)
    with open_file(path) as f:
        units_group = child(f, "units", where, kind="group", hint=" (no units table in this file)")
        data = child(units_group, "spike_times", where, hint=" (the units table has no spike times)")
        times = _times(data, where)
        index_ds = child(units_group, "spike_times_index", where,
                         hint=" (the ragged index of spike_times)")
        n = index_ds.shape[0] if index_ds.ndim == 1 else -1
        idx = ragged_index(index_ds, n, times.size, where)
        names = _unit_names(units_group, n, name_column, where)

        intervals = None
        has_iv, has_iv_index = "obs_intervals" in units_group, "obs_intervals_index" in units_group
        if has_iv != has_iv_index:
            missing = "obs_intervals_index" if has_iv else "obs_intervals"
            raise ValueError(where(f"/units/{missing}", "missing (obs_intervals and "
                                   "obs_intervals_index come together)"))
        if has_iv:
            iv_ds = child(units_group, "obs_intervals", where)
            if iv_ds.ndim != 2 or iv_ds.shape[1] != 2 or iv_ds.dtype.kind not in "fiu":
                raise ValueError(where(iv_ds.name, f"expected a numeric (n, 2) dataset of "
                                       f"[start, end] times, got shape {iv_ds.shape}"))
            iv = np.asarray(iv_ds[()], dtype=np.float64)
            iv_idx = ragged_index(child(units_group, "obs_intervals_index", where), n,
                                  iv.shape[0], where)
            bad = np.flatnonzero(~np.isfinite(iv).all(axis=1))
            if bad.size:
                raise ValueError(where(iv_ds.name, f"row {bad[0] + 1} is not finite"))
            b, e = segments(iv_idx)
            unit_of_row = np.repeat(np.arange(n), e - b)
            bad = np.flatnonzero(iv[:, 1] < iv[:, 0])
            if bad.size:
                r = int(bad[0])
                a_s, b_s = float(iv[r, 0]), float(iv[r, 1])
                raise ValueError(where(iv_ds.name, f"row {r + 1} (unit {names[unit_of_row[r]]!r}) "
                                       f"ends at {b_s!r} s before it starts at {a_s!r} s"))
            intervals = [iv[b[k]:e[k]] for k in range(n)]

    b, e = segments(idx)
    bad = np.flatnonzero(~np.isfinite(times) | (times < 0))
    if bad.size:
        s = int(bad[0])
        unit = names[int(np.searchsorted(e, s, side="right"))]
        what = "NaN" if np.isnan(times[s]) else ("infinite" if np.isinf(times[s]) else "negative")
        raise ValueError(where("/units/spike_times", f"spike {s + 1} (unit {unit!r}) is {what} "
                               f"({float(times[s])!r}); spike times must be finite and >= 0 s"))
    per_unit = [times[b[k]:e[k]] for k in range(n)]

    if units is not None:
        position = {s: k for k, s in enumerate(names)}
        wanted = [str(u) for u in units]
        unknown = [u for u in wanted if u not in position]
        if unknown:
            raise ValueError(where("/units", f"no unit named {', '.join(map(repr, unknown[:20]))}"))
        if len(set(wanted)) != len(wanted):
            raise ValueError("units: a unit is listed twice")
        if not wanted:
            raise ValueError("units: no unit selected")
        pick = [position[u] for u in wanted]
        names = wanted
        per_unit = [per_unit[k] for k in pick]
        intervals = None if intervals is None else [intervals[k] for k in pick]
    return NwbUnits(names, per_unit, intervals)


def _merged(iv) -> List[Tuple[float, float]]:
    """Union of [a, b) intervals as sorted disjoint intervals (touching ones joined, empty dropped)."""
    out: List[Tuple[float, float]] = []
    for a, b in sorted((float(a), float(b)) for a, b in iv if b > a):
        if out and a <= out[-1][1]:
            out[-1] = (out[-1][0], max(out[-1][1], b))
        else:
            out.append((a, b))
    return out


def _intersection(x, y) -> List[Tuple[float, float]]:
    """Intersection of two sorted disjoint interval lists (a two-pointer sweep)."""
    out, i, j = [], 0, 0
    while i < len(x) and j < len(y):
        a, b = max(x[i][0], y[j][0]), min(x[i][1], y[j][1])
        if b > a:
            out.append((a, b))
        if x[i][1] < y[j][1]:
            i += 1
        else:
            j += 1
    return out


def _complement(kept, start: float, stop: float) -> List[Tuple[float, float]]:
    """[start, stop) minus sorted disjoint intervals."""
    out, t = [], start
    for a, b in kept:
        a, b = max(a, start), min(b, stop)
        if b <= a:
            continue
        if a > t:
            out.append((t, a))
        t = max(t, b)
    if stop > t:
        out.append((t, stop))
    return out


def _clipped(iv, start: float, stop: float) -> List[Tuple[float, float]]:
    """Sorted disjoint intervals cut to [start, stop), empty pieces dropped."""
    cut = [(max(a, start), min(b, stop)) for a, b in iv]
    return [(a, b) for a, b in cut if b > a]


def observed_everywhere(intervals: List[np.ndarray], names: List[str]) -> List[Tuple[float, float]]:
    """The times at which every unit is inside one of its observation intervals."""
    common = None
    for name, iv in zip(names, intervals):
        own = _merged(iv)
        if not own:
            raise ValueError(f"unit {name!r} has no observation interval (it was never observed); "
                             f"leave it out with units=[...]")
        common = own if common is None else _intersection(common, own)
    return common or []


def bin_nwb_units(path, bin_width: float, *, start: Optional[float] = None,
                  stop: Optional[float] = None, gaps: Sequence[Tuple[float, float]] = (),
                  min_rate_hz: float = 0.0, name_column: Optional[str] = None,
                  units: Optional[Sequence[str]] = None):
    """Bin the spike times of an NWB file's units table, respecting observation intervals.

    Returns ``(X, names, report)`` like :func:`spinfer.bin_spikes` (the same core binning: half-open
    bins from ``start``, whole bins inside [start, stop), bins meeting a gap dropped). Bins where
    any selected unit was outside its ``obs_intervals`` are dropped as gaps, so no unit is counted
    as silent where it was not recorded. start/stop default to the earliest start and latest end
    of the observation intervals (to the first and last spike without intervals). ``gaps`` adds
    further [a, b) intervals to drop (clipped to the window). Every selected unit gets a column,
    also one without spikes in the window (a constant unit, which the fitters refuse by name;
    ``min_rate_hz`` drops such units). The report adds ``source``, ``observation_gaps_s`` (the
    gaps the intervals imply) and ``gaps_s`` (all gaps passed to the binning).
    """
    table = read_nwb_units(path, name_column=name_column, units=units)
    where = Where(path)
    n = len(table.names)
    counts = np.array([t.size for t in table.spike_times], dtype=np.int64)
    times = np.concatenate(table.spike_times) if n else np.zeros(0)
    if times.size == 0:
        raise ValueError(where("/units/spike_times", "no spikes for the selected units"))
    unit = np.repeat(np.arange(n, dtype=np.int32), counts)

    observed = None
    if table.intervals is not None:
        try:
            observed = observed_everywhere(table.intervals, table.names)
        except ValueError as e:
            raise ValueError(where("/units/obs_intervals", str(e))) from None
        if not observed:
            raise ValueError(where("/units/obs_intervals", "there is no time at which every "
                                   "selected unit was observed; select units whose observation "
                                   "intervals overlap (units=[...])"))
        lo = min(float(iv[:, 0].min()) for iv in table.intervals if iv.size)
        hi = max(float(iv[:, 1].max()) for iv in table.intervals if iv.size)
    else:
        lo, hi = float(times.min()), float(times.max())
    t0 = lo if start is None else float(start)
    t1 = hi if stop is None else float(stop)
    if not (np.isfinite(t0) and np.isfinite(t1)) or t1 <= t0:
        raise ValueError(f"{where.path}: stop ({t1!r} s) must be after start ({t0!r} s)")

    for a, b in gaps:
        if not (np.isfinite(a) and np.isfinite(b)) or b <= a:
            raise ValueError(f"gaps: the gap {a!r} to {b!r} s must end after it starts")
    observation_gaps = [] if observed is None else _complement(observed, t0, t1)
    all_gaps = _clipped(_merged(list(observation_gaps) + list(gaps)), t0, t1)
    X, names, report = _core.bin_spikes(list(table.names), unit, times, float(bin_width), t0, t1,
                                        all_gaps, float(min_rate_hz), where.path)
    report = json.loads(report)
    report["source"] = where.path
    report["observation_gaps_s"] = [list(g) for g in observation_gaps]
    report["gaps_s"] = [list(g) for g in all_gaps]
    return X, list(names), report
