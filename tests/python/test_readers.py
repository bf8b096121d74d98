"""The NWB units and AnnData .h5ad readers on small files written here with h5py.

The files follow the published layouts: the NWB 2.x core schema's ``Units`` table (a
``DynamicTable`` with ``VectorData`` columns and ``VectorIndex`` ragged indices) and the AnnData
on-disk format (anndata 0.8+ "On-disk format": ``encoding-type`` / ``encoding-version``
attributes, dataframes with an ``_index`` attribute, CSR/CSC groups with data/indices/indptr).
Binned spikes are checked against numpy.histogram, binarised expression against numpy.quantile.
"""
import sys

import numpy as np
import pytest

import spinfer
from spinfer import _h5ad

h5py = pytest.importorskip("h5py")

INDEX_DTYPES = [np.uint8, np.uint16, np.uint32, np.uint64, np.int32, np.int64]


# ---------------------------------------------------------------------------------------------
# NWB 2.x units table
# ---------------------------------------------------------------------------------------------

def ragged(values_per_row, index_dtype, width=None):
    """Concatenated values and the VectorIndex (row k owns data[index[k-1]:index[k]])."""
    counts = [len(v) for v in values_per_row]
    index = np.cumsum(counts).astype(index_dtype)
    shape = (0,) if width is None else (0, width)
    data = np.concatenate([np.asarray(v, dtype=np.float64).reshape((-1,) + shape[1:])
                           for v in values_per_row]) if values_per_row else np.zeros(shape)
    return data, index


def write_nwb(path, spikes, ids=None, index_dtype=np.uint32, intervals=None, labels=None):
    """A minimal NWB 2.x file: root NWBFile attributes and a /units table (NWB core schema)."""
    n = len(spikes)
    ids = list(range(n)) if ids is None else ids
    with h5py.File(path, "w") as f:
        f.attrs["namespace"] = "core"
        f.attrs["neurodata_type"] = "NWBFile"
        f.attrs["nwb_version"] = "2.7.0"
        units = f.create_group("units")
        units.attrs.update(namespace="core", neurodata_type="Units", description="test units")
        colnames = ["spike_times"] + (["obs_intervals"] if intervals is not None else []) + \
            (["label"] if labels is not None else [])
        units.attrs["colnames"] = np.array(colnames, dtype=h5py.string_dtype())
        ds = units.create_dataset("id", data=np.asarray(ids, dtype=np.int64))
        ds.attrs.update(namespace="hdmf-common", neurodata_type="ElementIdentifiers")
        data, index = ragged(spikes, index_dtype)
        st = units.create_dataset("spike_times", data=data)
        st.attrs.update(namespace="hdmf-common", neurodata_type="VectorData",
                        description="spike times (s)")
        si = units.create_dataset("spike_times_index", data=index)
        si.attrs.update(namespace="hdmf-common", neurodata_type="VectorIndex",
                        description="index into spike_times")
        si.attrs["target"] = st.ref
        if intervals is not None:
            data, index = ragged(intervals, index_dtype, width=2)
            oi = units.create_dataset("obs_intervals", data=data)
            oi.attrs.update(namespace="hdmf-common", neurodata_type="VectorData",
                            description="observation intervals (s)")
            ii = units.create_dataset("obs_intervals_index", data=index)
            ii.attrs.update(namespace="hdmf-common", neurodata_type="VectorIndex",
                            description="index into obs_intervals")
            ii.attrs["target"] = oi.ref
        if labels is not None:
            lab = units.create_dataset("label", data=np.array(labels, dtype=h5py.string_dtype()))
            lab.attrs.update(namespace="hdmf-common", neurodata_type="VectorData",
                             description="unit labels")
    return path


