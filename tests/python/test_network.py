"""Edge tables, edge-list CSV and GraphML export of a coupling matrix."""
import os

import numpy as np
import pytest

pd = pytest.importorskip("pandas")

import spinfer  # noqa: E402
from spinfer import network  # noqa: E402


def couplings(rng, n, zeros=0):
    A = np.round(rng.normal(size=(n, n)), 2)  # rounding makes ties in |J|
    J = np.triu(A, 1)
    J = J + J.T
    if zeros:
        iu = np.triu_indices(n, 1)
        pick = rng.choice(iu[0].size, size=zeros, replace=False)
        J[iu[0][pick], iu[1][pick]] = 0.0
        J[iu[1][pick], iu[0][pick]] = 0.0
    return J


def reference_rows(J, names):
    """Plain-Python reference: every pair i < j, sorted by |J| descending, then i, then j."""
    n = J.shape[0]
    rows = [(i, j, names[i], names[j], J[i, j]) for i in range(n) for j in range(i + 1, n)]
    rows.sort(key=lambda r: (-abs(r[4]), r[0], r[1]))
    return rows


def test_edge_table_matches_a_reference(rng):
    J = couplings(rng, 9, zeros=5)
    names = [f"g{k}" for k in range(9)]
    t = spinfer.edge_table(J, names, threshold=None)
    ref = reference_rows(J, names)
    assert list(t.columns) == ["i", "j", "source", "target", "coupling", "abs_coupling", "sign", "rank"]
    assert len(t) == 36
    assert list(zip(t.i, t.j, t.source, t.target, t.coupling)) == ref
    np.testing.assert_array_equal(t.abs_coupling, np.abs(t.coupling))
    np.testing.assert_array_equal(t.sign, np.sign(t.coupling))
    np.testing.assert_array_equal(t["rank"], np.arange(1, 37))
    # the default threshold (0) drops exact zeros; ranks stay those over all pairs
    t0 = spinfer.edge_table(J, names)
    assert len(t0) == 36 - 5 and (t0.abs_coupling > 0).all()
    np.testing.assert_array_equal(t0["rank"], np.arange(1, 32))
    t1 = spinfer.edge_table(J, names, threshold=0.5, top=4)
    expected = [r for r in ref if abs(r[4]) > 0.5][:4]
    assert list(zip(t1.i, t1.j)) == [(r[0], r[1]) for r in expected]


def test_edge_table_optional_columns(rng):
    n = 5
    J = couplings(rng, n)
    low, high = J - 0.1, J + 0.2
    p = rng.uniform(size=(n, n))
    p = (p + p.T) / 2
    dec = p < 0.3
    t = spinfer.edge_table(J, intervals=(low, high), p_values=p, decisions=dec)
    assert list(t.columns)[-4:] == ["ci_low", "ci_high", "p_value", "significant"]
    for row in t.itertuples():
        assert row.ci_low == low[row.i, row.j] and row.ci_high == high[row.i, row.j]
        assert row.p_value == p[row.i, row.j] and row.significant == dec[row.i, row.j]
    assert t.source.tolist() == [str(i) for i in t.i]  # default names are the indices
    stacked = spinfer.edge_table(J, intervals=np.stack([low, high]))
    np.testing.assert_array_equal(stacked.ci_high, t.ci_high)
    last = spinfer.edge_table(J, intervals=np.stack([low, high], axis=-1))
    np.testing.assert_array_equal(last.ci_low, t.ci_low)


def test_edge_table_bad_input(rng):
    J = couplings(rng, 4)
    with pytest.raises(ValueError, match="square"):
        spinfer.edge_table(np.zeros((2, 3)))
    bad = J.copy()
    bad[0, 2] += 1.0
    with pytest.raises(ValueError, match=r"not symmetric \(J\[0,2\]"):
        spinfer.edge_table(bad)
    with pytest.raises(ValueError, match="appears more than once"):
        spinfer.edge_table(J, names=["a", "b", "a", "c"])
    with pytest.raises(ValueError, match="3 names for 4 units"):
        spinfer.edge_table(J, names=["a", "b", "c"])
    with pytest.raises(ValueError, match="p_values"):
        spinfer.edge_table(J, p_values=np.zeros((3, 3)))


