"""Pseudo-likelihood speed against what a user would otherwise run. One command, JSON lines out:

    PYTHONPATH=build/dev/python python3 benchmarks/bench_pseudo_likelihood.py [--cases a,b,c]
        [--threads 2] [--sklearn-units 20] [--baselines auto|none|scipy|sklearn|all]
        [--samples T] [--max-iterations K]

Cases (each in its own subprocess; our fit in a further child of its own, see "Memory"):
  a: N=100, T=1e5, dense +-1 samples of an SK model (beta=1, h ~ N(0, 0.3^2)); numpy Gibbs, 1000
     parallel chains, 100 burn-in sweeps, one sample every 2 sweeps.
  b: N=200, T=2e5, {0,1} spiking-like data at ~5 % activity: units independent given a shared
     latent AR(1) drive (3 factors), x_it ~ Bernoulli(sigmoid(b_i + a_i . z_t)).
  c: N=1000, T=1e6, the same latent model at ~2 % activity. Goal: our fit finishes in at most
     10 minutes on 2 cores with at most 2 GB peak resident memory (data included: the uint8
     matrix alone is 954 MiB). The record's "goal" says whether this run met it.
The data are generated in blocks of rows straight into one uint8 (T, N) array (no float64 copy
of the matrix; the block's temporaries are a few tens of MB for (c)) and handed to spinfer
as that array, which it uses without a copy. Generation costs about a minute for (c).

Baselines in the same run, at the same L2 penalty per unit (--baselines; "auto", the default,
runs both for a and b and none for c, where each would need float64 copies of the data, 8 GB
apiece, and scikit-learn per unit would take hours):
  sklearn: LogisticRegression(lbfgs) per unit, C = 2 / (T l2) (see tests/python/test_fitting.py
           for the mapping), tol 1e-6; timed on --sklearn-units units and scaled to N (stated);
  scipy:   scipy.optimize.minimize(L-BFGS-B) on the same per-variable objective, all units at
           once, numpy/BLAS products on the dense +-1 matrix.
The objective gap is the relative difference of our per-variable objective (summed over units,
evaluated by numpy for every method) to the best baseline's; negative means ours is lower.
GFLOP/s: our fit's 4 T N flops per unit evaluation (the dense-equivalent work of a unit's two
products; "evaluations" counts unit evaluations, "rounds" the lock-step rounds) over its time, against a numpy (T' x N) @ (N x N) float64 product timed in the same run
(T' = min(T, 200000, 4e7 / N) rows).

Memory: our fit runs in a child process that generates its data, then fits. It reports the
data's own size (data_mb), its peak resident memory after generating the data
(peak_rss_mb_after_data, from /proc/self/status VmHWM), its resident memory just before the fit
(rss_mb_before_fit), the peak during the fit alone (peak_rss_mb_fit: VmHWM reset through
/proc/self/clear_refs before the fit; null where the kernel does not allow it), the fit's own
addition (fit_extra_mb = peak_rss_mb_fit - rss_mb_before_fit) and the child's overall peak
(peak_rss_mb; also ru_maxrss of the child as the parent sees it, child_ru_maxrss_mb).

--samples T replaces each case's T and --max-iterations K caps our fit (dry runs:
`--cases c --samples 100000 --max-iterations 5` checks the script in a few minutes; the goal is
judged only at the case's own T, 2 threads and the default budget).
"""
from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time

import numpy as np


def proc_status_mb(key: str) -> float:
    """A memory line of /proc/self/status (VmHWM: peak resident, VmRSS: current), in MiB."""
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith(key + ":"):
                return int(line.split()[1]) / 1024.0
    raise RuntimeError(f"/proc/self/status has no {key}")


def reset_peak_rss() -> bool:
    """Resets VmHWM to the current resident size (Linux >= 4.0, proc(5) clear_refs "5")."""
    try:
        with open("/proc/self/clear_refs", "w") as f:
            f.write("5")
        return True
    except OSError:
        return False