def histogram_reference(spikes, w, start, stop, observed):
    """Bins counted with numpy.histogram; a bin is kept when every unit's observed intervals
    (disjoint, not touching) contain it whole. Returns (X, counts in kept bins)."""
    n_bins = int(np.floor((stop - start) / w))
    edges = start + w * np.arange(n_bins + 1)
    counts = np.stack([np.histogram(t, bins=edges)[0] for t in spikes], axis=1)
    keep = np.ones(n_bins, dtype=bool)
    for iv in observed:
        inside = np.zeros(n_bins, dtype=bool)
        for a, b in iv:
            inside |= (edges[:-1] >= a) & (edges[1:] <= b)
        keep &= inside
    counts = counts[keep]
    return (counts > 0).astype(np.uint8), counts


def random_spikes(rng, n_spikes, n_units, w, start, n_bins):
    """Spike times at random offsets 0.05..0.95 inside random bins (never at a bin edge, so
    numpy's plain arithmetic and the core's edge tolerance agree)."""
    unit = rng.integers(0, n_units, n_spikes)
    k = rng.integers(0, n_bins, n_spikes)
    t = start + (k + rng.uniform(0.05, 0.95, n_spikes)) * w
    return [np.sort(t[unit == u]) for u in range(n_units)]


@pytest.mark.parametrize("index_dtype", INDEX_DTYPES)
def test_nwb_bins_match_numpy_histogram(tmp_path, index_dtype):
    rng = np.random.default_rng(11)
    w, start, n_bins = 0.01, 2.0, 1500
    stop = start + n_bins * w
    n_spikes = min(3000, np.iinfo(index_dtype).max)  # uint8 indices address at most 255 spikes
    spikes = random_spikes(rng, n_spikes, 4, w, start, n_bins)
    # Each unit observed in one or two intervals with edges 0.3 bins off the grid (or outside the
    # window); the time every unit is observed is [3.123, 7.503) + [8.903, 16.003) + [16.203, 17).
    intervals = [
        [(1.003, 7.503), (8.903, 20.0)],
        [(3.123, 17.5)],
        [(0.0, 16.003), (16.203, 30.0)],
        [(2.0, 25.0)],
    ]
    ids = [30, 4, 12, 7]                     # output order is numeric: 4, 7, 12, 30
    path = write_nwb(tmp_path / "rec.nwb", spikes, ids=ids, index_dtype=index_dtype,
                     intervals=intervals)
    X, names, report = spinfer.bin_nwb_units(path, w, start=start, stop=stop)
    order = np.argsort(ids)
    ref, counts = histogram_reference([spikes[k] for k in order], w, start, stop,
                                      [intervals[k] for k in order])
    assert names == [str(ids[k]) for k in order]
    np.testing.assert_array_equal(X, ref)
    assert X.dtype == np.uint8 and X.flags.c_contiguous
    assert report["bins_in_window"] == n_bins
    assert report["bins_kept"] == ref.shape[0]
    assert [u["spikes"] for u in report["units"]] == counts.sum(axis=0).tolist()
    assert [u["multi_spike_bins"] for u in report["units"]] == (counts >= 2).sum(axis=0).tolist()
    np.testing.assert_allclose(report["observation_gaps_s"],
                               [[2.0, 3.123], [7.503, 8.903], [16.003, 16.203]])
    assert report["source"] == str(path)


def test_nwb_without_intervals_matches_bin_spikes(tmp_path):
    rng = np.random.default_rng(5)
    w = 0.02
    spikes = random_spikes(rng, 4000, 6, w, 0.0, 2000)
    path = write_nwb(tmp_path / "plain.nwb", spikes, ids=[5, 6, 7, 8, 9, 10])
    gap = (10.005, 12.515)   # off the bin grid, so numpy's edges cannot round the other way
    X, names, report = spinfer.bin_nwb_units(path, w, start=0.0, stop=40.0, gaps=[gap])
    units = np.concatenate([[str(5 + k)] * len(t) for k, t in enumerate(spikes)])
    X2, names2, report2 = spinfer.bin_spikes(units, np.concatenate(spikes), w, start=0.0,
                                             stop=40.0, gaps=[gap])
    np.testing.assert_array_equal(X, X2)
    assert names == names2 and report["bins_kept"] == report2["bins_kept"]
    ref, _ = histogram_reference(spikes, w, 0.0, 40.0, [[(0.0, gap[0]), (gap[1], 40.0)]] * 6)
    np.testing.assert_array_equal(X, ref)
    assert report["observation_gaps_s"] == []
    assert report["gaps_s"] == [list(gap)]
    # Without start/stop the window runs from the first to the last spike (as bin_spikes).
    _, _, rep = spinfer.bin_nwb_units(path, w)
    first = min(t.min() for t in spikes)
    assert rep["start_s"] == pytest.approx(first)


