"""Spike binning against a direct numpy implementation of the same rule, the Poisson
multi-spike fraction, spike tables from files, and rejected inputs."""
import math

import numpy as np
import pytest

import spinfer


def numpy_reference(units, times, w, start, stop, gaps):
    """Half-open bins [start + k w, start + (k+1) w), whole bins inside [start, stop), bins meeting
    a gap dropped; returns (X, sorted ids, per-unit spike counts in kept bins, multi-spike bins)."""
    n_bins = int(np.floor((stop - start) / w))
    edges = start + w * np.arange(n_bins + 1)
    keep = np.ones(n_bins, bool)
    for a, b in gaps:
        keep &= ~((edges[:-1] < b) & (edges[1:] > a))
    ids = np.unique(units)
    counts = np.zeros((n_bins, ids.size), int)
    inside = (times >= start) & (times < edges[-1])
    k = np.floor((times[inside] - start) / w).astype(int)
    col = np.searchsorted(ids, units[inside])
    np.add.at(counts, (k, col), 1)
    counts = counts[keep]
    return (counts > 0).astype(np.uint8), ids, counts.sum(0), (counts >= 2).sum(0)


def test_random_spikes_match_numpy():
    rng = np.random.default_rng(7)
    w, start, stop = 0.02, 0.5, 60.5
    units = rng.integers(0, 12, 20000)
    # Keep spikes away from bin edges (offset within the bin in [0.05, 0.95]) so the reference's
    # plain floor() cannot disagree with the edge tolerance.
    k = rng.integers(-10, int((stop - start) / w) + 10, units.size)
    times = np.clip(start + (k + rng.uniform(0.05, 0.95, units.size)) * w, 0, None)
    gaps = [(10.0, 12.5), (30.01, 30.03), (45.0, 50.0)]
    X, names, report = spinfer.bin_spikes(units, times, w, start=start, stop=stop, gaps=gaps)
    ref, ids, spikes, multi = numpy_reference(units, times, w, start, stop, gaps)
    assert names == [str(i) for i in ids]  # numeric ids sorted numerically
    np.testing.assert_array_equal(X, ref)
    assert report["bins_kept"] == ref.shape[0]
    assert report["bins_in_window"] == 3000
    # gap bins: [10, 12.5) -> 125 bins; (30.01, 30.03) meets [30.0, 30.02) and [30.02, 30.04);
    # [45, 50) -> 250 bins
    assert report["bins_dropped_gaps"] == 125 + 2 + 250
    assert [u["spikes"] for u in report["units"]] == list(spikes)
    assert [u["multi_spike_bins"] for u in report["units"]] == list(multi)
    assert report["multi_spike_bins"] == multi.sum()
    assert report["spikes_outside_window"] == int(((times < start) | (times >= stop)).sum())
    duration = ref.shape[0] * w
    np.testing.assert_allclose([u["rate_hz"] for u in report["units"]], spikes / duration)


def test_poisson_multi_spike_fraction():
    # Poisson firing at rate r, bins of width w: with lam = r w,
    # P(>=2 | >=1) = (1 - e^-lam - lam e^-lam) / (1 - e^-lam)  (Poisson distribution).
    rng = np.random.default_rng(3)
    r, w, T = 20.0, 0.02, 2000.0
    times = np.sort(rng.uniform(0, T, rng.poisson(r * T)))
    X, names, rep = spinfer.bin_spikes(np.zeros(times.size, int), times, w, start=0.0, stop=T)
    lam = r * w
    p = (1 - math.exp(-lam) - lam * math.exp(-lam)) / (1 - math.exp(-lam))
    n_active = rep["active_bins"]
    se = math.sqrt(p * (1 - p) / n_active)
    assert abs(rep["multi_spike_fraction"] - p) < 5 * se
    # P(active) = 1 - e^-lam, within 5 standard errors
    q = 1 - math.exp(-lam)
    assert abs(X.mean() - q) < 5 * math.sqrt(q * (1 - q) / X.shape[0])


