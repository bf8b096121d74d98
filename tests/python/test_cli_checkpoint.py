"""Stopping long `spinfer` subcommands with SIGTERM / SIGINT / SIGUSR1, and --resume.

The reference for every resumed output is the uninterrupted run with the same seed: the numbers
must be equal (exactly). A run is signalled only once it is demonstrably running: its
checkpoint has appeared or advanced, or (commands without checkpoints) /proc shows the handler
installed. Exit codes: 128 + signal when stopped, 65 for a checkpoint that does not fit, 66 for a
missing one.
"""
import json
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

import spinfer

pytestmark = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="signals and /proc: Linux")

REFINE = ["--seed", 3, "--threshold", 0.01, "--max-iterations", 60, "--noise", "iid"]
SIGNIFICANCE = ["--seed", 2, "--bootstrap", 30, "--nulls", 15, "--threads", 1]


def run(cli, *args):
    return subprocess.run([cli, *map(str, args)], capture_output=True, text=True, timeout=300)


def default_signals():
    # A parent that ignores SIGINT (a non-interactive shell's background job) would pass that on.
    for s in (signal.SIGINT, signal.SIGTERM, signal.SIGUSR1):
        signal.signal(s, signal.SIG_DFL)


def start(cli, *args):
    return subprocess.Popen([cli, *map(str, args)], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, preexec_fn=default_signals)


def wait_until(proc, ready, what, timeout=120):
    """Polls ready() while proc runs; fails (with its stderr) if it ends first."""
    deadline = time.monotonic() + timeout
    while not ready():
        if proc.poll() is not None:
            pytest.fail(f"the command ended before {what}: {proc.returncode}\n{proc.stderr.read()}")
        if time.monotonic() > deadline:
            proc.kill()
            pytest.fail(f"timed out waiting for {what}")
        time.sleep(0.005)


def stop(proc, sig):
    proc.send_signal(sig)
    out, err = proc.communicate(timeout=120)
    return proc.returncode, err


def saved_state(path):
    """The state in a checkpoint file (None while there is none; it is replaced atomically)."""
    try:
        with open(path) as f:
            return json.load(f)["state"]
    except FileNotFoundError:
        return None


def refine_iteration(path):
    s = saved_state(path)
    return s["iteration"] if s and s.get("started") else 0


def replicates_done(path):
    s = saved_state(path)
    r = s and s["replicates"]
    return len(r["bootstrap"]) + len(r["null"]) if r else 0


def handler_installed(pid):
    with open(f"/proc/{pid}/status") as f:
        for line in f:
            if line.startswith("SigCgt:"):
                return bool(int(line.split()[1], 16) & (1 << (signal.SIGTERM - 1)))
    return False


@pytest.fixture(scope="module")
def recording(tmp_path_factory, cli):
    """20 units with a shared input (so couplings are dense), 3000 bins; a mean-field start."""
    d = tmp_path_factory.mktemp("recording")
    rng = np.random.default_rng(5)
    z = rng.normal(size=(3000, 1))
    X = (rng.normal(size=(3000, 20)) + 0.8 * z > 0.9).astype(np.uint8)
    np.save(d / "x.npy", X)
    np.save(d / "x8.npy", X[:, :8])  # for significance: 45 pseudo-likelihood refits of 8 units
    r = run(cli, "fit", d / "x.npy", "--method", "mean-field", "--out", d / "start.json", "-q")
    assert r.returncode == 0, r.stderr
    return d


def setting(args, option, value):
    """args with `option`'s value replaced (or the option added)."""
    args = list(args)
    if option in args:
        args[args.index(option) + 1] = value
    else:
        args += [option, value]
    return args


def model_numbers(path):
    m = json.loads(path.read_text())
    extra = dict(m["provenance"]["extra"])
    extra.pop("command")  # the command line differs (--resume)
    return m["fields"], m["couplings"], {**m["provenance"], "extra": extra}


def leftovers(folder, keep):
    return sorted(p.name for p in folder.iterdir() if p.name not in keep)