def test_nwb_spikes_outside_a_units_intervals_are_not_counted(tmp_path):
    # Unit 1 is observed on [0, 10) only, yet the file holds spikes of it at 12-18 s (outside
    # its intervals); unit 2 is observed on [0, 20). Bins in [10, 20) must be dropped for both.
    a = np.array([0.505, 2.005, 12.005, 15.005, 18.005])
    b = np.array([1.005, 11.005, 19.005])
    path = write_nwb(tmp_path / "obs.nwb", [a, b], ids=[1, 2],
                     intervals=[[(0.0, 10.0)], [(0.0, 20.0)]])
    X, names, report = spinfer.bin_nwb_units(path, 0.01)
    assert report["start_s"] == 0.0 and report["stop_s"] == 20.0   # from the intervals
    assert report["bins_kept"] == 1000 and report["bins_dropped_gaps"] == 1000
    assert report["observation_gaps_s"] == [[10.0, 20.0]]
    assert report["spikes_in_dropped_bins"] == 5                    # 3 of unit 1, 2 of unit 2
    assert X.shape == (1000, 2)
    assert np.flatnonzero(X[:, 0]).tolist() == [50, 200]
    assert np.flatnonzero(X[:, 1]).tolist() == [100]
    assert [u["spikes"] for u in report["units"]] == [2, 1]


def test_nwb_touching_intervals_join_and_units_can_be_chosen(tmp_path):
    # [0, 5) and [5, 10) of one unit are one observed stretch: no bin at 5 s is dropped.
    a = np.array([4.9951, 5.0051])
    b = np.array([1.0, 6.0])
    c = np.array([3.0])
    path = write_nwb(tmp_path / "touch.nwb", [a, b, c], labels=["b-cell", "a-cell", "c-cell"],
                     intervals=[[(0.0, 5.0), (5.0, 10.0)], [(0.0, 10.0)], [(20.0, 30.0)]])
    # all three units: no common observation
    with pytest.raises(ValueError, match=r"touch\.nwb: /units/obs_intervals: there is no time"):
        spinfer.bin_nwb_units(path, 0.01)
    X, names, report = spinfer.bin_nwb_units(path, 0.01, name_column="label",
                                             units=["b-cell", "a-cell"])
    assert names == ["a-cell", "b-cell"]                       # lexicographic: ids not numeric
    assert report["bins_kept"] == 1000 and report["observation_gaps_s"] == []
    assert np.flatnonzero(X[:, 1]).tolist() == [499, 500]
    table = spinfer.read_nwb_units(path, name_column="label", units=["c-cell", "a-cell"])
    assert table.names == ["c-cell", "a-cell"]
    np.testing.assert_array_equal(table.spike_times[1], b)
    np.testing.assert_array_equal(table.intervals[0], [[20.0, 30.0]])


def test_nwb_unit_without_spikes_is_a_silent_column(tmp_path):
    path = write_nwb(tmp_path / "silent.nwb", [np.array([0.5, 1.5]), np.array([])], ids=[1, 2])
    X, names, report = spinfer.bin_nwb_units(path, 0.1, start=0.0, stop=2.0)
    assert names == ["1", "2"] and X.shape == (20, 2)
    assert X[:, 1].sum() == 0 and report["units"][1]["spikes"] == 0
    X, names, report = spinfer.bin_nwb_units(path, 0.1, start=0.0, stop=2.0, min_rate_hz=0.1)
    assert names == ["1"] and report["units_dropped"][0]["id"] == "2"


