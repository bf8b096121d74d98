"""Make the two demo recordings in data/ from known networks, with the project's own sampler.

Both scenarios are invented for the demos; nothing here is real data.

neurons/  "Forty neurons in a simulated cortical column": three small assemblies whose members
          excite each other, sparse inhibition between assemblies, firing rates of a few Hz,
          10 ms bins, ten minutes with a 20 s stretch of lost signal (listed in gaps.csv). The
          sampled activity is written as spike times (one spike at a random time inside each
          active bin, and now and then a second one), so `spinfer bin` has real work to do.
genes/    "Thirty genes switched on or off across 2,000 simulated cells": a sparse regulatory-style
          network with activating (positive) and repressing (negative) couplings; one row per
          cell, one column per gene, 1 = gene detected.

Each folder also gets the generating model (true_model.json, binary convention) as ground truth.
Run from the repository root:  python3 data/make_demo.py
"""
from pathlib import Path

import numpy as np

import spinfer

HERE = Path(__file__).resolve().parent
BIN_WIDTH = 0.010           # seconds
DURATION = 600.0            # seconds
GAP = (241.0, 261.0)        # seconds of lost signal


def neuron_network(rng, n=40):
    """Fields and couplings (binary convention) of three assemblies plus background units."""
    assemblies = [range(0, 8), range(8, 15), range(15, 21)]
    W = np.zeros((n, n))
    for group in assemblies:
        g = list(group)
        for a in g:
            for b in g:
                if a < b and rng.random() < 0.6:
                    W[a, b] = rng.uniform(0.8, 1.6)
    for a in range(n):
        for b in range(a + 1, n):
            if W[a, b] == 0 and rng.random() < 0.04:
                W[a, b] = -rng.uniform(0.5, 1.2) if rng.random() < 0.7 else rng.uniform(0.4, 0.9)
    W = W + W.T
    a = rng.uniform(-4.2, -3.0, size=n)   # baseline: 1.5-5% of 10 ms bins active alone
    return a, W


def gene_network(rng, n=30):
    W = np.zeros((n, n))
    for a in range(n):
        for b in range(a + 1, n):
            if rng.random() < 0.09:
                W[a, b] = rng.choice([-1, 1]) * rng.uniform(0.7, 1.8)
    W = W + W.T
    a = rng.uniform(-1.8, 0.2, size=n)
    return a, W


def save_truth(path, fields, couplings, names, note):
    model = spinfer.IsingModel(fields=np.asarray(fields), couplings=np.asarray(couplings),
                               convention="binary", names=names,
                               provenance={"method": "ground-truth", "extra": {"note": note}})
    spinfer.save_model(path, model)


def make_neurons(rng):
    out = HERE / "neurons"
    out.mkdir(exist_ok=True)
    a, W = neuron_network(rng)
    n = len(a)
    names = [f"n{i + 1:02d}" for i in range(n)]
    bins = int(round(DURATION / BIN_WIDTH))
    starts = np.arange(bins) * BIN_WIDTH
    in_gap = (starts + BIN_WIDTH > GAP[0]) & (starts < GAP[1])
    kept = np.flatnonzero(~in_gap)
    X, _ = spinfer.sample(a, W, "binary", len(kept), seed=11, chains=4, threads=2)
    rows, cols = np.nonzero(X)
    t_bin = starts[kept[rows]]
    times = t_bin + rng.uniform(0.0005, BIN_WIDTH - 0.0005, size=len(rows))
    extra = rng.random(len(rows)) < 0.08          # a second spike in the same bin now and then
    times2 = t_bin[extra] + rng.uniform(0.0005, BIN_WIDTH - 0.0005, size=extra.sum())
    units = np.concatenate([cols, cols[extra]])
    times = np.concatenate([times, times2])
    order = np.argsort(times, kind="stable")
    with open(out / "spikes.csv", "w") as f:
        f.write("# Invented demo: spike times of 40 simulated neurons (see data/README.md)\n")
        f.write("unit,time\n")
        for u, t in zip(units[order], times[order]):
            f.write(f"{names[u]},{t:.5f}\n")
    with open(out / "gaps.csv", "w") as f:
        f.write("start,stop\n")
        f.write(f"{GAP[0]},{GAP[1]}\n")
    save_truth(out / "true_model.json", a, W, names, "neuron demo ground truth, 10 ms bins")
    return X


def make_genes(rng):
    out = HERE / "genes"
    out.mkdir(exist_ok=True)
    a, W = gene_network(rng)
    syllables = ["ka", "lo", "mir", "su", "ten", "vo", "ra", "ph", "ul", "ze"]
    names = []
    while len(names) < len(a):
        nm = (rng.choice(syllables) + rng.choice(syllables)).capitalize() + str(rng.integers(1, 9))
        if nm not in names:
            names.append(nm)
    X, _ = spinfer.sample(a, W, "binary", 2000, seed=23, chains=4, threads=2)
    with open(out / "cells.csv", "w") as f:
        f.write("# Invented demo: 2000 simulated cells x 30 genes, 1 = gene detected\n")
        f.write(",".join(names) + "\n")
        for row in X:
            f.write(",".join(str(int(v)) for v in row) + "\n")
    save_truth(out / "true_model.json", a, W, names, "gene demo ground truth")


def main():
    rng = np.random.default_rng(2026)
    X = make_neurons(rng)
    print(f"neurons: {X.shape[0]} bins, mean activity {X.mean():.3f}")
    make_genes(rng)
    print("genes: written")


if __name__ == "__main__":
    main()