def test_refine_stopped_three_times_resumes_to_the_uninterrupted_result(cli, recording, tmp_path):
    data, start_model = recording / "x.npy", recording / "start.json"
    ref = tmp_path / "ref.json"
    r = run(cli, "refine", start_model, data, "--out", ref, *REFINE)
    assert r.returncode == 0, r.stderr
    assert not (tmp_path / "ref.json.checkpoint").exists()

    out = tmp_path / "refined.json"
    ckpt = tmp_path / "refined.json.checkpoint"
    reached = 0
    for k, sig in enumerate([signal.SIGTERM, signal.SIGUSR1, signal.SIGINT]):
        resume = ["--resume"] if k else []
        p = start(cli, "refine", start_model, data, "--out", out, "--checkpoint-every", 0, *REFINE, *resume)
        wait_until(p, lambda: refine_iteration(ckpt) > reached, f"iteration {reached + 1}")
        code, err = stop(p, sig)
        assert code == 128 + sig, err
        assert f"interrupted by {signal.Signals(sig).name}; checkpoint written to {ckpt}" in err
        assert not out.exists()
        assert leftovers(tmp_path, {"ref.json", ckpt.name}) == []  # no temporary files either
        # The state of a stopped run is the top of the iteration it was in: further on, or where
        # the last periodic checkpoint already was.
        assert refine_iteration(ckpt) > reached
        reached = refine_iteration(ckpt)
    assert reached < 60

    # The last run with another thread count: results do not depend on it.
    r = run(cli, "refine", start_model, data, "--out", out, *REFINE, "--resume", "--threads", 1)
    assert r.returncode == 0, r.stderr
    assert "resuming from" in r.stderr
    assert not ckpt.exists()  # removed once the output is written
    assert model_numbers(out) == model_numbers(ref)
    assert json.loads(r.stdout.splitlines()[-1])["iterations"] == 60


def test_significance_stopped_twice_resumes_to_the_uninterrupted_table(cli, recording, tmp_path):
    data = recording / "x8.npy"
    ref = tmp_path / "ref.csv"
    r = run(cli, "significance", data, "--out", ref, *SIGNIFICANCE)
    assert r.returncode == 0, r.stderr

    out = tmp_path / "edges.csv"
    ckpt = tmp_path / "edges.ckpt"
    done = 0
    for k, sig in enumerate([signal.SIGTERM, signal.SIGINT]):
        resume = ["--resume"] if k else []
        p = start(cli, "significance", data, "--out", out, "--checkpoint", ckpt, "--checkpoint-every", 0,
                  *SIGNIFICANCE, *resume)
        wait_until(p, lambda: replicates_done(ckpt) > done, f"replicate {done + 1}")
        code, err = stop(p, sig)
        assert code == 128 + sig, err
        assert f"checkpoint written to {ckpt}" in err
        assert not out.exists()
        state = saved_state(ckpt)
        # The held-out penalty was chosen once and is kept, so the resumed refits use it.
        assert state["penalties"]["l2"] > 0
        done = replicates_done(ckpt)
    assert done < 45

    r = run(cli, "significance", data, "--out", out, "--checkpoint", ckpt, *setting(SIGNIFICANCE, "--threads", 2),
            "--resume")
    assert r.returncode == 0, r.stderr
    assert not ckpt.exists()
    # Every number is printed with 17 significant digits: equal text means equal doubles.
    assert out.read_text() == ref.read_text()


def test_significance_stopped_while_choosing_the_penalty(cli, tmp_path):
    # 24 units x 40000 bins (many distinct patterns): the held-out choice of the penalty, the
    # first thing polling for signals, takes a few tenths of a second, so the signal lands inside.
    rng = np.random.default_rng(7)
    z = rng.normal(size=(40000, 1))
    np.save(tmp_path / "x.npy", (rng.normal(size=(40000, 24)) + 0.8 * z > 0.9).astype(np.uint8))
    args = [tmp_path / "x.npy", "--seed", 1, "--bootstrap", 2, "--nulls", 1, "--threads", 1]
    r = run(cli, "significance", *args, "--out", tmp_path / "ref.csv")
    assert r.returncode == 0, r.stderr
    out, ckpt = tmp_path / "edges.csv", tmp_path / "edges.csv.checkpoint"
    p = start(cli, "significance", *args, "--out", out)
    wait_until(p, lambda: handler_installed(p.pid), "the signal handlers are installed")
    code, err = stop(p, signal.SIGTERM)
    assert code == 128 + signal.SIGTERM, err
    assert saved_state(ckpt) == {"penalties": None, "replicates": None}  # nothing finished yet
    assert leftovers(tmp_path, {"x.npy", "ref.csv", ckpt.name}) == []
    r = run(cli, "significance", *args, "--out", out, "--resume")
    assert r.returncode == 0, r.stderr
    assert out.read_text() == (tmp_path / "ref.csv").read_text()
    assert not ckpt.exists()