def test_edges_min_rate_and_string_ids():
    # 0.3 / 0.1 = 2.9999999999999996 in floating point: the spike still belongs to bin 3.
    # Rates over the 1 s window: a 2 Hz, b 1 Hz, c 1 Hz; a unit is dropped only below the minimum.
    X, names, rep = spinfer.bin_spikes(["b", "a", "a", "c"], [0.3, 0.05, 0.7, 0.95], 0.1,
                                       start=0.0, stop=1.0, min_rate_hz=1.0)
    assert names == ["a", "b", "c"]
    np.testing.assert_array_equal(X[:, 1], [0, 0, 0, 1, 0, 0, 0, 0, 0, 0])
    np.testing.assert_array_equal(X[:, 0], [1, 0, 0, 0, 0, 0, 0, 1, 0, 0])
    assert rep["units_dropped"] == []
    X, names, rep = spinfer.bin_spikes(["b", "a", "a", "c"], [0.3, 0.05, 0.7, 0.95], 0.1,
                                       start=0.0, stop=1.0, min_rate_hz=1.5)
    assert names == ["a"]
    assert [d["id"] for d in rep["units_dropped"]] == ["b", "c"]
    assert rep["units_dropped"][0]["rate_hz"] == pytest.approx(1.0)


def test_spike_tables_from_files(tmp_path):
    (tmp_path / "h.csv").write_text("# sorted by hand\ntime,unit,quality\n0.11,n7,good\n0.02,n1,good\n")
    units, times = spinfer.read_spikes(tmp_path / "h.csv")
    assert list(units) == ["n7", "n1"]
    np.testing.assert_array_equal(times, [0.11, 0.02])
    (tmp_path / "p.tsv").write_text("3\t0.5\n1\t0.25\n3\t0.75\n")
    units, times = spinfer.read_spikes(tmp_path / "p.tsv")
    X, names, _ = spinfer.bin_spikes(units, times, 0.25, start=0.0, stop=1.0)
    assert names == ["1", "3"]
    np.testing.assert_array_equal(X, [[0, 0], [1, 0], [0, 1], [0, 1]])


@pytest.mark.parametrize("text, message", [
    ("unit,time\n1,-0.5\n", r"line 2, column 2: spike time -0.5 is negative"),
    ("unit,time\n1,nan\n", r"line 2, column 2: spike time is not finite"),
    ("unit,time\n1,abc\n", r"line 2, column 2: 'abc' is not a time"),
    ("1,0.5\n2,0.6,7\n", r"line 2: 3 cells, expected 2"),
    ("neuron,t\n1,0.5\n", r"must name the columns 'unit' and 'time'"),
    ("unit,time\n", r"no spikes"),
])
def test_bad_spike_files(tmp_path, text, message):
    (tmp_path / "s.csv").write_text(text)
    with pytest.raises(ValueError, match=message):
        spinfer.read_spikes(tmp_path / "s.csv")


@pytest.mark.parametrize("kwargs, message", [
    (dict(bin_width=0.0), "bin width"),
    (dict(bin_width=-1.0), "bin width"),
    (dict(bin_width=0.1, start=1.0, stop=0.5), "must be after start"),
    (dict(bin_width=0.1, start=0.0, stop=1.0, gaps=[(0.5, 2.0)]), "outside the window"),
    (dict(bin_width=0.1, start=0.0, stop=1.0, gaps=[(0.1, 0.4), (0.3, 0.5)]), "overlaps"),
    (dict(bin_width=0.1, start=0.0, stop=1.0, gaps=[(0.4, 0.3)]), "end must be after the start"),
    (dict(bin_width=0.1, min_rate_hz=1e6), "below the minimum rate"),
])
def test_bad_binning_options(kwargs, message):
    with pytest.raises(ValueError, match=message):
        spinfer.bin_spikes([1, 2, 1], [0.1, 0.5, 0.9], **kwargs)


def test_bad_spike_arrays():
    with pytest.raises(ValueError, match="spike 2: spike time -1 is negative"):
        spinfer.bin_spikes([1, 2], [0.1, -1.0], 0.1)
    with pytest.raises(ValueError, match="spike 1: spike time is not finite"):
        spinfer.bin_spikes([1, 2], [np.nan, 1.0], 0.1)
    with pytest.raises(ValueError, match="2 unit labels but 3 spike times"):
        spinfer.bin_spikes([1, 2], [0.1, 0.2, 0.3], 0.1)
