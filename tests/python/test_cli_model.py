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
