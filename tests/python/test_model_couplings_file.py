"""Model files with the couplings in a sibling .npy file, across Python, numpy and the CLI.

Outside references: numpy.load reads the sibling (numpy's own .npy reader), json reads the model
file, and the checksum is recomputed here from the FNV-1a definition (Fowler, Noll, Vo)."""
import json
import shutil
import subprocess

import numpy as np
import pytest

import spinfer


def fnv1a64(data: bytes) -> str:
    """FNV-1a 64 (Fowler, Noll, Vo): offset basis cbf29ce484222325, prime 100000001b3."""
    h = 0xCBF29CE484222325
    for byte in data:
        h = ((h ^ byte) * 0x100000001B3) & 0xFFFFFFFFFFFFFFFF
    return f"{h:016x}"


def test_the_reference_hash_matches_the_published_vectors():
    # The FNV test suite of the algorithm's authors: "" -> cbf29ce484222325, "a" ->
    # af63dc4c8601ec8c, "foobar" -> 85944171f73967e8 (also checked in tests/cpp/test_checksum.cpp).
    assert fnv1a64(b"") == "cbf29ce484222325"
    assert fnv1a64(b"a") == "af63dc4c8601ec8c"
    assert fnv1a64(b"foobar") == "85944171f73967e8"


def run(cli, *args):
    return subprocess.run([cli, *map(str, args)], capture_output=True, text=True, timeout=300)


def random_model(n, seed, names=True):
    rng = np.random.default_rng(seed)
    J = np.triu(rng.normal(0, 0.1, (n, n)), 1)
    return spinfer.IsingModel(rng.normal(-1, 0.3, n), J + J.T, "binary",
                              names=[f"cell{i:03d}" for i in range(n)] if names else None,
                              provenance={"method": "tap", "extra": {"note": "invented"}})


def test_python_writes_numpy_reads_the_sibling_exactly(tmp_path):
    model = random_model(9, 1)
    path = tmp_path / "net.json"
    spinfer.save_model(path, model, couplings_file="npy")
    sibling = tmp_path / "net.couplings.npy"
    assert spinfer.couplings_sibling_path(path) == str(sibling)
    on_disk = np.load(sibling)
    assert on_disk.dtype == np.float64 and on_disk.shape == (9, 9)
    assert np.array_equal(on_disk, model.couplings)  # bit-exact
    doc = json.loads(path.read_text())
    assert doc["format_version"] == 2
    assert doc["couplings"] == {"npy": "net.couplings.npy", "shape": [9, 9], "dtype": "float64",
                                "fnv1a64": fnv1a64(sibling.read_bytes())}
    assert doc["names"] == model.names and np.array_equal(doc["fields"], model.fields)
    back = spinfer.load_model(path)
    assert np.array_equal(back.couplings, model.couplings)
    assert np.array_equal(back.fields, model.fields)
    assert back.names == model.names and back.provenance == model.provenance


def test_automatic_choice_follows_the_documented_threshold(tmp_path):
    n = spinfer.INLINE_COUPLINGS_MAX_UNITS
    assert n == 500
    spinfer.save_model(tmp_path / "at.json", random_model(n, 2, names=False))
    spinfer.save_model(tmp_path / "above.json", random_model(n + 1, 3, names=False))
    assert isinstance(json.loads((tmp_path / "at.json").read_text())["couplings"], list)
    assert not (tmp_path / "at.couplings.npy").exists()
    assert isinstance(json.loads((tmp_path / "above.json").read_text())["couplings"], dict)
    # Forcing inline keeps a large model in one file.
    spinfer.save_model(tmp_path / "one.json", random_model(n + 1, 3, names=False), couplings_file="inline")
    assert not (tmp_path / "one.couplings.npy").exists()
    with pytest.raises(ValueError, match="couplings_file 'zarr': expected auto, inline or npy"):
        spinfer.save_model(tmp_path / "x.json", random_model(3, 4), couplings_file="zarr")
    assert not (tmp_path / "x.json").exists()


def test_mismatched_or_missing_sibling_is_refused_naming_both_files(tmp_path):
    a, b = tmp_path / "a.json", tmp_path / "b.json"
    spinfer.save_model(a, random_model(6, 5), couplings_file="npy")
    spinfer.save_model(b, random_model(6, 6), couplings_file="npy")
    shutil.copy(tmp_path / "b.couplings.npy", tmp_path / "a.couplings.npy")
    with pytest.raises(ValueError, match=r"a\.json: key 'couplings': the couplings file .*a\.couplings\.npy "
                                         r"does not belong to this model file"):
        spinfer.load_model(a)
    (tmp_path / "a.couplings.npy").unlink()
    with pytest.raises(OSError, match=r"a\.json: key 'couplings': cannot read its couplings file: .*a\.couplings\.npy"):
        spinfer.load_model(a)