def write_units_by_hand(path, times, index, ids=None, extra=None):
    """A /units table with exactly the given (possibly broken) spike_times and index."""
    with h5py.File(path, "w") as f:
        units = f.create_group("units")
        if ids is not None:
            units.create_dataset("id", data=np.asarray(ids))
        if times is not None:
            units.create_dataset("spike_times", data=np.asarray(times, dtype=np.float64))
        if index is not None:
            units.create_dataset("spike_times_index", data=index)
        for name, value in (extra or {}).items():
            units.create_dataset(name, data=value)
    return path


@pytest.mark.parametrize("times, index, message", [
    ([0.1, 0.2, 0.3], np.array([2, 1, 3], np.int32), r"spike_times_index: entry 2 \(1\) is below"),
    ([0.1, 0.2, 0.3], np.array([1, 4], np.uint16), r"spike_times_index: entry 2 \(4\) points beyond"),
    ([0.1, 0.2, 0.3], np.array([1, 2], np.uint64), r"spike_times_index: the last entry is 2"),
    ([0.1, 0.2, 0.3], np.array([-1, 3], np.int64), r"spike_times_index: entry 1 is negative"),
    ([0.1, np.nan, 0.3], np.array([1, 3], np.uint8), r"spike_times: spike 2 \(unit '1'\) is NaN"),
    ([0.1, 0.2, -0.3], np.array([1, 3], np.uint8), r"spike_times: spike 3 \(unit '1'\) is negative"),
    ([0.1, 0.2, 0.3], np.array([1.0, 3.0]), r"spike_times_index: expected integers"),
])
def test_nwb_bad_spike_tables_are_refused_by_name(tmp_path, times, index, message):
    path = write_units_by_hand(tmp_path / "bad.nwb", times, index, ids=[0, 1])
    with pytest.raises(ValueError, match=r"bad\.nwb: /units/" + message):
        spinfer.bin_nwb_units(path, 0.01)


def test_nwb_missing_parts_are_named(tmp_path):
    with h5py.File(tmp_path / "empty.nwb", "w") as f:
        f.create_group("acquisition")
    with pytest.raises(ValueError, match=r"empty\.nwb: /units: missing"):
        spinfer.read_nwb_units(tmp_path / "empty.nwb")
    path = write_units_by_hand(tmp_path / "no_times.nwb", None, np.array([1], np.uint32), ids=[0])
    with pytest.raises(ValueError, match=r"no_times\.nwb: /units/spike_times: missing"):
        spinfer.read_nwb_units(path)
    path = write_units_by_hand(tmp_path / "no_index.nwb", [0.5], None, ids=[0])
    with pytest.raises(ValueError, match=r"no_index\.nwb: /units/spike_times_index: missing"):
        spinfer.read_nwb_units(path)
    path = write_units_by_hand(tmp_path / "no_ids.nwb", [0.5], np.array([1], np.uint32))
    with pytest.raises(ValueError, match=r"no_ids\.nwb: /units/id: missing"):
        spinfer.read_nwb_units(path)
    path = write_units_by_hand(tmp_path / "half.nwb", [0.5], np.array([1], np.uint32), ids=[0],
                               extra={"obs_intervals": np.array([[0.0, 1.0]])})
    with pytest.raises(ValueError, match=r"half\.nwb: /units/obs_intervals_index: missing"):
        spinfer.read_nwb_units(path)
    with pytest.raises(FileNotFoundError, match=r"nowhere\.nwb: no such file"):
        spinfer.read_nwb_units(tmp_path / "nowhere.nwb")
    (tmp_path / "text.nwb").write_text("unit,time\n1,0.5\n")
    with pytest.raises(OSError, match=r"text\.nwb: cannot be read as an HDF5 file"):
        spinfer.read_nwb_units(tmp_path / "text.nwb")