@pytest.fixture
def stopped_refine(cli, recording, tmp_path):
    """A refine run stopped by SIGTERM after its second iteration (its checkpoint is left)."""
    out = tmp_path / "refined.json"
    args = [recording / "start.json", recording / "x.npy", "--out", out, *REFINE]
    p = start(cli, "refine", *args, "--checkpoint-every", 0)
    ckpt = tmp_path / "refined.json.checkpoint"
    wait_until(p, lambda: refine_iteration(ckpt) >= 2, "iteration 2")
    code, err = stop(p, signal.SIGTERM)
    assert code == 128 + signal.SIGTERM, err
    return args, out, ckpt


def test_resume_refuses_other_settings_and_other_data(cli, stopped_refine, recording, tmp_path):
    args, out, ckpt = stopped_refine
    before = ckpt.read_text()
    r = run(cli, "refine", *setting(args, "--seed", 4), "--resume")
    assert r.returncode == 65
    assert "settings/seed: 3 in the checkpoint, 4 now" in r.stderr
    r = run(cli, "refine", *setting(setting(args, "--l2", 0.5), "--noise", "bootstrap"), "--resume")
    assert r.returncode == 65
    assert "settings/l2: 0.0 in the checkpoint, 0.5 now" in r.stderr
    assert 'settings/noise: "iid" in the checkpoint, "bootstrap" now' in r.stderr
    # The same file name with other contents.
    X = np.load(recording / "x.npy")
    moved = tmp_path / "x.npy"
    np.save(moved, X[::-1])
    other = [a if a != recording / "x.npy" else moved for a in args]
    r = run(cli, "refine", *other, "--resume")
    assert r.returncode == 65
    assert "inputs/data:" in r.stderr
    # Another command's checkpoint.
    r = run(cli, "significance", recording / "x.npy", "--out", tmp_path / "e.csv", "--checkpoint", ckpt,
            "--resume")
    assert r.returncode == 65
    assert "written by `spinfer refine`" in r.stderr
    # Without --resume an existing checkpoint is kept unless --force.
    r = run(cli, "refine", *args)
    assert r.returncode == 66 and "--resume" in r.stderr and "--force" in r.stderr
    assert ckpt.read_text() == before and not out.exists()
    # A damaged checkpoint is bad input, not a crash.
    ckpt.write_text('{"format": "spinfer-checkpoint", "format_version": 1, "command": "refine"')
    r = run(cli, "refine", *args, "--resume")
    assert r.returncode == 65 and "not a readable spinfer checkpoint" in r.stderr


def test_resume_without_a_checkpoint_is_a_file_error(cli, recording, tmp_path):
    out = tmp_path / "refined.json"
    r = run(cli, "refine", recording / "start.json", recording / "x.npy", "--out", out, *REFINE, "--resume")
    assert r.returncode == 66
    assert "no checkpoint to resume from" in r.stderr
    assert not out.exists()


@pytest.fixture(scope="module")
def long_inputs(tmp_path_factory):
    """A 40-unit model and 400000 x 60 / 40000 x 40 recordings: every command below runs for
    seconds to minutes uninterrupted (the symmetric fit of x60 about 5 s here; the per-variable
    default now converges in a fraction of a second at 40000 rows, before the stop could land)."""
    d = tmp_path_factory.mktemp("long")
    rng = np.random.default_rng(1)
    n = 40
    J = np.triu(rng.normal(0, 0.3 / np.sqrt(n), (n, n)), 1)
    spinfer.save_model(d / "m.json", spinfer.IsingModel(fields=rng.normal(0, 0.1, n), couplings=J + J.T,
                                                        convention="spin"))
    z = rng.normal(size=(400000, 1))
    X = (rng.normal(size=(400000, 60)) + 0.8 * z > 0.9).astype(np.uint8)
    np.save(d / "x60.npy", X)
    np.save(d / "x40.npy", X[:40000, :40])
    return d


