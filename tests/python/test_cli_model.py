"""`spinfer sample` and `spinfer check` end to end on a small model (exact oracle: enumeration)."""
import json
import subprocess

import numpy as np
import pytest

import spinfer


def run(cli, *args):
    return subprocess.run([cli, *map(str, args)], capture_output=True, text=True, timeout=300)


@pytest.fixture
def small_model(tmp_path, rng):
    n = 6
    J = np.triu(rng.normal(0, 0.5, (n, n)), 1)
    m = spinfer.IsingModel(fields=rng.normal(-0.5, 0.3, n), couplings=J + J.T, convention="binary",
                           names=[f"u{i}" for i in range(n)])
    path = tmp_path / "model.json"
    spinfer.save_model(path, m)
    return m, path


def test_sample_matches_exact_means_and_is_reproducible(cli, small_model, tmp_path):
    model, path = small_model
    out = tmp_path / "s.npy"
    r = run(cli, "sample", path, "--count", 40000, "--seed", 5, "--out", out)
    assert r.returncode == 0, r.stderr
    summary = json.loads(r.stdout.strip().splitlines()[-1])
    assert summary["samples"] == 40000 and summary["provenance"]["seed"] == 5
    X = np.load(out)
    assert X.dtype == np.uint8 and X.shape == (40000, 6)
    exact = spinfer.exact_statistics(model, moments_convention="binary")
    mean_exact = np.asarray(exact["mean"])
    se = np.sqrt(mean_exact * (1 - mean_exact) / 40000) * 3   # x3 allows for autocorrelation
    assert np.all(np.abs(X.mean(axis=0) - mean_exact) < 5 * se)
    out2 = tmp_path / "s2.npy"
    assert run(cli, "sample", path, "--count", 40000, "--seed", 5, "--threads", 1, "--out", out2).returncode == 0
    assert np.array_equal(np.load(out2), X)


def test_sample_refuses_to_overwrite(cli, small_model, tmp_path):
    _, path = small_model
    out = tmp_path / "s.npy"
    out.write_text("keep me")
    r = run(cli, "sample", path, "--count", 10, "--out", out)
    assert r.returncode == 66 and "--force" in r.stderr
    assert out.read_text() == "keep me"


def test_check_writes_documented_json(cli, small_model, tmp_path):
    model, path = small_model
    X, _ = spinfer.sample(model.fields, model.couplings, "binary", 5000, seed=3)
    data = tmp_path / "d.npz"
    spinfer.write_matrix(data, X, names=model.names)
    out = tmp_path / "check.json"
    r = run(cli, "check", path, data, "--out", out, "--seed", 2, "--replicates", 30)
    assert r.returncode == 0, r.stderr
    j = json.loads(out.read_text())
    assert j["format"] == "spinfer-check" and j["model_statistics"] == "exact"
    assert j["names"] == model.names
    assert set(j["summary"]) == {"means", "correlations", "triplets", "active_counts"}
    assert len(j["correlations"]["pairs"]) == 15
    assert j["provenance"]["inputs"][0]["fnv1a64"]
    assert "normalised error" in r.stderr


def test_check_bad_inputs(cli, small_model, tmp_path):
    _, path = small_model
    wrong = tmp_path / "w.npy"
    np.save(wrong, np.zeros((10, 4), np.uint8) + np.eye(10, 4, dtype=np.uint8))
    r = run(cli, "check", path, wrong, "--out", tmp_path / "c.json")
    assert r.returncode == 65 and "6 units but the data have 4" in r.stderr
    assert not (tmp_path / "c.json").exists()
    r = run(cli, "check", tmp_path / "missing.json", wrong)
    assert r.returncode == 66
    r = run(cli, "check", path, wrong, "--no-such-option")
    assert r.returncode == 2


def test_scan_exact_matches_enumeration(cli, small_model, tmp_path):
    model, path = small_model
    out = tmp_path / "scan.json"
    r = run(cli, "scan", path, "--temperatures", "0.5,1.0,1.5,3.0", "--out", out)
    assert r.returncode == 0, r.stderr
    j = json.loads(out.read_text())
    assert j["method"] == "exact"
    for t, e, c in zip(j["temperatures"], j["energy"], j["specific_heat"]):
        ex = spinfer.exact_statistics(model, temperature=t)
        assert e == pytest.approx(ex["mean_energy"], rel=1e-12)
        assert c == pytest.approx(ex["specific_heat"], rel=1e-12)
    assert min(j["temperatures"]) <= j["peak_temperature"] <= max(j["temperatures"])
    assert run(cli, "scan", path, "--temperatures", "1:2").returncode == 65


@pytest.mark.parametrize("method", ["pseudo-likelihood", "screening", "mean-field", "tap",
                                    "independent-pair", "sessak-monasson", "bethe"])