def sk_samples(N, T, beta, seed, chains=1000, burn=100, thin=2):
    rng = np.random.default_rng(seed)
    J = rng.normal(0, beta / np.sqrt(N), (N, N))
    J = np.triu(J, 1)
    J = J + J.T
    h = rng.normal(0, 0.3, N)
    S = rng.choice([-1.0, 1.0], size=(N, chains))
    out = np.empty((T, N), dtype=np.uint8)
    per_chain = T // chains
    k = 0

    def sweep():
        for i in range(N):
            H = h[i] + J[i] @ S
            S[i] = np.where(rng.random(chains) < 1 / (1 + np.exp(-2 * H)), 1.0, -1.0)

    for _ in range(burn):
        sweep()
    for _ in range(per_chain):
        for _ in range(thin):
            sweep()
        out[k:k + chains] = (S.T > 0)
        k += chains
    return out, h, J


def calibrated_shift(a, b, rate):
    """d such that the mean over units of E[sigmoid(b_i + d + a_i . z)], z ~ N(0, I) (the drive's
    stationary law), equals `rate`: a_i . z ~ N(0, |a_i|^2), integrated by Gauss-Hermite
    quadrature (numpy's hermegauss, probabilists' weight exp(-x^2/2)), d by bisection."""
    x, w = np.polynomial.hermite_e.hermegauss(60)
    w = w / w.sum()
    s = np.linalg.norm(a, axis=1)

    def mean_rate(d):
        return float(np.mean(w @ (1 / (1 + np.exp(-(b + d + np.outer(x, s)))))))

    lo, hi = -30.0, 30.0
    for _ in range(100):
        mid = (lo + hi) / 2
        lo, hi = (mid, hi) if mean_rate(mid) < rate else (lo, mid)
    return (lo + hi) / 2


def latent_spikes(N, T, rate, seed, factors=3, chunk=100000, calibrate=False):
    """(T, N) uint8, generated `chunk` rows at a time (the chunk size is part of the random stream).
    Without `calibrate` the offsets start from logit(rate) and the drive raises the activity above
    `rate` (case b asks for 5 % and gets about 7 %); with it they are shifted so that the expected
    activity is `rate`."""
    rng = np.random.default_rng(seed)
    a = rng.normal(0, 0.8, (N, factors))
    b = np.log(rate / (1 - rate)) - 0.3 * np.ones(N) + rng.normal(0, 0.3, N)
    if calibrate:
        b += calibrated_shift(a, b, rate)
    out = np.empty((T, N), dtype=np.uint8)
    z = np.zeros(factors)
    rho = 0.95
    for t0 in range(0, T, chunk):
        n = min(chunk, T - t0)
        Z = np.empty((n, factors))
        eps = rng.normal(0, np.sqrt(1 - rho ** 2), (n, factors))
        for t in range(n):
            z = rho * z + eps[t]
            Z[t] = z
        p = Z @ a.T  # p = sigmoid(b + Z a^T), in place to keep the block's temporaries few
        p += b
        np.negative(p, out=p)
        np.exp(p, out=p)
        p += 1
        np.reciprocal(p, out=p)
        out[t0:t0 + n] = rng.random((n, N), dtype=np.float32) < p
    return out


def plm_objective(X, Theta, h, l2):
    """Per-variable objective summed over units (numpy, blocked): sum_i mean_b[log2cosh H - sH] + l2||Theta_i||^2."""
    Theta = Theta.copy()
    np.fill_diagonal(Theta, 0)
    tot = np.zeros(X.shape[1])
    for b0 in range(0, X.shape[0], 20000):
        S = 2.0 * X[b0:b0 + 20000] - 1.0
        H = S @ Theta + h
        tot += (np.logaddexp(H, -H) - S * H).sum(0)
    return float(tot.sum() / X.shape[0] + l2 * (Theta ** 2).sum())