@pytest.mark.parametrize("command", [
    ["sample", "m.json", "--count", 10, "--burn-in", 10**9],
    ["scan", "m.json", "--method", "sampled", "--temperatures", 1, "--samples", 10**7],
    ["fit", "x60.npy", "--variant", "symmetric"],
    ["check", "m.json", "x40.npy", "--replicates", 100000],
], ids=lambda c: c[0])
def test_long_commands_stop_on_sigterm_without_output(cli, long_inputs, tmp_path, command):
    args = [long_inputs / a if isinstance(a, str) and a.endswith((".json", ".npy")) else a for a in command]
    out = tmp_path / ("out.npy" if command[0] == "sample" else "out.json")
    p = start(cli, *args, "--out", out)
    wait_until(p, lambda: handler_installed(p.pid), "the signal handlers are installed")
    time.sleep(0.3)  # inside the computation
    code, err = stop(p, signal.SIGTERM)
    assert code == 128 + signal.SIGTERM, err
    if command[0] == "fit":  # fits keep a checkpoint (see test_fit_stopped_twice_resumes_...)
        assert err.strip().splitlines()[-1].startswith("spinfer: interrupted by SIGTERM; checkpoint written to")
        assert os.listdir(tmp_path) == ["out.json.checkpoint"]
    else:
        assert err.strip().splitlines()[-1] == "spinfer: interrupted by SIGTERM"
        assert os.listdir(tmp_path) == []


@pytest.fixture(scope="module")
def fit_recording(tmp_path_factory):
    """120000 x 70 correlated binary data: a tight pseudo-likelihood fit takes tens of rounds."""
    d = tmp_path_factory.mktemp("fitrec")
    rng = np.random.default_rng(5)
    z = rng.normal(size=(120000, 3))
    load = rng.normal(0, 0.7, (3, 70))
    X = (rng.normal(size=(120000, 70)) + z @ load > 0.6).astype(np.uint8)
    np.save(d / "x.npy", X)
    return d / "x.npy"


def optimiser_rounds(path):
    s = saved_state(path)
    return s["optimiser"]["rounds"] if s and s.get("stage") == "final" else -1


@pytest.mark.parametrize("extra", [[], ["--shard", "2/3"], ["--variant", "symmetric"]],
                         ids=["per-variable", "shard", "symmetric"])
def test_fit_stopped_twice_resumes_to_the_uninterrupted_model(cli, fit_recording, tmp_path, extra):
    """Oracle: the same fit run without interruption; the resumed model must be identical."""
    args = ["fit", fit_recording, "--l2", "1e-5", "--tolerance", "1e-10", "--max-iterations", 5000,
            *extra]
    reference = tmp_path / "reference.json"
    r = run(cli, *args, "--out", reference)
    assert r.returncode == 0, r.stderr
    out = tmp_path / "model.json"
    ckpt = tmp_path / "model.json.checkpoint"
    reached = -1
    for k, sig in enumerate((signal.SIGTERM, signal.SIGUSR1)):
        resume = ["--resume"] if k else []
        p = start(cli, *args, "--out", out, "--checkpoint-every", 0, *resume)
        wait_until(p, lambda: optimiser_rounds(ckpt) > reached + 1, f"round {reached + 2}")
        code, err = stop(p, sig)
        assert code == 128 + sig, err
        assert "checkpoint written to" in err
        assert not out.exists()
        reached = optimiser_rounds(ckpt)
    r = run(cli, *args, "--out", out, "--resume", "--threads", 1)
    assert r.returncode == 0, r.stderr
    assert not ckpt.exists()
    a, b = json.loads(reference.read_text()), json.loads(out.read_text())
    if extra and extra[0] == "--shard":
        assert a["fits"]["coefficients"] == b["fits"]["coefficients"]
        assert a["fits"]["fields"] == b["fits"]["fields"]
    else:
        assert a["fields"] == b["fields"] and a["couplings"] == b["couplings"]
        assert a["provenance"]["iterations"] == b["provenance"]["iterations"]
    # A different penalty is refused.
    p = start(cli, *args[:2], "--l2", "2e-5", *args[4:], "--out", out, "--force", "--checkpoint-every", 0)
    wait_until(p, lambda: optimiser_rounds(ckpt) >= 1, "round 1")
    stop(p, signal.SIGTERM)
    r = run(cli, *args, "--out", tmp_path / "x.json", "--checkpoint", ckpt, "--resume")
    assert r.returncode == 65 and "settings/l2" in r.stderr
