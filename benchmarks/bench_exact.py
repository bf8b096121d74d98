"""Exact enumeration speed. One command, JSON lines out:

    PYTHONPATH=build/dev/python python3 benchmarks/bench_exact.py [--sizes 16,20,22] [--threads 1,2]

For each N: a random SK-like model (J ~ N(0, 1/N), h ~ N(0, 0.25)); times exact_log_partition
(O(2^N N) Gray-code walk) and exact_statistics (adds O(2^N N^2) moment accumulation through BLAS),
and, for N <= 20, a vectorised numpy reference (all states as a (2^N, N) float matrix, one matrix
product for the energies) for log Z, the computation a user would otherwise write.
"""
from __future__ import annotations

import argparse
import json
import time

import numpy as np

import spinfer


def numpy_log_z(h, J):
    n = len(h)
    k = np.arange(2 ** n, dtype=np.int64)
    S = ((k[:, None] >> np.arange(n)) & 1) * 2.0 - 1.0
    a = S @ h + 0.5 * np.einsum("ti,ti->t", S @ J, S)
    top = a.max()
    return top + np.log(np.exp(a - top).sum())


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", default="16,20,22")
    ap.add_argument("--threads", default="1,2")
    args = ap.parse_args()
    for n in [int(s) for s in args.sizes.split(",")]:
        rng = np.random.default_rng(n)
        J = np.triu(rng.normal(0, 1 / np.sqrt(n), (n, n)), 1)
        J = J + J.T
        h = rng.normal(0, 0.5, n)
        model = spinfer.IsingModel(h, J)
        for th in [int(t) for t in args.threads.split(",")]:
            t0 = time.perf_counter()
            lz = spinfer.exact_log_partition(model, threads=th)
            t1 = time.perf_counter()
            spinfer.exact_statistics(model, threads=th)
            t2 = time.perf_counter()
            row = {"bench": "exact", "N": n, "threads": th, "log_partition_s": round(t1 - t0, 4),
                   "statistics_s": round(t2 - t1, 4)}
            if n <= 20 and th == 1:
                t3 = time.perf_counter()
                ref = numpy_log_z(h, J)
                row["numpy_log_partition_s"] = round(time.perf_counter() - t3, 4)
                row["log_partition_abs_diff"] = abs(ref - lz)
            print(json.dumps(row), flush=True)


if __name__ == "__main__":
    main()
