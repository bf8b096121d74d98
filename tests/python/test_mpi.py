"""The MPI build of `spinfer` (-DSPINFER_MPI=ON): a 3-rank job against the same command started
without a launcher (one process). Reference: the single-process run. Fits must agree within
1e-10 (the promise to users, DEVELOPERS.md "MPI"; in fact they are bit-identical, as
tests/cpp/test_team.cpp asserts for thread ranks); samples must be equal bit for bit (chain c
keeps random stream c on whichever rank runs it).

Needs SPINFER_MPI_CLI (the MPI build's `spinfer`, e.g. build/mpi/spinfer; .ci/test sets it) and
an `mpirun` on PATH. Data: the invented demo recording data/neurons (data/README.md), first 120 s.
"""
import json
import os
import shutil
import signal
import subprocess
import time
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[2]
NEURONS = ROOT / "data" / "neurons"
RANKS = 3
TIMEOUT = 300  # seconds; a hung job fails the test instead of hanging the suite


@pytest.fixture(scope="module")
def mpi_cli():
    path = os.environ.get("SPINFER_MPI_CLI")
    if not path:
        pytest.skip("SPINFER_MPI_CLI is not set (path of a spinfer built with -DSPINFER_MPI=ON; "
                    ".ci/test builds one in build/mpi)")
    assert Path(path).is_file() and os.access(path, os.X_OK), f"SPINFER_MPI_CLI={path} is not a program"
    assert shutil.which("mpirun"), "SPINFER_MPI_CLI is set but mpirun is not on PATH"
    return str(Path(path).resolve())


def launcher():
    """mpirun with RANKS ranks; Open MPI refuses more ranks than cores without --oversubscribe."""
    version = subprocess.run(["mpirun", "--version"], capture_output=True, text=True).stdout
    extra = ["--oversubscribe"] if "Open MPI" in version else []
    return ["mpirun", *extra, "-n", str(RANKS)]


def run(args, mpi=False, timeout=TIMEOUT):
    env = dict(os.environ)
    if not mpi:
        env["SPINFER_USE_MPI"] = "0"  # one process even if this test itself runs under a launcher
    cmd = (launcher() if mpi else []) + [str(a) for a in args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, env=env)


@pytest.fixture(scope="module")
def recording(mpi_cli, tmp_path_factory):
    """The demo spikes binned at 10 ms over the first 120 s: 12,000 bins x 40 neurons."""
    out = tmp_path_factory.mktemp("mpi") / "neurons.npz"
    r = run([mpi_cli, "bin", NEURONS / "spikes.csv", "--bin-width", 0.01, "--start", 0,
             "--stop", 120, "--out", out, "--quiet"])
    assert r.returncode == 0, r.stderr
    return out


def load_model(path):
    m = json.loads(Path(path).read_text())
    return np.asarray(m["fields"]), np.asarray(m["couplings"]), m


@pytest.mark.parametrize("variant", ["symmetric", "per-variable"])
def test_fit_on_three_ranks_equals_one_process(mpi_cli, recording, tmp_path, variant):
    # Default penalty: l2 chosen on held-out rows, so the held-out path is shared too.
    common = ["fit", recording, "--method", "pseudo-likelihood", "--variant", variant,
              "--threads", 1]
    plain, shared = tmp_path / "plain.json", tmp_path / "shared.json"
    r = run([mpi_cli, *common, "--out", plain])
    assert r.returncode == 0, r.stderr
    r = run([mpi_cli, *common, "--out", shared], mpi=True)
    assert r.returncode == 0, r.stderr
    # Only rank 0 prints the summary line.
    summaries = [line for line in r.stdout.splitlines() if line.startswith("{")]
    assert len(summaries) == 1 and json.loads(summaries[0])["command"] == "fit"
    h0, J0, m0 = load_model(plain)
    h1, J1, m1 = load_model(shared)
    difference = max(np.abs(h1 - h0).max(), np.abs(J1 - J0).max())
    assert difference < 1e-10, f"max |MPI - plain| = {difference:.3g}"
    assert m1["provenance"]["iterations"] == m0["provenance"]["iterations"]
    assert m1["provenance"]["l2"] == pytest.approx(m0["provenance"]["l2"], rel=1e-12)
    assert m1["provenance"]["extra"]["command"]["ranks"] == RANKS
    assert m0["provenance"]["extra"]["command"]["ranks"] == 1
    if variant == "per-variable":  # the units (rows of J) were shared out, not the samples
        assert m1["provenance"]["extra"]["unit_ranks"] == RANKS
        assert "unit_ranks" not in m0["provenance"]["extra"]
        assert m1["provenance"]["extra"]["evaluations"] == m0["provenance"]["extra"]["evaluations"]


def test_sample_on_three_ranks_equals_one_process(mpi_cli, tmp_path):
    # 5 chains over 3 ranks (2, 2, 1 chains); automatic burn-in and thinning from the pilot of all
    # chains; 3001 samples so the chains keep unequal counts.
    common = ["sample", NEURONS / "true_model.json", "--count", 3001, "--chains", 5, "--seed", 11,
              "--threads", 1]
    plain, shared = tmp_path / "plain.npy", tmp_path / "shared.npy"
    r0 = run([mpi_cli, *common, "--out", plain])
    assert r0.returncode == 0, r0.stderr
    r1 = run([mpi_cli, *common, "--out", shared], mpi=True)
    assert r1.returncode == 0, r1.stderr
    a, b = np.load(plain), np.load(shared)
    assert a.shape == (3001, 40)
    assert np.array_equal(a, b)
    s0 = json.loads(r0.stdout.strip().splitlines()[-1])
    s1 = json.loads(r1.stdout.strip().splitlines()[-1])
    for key in ("burn_in", "thin", "rhat_energy", "ess_energy"):
        assert s1[key] == s0[key], key
    assert s1["provenance"]["ranks"] == RANKS