def test_nwb_bad_intervals_and_names_are_refused(tmp_path):
    spikes = [np.array([0.5]), np.array([0.7])]
    path = write_nwb(tmp_path / "iv.nwb", spikes, ids=[1, 2],
                     intervals=[[(0.0, 1.0)], [(0.0, 2.0), (3.0, 2.5)]])
    with pytest.raises(ValueError, match=r"iv\.nwb: /units/obs_intervals: row 3 \(unit '2'\) ends "
                                         r"at 2\.5 s before it starts at 3\.0 s"):
        spinfer.bin_nwb_units(path, 0.01)
    path = write_nwb(tmp_path / "never.nwb", spikes, ids=[1, 2], intervals=[[(0.0, 1.0)], []])
    with pytest.raises(ValueError, match=r"never\.nwb: /units/obs_intervals: unit '2' has no "
                                         r"observation interval"):
        spinfer.bin_nwb_units(path, 0.01)
    path = write_nwb(tmp_path / "dup.nwb", spikes, labels=["x", "x"])
    with pytest.raises(ValueError, match=r"dup\.nwb: /units/label: the name 'x' is used by more"):
        spinfer.read_nwb_units(path, name_column="label")
    with pytest.raises(ValueError, match=r"dup\.nwb: /units: no unit named '9'"):
        spinfer.read_nwb_units(path, units=["9"])


# ---------------------------------------------------------------------------------------------
# AnnData .h5ad
# ---------------------------------------------------------------------------------------------

def string_array(group, name, values):
    """An AnnData "string-array" element (variable-length UTF-8 strings)."""
    ds = group.create_dataset(name, data=np.array(values, dtype=object), dtype=h5py.string_dtype())
    ds.attrs.update({"encoding-type": "string-array", "encoding-version": "0.2.0"})
    return ds


def dataframe(f, name, index, columns=None, index_name="_index", legacy=False):
    """An AnnData "dataframe" element: the ``_index`` attribute names the index column; with
    ``legacy=True`` the older layout (an ``_index`` dataset and no attribute)."""
    g = f.create_group(name)
    if not legacy:
        g.attrs.update({"encoding-type": "dataframe", "encoding-version": "0.2.0",
                        "_index": index_name})
        g.attrs["column-order"] = np.array(list(columns or {}), dtype=h5py.string_dtype())
    string_array(g, index_name if not legacy else "_index", index)
    for col, (codes, categories) in (columns or {}).items():  # categorical columns
        c = g.create_group(col)
        c.attrs.update({"encoding-type": "categorical", "encoding-version": "0.2.0",
                        "ordered": False})
        c.create_dataset("codes", data=np.asarray(codes, dtype=np.int8))
        string_array(c, "categories", categories)
    return g


def matrix(parent, name, dense, layout):
    """A dense "array" element or a "csr_matrix"/"csc_matrix" group (data, indices, indptr)."""
    import scipy.sparse as sp

    if layout == "dense":
        ds = parent.create_dataset(name, data=dense)
        ds.attrs.update({"encoding-type": "array", "encoding-version": "0.2.0"})
        return
    m = (sp.csr_matrix if layout == "csr" else sp.csc_matrix)(dense)
    g = parent.create_group(name)
    g.attrs.update({"encoding-type": f"{layout}_matrix", "encoding-version": "0.1.0"})
    g.attrs["shape"] = np.array(dense.shape, dtype=np.int64)
    g.create_dataset("data", data=m.data)
    g.create_dataset("indices", data=m.indices)
    g.create_dataset("indptr", data=m.indptr)


def write_h5ad(path, dense, genes, cells, layout="dense", legacy_index=False, symbols=None,
               layers=None, raw=None):
    with h5py.File(path, "w") as f:
        f.attrs.update({"encoding-type": "anndata", "encoding-version": "0.1.0"})
        matrix(f, "X", dense, layout)
        dataframe(f, "obs", cells, legacy=legacy_index)
        columns = None
        if symbols is not None:
            categories = sorted(set(symbols))
            columns = {"symbol": ([categories.index(s) for s in symbols], categories)}
        dataframe(f, "var", genes, columns=columns, index_name="gene_ids", legacy=legacy_index)
        if layers:
            g = f.create_group("layers")
            g.attrs.update({"encoding-type": "dict", "encoding-version": "0.1.0"})
            for k, v in layers.items():
                matrix(g, k, v, layout)
        if raw is not None:
            raw_dense, raw_genes = raw
            g = f.create_group("raw")
            matrix(g, "X", raw_dense, layout)
            dataframe(g, "var", raw_genes)
    return path


