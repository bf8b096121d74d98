"""Plot helpers: they draw into a given Axes, return it, and hold the expected data.

Checks assert on artist data (image arrays, scatter offsets, scales, marker positions), not pixels.
"""
import io

import numpy as np
import pytest

matplotlib = pytest.importorskip("matplotlib")
matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

import spinfer  # noqa: E402
from spinfer import plots  # noqa: E402


@pytest.fixture(autouse=True)
def close_figures():
    yield
    plt.close("all")


def random_couplings(rng, n):
    A = rng.normal(size=(n, n))
    J = (A + A.T) / 2
    np.fill_diagonal(J, 0.0)
    return J


def render(ax):
    buf = io.BytesIO()
    ax.figure.savefig(buf, format="png")
    assert buf.getvalue()[:8] == b"\x89PNG\r\n\x1a\n"


def upper(M):
    return M[np.triu_indices(M.shape[0], k=1)]


def scatter_offsets(ax):
    from matplotlib.collections import PathCollection
    return [c.get_offsets() for c in ax.collections if isinstance(c, PathCollection)]


def test_couplings_heat_map_masks_the_diagonal_and_is_symmetric(rng):
    J = random_couplings(rng, 8)
    ax = spinfer.plot_couplings(J, names=[f"u{k}" for k in range(8)])
    render(ax)
    im = ax.images[0]
    shown = im.get_array()
    assert np.ma.isMaskedArray(shown)
    np.testing.assert_array_equal(shown.mask, np.eye(8, dtype=bool))
    np.testing.assert_array_equal(shown.filled(0.0), J)
    m = np.abs(upper(J)).max()
    assert im.norm.vmin == pytest.approx(-m) and im.norm.vmax == pytest.approx(m)
    assert im.get_cmap().name == "RdBu_r"
    assert [t.get_text() for t in ax.get_xticklabels()] == [f"u{k}" for k in range(8)]
    assert len(ax.figure.axes) == 2  # the colorbar


def test_couplings_reordered_and_clustered(rng):
    J = random_couplings(rng, 6)
    perm = np.array([3, 1, 5, 0, 2, 4])
    fig, ax = plt.subplots()
    assert spinfer.plot_couplings(J, order=perm, ax=ax, colorbar=False) is ax
    np.testing.assert_array_equal(ax.images[0].get_array().filled(0.0), J[np.ix_(perm, perm)])
    assert [t.get_text() for t in ax.get_yticklabels()] == [str(p) for p in perm]
    assert len(fig.axes) == 1

    # two blocks of strongly coupled units hidden by a shuffle: clustering puts each block together
    block = np.zeros((6, 6))
    block[:3, :3] = block[3:, 3:] = 1.0
    np.fill_diagonal(block, 0.0)
    shuffle = np.array([0, 3, 1, 4, 2, 5])
    Jb = block[np.ix_(shuffle, shuffle)] + 0.01 * random_couplings(rng, 6)
    order = spinfer.cluster_order(Jb)
    assert sorted(order) == list(range(6))
    groups = [set(shuffle[order[:3]] < 3), set(shuffle[order[3:]] < 3)]
    assert groups == [{True}, {False}] or groups == [{False}, {True}]
    ax2 = spinfer.plot_couplings(Jb, cluster=True)
    np.testing.assert_array_equal(ax2.spinfer_order, order)


def test_couplings_groups_sorted_with_separators(rng):
    J = random_couplings(rng, 5)
    ax = spinfer.plot_couplings(J, groups=["b", "a", "b", "a", "c"], colorbar=False)
    np.testing.assert_array_equal(ax.spinfer_order, [0, 2, 1, 3, 4])  # first-seen group order
    assert len(ax.lines) == 4  # two boundaries, a horizontal and a vertical line each


def test_couplings_no_tick_labels_for_many_units(rng):
    ax = spinfer.plot_couplings(random_couplings(rng, 60), colorbar=False)
    assert len(ax.get_xticks()) == 0 and len(ax.get_yticks()) == 0


