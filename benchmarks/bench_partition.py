"""Speed and accuracy of the ln Z estimators beyond enumeration. One command, JSON lines out:

    PYTHONPATH=build/dev/python python3 benchmarks/bench_partition.py [--sizes 8,16,32] [--threads 1,2]

For each L: the L x L periodic lattice at K = 0.3 and K = 0.4 (near K_c = 0.4407), whose exact
ln Z is Kaufman's formula (tests/python/test_likelihood.py: kaufman_log_z); runs AIS and
thermodynamic integration with the default options and reports time, the error bar, the actual
deviation from the exact value and (AIS) the effective number of runs. Then a dense SK-like model
(J ~ N(0, 1/N)) of N = L^2 units, timed only (no exact value).
"""
from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

import spinfer

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "python"))
from test_likelihood import kaufman_log_z, torus_couplings  # noqa: E402


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", default="8,16,32")
    ap.add_argument("--threads", default="1,2")
    args = ap.parse_args()
    for L in [int(s) for s in args.sizes.split(",")]:
        N = L * L
        for K in (0.3, 0.4):
            exact = kaufman_log_z(L, L, K)
            model = (np.zeros(N), torus_couplings(L, K), "spin")
            for method in ("ais", "thermodynamic"):
                for threads in [int(t) for t in args.threads.split(",")]:
                    t0 = time.perf_counter()
                    r = spinfer.log_partition(model, method, threads=threads, seed=1)
                    print(json.dumps(dict(
                        bench="log_partition", model="torus", L=L, N=N, K=K, method=method,
                        threads=threads, seconds=round(time.perf_counter() - t0, 3),
                        value=r["value"], exact=exact, deviation=r["value"] - exact, error=r["error"],
                        effective_runs=r["effective_runs"] if method == "ais" else None)), flush=True)
        rng = np.random.default_rng(N)
        J = np.triu(rng.normal(0, 1 / np.sqrt(N), (N, N)), 1)
        J = J + J.T
        model = (rng.normal(0, 0.5, N), J, "spin")
        for method in ("ais", "thermodynamic"):
            t0 = time.perf_counter()
            r = spinfer.log_partition(model, method, threads=2, seed=1)
            print(json.dumps(dict(
                bench="log_partition", model="sk", N=N, method=method, threads=2,
                seconds=round(time.perf_counter() - t0, 3), value=r["value"], error=r["error"],
                effective_runs=r["effective_runs"] if method == "ais" else None,
                warnings=len(r["warnings"]))), flush=True)


if __name__ == "__main__":
    main()