def run_scipy(X, l2):
    from scipy.optimize import minimize
    T, N = X.shape
    S = 2.0 * X - 1.0
    mask = 1.0 - np.eye(N)

    def f(x):
        Theta = x[:N * N].reshape(N, N) * mask
        h = x[N * N:]
        H = S @ Theta + h
        R = np.tanh(H) - S
        val = (np.logaddexp(H, -H) - S * H).sum() / T + l2 * (Theta ** 2).sum()
        gT = (S.T @ R) / T * mask + 2 * l2 * Theta
        return val, np.concatenate([gT.ravel(), R.sum(0) / T])

    m = S.mean(0)
    x0 = np.concatenate([np.zeros(N * N), np.arctanh(np.clip(m, -0.999999, 0.999999))])
    t = time.perf_counter()
    r = minimize(f, x0, jac=True, method="L-BFGS-B",
                 options={"maxiter": 5000, "ftol": 1e-12, "gtol": 1e-7, "maxcor": 10})
    sec = time.perf_counter() - t
    Theta = r.x[:N * N].reshape(N, N) * mask
    return sec, Theta, r.x[N * N:], int(r.nit)


def run_sklearn(X, l2, units):
    from sklearn.linear_model import LogisticRegression
    T, N = X.shape
    S = 2.0 * X - 1.0
    Theta = np.zeros((N, N))
    h = np.zeros(N)
    t = time.perf_counter()
    for i in units:
        others = np.delete(np.arange(N), i)
        lr = LogisticRegression(C=2.0 / (T * l2), solver="lbfgs", tol=1e-6, max_iter=10000)
        lr.fit(S[:, others], X[:, i])
        Theta[others, i] = lr.coef_[0] / 2
        h[i] = lr.intercept_[0] / 2
    return time.perf_counter() - t, Theta, h


def unit_objectives(X, Theta, h, l2, units):
    T, N = X.shape
    S = 2.0 * X - 1.0
    Th = Theta.copy()
    np.fill_diagonal(Th, 0)
    H = S @ Th[:, units] + h[units]
    Su = S[:, units]
    return (np.logaddexp(H, -H) - Su * H).mean(0) + l2 * (Th[:, units] ** 2).sum(0)


def ours(X, l2, threads, representation="auto", tolerance=1e-6, max_iterations=1000):
    import spinfer
    t = time.perf_counter()
    r = spinfer.fit_pseudo_likelihood(X, l2=l2, threads=threads, tolerance=tolerance,
                                      representation=representation, max_iterations=max_iterations)
    return time.perf_counter() - t, r