def test_bad_input_on_three_ranks_ends_the_job_with_exit_65(mpi_cli, tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("a,b,c\n0,1,0\n1,2,0\n0,0,1\n")  # a 2 is neither binary nor spin
    out = tmp_path / "never.json"
    r = run([mpi_cli, "fit", bad, "--threads", 1, "--out", out], mpi=True, timeout=120)
    assert r.returncode == 65, r.stderr
    assert "bad.csv" in r.stderr and "error" in r.stderr
    assert not out.exists()


def test_an_error_on_one_rank_ends_every_rank(mpi_cli, recording, tmp_path):
    # Rank 2 alone reads a bad file while ranks 0 and 1 start the fit and wait for it in the
    # first collective: MPI_Abort must end them with rank 2's exit code instead of a hang.
    bad = tmp_path / "bad.csv"
    bad.write_text("a,b\n0,1\n1,3\n")
    script = tmp_path / "one_bad_rank.sh"
    script.write_text(
        "#!/bin/sh\n"
        'rank=${OMPI_COMM_WORLD_RANK:-${PMI_RANK:-${PMIX_RANK:-0}}}\n'
        f'if [ "$rank" = 2 ]; then data="{bad}"; else data="{recording}"; fi\n'
        f'exec "{mpi_cli}" fit "$data" --threads 1 --out "{tmp_path}/never.json"\n')
    script.chmod(0o755)
    r = run([script], mpi=True, timeout=120)
    assert r.returncode == 65, r.stderr
    assert "rank 2 of 3" in r.stderr and "not binary" in r.stderr
    assert not (tmp_path / "never.json").exists()


@pytest.mark.parametrize("variant", ["symmetric", "per-variable"])
def test_a_stopped_job_resumes_to_the_one_process_model(mpi_cli, tmp_path, variant):
    # SIGUSR1 to mpirun (which forwards it to every rank): rank 0 alone acts on it, writes the
    # checkpoint and exits with 128 + 10; resuming on 3 ranks gives the uninterrupted model.
    # Per-variable: every rank fits its own units, and the checkpoint gathers all of them.
    rng = np.random.default_rng(5)
    z = rng.normal(size=(30000, 3))
    X = (rng.normal(size=(30000, 40)) + z @ rng.normal(0, 0.7, (3, 40)) > 0.6).astype(np.uint8)
    data = tmp_path / "x.npy"
    np.save(data, X)
    args = [mpi_cli, "fit", data, "--variant", variant, "--l2", "1e-5", "--tolerance", "1e-10",
            "--max-iterations", 5000, "--threads", 1]
    reference, out = tmp_path / "reference.json", tmp_path / "model.json"
    ckpt = tmp_path / "model.json.checkpoint"
    r = run([*args, "--out", reference])
    assert r.returncode == 0, r.stderr

    def rounds():
        try:
            state = json.loads(ckpt.read_text())["state"]
        except (FileNotFoundError, json.JSONDecodeError):
            return -1
        return state["optimiser"]["rounds"] if state.get("stage") == "final" else -1

    p = subprocess.Popen(launcher() + [str(a) for a in args] + ["--out", str(out), "--checkpoint-every", "0"],
                         stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + TIMEOUT
    while rounds() < 3:
        assert p.poll() is None, "the job ended before its third round: " + p.stderr.read()
        if time.monotonic() > deadline:
            p.kill()
            pytest.fail("no checkpoint of round 3")
        time.sleep(0.005)
    p.send_signal(signal.SIGUSR1)
    _, err = p.communicate(timeout=TIMEOUT)
    assert p.returncode == 128 + signal.SIGUSR1, err
    assert "checkpoint written to" in err and not out.exists()
    saved = ckpt.read_bytes()
    r = run([*args, "--out", out, "--resume"], mpi=True)
    assert r.returncode == 0, r.stderr
    a, b = load_model(reference), load_model(out)
    assert np.array_equal(a[0], b[0]) and np.array_equal(a[1], b[1])
    assert not ckpt.exists()
    if variant == "per-variable":
        # The gathered state has the one-process layout: the same checkpoint resumes without MPI.
        alone, alone_ckpt = tmp_path / "alone.json", tmp_path / "alone.json.checkpoint"
        alone_ckpt.write_bytes(saved)
        r = run([*args, "--out", alone, "--resume"])
        assert r.returncode == 0, r.stderr
        c = load_model(alone)
        assert np.array_equal(a[0], c[0]) and np.array_equal(a[1], c[1])


def test_commands_that_do_not_share_work_refuse_several_ranks(mpi_cli, tmp_path):
    r = run([mpi_cli, "stats", NEURONS / "true_model.json", "--out", tmp_path / "s.json"],
            mpi=True, timeout=120)
    assert r.returncode == 2
    assert "only fit and sample" in r.stderr