@pytest.fixture
def counts():
    """Poisson counts (cells x genes) with gene-specific means from 0.05 to 3, int32 (every gene
    is detected in some cells and missed in others: P(no zero in 300 cells) <= 1e-6)."""
    rng = np.random.default_rng(21)
    means = np.geomspace(0.05, 3.0, 12)
    return rng.poisson(means, size=(300, 12)).astype(np.int32)


def names_for(counts):
    return ([f"G{j:02d}" for j in range(counts.shape[1])],
            [f"cell{i:03d}" for i in range(counts.shape[0])])


@pytest.mark.parametrize("threshold", [0.0, 1.5, "median", "quantile:0.75", "per-gene"])
def test_h5ad_dense_csr_csc_agree_with_numpy(tmp_path, counts, threshold, monkeypatch):
    genes, cells = names_for(counts)
    if threshold == "per-gene":
        threshold = np.linspace(0.0, 3.0, counts.shape[1])
    # numpy reference: active = value > threshold; median / quantile from numpy.quantile
    if isinstance(threshold, str):
        q = 0.5 if threshold == "median" else 0.75
        t = np.quantile(counts.astype(float), q, axis=0)
    else:
        t = np.broadcast_to(np.asarray(threshold, dtype=float), (counts.shape[1],))
    ref = (counts > t).astype(np.uint8)
    keep = (ref.sum(0) > 0) & (ref.sum(0) < ref.shape[0])
    results = []
    for layout in ("dense", "csr", "csc"):
        path = write_h5ad(tmp_path / f"{layout}.h5ad", counts, genes, cells, layout=layout)
        results.append(spinfer.read_h5ad_binary(path, threshold, drop_constant=True))
        monkeypatch.setattr(_h5ad, "BLOCK_VALUES", 5 * counts.shape[0])  # blocks of 5 genes
        results.append(spinfer.read_h5ad_binary(path, threshold, drop_constant=True))
        monkeypatch.undo()
    for r in results:
        np.testing.assert_array_equal(r.X, ref[:, keep])
        assert r.X.dtype == np.uint8 and r.X.flags.c_contiguous
        assert r.genes == [g for g, k in zip(genes, keep) if k]
        assert r.dropped == [g for g, k in zip(genes, keep) if not k]
        assert r.cells == cells
        np.testing.assert_allclose(r.thresholds, t[keep])


def test_h5ad_names_selection_layers_and_raw(tmp_path, counts):
    genes, cells = names_for(counts)
    symbols = [f"Sym{j % 10}" for j in range(counts.shape[1])]   # Sym0, Sym1 repeat: not unique
    doubled = counts * 2
    path = write_h5ad(tmp_path / "a.h5ad", counts, genes, cells, layout="csr", symbols=symbols,
                      layers={"twice": doubled}, raw=(counts[:, ::-1], genes[::-1]))
    pick = ["G11", "G03", "G07"]
    col = [genes.index(g) for g in pick]
    r = spinfer.read_h5ad_binary(path, 1.5, genes=pick)
    assert r.genes == pick
    np.testing.assert_array_equal(r.X, (counts[:, col] > 1.5).astype(np.uint8))
    r = spinfer.read_h5ad_binary(path, 1.5, genes=pick, layer="twice")
    np.testing.assert_array_equal(r.X, (doubled[:, col] > 1.5).astype(np.uint8))
    r = spinfer.read_h5ad_binary(path, 1.5, genes=pick, use_raw=True)   # raw has its own var
    np.testing.assert_array_equal(r.X, (counts[:, col] > 1.5).astype(np.uint8))
    r = spinfer.read_h5ad_binary(path, 0.0, gene_column="symbol", genes=["Sym9", "Sym5"])
    np.testing.assert_array_equal(r.X, (counts[:, [9, 5]] > 0).astype(np.uint8))
    with pytest.raises(ValueError, match=r"a\.h5ad: /var: gene name\(s\) 'Sym0', 'Sym1'.* occur "
                                         r"more than once"):
        spinfer.read_h5ad_binary(path, gene_column="symbol", drop_constant=True)
    with pytest.raises(ValueError, match=r"a\.h5ad: /var: no gene named 'nope'"):
        spinfer.read_h5ad_binary(path, genes=["G01", "nope"])
    legacy = write_h5ad(tmp_path / "old.h5ad", counts, genes, cells, legacy_index=True)
    r = spinfer.read_h5ad_binary(legacy, 0.0, drop_constant=True)
    assert r.cells == cells and r.genes[-1] == "G11"


