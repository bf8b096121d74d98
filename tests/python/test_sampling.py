"""spinfer.sample / model_statistics / temperature_scan against exact enumeration written with numpy.

Statistical checks allow 5 batch-means standard errors; seeds are fixed, so results are
deterministic.
"""
import itertools
import os
import signal
import threading
import time

import numpy as np
import pytest

import spinfer


def random_model(N, seed, h_scale=0.8, j_scale=0.5):
    rng = np.random.default_rng(seed)
    h = rng.uniform(-h_scale, h_scale, N)
    J = np.triu(rng.uniform(-j_scale, j_scale, (N, N)), 1)
    return h, J + J.T


def exact(h, J, convention, T=1.0):
    """Brute force over all 2^N states (numpy + itertools)."""
    N = len(h)
    lo = 0.0 if convention == "binary" else -1.0
    V = np.array(list(itertools.product([lo, 1.0], repeat=N)))
    E = -V @ h - 0.5 * np.einsum("si,ij,sj->s", V, J, V)
    w = np.exp(-(E - E.min()) / T)
    p = w / w.sum()
    mean = p @ V
    second = V.T @ (V * p[:, None])
    K = (V == 1.0).sum(axis=1)
    pk = np.bincount(K, weights=p, minlength=N + 1)
    Em = p @ E
    C = (p @ E**2 - Em**2) / (N * T**2)
    return dict(mean=mean, second=second, connected=second - np.outer(mean, mean),
                active_count=pk, energy=Em, specific_heat=C)


def assert_within(est, err, ref, what, max_err):
    est, err, ref = np.atleast_1d(est), np.atleast_1d(err), np.atleast_1d(ref)
    assert np.all(err > 0), what
    assert np.all(err < max_err), what
    bad = np.abs(est - ref) > 5 * err
    assert not bad.any(), f"{what}: {est[bad]} vs {ref[bad]} (+- {err[bad]})"


@pytest.mark.parametrize("convention", ["binary", "spin"])
def test_statistics_match_enumeration(convention):
    h, J = random_model(8, 1 if convention == "binary" else 2,
                        j_scale=1.0 if convention == "binary" else 0.4)
    x = exact(h, J, convention)
    st = spinfer.model_statistics(h, J, convention, 40000, seed=3, threads=2)
    iu = np.triu_indices(8, 1)
    assert_within(st["mean"], st["mean_error"], x["mean"], "mean", 0.03)
    assert_within(st["connected"][iu], st["connected_error"][iu], x["connected"][iu], "connected", 0.03)
    keep = x["active_count"] > 1e-3
    assert_within(st["active_count"][keep], st["active_count_error"][keep], x["active_count"][keep],
                  "P(K)", 0.02)
    assert_within(st["energy"], st["energy_error"], x["energy"], "energy", 0.1)
    assert_within(st["specific_heat"], st["specific_heat_error"], x["specific_heat"], "C", 0.1)
    assert st["error_method"] == "batch means"
    assert st["batches"] == 32


def test_sample_output_and_energies():
    h, J = random_model(12, 5)
    for convention, dtype, values in [("binary", np.uint8, {0, 1}), ("spin", np.int8, {-1, 1})]:
        s, d = spinfer.sample(h, J, convention, 999, seed=4, chains=3, method="metropolis",
                              scan="random")
        assert s.dtype == dtype and s.shape == (999, 12)
        assert set(np.unique(s)) <= values
        v = s.astype(float)
        E = -v @ h - 0.5 * np.einsum("si,ij,sj->s", v, J, v)
        # Dense couplings are sampled with integer fields: the energies are exactly those of the
        # model rounded to multiples of the resolution r = 2^-s (half away from zero, as C's
        # lround), within (N + N (N - 1) / 2) r / 2 of the given model's.
        r = d["field_resolution"]
        assert 0 < r <= 2.0**-20
        grid = lambda x: np.trunc(x / r + np.copysign(0.5, x)) * r
        Er = -v @ grid(h) - 0.5 * np.einsum("si,ij,sj->s", v, grid(J), v)
        np.testing.assert_allclose(d["energy"], Er, rtol=1e-12, atol=1e-12)
        assert np.max(np.abs(d["energy"] - E)) <= (12 + 12 * 11 / 2) * r / 2
        np.testing.assert_array_equal(d["chain"], np.repeat([0, 1, 2], 333))
        assert d["storage"] == "dense" and d["method"] == "metropolis"
        assert len(d["acceptance_rate"]) == 3
        assert d["automatic_burn_in"] and d["thin"] >= 1


def test_same_seed_same_samples_for_any_thread_count():
    h, J = random_model(20, 7)
    a, da = spinfer.sample(h, J, "spin", 2000, seed=11, threads=1, ladder=[1.0, 1.7])
    b, db = spinfer.sample(h, J, "spin", 2000, seed=11, threads=2, ladder=[1.0, 1.7])
    np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(da["energy"], db["energy"])
    c, _ = spinfer.sample(h, J, "spin", 2000, seed=12, threads=2, ladder=[1.0, 1.7])
    assert not np.array_equal(a, c)
    assert len(da["swap_acceptance"]) == 1


