"""The HTML report: one self-contained file with figures, check tables, edges and cautions."""
import base64
import os
import re

import numpy as np
import pytest

matplotlib = pytest.importorskip("matplotlib")
matplotlib.use("Agg")
pytest.importorskip("pandas")

import spinfer  # noqa: E402
from spinfer import _atomic, report  # noqa: E402


def couplings(rng, n):
    A = rng.normal(scale=0.3, size=(n, n))
    J = np.triu(A, 1)
    return J + J.T


@pytest.fixture
def inputs(rng):
    n = 6
    J = couplings(rng, n)
    model = {"fields": rng.normal(size=n), "couplings": J, "names": [f"cell<{k}>" for k in range(n)],
             "convention": "spin", "provenance": {"method": "tap", "samples": 5000, "units": n}}
    data_means = rng.uniform(-0.5, 0.5, size=n)
    se = np.full(n, 0.01)
    means = {"data": data_means, "model": data_means + np.array([0.0, 0.01, -0.01, 0.03, 0, 0]),
             "independent": data_means, "data_se": se}
    C = couplings(rng, n) / 10
    corr = {"data": C, "model": C + 0.001, "independent": np.zeros((n, n)),
            "data_se": np.full((n, n), 0.002)}
    pk = np.array([0.4, 0.3, 0.2, 0.07, 0.02, 0.01, 0.0])
    counts = {"data": pk, "model": pk * 0.9 + 0.01, "independent": np.full(7, 1 / 7),
              "data_se": np.array([0.01, 0.01, 0.01, 0.005, 0.002, 0.001, 0.0])}
    check = {"summary": {"pairwise": {"max normalised error": 2.1, "fraction within 2 SE": 0.93},
                         "independent": {"max normalised error": 40.0, "fraction within 2 SE": 0.2}},
             "means": means, "correlations": corr, "active_counts": counts}
    scan = {"temperatures": [0.8, 1.0, 1.2], "specific_heat": [0.2, 0.5, 0.3],
            "specific_heat_error": [0.01, 0.02, 0.01], "peak": 1.02}
    return model, check, scan, J


def images(text):
    return re.findall(r'<img [^>]*src="([^"]*)"', text)


def test_full_report_is_self_contained(inputs, tmp_path):
    model, check, scan, J = inputs
    truth = J + 0.05
    path = tmp_path / "report.html"
    spinfer.write_report(path, title="Test <run>", model=model, check=check, scan=scan, truth=truth,
                         notes=["Recorded in V1 & V2."])
    text = path.read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>")
    lowered = text.lower()
    assert "http" not in lowered and "<script" not in lowered and "<link" not in lowered
    assert "Test &lt;run&gt;" in text and "Recorded in V1 &amp; V2." in text  # escaped
    assert "5000 × 6" in text  # data shape from the provenance
    # couplings, histogram, recovery, means, correlations, P(K), C(T)
    srcs = images(text)
    assert len(srcs) == 7
    for src in srcs:
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n"
    for caution in report.CAUTIONS:
        assert caution in text
    assert "How to read this" in text
    assert "not anatomical synapses or regulatory interactions" in text
    assert "subsampling" in text
    assert "max normalised error" in text and "pairwise" in text
    assert "cell&lt;0&gt;" in text  # names in the edge table are escaped
    assert "Strongest couplings (15 of 15 edges)" in text
    assert "RMS of (model − data)/SE" in text
    assert [p.name for p in tmp_path.iterdir()] == ["report.html"]


def test_agreement_numbers_are_computed_from_the_arrays(inputs):
    _, check, _, _ = inputs
    rows = report._agreement(check["means"], "means")
    z = np.array([0.0, 0.01, -0.01, 0.03, 0, 0]) / 0.01
    assert rows[0][:3] == ["means", "pairwise model", 6]
    assert rows[0][3] == pytest.approx(np.sqrt(np.mean(z ** 2)), rel=1e-12)
    assert rows[0][4] == pytest.approx(5 / 6)  # |z| = 3 for one of six
    assert rows[0][5] == pytest.approx(3.0)
    assert rows[1][1] == "independent model" and rows[1][3] == 0.0
    # P(K) entries with a zero data SE are left out
    assert report._agreement(check["active_counts"], "active_counts")[0][2] == 6
    # pair matrices count each pair once
    assert report._agreement(check["correlations"], "correlations")[0][2] == 15