def test_h5ad_duplicate_sparse_entries_add_up(tmp_path):
    # CSR with entry (0, 1) stored twice: scipy.sparse sums duplicates (toarray), so do we.
    import scipy.sparse as sp

    data, indices, indptr = np.array([1.0, 2.0, 3.0]), np.array([1, 1, 0]), np.array([0, 2, 3])
    ref = sp.csr_matrix((data, indices, indptr), shape=(2, 2)).toarray()
    with h5py.File(tmp_path / "dup.h5ad", "w") as f:
        g = f.create_group("X")
        g.attrs.update({"encoding-type": "csr_matrix", "encoding-version": "0.1.0"})
        g.attrs["shape"] = np.array([2, 2])
        g.create_dataset("data", data=data)
        g.create_dataset("indices", data=indices)
        g.create_dataset("indptr", data=indptr)
        dataframe(f, "obs", ["c1", "c2"])
        dataframe(f, "var", ["g1", "g2"])
    r = spinfer.read_h5ad_binary(tmp_path / "dup.h5ad", 2.5)
    # cell c1, gene g2 holds 1 + 2 = 3 > 2.5 (a kept last or first entry alone would give 0)
    np.testing.assert_array_equal(r.X, (ref > 2.5).astype(np.uint8))
    assert r.X[0, 1] == 1 and r.dropped == []


@pytest.mark.parametrize("layout", ["dense", "csr"])
def test_h5ad_scaled_or_broken_values_are_refused(tmp_path, counts, layout):
    genes, cells = names_for(counts)
    sd = counts.std(0)
    z = (counts - counts.mean(0)) / np.where(sd > 0, sd, 1.0)
    path = write_h5ad(tmp_path / "scaled.h5ad", z, genes, cells, layout=layout)
    with pytest.raises(ValueError, match=r"scaled\.h5ad: /X: holds negative values .* look scaled "
                                         r"or centred, and scaled data cannot be binarized"):
        spinfer.read_h5ad_binary(path)
    bad = counts.astype(float)
    bad[4, 2] = np.nan
    path = write_h5ad(tmp_path / "nan.h5ad", bad, genes, cells, layout=layout)
    with pytest.raises(ValueError, match=r"nan\.h5ad: /X: cell 'cell004', gene 'G02': value nan"):
        spinfer.read_h5ad_binary(path)


def test_h5ad_constant_genes_are_reported(tmp_path, counts):
    genes, cells = names_for(counts)
    c = counts.copy()
    c[:, 3] = 0          # never detected
    c[:, 8] = 5          # always detected
    path = write_h5ad(tmp_path / "const.h5ad", c, genes, cells, layout="csc")
    with pytest.raises(ValueError, match=r"const\.h5ad: /X: 2 gene\(s\) are constant after "
                                         r"binarisation \(never active: 'G03'; always active: "
                                         r"'G08'\).*drop_constant=True"):
        spinfer.read_h5ad_binary(path)
    r = spinfer.read_h5ad_binary(path, drop_constant=True)
    assert r.dropped == ["G03", "G08"]
    assert r.genes == [g for g in genes if g not in ("G03", "G08")]
    with pytest.raises(ValueError, match=r"every gene is constant"):
        spinfer.read_h5ad_binary(path, 100.0, drop_constant=True)