def numpy_gflops(T, N):
    A = np.random.default_rng(0).standard_normal((min(T, 200000, 40_000_000 // N), N))
    B = np.random.default_rng(1).standard_normal((N, N))
    A @ B
    t = time.perf_counter()
    reps = 3
    for _ in range(reps):
        A @ B
    return 2.0 * A.shape[0] * N * N * reps / (time.perf_counter() - t) / 1e9


# name -> (N, T, description, default baselines). c's goal: at most GOAL_SECONDS and GOAL_RSS_MB.
CASES = {
    "a": (100, 100000, "SK beta=1, dense +-1, Gibbs", "all"),
    "b": (200, 200000, "latent-drive spiking, ~5% activity", "all"),
    "c": (1000, 1000000, "latent-drive spiking, ~2% activity", "none"),
}
GOAL = {"c": {"seconds_max": 600.0, "peak_rss_mb_max": 2048.0, "threads": 2}}


def case_data(name, T):
    N = CASES[name][0]
    if name == "a":
        X, _, _ = sk_samples(N, T, 1.0, 1)
    elif name == "b":
        X = latent_spikes(N, T, 0.05, 2)
    else:
        X = latent_spikes(N, T, 0.02, 3, chunk=5000, calibrate=True)  # 5000 x 1000 blocks: ~40 MB per temporary
    return X


def penalty(N, T):
    return 0.1 * N / T  # a fixed, moderate penalty so all methods solve the same problem


def fit_child(name, T, threads, max_iterations):
    """Generate the case's data, then fit; one JSON line with times, memory and the fit's summary."""
    t0 = time.perf_counter()
    X = case_data(name, T)
    data_seconds = time.perf_counter() - t0
    rec = {"data_seconds": round(data_seconds, 3), "data_mb": round(X.nbytes / 2**20, 1),
           "data_dtype": str(X.dtype), "activity": float(X.mean()),
           "peak_rss_mb_after_data": round(proc_status_mb("VmHWM"), 1)}
    import spinfer  # noqa: F401  (imported before the reset: the fit's peak excludes loading the library)
    rec["rss_mb_before_fit"] = round(proc_status_mb("VmRSS"), 1)
    reset = reset_peak_rss()
    sec, r = ours(X, penalty(X.shape[1], X.shape[0]), threads, max_iterations=max_iterations)
    fit_peak = proc_status_mb("VmHWM")
    prov = r["provenance"]
    rec.update({"seconds": round(sec, 3), "iterations": prov["iterations"],
                "evaluations": prov["extra"]["evaluations"], "rounds": prov["extra"].get("rounds"),
                "converged": prov["converged"],
                "representation": prov["extra"]["representation"], "objective": prov["objective"],
                "peak_rss_mb_fit": round(fit_peak, 1) if reset else None,
                "fit_extra_mb": round(fit_peak - rec["rss_mb_before_fit"], 1) if reset else None,
                "peak_rss_mb": round(max(fit_peak, rec["peak_rss_mb_after_data"]), 1)})
    return rec


def run_fit_child(name, T, threads, max_iterations):
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    t = time.perf_counter()
    p = subprocess.run([sys.executable, __file__, "--fit-child", name, "--samples", str(T),
                        "--threads", str(threads), "--max-iterations", str(max_iterations)],
                       capture_output=True, text=True, env=child_env(threads))
    wall = time.perf_counter() - t
    if p.returncode != 0:
        sys.stderr.write(p.stderr)
        raise RuntimeError(f"case {name}: the fit child failed with exit code {p.returncode}")
    rec = json.loads(p.stdout.strip().splitlines()[-1])
    rec["child_seconds"] = round(wall, 3)
    after = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    rec["child_ru_maxrss_mb"] = round(after / 1024.0, 1) if after > before else None
    return rec


def case(name, threads, sk_units, baselines, T, max_iterations):
    N, T_case, desc, default_baselines = CASES[name]
    T = T or T_case
    chosen = default_baselines if baselines == "auto" else baselines
    l2 = penalty(N, T)
    child = run_fit_child(name, T, threads, max_iterations)
    sec = child["seconds"]
    evals = child["evaluations"]
    rec = {"name": f"case_{name}", "description": desc, "N": N, "T": T,
           "activity": child["activity"], "l2": l2, "threads": threads, "baselines": chosen,
           "max_iterations": max_iterations}
    rec.update({k: child[k] for k in (
        "seconds", "iterations", "evaluations", "rounds", "converged", "representation", "data_seconds",
        "child_seconds", "data_mb", "data_dtype", "peak_rss_mb_after_data", "rss_mb_before_fit",
        "peak_rss_mb_fit", "fit_extra_mb", "peak_rss_mb", "child_ru_maxrss_mb")})
    # The joint optimiser (no "rounds") counted evaluations of all N units at once.
    unit_evals = evals if child["rounds"] is not None else evals * N
    rec["gflops_effective"] = round(4.0 * T * N * unit_evals / sec / 1e9, 2)
    rec["numpy_matmul_gflops"] = round(numpy_gflops(T, N), 2)
    rec["objective_ours"] = child["objective"]
    if name in GOAL:
        g = GOAL[name]
        judged = T == T_case and threads == g["threads"] and max_iterations == 1000
        rec["goal"] = dict(g, judged=judged,
                           met=(judged and sec <= g["seconds_max"] and rec["peak_rss_mb"] <= g["peak_rss_mb_max"])
                           if judged else None)
    if name in ("a", "b") or chosen != "none":
        X = case_data(name, T)
    if name in ("a", "b"):
        # Per-representation timings of our fit (the measurement behind "auto").
        rec["seconds_by_representation"] = {rep: round(ours(X, l2, threads, rep, max_iterations=max_iterations)[0], 3)
                                            for rep in ("dense", "sparse")}
    if chosen in ("scipy", "all"):
        s_sc, Th_sc, h_sc, it_sc = run_scipy(X, l2)
        obj_sc = plm_objective(X, Th_sc, h_sc, l2)
        rec.update({"scipy_seconds": round(s_sc, 3), "scipy_iterations": it_sc,
                    "ratio_vs_scipy": round(s_sc / sec, 2), "scipy_objective": obj_sc,
                    "objective_gap_vs_best_baseline": (child["objective"] - obj_sc) / abs(obj_sc)})
    if chosen in ("sklearn", "all"):
        units = np.linspace(0, N - 1, sk_units).astype(int)
        s_sk, Th_sk, h_sk = run_sklearn(X, l2, units)
        s_sk_full = s_sk * N / len(units)
        rec.update({"sklearn_seconds_extrapolated": round(s_sk_full, 3),
                    "sklearn_units_timed": int(len(units)),
                    "ratio_vs_sklearn": round(s_sk_full / sec, 2)})
        if chosen == "all":
            # Per-unit optimum check on the sklearn units: objective of scipy vs sklearn solutions.
            ou_sc = unit_objectives(X, Th_sc, h_sc, l2, units)
            ou_sk = unit_objectives(X, Th_sk, h_sk, l2, units)
            rec["sklearn_vs_scipy_unit_objective_gap"] = float(np.max((ou_sk - ou_sc) / np.abs(ou_sc)))
    return [rec]


def child_env(threads):
    """Children get BLAS at the benchmark's thread count and without this workplace's old-OpenBLAS
    settings (they slow a current numpy)."""
    env = dict(os.environ, OMP_NUM_THREADS=str(threads), OPENBLAS_NUM_THREADS=str(threads))
    env.pop("OPENBLAS_CORETYPE", None)
    env.pop("OPENBLAS_L2_SIZE", None)
    return env


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--cases", default="a,b,c", help="comma-separated: a, b, c")
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--sklearn-units", type=int, default=20, help="units timed for scikit-learn")
    ap.add_argument("--baselines", default="auto", choices=["auto", "none", "scipy", "sklearn", "all"],
                    help="auto: all for a and b, none for c")
    ap.add_argument("--samples", type=int, default=0, help="replace each case's T (dry runs)")
    ap.add_argument("--max-iterations", type=int, default=1000,
                    help="our fit's iteration budget (default: spinfer's; lower only for dry runs)")
    ap.add_argument("--case", help=argparse.SUPPRESS)
    ap.add_argument("--fit-child", help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.fit_child:
        print(json.dumps(fit_child(a.fit_child, a.samples or CASES[a.fit_child][1], a.threads,
                                   a.max_iterations)), flush=True)
        return
    if a.case:
        for rec in case(a.case, a.threads, a.sklearn_units, a.baselines, a.samples, a.max_iterations):
            print(json.dumps(rec), flush=True)
        return
    for c in a.cases.split(","):
        if c not in CASES:
            ap.error(f"--cases: unknown case {c!r} (a, b, c)")
        subprocess.run([sys.executable, __file__, "--case", c, "--threads", str(a.threads),
                        "--sklearn-units", str(a.sklearn_units), "--baselines", a.baselines,
                        "--samples", str(a.samples), "--max-iterations", str(a.max_iterations)],
                       check=True, env=child_env(a.threads))


if __name__ == "__main__":
    main()
