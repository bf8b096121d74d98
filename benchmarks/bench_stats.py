"""Benchmark: means + pairwise correlations of a 10^6 x 200 {0,1} matrix at 5% activity.

Compares spinfer.moments (compact uint8 data, automatic sparse/dense kernel) with what a user would
otherwise write in numpy: a float64 or float32 copy of the data and X.T @ X (OpenBLAS). Each case runs
in its own subprocess so its peak memory is its own; all cases run in this one invocation. Prints one
JSON line per case: name, seconds (best of --repeat), extra peak memory over the loaded uint8 data
(MB), and ratios against the numpy float64 case.

    python3 benchmarks/bench_stats.py [--rows 1000000] [--units 200] [--density 0.05] [--threads 2]

Goals (issue: foundation): >= 5x faster than numpy float64; <= 1/4 of the float32 copy's memory.
"""
import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time

CASES = ("spinfer", "numpy_float64", "numpy_float32")


def peak_mb():
    """Peak resident memory of this process (VmHWM; unlike ru_maxrss it is not inherited across exec)."""
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024.0
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def run_case(name, path, threads, repeat):
    import numpy as np
    X = np.load(path)
    base = peak_mb()
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        if name == "spinfer":
            import spinfer
            m = spinfer.moments(X, threads=threads)
            mean, conn = m["mean"], m["connected"]
        else:
            dtype = np.float64 if name == "numpy_float64" else np.float32
            F = X.astype(dtype)
            mean = F.mean(axis=0, dtype=np.float64)
            conn = (F.T @ F) / len(F) - np.outer(mean, mean)
            del F
        best = min(best, time.perf_counter() - t0)
    checksum = float(np.asarray(conn).sum() + np.asarray(mean).sum())
    return {"seconds": best, "extra_peak_mb": peak_mb() - base, "checksum": checksum}


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--units", type=int, default=200)
    ap.add_argument("--density", type=float, default=0.05)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--case", help=argparse.SUPPRESS)
    ap.add_argument("--data", help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.case:  # child process
        print(json.dumps(run_case(a.case, a.data, a.threads, a.repeat)))
        return
    import numpy as np
    rng = np.random.default_rng(1)
    X = (rng.random((a.rows, a.units), dtype=np.float32) < a.density).astype(np.uint8)
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "data.npy")
        np.save(path, X)
        del X
        env = dict(os.environ, OMP_NUM_THREADS=str(a.threads), OPENBLAS_NUM_THREADS=str(a.threads))
        # This machine pins OpenBLAS to a conservative kernel for old builds; that slows a current
        # numpy. Unset both variables together for every case so the baseline runs at full speed.
        env.pop("OPENBLAS_CORETYPE", None)
        env.pop("OPENBLAS_L2_SIZE", None)
        results = {}
        for case in CASES:
            out = subprocess.run([sys.executable, __file__, "--case", case, "--data", path,
                                  "--threads", str(a.threads), "--repeat", str(a.repeat)],
                                 check=True, capture_output=True, text=True, env=env)
            results[case] = json.loads(out.stdout.strip().splitlines()[-1])
    ref = results["numpy_float64"]
    f32 = results["numpy_float32"]
    for case in CASES:
        r = results[case]
        print(json.dumps({
            "name": f"stats_{case}", "rows": a.rows, "units": a.units, "density": a.density,
            "threads": a.threads, "seconds": round(r["seconds"], 4),
            "extra_peak_mb": round(r["extra_peak_mb"], 1),
            "speedup_vs_numpy_float64": round(ref["seconds"] / r["seconds"], 2),
            "memory_vs_float32_copy": round(r["extra_peak_mb"] / max(f32["extra_peak_mb"], 1e-9), 3),
            "checksum_matches_float64": abs(r["checksum"] - ref["checksum"]) < 1e-6 * max(1, abs(ref["checksum"])),
        }))


if __name__ == "__main__":
    main()