def test_fit_cli_equals_python(cli, small_model, tmp_path, method):
    model, _ = small_model
    X, _ = spinfer.sample(model.fields, model.couplings, "binary", 4000, seed=8)
    data = tmp_path / "d.npy"
    np.save(data, X)
    out = tmp_path / "m.json"
    r = run(cli, "fit", data, "--method", method, "--out", out, "--threads", 1)
    assert r.returncode == 0, r.stderr
    summary = json.loads(r.stdout.strip().splitlines()[-1])
    assert summary["method"] == method and summary["converged"]
    from_cli = spinfer.load_model(out)
    from_py = spinfer.fit(X, method, threads=1)
    assert from_cli.convention == "binary"
    np.testing.assert_allclose(from_cli.couplings, from_py.couplings, rtol=0, atol=1e-12)
    np.testing.assert_allclose(from_cli.fields, from_py.fields, rtol=0, atol=1e-12)
    assert from_cli.provenance["method"] == method


def test_fit_cli_penalties_and_bad_options(cli, small_model, tmp_path):
    model, _ = small_model
    X, _ = spinfer.sample(model.fields, model.couplings, "binary", 3000, seed=9)
    data = tmp_path / "d.npy"
    np.save(data, X)
    out = tmp_path / "m.json"
    r = run(cli, "fit", data, "--l2", "0.01", "--variant", "symmetric", "--model-convention", "spin", "--out", out)
    assert r.returncode == 0, r.stderr
    m = spinfer.load_model(out)
    assert m.convention == "spin" and m.provenance["l2"] == 0.01
    assert m.provenance["extra"]["variant"] == "symmetric"
    assert run(cli, "fit", data, "--method", "magic", "--out", out, "--force").returncode == 2
    assert run(cli, "fit", data, "--l2", "-1", "--out", out, "--force").returncode == 65
    assert run(cli, "fit", data, "--method", "tap", "--l2", "0.1", "--out", tmp_path / "x.json").returncode == 65
    assert not (tmp_path / "x.json").exists()
    const = tmp_path / "c.npy"
    Y = X.copy()
    Y[:, 2] = 0
    np.save(const, Y)
    r = run(cli, "fit", const, "--out", tmp_path / "y.json")
    assert r.returncode == 65 and "never active: unit 3" in r.stderr
    assert run(cli, "fit", const, "--drop-constant", "--out", tmp_path / "y.json").returncode == 0
    assert spinfer.load_model(tmp_path / "y.json").n_units == 5


def test_report_cli_writes_self_contained_html(cli, small_model, tmp_path):
    pytest.importorskip("matplotlib")
    model, path = small_model
    X, _ = spinfer.sample(model.fields, model.couplings, "binary", 3000, seed=10)
    data = tmp_path / "d.npy"
    np.save(data, X)
    assert run(cli, "check", path, data, "--out", tmp_path / "c.json", "--replicates", 20).returncode == 0
    out = tmp_path / "r.html"
    r = run(cli, "report", path, "--check", tmp_path / "c.json", "--truth", path, "--out", out)
    assert r.returncode == 0, r.stderr
    html = out.read_text()
    assert "<script" not in html and "http" not in html and "data:image/png;base64," in html
    assert "not anatomical" in html or "statistical" in html
    r = run(cli, "report", path, "--out", out)
    assert r.returncode == 66 and "--force" in r.stderr


def test_refine_cli_matches_data_moments(cli, small_model, tmp_path):
    model, _ = small_model
    X, _ = spinfer.sample(model.fields, model.couplings, "binary", 20000, seed=12)
    data = tmp_path / "d.npy"
    np.save(data, X)
    start = tmp_path / "start.json"
    assert run(cli, "fit", data, "--method", "mean-field", "--out", start).returncode == 0
    out = tmp_path / "refined.json"
    r = run(cli, "refine", start, data, "--expectations", "exact", "--out", out)
    assert r.returncode == 0, r.stderr
    refined = spinfer.load_model(out)
    # Exact-expectation learning ends at the maximum-likelihood point, where the model's means
    # equal the data's (the moment-matching condition; checked by exact enumeration).
    ex = spinfer.exact_statistics(refined, moments_convention="binary")
    np.testing.assert_allclose(ex["mean"], X.mean(axis=0), atol=1e-7)
    assert refined.provenance["method"] == "boltzmann-learning"


def test_significance_cli_writes_edge_table(cli, tmp_path):
    pd = pytest.importorskip("pandas")
    n = 6
    J = np.zeros((n, n))
    J[0, 1] = J[1, 0] = 1.2
    X, _ = spinfer.sample(np.full(n, -0.2), J, "spin", 4000, seed=13)
    data = tmp_path / "d.npy"
    np.save(data, X)
    out = tmp_path / "edges.csv"
    r = run(cli, "significance", data, "--method", "mean-field", "--bootstrap", 30, "--nulls", 60,
            "--out", out, "--seed", 1)
    assert r.returncode == 0, r.stderr
    t = pd.read_csv(out)
    assert len(t) == 15 and list(t.columns[:4]) == ["i", "j", "source", "target"]
    top = t.iloc[0]
    assert (top["i"], top["j"]) == (0, 1) and bool(top["significant"])
    assert top["lower"] <= top["coupling"] <= top["upper"]
    assert run(cli, "significance", data, "--fdr", "2", "--out", tmp_path / "x.csv").returncode == 2