def test_edge_list_csv_round_trip(rng, tmp_path):
    J = couplings(rng, 6)
    t = spinfer.edge_table(J, [f"n{k}" for k in range(6)], p_values=np.full((6, 6), 0.5))
    path = tmp_path / "edges.csv"
    spinfer.write_edge_list(path, t)
    # pandas 2's default C float parser may be one ulp off (its float_precision option is
    # deprecated in pandas 3); Python's float() reads %.17g exactly.
    back = pd.read_csv(path, converters={"weight": float})
    assert list(back.columns) == ["source", "target", "weight", "abs_weight", "sign", "rank",
                                  "p_value", "i", "j"]
    np.testing.assert_array_equal(back.weight, t.coupling)  # %.17g keeps doubles exact
    nx = pytest.importorskip("networkx")
    G = nx.from_pandas_edgelist(back, "source", "target", edge_attr=True)
    assert G.number_of_edges() == len(t)
    assert G["n0"]["n1"]["weight"] == J[0, 1]
    assert [p.name for p in tmp_path.iterdir()] == ["edges.csv"]


def test_graphml_round_trip(rng, tmp_path):
    nx = pytest.importorskip("networkx")
    n = 7
    J = couplings(rng, n, zeros=4)
    h = rng.normal(size=n)
    names = ["a&b", "c<d", "e", "f", "g", "h", "i"]  # XML special characters must survive
    path = tmp_path / "net.graphml"
    spinfer.write_graphml(path, J, names, fields=h)
    assert 'edgedefault="undirected"' in path.read_text()
    G = nx.read_graphml(path)
    assert not G.is_directed()
    assert list(G.nodes) == names
    for k, name in enumerate(names):
        assert G.nodes[name]["field"] == h[k] and G.nodes[name]["index"] == k
    assert G.number_of_edges() == n * (n - 1) // 2 - 4
    for i in range(n):
        for j in range(i + 1, n):
            if J[i, j] == 0:
                assert not G.has_edge(names[i], names[j])
                continue
            e = G[names[i]][names[j]]
            assert e["weight"] == J[i, j] and e["abs_weight"] == abs(J[i, j])
            assert e["sign"] == np.sign(J[i, j])
    # a filtered edge table decides the edges
    t = spinfer.edge_table(J, names, top=3, decisions=np.abs(J) > 1.0)
    spinfer.write_graphml(path, J, names, edge_table=t)
    G = nx.read_graphml(path)
    assert G.number_of_edges() == 3 and G.number_of_nodes() == n
    assert {e["significant"] for _, _, e in G.edges(data=True)} <= {True, False}


def test_failed_write_leaves_no_file(rng, tmp_path, monkeypatch):
    J = couplings(rng, 4)
    path = tmp_path / "edges.csv"
    path.write_text("old contents")

    def broken(*args, **kwargs):
        raise RuntimeError("disk full")

    monkeypatch.setattr(pd.DataFrame, "to_csv", broken)
    with pytest.raises(RuntimeError, match="disk full"):
        spinfer.write_edge_list(path, spinfer.edge_table(J))
    assert path.read_text() == "old contents"  # untouched
    assert sorted(os.listdir(tmp_path)) == ["edges.csv"]  # and no temporary file left
    with pytest.raises(OSError, match="does not exist"):
        spinfer.write_graphml(tmp_path / "missing" / "g.graphml", J)
    with pytest.raises(ValueError, match="not in names"):
        network.network_graph(J, names=list("abcd"), edge_table=spinfer.edge_table(J))
