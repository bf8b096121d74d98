"""Single-unit updates per second: spinfer's sampler vs vectorised numpy samplers on the same models.

Models (spins, T = 1, heat-bath / Gibbs updates everywhere):
  * dense: SK model, N = 200, J_ij ~ N(0, 1/N), h = 0.
  * lattice: 64 x 64 periodic square lattice, J = 0.4 between nearest neighbours, h = 0
    (spinfer picks CSR neighbour lists automatically).
numpy baselines, written to be as fast as numpy allows:
  * dense, one chain: sequential sweep in Python, local fields updated with one vectorised
    axpy per flip (the direct translation of the algorithm).
  * dense, many chains: the same sweep applied to R chains at once, so each Python step updates
    R units and the field update is an (R x N) rank-1 product: Python overhead is amortised.
  * dense, many chains, flipped rows only: as above with R = 256, but the field update touches
    only the chains whose unit changed (H[rows] += delta[rows, None] * J[k]); about twice the
    plain version's rate here, so it is the dense baseline to beat.
  * lattice: checkerboard updates, a whole sublattice at once with np.roll neighbour sums; and
    the same on R = 16 lattices at once (one (R, L, L) array), which amortises numpy's per-call
    overhead and is the faster of the two.
Threads: the 1-thread spinfer rows are compared with the numpy samplers in one process (their
loops make no BLAS calls, so numpy runs on one core; OpenBLAS is held at one thread). The 2-thread rows are compared with the best
numpy sampler run in 2 processes at once (same core count for both), summing their updates.
spinfer modes: the default (scan="sequential") and, on the lattice, scan="coloured" (the fastest
mode there: colours of the coupling graph in turn, each colour updated as vectors, batched draws,
exact tabulated thresholds). The 1-thread rows run one chain; "vs numpy ..." rows repeat a
spinfer rate against another numpy baseline for reference. The "8 chains" / "16 chains" rows
run 8 chains per thread, which spinfer advances as one lock-step group (vectors across chains;
"groups" gives the number); the lattice "64 chains" / "128 chains" rows run 64 chains per thread,
one group each (uniform couplings: up to 64 chains per group, one byte per chain and site); the
numpy baselines are the same as for the other rows.
Every spinfer run keeps one sample every 10 sweeps (the numpy baselines keep none).
Prints JSON lines: {"name", "updates_per_second", "ratio", "cpu_ratio"} where ratio = spinfer /
best numpy for that model in wall-clock time. On a shared machine wall-clock rates swing with the
load, so single-thread rows also give cpu_ratio: the same ratio from process CPU time (numpy
loop vs. the spinfer call minus the CPU time of a one-sweep call, i.e. without the set-up), which
is insensitive to other processes.
Usage: python benchmarks/bench_sampler.py [--quick] [--only dense|lattice]
"""
import argparse
import json
import multiprocessing
import os
import time

# The numpy samplers' loops make no BLAS calls; OpenBLAS worker threads left by the set-up
# products would otherwise spin on the cores the spinfer runs use (seen in perf profiles).
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402

import spinfer  # noqa: E402


def sk_model(N, seed=0):
    rng = np.random.default_rng(seed)
    J = np.triu(rng.normal(0, 1 / np.sqrt(N), (N, N)), 1)
    return np.zeros(N), J + J.T


def lattice_model(L, K):
    N = L * L
    J = np.zeros((N, N))
    idx = np.arange(N).reshape(L, L)
    for a, b in [(idx, np.roll(idx, -1, 0)), (idx, np.roll(idx, -1, 1))]:
        J[a.ravel(), b.ravel()] = K
        J[b.ravel(), a.ravel()] = K
    return np.zeros(N), J


def numpy_dense_one_chain(J, sweeps, rng):
    N = len(J)
    s = rng.choice([-1.0, 1.0], N)
    H = J @ s
    for _ in range(sweeps):
        u = rng.random(N)
        for k in range(N):
            new = 1.0 if u[k] * (1.0 + np.exp(-2.0 * H[k])) < 1.0 else -1.0
            if new != s[k]:
                H += J[k] * (new - s[k])  # J symmetric: row k = column k, contiguous
                s[k] = new
    return sweeps * N


def numpy_dense_many_chains(J, sweeps, R, rng):
    N = len(J)
    S = rng.choice([-1.0, 1.0], (R, N))
    H = S @ J
    for _ in range(sweeps):
        U = rng.random((N, R))
        for k in range(N):
            new = np.where(U[k] * (1.0 + np.exp(-2.0 * H[:, k])) < 1.0, 1.0, -1.0)
            delta = new - S[:, k]
            S[:, k] = new
            H += np.outer(delta, J[k])
    return sweeps * N * R