def test_couplings_bad_input(rng):
    with pytest.raises(ValueError, match="square"):
        spinfer.plot_couplings(np.zeros((3, 4)))
    with pytest.raises(ValueError, match="row 1, column 2"):
        J = np.zeros((3, 3))
        J[1, 2] = np.nan
        spinfer.plot_couplings(J)
    with pytest.raises(ValueError, match="permutation"):
        spinfer.plot_couplings(np.zeros((3, 3)), order=[0, 0, 1])
    with pytest.raises(ValueError, match="not both"):
        spinfer.plot_couplings(np.zeros((3, 3)), order=[0, 1, 2], cluster=True)


def test_model_vs_data_points_band_and_independent(rng):
    n = 7
    C = random_couplings(rng, n)
    M = C + 0.01 * random_couplings(rng, n)
    se = np.full((n, n), 0.05)
    ind = np.zeros((n, n))
    ax = spinfer.plot_model_vs_data(C, M, se, independent=ind)
    render(ax)
    offsets = scatter_offsets(ax)
    assert len(offsets) == 2
    pairwise = offsets[-1]  # drawn last, on top
    assert pairwise.shape == (n * (n - 1) // 2, 2)
    np.testing.assert_array_equal(pairwise[:, 0], upper(C))
    np.testing.assert_array_equal(pairwise[:, 1], upper(M))
    np.testing.assert_array_equal(offsets[0][:, 1], 0.0)
    # the band is data ± 2 SE around the identity: its vertices span x - 0.1 .. x + 0.1
    band = [c for c in ax.collections if c.get_label() == "data ± 2 SE"][0]
    verts = band.get_paths()[0].vertices
    x = np.sort(upper(C))
    assert verts[:, 1].min() == pytest.approx(x.min() - 0.1)
    assert verts[:, 1].max() == pytest.approx(x.max() + 0.1)
    identity = [ln for ln in ax.lines if ln.get_label() == "identity"][0]
    xs, ys = identity.get_data()
    np.testing.assert_array_equal(xs, ys)


def test_model_vs_data_callable_noise_errorbars_and_log(rng):
    d = rng.uniform(0.01, 1.0, size=20)
    m = d * 1.1
    ax = spinfer.plot_model_vs_data(d, m, lambda x: 0.1 * x)
    assert len(scatter_offsets(ax)[0]) == 20
    ax = spinfer.plot_model_vs_data(d, m, 0.02 * np.ones(20), noise_style="errorbar", log=True)
    render(ax)
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    container = [c for c in ax.containers if c.get_label() == "data ± 2 SE"][0]
    bars = container.lines[2][0]  # errorbar containers hold (data line, caps, bar collections)
    assert len(bars.get_segments()) == 20
    seg = np.array(bars.get_segments()[0])
    assert seg[1, 0] - seg[0, 0] == pytest.approx(0.08)  # the bar spans ±2 SE
    with pytest.raises(ValueError, match="model_values has 5"):
        spinfer.plot_model_vs_data(d, m[:5])
    with pytest.raises(ValueError, match="noise_style"):
        spinfer.plot_model_vs_data(d, m, 0.1, noise_style="cloud")


def test_active_counts_log_axis_and_series():
    pk = np.array([0.5, 0.3, 0.15, 0.05, 0.0])
    model = np.array([0.48, 0.32, 0.14, 0.05, 0.01])
    ind = np.array([0.4, 0.4, 0.15, 0.04, 0.01])
    ax = spinfer.plot_active_counts(pk, model, ind, errors=np.full(5, 0.01))
    render(ax)
    assert ax.get_yscale() == "log"
    by_label = {ln.get_label(): ln for ln in ax.lines}
    np.testing.assert_array_equal(by_label["pairwise model"].get_ydata(), model)
    np.testing.assert_array_equal(by_label["independent model"].get_xdata(), np.arange(5))
    data_line = [c for c in ax.containers if c.get_label() == "data"][0].lines[0]
    np.testing.assert_array_equal(data_line.get_xdata(), [0, 1, 2, 3])  # P = 0 left out of log-y
    np.testing.assert_array_equal(data_line.get_ydata(), pk[:4])


def test_specific_heat_peak_marker():
    T = np.array([1.5, 0.5, 1.0, 1.25, 0.75])
    C = np.array([0.3, 0.2, 0.9, 0.6, 0.5])
    ax = spinfer.plot_specific_heat(T, C, errors=np.full(5, 0.02), peak=1.1)
    render(ax)
    by_label = {ln.get_label(): ln for ln in ax.lines}
    bars = ax.containers[0].lines[2][0].get_segments()
    order = np.argsort(T)
    np.testing.assert_allclose([b[1][1] - b[0][1] for b in bars], 0.08)  # from -2 SE to +2 SE
    np.testing.assert_array_equal([b[0][0] for b in bars], T[order])
    star = [ln for ln in ax.lines if ln.get_marker() == "*"][0]
    assert star.get_xdata()[0] == 1.1
    assert star.get_ydata()[0] == pytest.approx(0.9 + 0.4 * (0.6 - 0.9))  # linear interpolation
    curve = [ln for ln in ax.lines if ln.get_marker() == "o"][0]
    np.testing.assert_array_equal(curve.get_xdata(), np.sort(T))
    assert "peak T = 1.1" in by_label
    # the dict from temperature_scan is accepted as it is
    scan = {"temperatures": T, "specific_heat": C, "specific_heat_error": np.full(5, 0.02),
            "peak_temperature": 1.0}
    ax = spinfer.plot_specific_heat(scan)
    assert [ln for ln in ax.lines if ln.get_marker() == "*"][0].get_xdata()[0] == 1.0
    with pytest.raises(ValueError, match="4 specific-heat"):
        spinfer.plot_specific_heat(T, C[:4])


def test_coupling_histogram_counts_each_pair_once(rng):
    J = random_couplings(rng, 9)
    ax = spinfer.plot_coupling_histogram(J, bins=10)
    render(ax)
    heights = [p.get_height() for p in ax.patches]
    assert len(heights) == 10 and sum(heights) == 9 * 8 / 2
    expected, _ = np.histogram(upper(J), bins=10)  # numpy.histogram as the reference
    np.testing.assert_array_equal(heights, expected)


def test_recovered_vs_true_reports_rmse_and_correlation(rng):
    Jt = random_couplings(rng, 10)
    Jf = Jt + 0.1 * random_couplings(rng, 10)
    ax = spinfer.plot_recovered_vs_true(Jt, Jf)
    render(ax)
    pts = scatter_offsets(ax)[0]
    assert pts.shape == (45, 2)
    x, y = upper(Jt), upper(Jf)
    rmse = np.sqrt(np.mean((y - x) ** 2))
    r = np.corrcoef(x, y)[0, 1]
    assert ax.spinfer_rmse == pytest.approx(rmse, rel=1e-12)
    assert ax.spinfer_correlation == pytest.approx(r, rel=1e-12)
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert f"45 pairs: RMS error {rmse:.3g}, r = {r:.3f}" in legend
    with pytest.raises(ValueError, match="J_fit"):
        spinfer.plot_recovered_vs_true(Jt, Jt[:5, :5])


def test_plots_leave_no_figure_when_given_an_axes(rng):
    fig, ax = plt.subplots()
    before = plt.get_fignums()
    spinfer.plot_coupling_histogram(random_couplings(rng, 4), ax=ax)
    spinfer.plot_active_counts([0.5, 0.5], ax=ax)
    assert plt.get_fignums() == before
    assert plots.MAX_TICK_LABELS == 50