def test_h5ad_malformed_files_are_named(tmp_path, counts):
    genes, cells = names_for(counts)
    path = write_h5ad(tmp_path / "short.h5ad", counts, genes[:-1], cells)
    with pytest.raises(ValueError, match=r"short\.h5ad: /X: has 12 columns but var names 11"):
        spinfer.read_h5ad_binary(path)
    path = write_h5ad(tmp_path / "ptr.h5ad", counts, genes, cells, layout="csr")
    with h5py.File(path, "a") as f:
        indptr = f["X/indptr"][()]
        indptr[5] = indptr[4] - 1
        del f["X/indptr"]
        f["X"].create_dataset("indptr", data=indptr)
    with pytest.raises(ValueError, match=r"ptr\.h5ad: /X/indptr: expected 301 non-decreasing"):
        spinfer.read_h5ad_binary(path)
    with h5py.File(tmp_path / "nox.h5ad", "w") as f:
        dataframe(f, "var", genes)
    with pytest.raises(ValueError, match=r"nox\.h5ad: /X: missing"):
        spinfer.read_h5ad_binary(tmp_path / "nox.h5ad")
    with h5py.File(tmp_path / "novar.h5ad", "w") as f:
        matrix(f, "X", counts, "dense")
    with pytest.raises(ValueError, match=r"novar\.h5ad: /var: missing"):
        spinfer.read_h5ad_binary(tmp_path / "novar.h5ad")
    path = write_h5ad(tmp_path / "ok.h5ad", counts, genes, cells)
    for bad, message in (("mean", "expected a number"), ("quantile:1.5", "in \\[0, 1\\)"),
                         (np.ones(3), "3 values for 12 genes")):
        with pytest.raises(ValueError, match=message):
            spinfer.read_h5ad_binary(path, bad)
    with pytest.raises(ValueError, match=r"ok\.h5ad: /layers: missing"):
        spinfer.read_h5ad_binary(path, layer="counts")


@pytest.mark.filterwarnings("ignore")
def test_h5ad_layout_round_trips_through_anndata(tmp_path, counts):
    """anndata (when installed) reads our hand-written files, and we read files it writes."""
    ad = pytest.importorskip("anndata")
    import scipy.sparse as sp

    genes, cells = names_for(counts)
    for layout in ("dense", "csr", "csc"):
        path = write_h5ad(tmp_path / f"ours_{layout}.h5ad", counts, genes, cells, layout=layout)
        a = ad.read_h5ad(path)
        X = a.X.toarray() if sp.issparse(a.X) else np.asarray(a.X)
        np.testing.assert_array_equal(X, counts)
        assert list(a.var_names) == genes and list(a.obs_names) == cells
    import pandas as pd

    for store in (np.asarray, sp.csr_matrix, sp.csc_matrix):
        a = ad.AnnData(X=store(counts.astype(np.float32)), obs=pd.DataFrame(index=cells),
                       var=pd.DataFrame(index=genes))
        path = tmp_path / "theirs.h5ad"
        a.write_h5ad(path)
        r = spinfer.read_h5ad_binary(path, "median", drop_constant=True)
        t = np.quantile(counts.astype(float), 0.5, axis=0)
        ref = counts > t
        keep = ref.any(0) & ~ref.all(0)
        np.testing.assert_array_equal(r.X, ref[:, keep].astype(np.uint8))
        assert r.cells == cells


# ---------------------------------------------------------------------------------------------
# h5py missing
# ---------------------------------------------------------------------------------------------

def test_readers_explain_a_missing_h5py(tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "h5py", None)   # makes `import h5py` raise ImportError
    with pytest.raises(ImportError, match=r"need h5py: pip install h5py .*spinfer\[readers\]"):
        spinfer.read_nwb_units(tmp_path / "x.nwb")
    with pytest.raises(ImportError, match=r"need h5py"):
        spinfer.read_h5ad_binary(tmp_path / "x.h5ad")
    with pytest.raises(ImportError, match=r"need h5py"):
        spinfer.bin_nwb_units(tmp_path / "x.nwb", 0.01)