def numpy_dense_many_chains_flipped(J, sweeps, R, rng):
    N = len(J)
    S = rng.choice([-1.0, 1.0], (R, N))
    H = S @ J
    for _ in range(sweeps):
        U = rng.random((N, R))
        for k in range(N):
            new = np.where(U[k] * (1.0 + np.exp(-2.0 * H[:, k])) < 1.0, 1.0, -1.0)
            delta = new - S[:, k]
            S[:, k] = new
            rows = np.flatnonzero(delta)
            H[rows] += delta[rows, None] * J[k]
    return sweeps * N * R


def numpy_checkerboard_many(L, K, sweeps, R, rng):
    s = rng.choice([-1.0, 1.0], (R, L, L))
    ii, jj = np.indices((L, L))
    masks = [(ii + jj) % 2 == 0, (ii + jj) % 2 == 1]
    for _ in range(sweeps):
        for m in masks:
            nb = np.roll(s, 1, 1) + np.roll(s, -1, 1) + np.roll(s, 1, 2) + np.roll(s, -1, 2)
            p = 1.0 / (1.0 + np.exp(-2.0 * K * nb[:, m]))
            s[:, m] = np.where(rng.random(p.shape) < p, 1.0, -1.0)
    return sweeps * L * L * R


def numpy_checkerboard(L, K, sweeps, rng):
    s = rng.choice([-1.0, 1.0], (L, L))
    ii, jj = np.indices((L, L))
    masks = [(ii + jj) % 2 == 0, (ii + jj) % 2 == 1]
    for _ in range(sweeps):
        for m in masks:
            nb = np.roll(s, 1, 0) + np.roll(s, -1, 0) + np.roll(s, 1, 1) + np.roll(s, -1, 1)
            p = 1.0 / (1.0 + np.exp(-2.0 * K * nb[m]))
            s[m] = np.where(rng.random(p.size) < p, 1.0, -1.0)
    return sweeps * L * L


def timed(f, *args):
    """(wall-clock rate, CPU-time rate) of a numpy baseline."""
    t0, c0 = time.perf_counter(), time.process_time()
    updates = f(*args)
    return updates / (time.perf_counter() - t0), updates / (time.process_time() - c0)


def _run_in_child(job):
    f, args, seed = job
    return f(*args, np.random.default_rng(seed))


def timed_processes(f, args, processes=2):
    """Wall-clock rate of `processes` copies of a numpy baseline running at once (fork)."""
    ctx = multiprocessing.get_context("fork")
    with ctx.Pool(processes) as pool:
        t0 = time.perf_counter()
        updates = sum(pool.map(_run_in_child, [(f, args, p) for p in range(processes)]))
        return updates / (time.perf_counter() - t0)


def spinfer_rate(h, J, sweeps, chains, threads, scan="sequential"):
    """Updates per second of the sampling loop (diagnostics["seconds"]); the one-off set-up (array
    conversion, model validation, coupling layout: O(N^2) for the dense (N, N) input) is reported
    separately, as the numpy baselines' set-up is not timed either. d["cpu_rate"]: updates per
    CPU second, less the CPU time of a one-sweep call (set-up) on the same input."""
    c0 = time.process_time()
    spinfer.sample(h, J, "spin", chains, chains=chains, threads=threads, burn_in=0, thin=1, seed=1,
                   scan=scan)
    setup_cpu = time.process_time() - c0
    t0, c0 = time.perf_counter(), time.process_time()
    _, d = spinfer.sample(h, J, "spin", chains * sweeps // 10, chains=chains, threads=threads,
                          burn_in=0, thin=10, seed=1, scan=scan)
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    d["setup_seconds"] = round(wall - d["seconds"], 3)
    d["cpu_rate"] = d["updates"] / (cpu - setup_cpu)
    return d["updates"] / d["seconds"], d


def emit(name, rate, best_numpy, cpu=None, **extra):
    """rate/best_numpy: wall-clock; cpu: (spinfer, numpy) CPU-time rates for the cpu_ratio."""
    row = dict(name=name, updates_per_second=round(rate), ratio=round(rate / best_numpy, 2))
    if cpu is not None:
        row["cpu_ratio"] = round(cpu[0] / cpu[1], 2)
    print(json.dumps(dict(row, **extra)), flush=True)


def group_rows(model, h, J, chains, sweeps, best, np2, scan="sequential", tag=""):
    """Lock-step group rows: `chains` chains on one thread (against the best numpy sampler,
    best = (wall, cpu) rates) and twice as many on two threads (against numpy in 2 processes),
    each running `sweeps` sweeps per chain on one thread, half that on two."""
    r, d = spinfer_rate(h, J, sweeps, chains, 1, scan)
    emit(f"{model} spinfer 1 thread, {chains} chains ({tag}one lock-step group)", r, best[0],
         cpu=(d["cpu_rate"], best[1]), groups=d.get("lock_step_groups"))
    r, d = spinfer_rate(h, J, sweeps // 2, 2 * chains, 2, scan)
    emit(f"{model} spinfer 2 threads, {2 * chains} chains ({tag}lock-step groups) vs numpy 2 "
         "processes", r, np2, groups=d.get("lock_step_groups"))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="fewer sweeps (noisier)")
    ap.add_argument("--only", choices=["dense", "lattice"], help="run one model's rows only")
    args = ap.parse_args()
    q = args.quick
    rng = np.random.default_rng(0)
    if args.only != "lattice":
        dense_rows(q, rng)
    if args.only != "dense":
        lattice_rows(q, rng)


