"""The `spinfer stats`, `bin` and `convert` commands run as a user would: exit codes
(0 ok, 2 usage, 65 bad input, 66 file errors), outputs checked against numpy, and no output file
left behind by a failure or without --force."""
import json
import os
import subprocess
from pathlib import Path

import numpy as np
import pytest

from conftest import find_cli

REPO = Path(__file__).resolve().parents[2]
CLI = Path(find_cli() or "spinfer-not-built")
pytestmark = pytest.mark.skipif(
    not CLI.is_file(), reason="spinfer command not built (set SPINFER_CLI or build into build/dev)")


def run(*args, cwd=None):
    p = subprocess.run([str(CLI), *map(str, args)], capture_output=True, text=True, cwd=cwd,
                       timeout=60)
    return p


def summary(p):
    return json.loads(p.stdout.strip().splitlines()[-1])


@pytest.fixture
def data(tmp_path):
    rng = np.random.default_rng(11)
    X = (rng.random((400, 5)) < [0.1, 0.3, 0.5, 0.2, 0.0]).astype(np.uint8)
    X[:, 1] |= X[:, 0]  # a positive correlation
    path = tmp_path / "x.npy"
    np.save(path, X)
    return X, path


def test_stats_matches_numpy(tmp_path, data):
    X, path = data
    p = run("stats", path, "--out", tmp_path / "s.json")
    assert p.returncode == 0, p.stderr
    s = summary(p)
    assert s["command"] == "stats" and s["samples"] == 400 and s["units"] == 5
    assert s["constant_units"] == ["unit 5"]  # never active, reported by name
    assert "samples: 400" in p.stderr and "unit 5" in p.stderr
    j = json.loads((tmp_path / "s.json").read_text())
    # numpy.mean / numpy.cov(bias=True) / numpy.bincount as the references
    np.testing.assert_allclose(j["mean"], X.mean(0))
    np.testing.assert_allclose(j["connected_correlations"], np.cov(X.T, bias=True), atol=1e-12)
    pk = np.bincount(X.sum(1), minlength=6) / 400
    np.testing.assert_allclose(j["active_count_distribution"], pk)
    r = np.corrcoef(X[:, :4].T)
    np.testing.assert_allclose(s["mean_pair_correlation"], r[np.triu_indices(4, 1)].mean())


def test_stats_drop_constant_and_spin(tmp_path, data):
    X, _ = data
    path = tmp_path / "named.csv"
    np.savetxt(path, 2 * X.astype(int) - 1, fmt="%d", delimiter=",", header="a,b,c,d,e", comments="")
    p = run("stats", path, "--drop-constant", "--out", tmp_path / "s.json")
    assert p.returncode == 0, p.stderr
    s = summary(p)
    assert s["units"] == 4 and s["constant_units"] == ["e"] and s["convention"] == "spin"
    j = json.loads((tmp_path / "s.json").read_text())
    assert j["names"] == ["a", "b", "c", "d"]
    np.testing.assert_allclose(j["mean"], (2 * X[:, :4].astype(int) - 1).mean(0))


def test_bin_and_convert_round_trip(tmp_path):
    (tmp_path / "sp.csv").write_text("unit,time\n2,0.05\n1,0.15\n2,0.17\n2,0.18\n1,0.45\n1,0.9\n")
    p = run("bin", tmp_path / "sp.csv", "--bin-width", "0.1", "--start", "0", "--stop", "0.6",
            "--gap", "0.2:0.3", "--out", tmp_path / "b.npz")
    assert p.returncode == 0, p.stderr
    rep = summary(p)["report"]
    assert rep["bins_kept"] == 5 and rep["bins_dropped_gaps"] == 1
    assert rep["spikes_outside_window"] == 1 and rep["multi_spike_bins"] == 1
    assert "dropped for gaps" in p.stderr
    with np.load(tmp_path / "b.npz") as z:
        # bins [0,.1) [.1,.2) [.3,.4) [.4,.5) [.5,.6); units 1, 2
        np.testing.assert_array_equal(z["X"], [[0, 1], [1, 1], [0, 0], [1, 0], [0, 0]])
        assert list(z["names"]) == ["1", "2"]
    p = run("convert", tmp_path / "b.npz", "--out", tmp_path / "b.csv", "--to", "spin")
    assert p.returncode == 0, p.stderr
    assert (tmp_path / "b.csv").read_text().splitlines()[:3] == ['"1","2"', "-1,1", "1,1"]
    p = run("convert", tmp_path / "b.csv", "--out", tmp_path / "c.npy", "--to", "binary")
    assert p.returncode == 0, p.stderr
    np.testing.assert_array_equal(np.load(tmp_path / "c.npy"),
                                  [[0, 1], [1, 1], [0, 0], [1, 0], [0, 0]])