def test_temperature_scan_matches_enumeration():
    h, J = random_model(8, 9, j_scale=0.8)
    temps = [0.6, 1.0, 1.6]
    for pt in (False, True):
        sc = spinfer.temperature_scan(h, J, "spin", temps, 20000, parallel_tempering=pt, seed=2)
        np.testing.assert_array_equal(sc["temperatures"], temps)
        for i, T in enumerate(temps):
            x = exact(h, J, "spin", T)
            assert_within(sc["energy"][i], sc["energy_error"][i], x["energy"], "E(T)", 0.2)
            assert_within(sc["specific_heat"][i], sc["specific_heat_error"][i], x["specific_heat"],
                          "C(T)", 0.1)
        assert len(sc["runs"]) == (1 if pt else 3)


def test_bad_input():
    h, J = random_model(5, 1)
    with pytest.raises(ValueError, match="not symmetric"):
        spinfer.sample(h, J + np.eye(5)[0:1].T @ np.eye(5)[1:2], "spin", 100)
    with pytest.raises(ValueError, match="convention"):
        spinfer.sample(h, J, "ising", 100)
    with pytest.raises(ValueError, match="method"):
        spinfer.sample(h, J, "spin", 100, method="wolff")
    with pytest.raises(ValueError, match="couplings"):
        spinfer.sample(h, J[:4, :4], "spin", 100)
    with pytest.raises(ValueError, match="fields"):
        spinfer.sample(J, J, "spin", 100)
    with pytest.raises(ValueError, match="temperature"):
        spinfer.sample(h, J, "spin", 100, temperature=-1)
    with pytest.raises(TypeError, match="colour"):
        spinfer.sample(h, J, "spin", 100, colour="red")


def test_progress_callback_can_stop():
    h, J = random_model(30, 2)
    seen = []

    def stop(p):
        seen.append(p)
        return False

    with pytest.raises(KeyboardInterrupt):
        spinfer.sample(h, J, "spin", 100000, progress=stop)
    assert len(seen) == 1 and seen[0]["total"] > 0


def test_ctrl_c_interrupts_within_a_second():
    h, J = random_model(100, 3)
    timer = threading.Timer(0.5, lambda: os.kill(os.getpid(), signal.SIGINT))
    t0 = time.monotonic()
    timer.start()
    try:
        with pytest.raises(KeyboardInterrupt):
            # About 4e9 updates: minutes of work unless interrupted.
            spinfer.sample(h, J, "spin", 40, burn_in=0, thin=10**6, threads=2)
    finally:
        timer.cancel()
    assert time.monotonic() - t0 < 0.5 + 1.5


def torus(L, K):
    N = L * L
    J = np.zeros((N, N))
    idx = np.arange(N).reshape(L, L)
    for a, b in [(idx, np.roll(idx, -1, 0)), (idx, np.roll(idx, -1, 1))]:
        J[a.ravel(), b.ravel()] = K
        J[b.ravel(), a.ravel()] = K
    return np.zeros(N), J


@pytest.mark.parametrize("method", ["gibbs", "metropolis"])
def test_coloured_scan_matches_enumeration(method):
    # 4x4 torus with a small uniform field: two colours, fields take few values (threshold cache).
    h, J = torus(4, 0.35)
    h = h + 0.1
    x = exact(h, J, "spin")
    st = spinfer.model_statistics(h, J, "spin", 40000, seed=5, threads=2, scan="coloured",
                                  method=method, storage="sparse")
    assert st["diagnostics"]["scan"] == "coloured" and st["diagnostics"]["storage"] == "sparse"
    assert_within(st["mean"], st["mean_error"], x["mean"], "mean", 0.03)
    iu = np.triu_indices(16, 1)
    assert_within(st["connected"][iu], st["connected_error"][iu], x["connected"][iu], "connected", 0.03)
    assert_within(st["energy"], st["energy_error"], x["energy"], "energy", 0.2)
    assert_within(st["specific_heat"], st["specific_heat_error"], x["specific_heat"], "C", 0.1)


def test_coloured_scan_is_reproducible_and_differs_from_sequential():
    h, J = torus(6, 0.4)
    a, da = spinfer.sample(h, J, "spin", 400, seed=3, threads=1, scan="coloured", burn_in=10, thin=1)
    b, db = spinfer.sample(h, J, "spin", 400, seed=3, threads=2, scan="coloured", burn_in=10, thin=1)
    np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(da["energy"], db["energy"])
    c, _ = spinfer.sample(h, J, "spin", 400, seed=3, threads=2, burn_in=10, thin=1)
    assert not np.array_equal(a, c)
    with pytest.raises(ValueError, match="coloured"):
        spinfer.sample(h, J, "spin", 100, scan="colored")