def test_minimal_and_partial_inputs(inputs, tmp_path, rng):
    model, check, scan, J = inputs
    path = tmp_path / "r.html"
    spinfer.write_report(path, title="only cautions")
    text = path.read_text(encoding="utf-8")
    assert images(text) == [] and "How to read this" in text
    # an IsingModel-like object, a check with only some keys, an explicit edge table
    class Fit:
        couplings = J
        fields = np.zeros(6)
        names = None
        convention = "binary"
    edges = spinfer.edge_table(J, top=3)
    spinfer.write_report(path, title="partial", model=Fit(), check={"means": check["means"]},
                         edges=edges, data_shape=(100, 6))
    text = path.read_text(encoding="utf-8")
    assert len(images(text)) == 3  # couplings, histogram, means
    assert "100 × 6" in text and "Strongest couplings (3 of 3 edges)" in text
    spinfer.write_report(path, title="top", model=model, top_edges=4)
    text = path.read_text(encoding="utf-8")
    assert "Strongest couplings (4 of 15 edges)" in text
    table = text.split("Strongest couplings")[1].split("</table>")[0]
    assert table.count("<tr>") == 5  # header and four edges
    # the scan dict from temperature_scan (peak_temperature, peak_at_edge) is understood
    spinfer.write_report(path, title="scan", scan={"temperatures": [1, 2], "specific_heat": [1, 2],
                                                    "peak_temperature": 2.0, "peak_at_edge": True})
    assert "widen the temperature range" in path.read_text(encoding="utf-8")


def test_bad_input_leaves_no_file(inputs, tmp_path):
    model, check, _, _ = inputs
    path = tmp_path / "r.html"
    bad = {"correlations": {"data": np.zeros((6, 6)), "model": np.zeros((5, 5))}}
    with pytest.raises(ValueError, match="correlations"):
        spinfer.write_report(path, title="bad", check=bad)
    with pytest.raises(ValueError, match="truth"):
        spinfer.write_report(path, title="bad", truth=np.zeros((3, 3)))
    with pytest.raises(ValueError, match="title"):
        spinfer.write_report(path, title="")
    assert os.listdir(tmp_path) == []


def test_atomic_write_keeps_the_old_file_on_failure(inputs, tmp_path, monkeypatch):
    path = tmp_path / "r.html"
    path.write_text("previous report")

    def broken(fd):
        raise OSError("no space left on device")

    # fail after the document went into the temporary file, before the rename
    monkeypatch.setattr(_atomic.os, "fsync", broken)
    with pytest.raises(OSError, match="no space left"):
        spinfer.write_report(path, title="t", model=inputs[0])
    assert path.read_text() == "previous report"
    assert os.listdir(tmp_path) == ["r.html"]


def test_report_from_package_outputs(tmp_path):
    """The report takes what the package's own functions return, as they return it."""
    rng = np.random.default_rng(5)
    n = 5
    J = np.triu(rng.normal(scale=0.4, size=(n, n)) * (rng.uniform(size=(n, n)) < 0.5), 1)
    J = J + J.T
    h = rng.normal(scale=0.2, size=n)
    X, _ = spinfer.sample(h, J, "spin", 4000, seed=3)
    data = spinfer.moments(X, convention="spin", copy=True)
    noise = spinfer.bootstrap_noise(X, convention="spin", replicates=50, copy=True)
    fit = spinfer.fit_closed_form(X, "tap")
    pred = spinfer.exact_statistics(fit)
    indep = spinfer.exact_statistics(np.arctanh(data["mean"]), np.zeros((n, n)), "spin")
    check = {
        "means": {"data": data["mean"], "model": pred["mean"], "independent": indep["mean"],
                  "data_se": noise["mean_se"]},
        "correlations": {"data": data["connected"], "model": pred["connected"],
                         "independent": indep["connected"], "data_se": noise["connected_se"]},
        "active_counts": {"data": spinfer.active_count_distribution(X, copy=True),
                          "model": pred["active_count"], "independent": indep["active_count"],
                          "data_se": noise["count_se"]},
    }
    scan = spinfer.temperature_scan(fit.fields, fit.couplings, fit.convention, [0.8, 1.0, 1.25],
                                    n=2000, seed=1)
    path = tmp_path / "fit.html"
    spinfer.write_report(path, title="TAP fit", model=fit, check=check, scan=scan, truth=J)
    text = path.read_text(encoding="utf-8")
    assert "4000 × 5" in text and ">tap<" in text
    assert len(images(text)) == 7
    rows = report._agreement(check["means"], "means")
    assert rows[1][3] == pytest.approx(0.0, abs=1e-9)  # the independent model fits the means exactly