def test_estimator_save_passes_the_choice_through(tmp_path):
    rng = np.random.default_rng(7)
    X = (rng.random((3000, 5)) < 0.3).astype(np.uint8)
    net = spinfer.PairwiseNetwork(method="tap").fit(X)
    net.save(tmp_path / "est.json", couplings_file="npy")
    assert np.array_equal(np.load(tmp_path / "est.couplings.npy"), net.couplings_)


@pytest.fixture
def recording(tmp_path):
    rng = np.random.default_rng(8)
    X = (rng.random((4000, 6)) < 0.25).astype(np.uint8)
    path = tmp_path / "rec.npy"
    np.save(path, X)
    return X, path


def test_cli_writes_python_reads(cli, recording, tmp_path):
    X, data = recording
    out = tmp_path / "fit.json"
    r = run(cli, "fit", data, "--method", "tap", "--model-convention", "spin", "--couplings-file", "npy",
            "--out", out)
    assert r.returncode == 0, r.stderr
    assert "fit.couplings.npy" in r.stderr
    model = spinfer.load_model(out)
    assert np.array_equal(np.load(tmp_path / "fit.couplings.npy"), model.couplings)
    # The same fit from Python (closed form from the same moments; reference: our own Python
    # entry point, which shares the estimator, so only rounding-level agreement is asked).
    np.testing.assert_allclose(model.couplings, spinfer.fit_closed_form(X, "tap").couplings,
                               rtol=1e-12, atol=1e-15)
    # --force covers the sibling too: a leftover couplings file is not silently replaced.
    out.unlink()
    before = (tmp_path / "fit.couplings.npy").read_bytes()
    r = run(cli, "fit", data, "--method", "tap", "--couplings-file", "npy", "--out", out)
    assert r.returncode == 66 and "fit.couplings.npy: file exists (use --force" in r.stderr
    assert not out.exists() and (tmp_path / "fit.couplings.npy").read_bytes() == before
    r = run(cli, "fit", data, "--method", "tap", "--couplings-file", "npy", "--out", out, "--force")
    assert r.returncode == 0, r.stderr
    # An inline model does not touch (or need --force for) a sibling.
    inline = tmp_path / "inline.json"
    r = run(cli, "fit", data, "--method", "tap", "--out", inline)
    assert r.returncode == 0 and not (tmp_path / "inline.couplings.npy").exists()
    r = run(cli, "fit", data, "--couplings-file", "hdf5", "--out", tmp_path / "bad.json")
    assert r.returncode == 2


def test_python_writes_cli_reads(cli, tmp_path):
    model = random_model(6, 9)
    path = tmp_path / "py.json"
    spinfer.save_model(path, model, couplings_file="npy")
    r = run(cli, "sample", path, "--count", 200, "--seed", 1, "--out", tmp_path / "s.npy")
    assert r.returncode == 0, r.stderr
    refined = tmp_path / "refined.json"
    r = run(cli, "refine", path, tmp_path / "s.npy", "--max-iterations", 2, "--couplings-file", "npy",
            "--out", refined, "--seed", 2)
    assert r.returncode == 0, r.stderr
    assert np.array_equal(np.load(tmp_path / "refined.couplings.npy"), spinfer.load_model(refined).couplings)
    # A mismatched pair is bad input (65), a missing sibling a file error (66); both name the files.
    other = tmp_path / "other.json"
    spinfer.save_model(other, random_model(6, 10), couplings_file="npy")
    shutil.copy(tmp_path / "other.couplings.npy", tmp_path / "py.couplings.npy")
    r = run(cli, "sample", path, "--count", 10, "--out", tmp_path / "t.npy")
    assert r.returncode == 65 and "py.json" in r.stderr and "py.couplings.npy" in r.stderr
    (tmp_path / "py.couplings.npy").unlink()
    r = run(cli, "sample", path, "--count", 10, "--out", tmp_path / "t.npy")
    assert r.returncode == 66 and "py.json" in r.stderr and "py.couplings.npy" in r.stderr


def test_merged_shards_can_write_the_sibling(cli, recording, tmp_path):
    _, data = recording
    plain = tmp_path / "plain.json"
    assert run(cli, "fit", data, "--l2", "0.001", "--out", plain).returncode == 0
    parts = []
    for k in (1, 2):
        parts.append(tmp_path / f"part{k}.json")
        r = run(cli, "fit", data, "--l2", "0.001", "--shard", f"{k}/2", "--out", parts[-1])
        assert r.returncode == 0, r.stderr
        assert not (tmp_path / f"part{k}.couplings.npy").exists()
    merged = tmp_path / "merged.json"
    r = run(cli, "merge", *parts, "--couplings-file", "npy", "--out", merged)
    assert r.returncode == 0, r.stderr
    # Reference: the unsharded fit, stored inline (merging is documented to reproduce it).
    np.testing.assert_array_equal(np.load(tmp_path / "merged.couplings.npy"),
                                  np.array(json.loads(plain.read_text())["couplings"]))