def dense_rows(q, rng):
    # --- dense SK, N = 200 ---
    h, J = sk_model(200)
    ds = 5 if q else 20
    np1, np1c = timed(numpy_dense_one_chain, J, ds, rng)
    npR, npRc = timed(numpy_dense_many_chains, J, ds, 64, rng)
    npF, npFc = timed(numpy_dense_many_chains_flipped, J, ds, 256, rng)
    best, bestc = max(np1, npR, npF), max(np1c, npRc, npFc)
    emit("dense N=200 numpy one chain", np1, best)
    emit("dense N=200 numpy 64 chains vectorised", npR, best)
    emit("dense N=200 numpy 256 chains vectorised, flipped rows only", npF, best)
    np2 = timed_processes(numpy_dense_many_chains_flipped, (J, ds, 256))
    emit("dense N=200 numpy 256 chains flipped rows, 2 processes", np2, np2)
    sweeps = 20000 if q else 100000
    r1, d1 = spinfer_rate(h, J, sweeps, 1, 1)
    emit("dense N=200 spinfer 1 thread (default scan, also the fastest here)", r1, best,
         cpu=(d1["cpu_rate"], bestc), storage=d1["storage"], setup_seconds=d1["setup_seconds"])
    emit("dense N=200 spinfer 1 thread vs numpy 64 chains", r1, npR, cpu=(d1["cpu_rate"], npRc))
    emit("dense N=200 spinfer 1 thread vs numpy one chain", r1, np1, cpu=(d1["cpu_rate"], np1c))
    r2, d = spinfer_rate(h, J, sweeps // 2, 4, 2)
    emit("dense N=200 spinfer 2 threads (4 chains) vs numpy 2 processes", r2, np2,
         storage=d["storage"])
    # Lock-step groups: the chains of a thread update the same unit together; with integer
    # fields (the default for dense couplings) up to 16 per group.
    group_rows("dense N=200", h, J, 8, sweeps // 8, (best, bestc), np2)
    group_rows("dense N=200", h, J, 16, sweeps // 8, (best, bestc), np2)


def lattice_rows(q, rng):
    # --- 64 x 64 periodic lattice ---
    L, K = 64, 0.4
    hl, Jl = lattice_model(L, K)
    ls = 100 if q else 500
    npc, npcc = timed(numpy_checkerboard, L, K, ls, rng)
    npm, npmc = timed(numpy_checkerboard_many, L, K, ls // 16, 16, rng)
    bestl, bestlc = max(npc, npm), max(npcc, npmc)
    emit("lattice 64x64 numpy checkerboard", npc, bestl)
    emit("lattice 64x64 numpy checkerboard, 16 lattices at once", npm, bestl)
    npl2 = timed_processes(numpy_checkerboard_many, (L, K, ls // 16, 16))
    emit("lattice 64x64 numpy checkerboard 16 lattices, 2 processes", npl2, npl2)
    sweeps = 10000 if q else 100000  # long enough that the set-up (O(N^2) input) is small beside it
    for scan, label in [("sequential", "default scan=sequential"), ("coloured", "scan=coloured")]:
        r1, d = spinfer_rate(hl, Jl, sweeps, 1, 1, scan)
        emit(f"lattice 64x64 spinfer 1 thread ({label})", r1, bestl, cpu=(d["cpu_rate"], bestlc),
             storage=d["storage"], setup_seconds=d["setup_seconds"])
        emit(f"lattice 64x64 spinfer 1 thread ({label}) vs numpy one lattice", r1, npc,
             cpu=(d["cpu_rate"], npcc))
        r2, d = spinfer_rate(hl, Jl, sweeps // 2, 4, 2, scan)
        emit(f"lattice 64x64 spinfer 2 threads, 4 chains ({label}) vs numpy 2 processes", r2, npl2,
             storage=d["storage"])
        group_rows("lattice 64x64", hl, Jl, 8, sweeps // 8, (bestl, bestlc), npl2, scan,
                   f"{label}, ")
        # 64 chains per thread: 4 times the updates of the one-chain row, so the run lasts long
        # enough at these rates.
        group_rows("lattice 64x64", hl, Jl, 64, sweeps // 16, (bestl, bestlc), npl2, scan,
                   f"{label}, ")


if __name__ == "__main__":
    main()