def test_refuses_to_overwrite_without_force(tmp_path, data):
    _, path = data
    out = tmp_path / "o.csv"
    out.write_text("keep me")
    p = run("convert", path, "--out", out)
    assert p.returncode == 66 and "--force" in p.stderr
    assert out.read_text() == "keep me"
    assert run("convert", path, "--out", out, "--force").returncode == 0
    assert out.read_text() != "keep me"


@pytest.mark.parametrize("make, args, code", [
    (lambda d: np.save(d / "in.npy", np.array([[0, 2], [1, 0]])), ["convert", "in.npy"], 65),
    (lambda d: (d / "in.npy").write_bytes(b"\x93NUMPY\x01\x00"), ["convert", "in.npy"], 65),
    (lambda d: np.save(d / "in.npy", np.ones(4)), ["convert", "in.npy"], 65),
    (lambda d: (d / "in.csv").write_text("a,a\n0,1\n"), ["stats", "in.csv"], 65),
    (lambda d: (d / "in.csv").write_text("0,1\n1\n"), ["convert", "in.csv"], 65),
    (lambda d: None, ["convert", "missing.npy"], 66),
    (lambda d: None, ["stats", "missing.npy"], 66),
    (lambda d: (d / "in.npz").write_bytes(b"PK\x03\x04garbage"), ["convert", "in.npz"], 66),
    (lambda d: (d / "in.csv").write_text("1,0.5\n"), ["bin", "in.csv", "--bin-width", "0"], 65),
    (lambda d: (d / "in.csv").write_text("1,0.5\n1,0.9\n"),
     ["bin", "in.csv", "--bin-width", "0.1", "--gap", "0.6:0.7", "--gap", "0.65:0.8"], 65),
    (lambda d: (d / "in.csv").write_text("1,-0.5\n"), ["bin", "in.csv", "--bin-width", "0.1"], 65),
    (lambda d: None, ["bin", "missing.csv", "--bin-width", "0.1"], 66),
    (lambda d: (d / "in.csv").write_text("1,0.5\n"), ["bin", "in.csv", "--gap", "1-2",
                                                      "--bin-width", "0.1"], 2),
    (lambda d: (d / "in.csv").write_text("1,0.5\n"), ["bin", "in.csv"], 2),
    (lambda d: np.save(d / "in.npy", np.eye(2)), ["convert", "in.npy", "--to", "ising"], 2),
    (lambda d: np.save(d / "in.npy", np.eye(2)), ["stats", "in.npy", "--bogus"], 2),
])
def test_failures_exit_codes_and_no_output(tmp_path, make, args, code):
    make(tmp_path)
    out = "out.json" if args[0] == "stats" else "out.npy"
    p = run(*args, "--out", out, cwd=tmp_path)
    assert p.returncode == code, p.stderr
    assert not (tmp_path / out).exists()
    assert not [f for f in os.listdir(tmp_path) if ".tmp-" in f]  # no temporary files either
    if code in (65, 66):
        assert p.stderr.startswith("spinfer: error: ") and p.stdout == ""


@pytest.mark.parametrize("command", ["stats", "bin", "convert"])
def test_help_has_an_example(command):
    p = run(command, "--help")
    assert p.returncode == 0
    assert "Example:" in p.stdout and f"spinfer {command} " in p.stdout
