"""spinfer.refine (Boltzmann learning) against references computed here with numpy/scipy:
the exact maximum-likelihood estimate by scipy.optimize.minimize (L-BFGS-B) on the log-likelihood
summed over all 2^N states with numpy, and the exact moments of the refined model. Tolerances on
sampled quantities are in units of the data's sampling noise (sigma^2 = (1 - x^2) / B), with fixed
seeds."""
import itertools
import os
import signal
import threading

import numpy as np
import pytest
import scipy.optimize

import spinfer


def states(n):
    return np.array(list(itertools.product([-1.0, 1.0], repeat=n)))


def random_model(n, coupling_sd, field_sd, seed):
    g = np.random.default_rng(seed)
    J = np.triu(coupling_sd * g.standard_normal((n, n)), 1)
    return field_sd * g.standard_normal(n), J + J.T


def probabilities(h, J, S):
    logw = S @ h + 0.5 * np.einsum("ki,ij,kj->k", S, J, S)
    w = np.exp(logw - logw.max())
    return w / w.sum()


def draws(h, J, B, seed):
    S = states(len(h))
    p = probabilities(h, J, S)
    return S[np.random.default_rng(seed).choice(len(S), size=B, p=p)].astype(np.int8)


def exact_ml(X):
    """Maximum-likelihood (h, J) by scipy L-BFGS-B on -mean log P, enumerating states with numpy."""
    X = X.astype(float)
    n = X.shape[1]
    S = states(n)
    iu = np.triu_indices(n, 1)
    m, c = X.mean(0), (X.T @ X / len(X))[iu]
    pairs = S[:, iu[0]] * S[:, iu[1]]

    def f(theta):
        logw = S @ theta[:n] + pairs @ theta[n:]
        top = logw.max()
        logz = top + np.log(np.exp(logw - top).sum())
        p = np.exp(logw - logz)
        value = -(theta[:n] @ m + theta[n:] @ c - logz)
        grad = -np.concatenate([m - p @ S, c - p @ pairs])
        return value, grad

    r = scipy.optimize.minimize(f, np.zeros(n + len(iu[0])), jac=True, method="L-BFGS-B",
                                options=dict(gtol=1e-12, ftol=1e-15, maxiter=10000))
    J = np.zeros((n, n))
    J[iu] = r.x[n:]
    return r.x[:n], J + J.T


def moment_errors(h, J, X):
    """epsilon_m, epsilon_c and max |z| of the model's exact moments against the data."""
    X = X.astype(float)
    n, B = X.shape[1], len(X)
    S = states(n)
    p = probabilities(h, J, S)
    mm, cm = p @ S, (S * p[:, None]).T @ S
    md, cd = X.mean(0), X.T @ X / B
    iu = np.triu_indices(n, 1)
    zm = (mm - md) / np.sqrt((1 - md ** 2) / B)
    zc = (cm - cd)[iu] / np.sqrt((1 - cd[iu] ** 2) / B)
    return np.sqrt(np.mean(zm ** 2)), np.sqrt(np.mean(zc ** 2)), max(abs(zm).max(), abs(zc).max())


def rms(a, b):
    n = len(a.fields)
    iu = np.triu_indices(n, 1)
    d = np.concatenate([a.fields - b.fields, (a.couplings - b.couplings)[iu]])
    return np.sqrt(np.mean(d ** 2))


@pytest.fixture(scope="module")
def case():
    h, J = random_model(8, 0.3, 0.3, 7)
    X = draws(h, J, 20000, 8)
    hm, Jm = exact_ml(X)
    return dict(truth=spinfer.IsingModel(h, J), X=X, ml=spinfer.IsingModel(hm, Jm))


def test_exact_expectations_match_scipy_maximum_likelihood():
    h, J = random_model(5, 0.5, 0.3, 3)
    X = draws(h, J, 3000, 4)
    hm, Jm = exact_ml(X)
    start = spinfer.IsingModel(np.zeros(5), np.zeros((5, 5))).to_convention("binary")
    model, report = spinfer.refine(X, start, expectations="exact", noise="iid")
    assert report["converged"] and report["expectations"] == "exact"
    assert model.convention == "binary"
    spin = model.to_convention("spin")
    np.testing.assert_allclose(spin.fields, hm, atol=1e-6)
    np.testing.assert_allclose(spin.couplings, Jm, atol=1e-6)
    # At the maximum the model's moments equal the data's: epsilon ~ 0.
    assert report["epsilon_mean"] < 1e-5 and report["epsilon_correlation"] < 1e-5
    assert model.provenance["method"] == "boltzmann-learning"


def test_sampled_refinement_approaches_exact_ml(case):
    truth, X, ml = case["truth"], case["X"], case["ml"]
    g = np.random.default_rng(1)
    noise = np.triu(0.3 * g.standard_normal((8, 8)), 1)
    start = spinfer.IsingModel(truth.fields + 0.3 * g.standard_normal(8), truth.couplings + noise + noise.T,
                               provenance={"method": "perturbed"})
    model, report = spinfer.refine(X, start, expectations="sampled", noise="iid", seed=2)
    assert report["converged"], report["stop_reason"]
    assert report["trajectory"]["check"][-1]
    assert rms(model, ml) < 0.5 * rms(start, ml)
    em, ec, zmax = moment_errors(model.fields, model.couplings, X)
    assert em < 1.5 and ec < 1.5
    assert zmax < 4.5  # 36 statistics at epsilon ~ 1
    p = model.provenance
    assert p["extra"]["start_method"] == "perturbed" and p["seed"] == 2
    assert p["extra"]["samples_per_iteration"] > 0
    assert len(report["trajectory"]["epsilon_mean"]) == report["iterations"]


def test_sampled_refinement_from_mean_field_with_bootstrap_noise(case):
    X, ml = case["X"], case["ml"]
    start = spinfer.fit_closed_form(X, "mean-field")
    model, report = spinfer.refine(X, start, expectations="sampled", seed=5)
    assert report["converged"] and report["noise"] == "bootstrap"
    assert report["epsilon_mean"] < 1 and report["epsilon_correlation"] < 1
    assert rms(model, ml) < 0.5 * rms(start, ml)
    em, ec, _ = moment_errors(model.fields, model.couplings, X)
    assert em < 1.5 and ec < 1.5


def test_refinement_beats_pseudo_likelihood(case):
    X, ml = case["X"], case["ml"]
    # Pseudo-likelihood (no penalty) only approximates maximum likelihood; refinement with exact
    # expectations (N = 8) lands on the exact maximum-likelihood estimate, which sampled
    # refinement approaches to within its Monte Carlo noise.
    start = spinfer.fit(X, "pseudo-likelihood", copy=True, l2=0)
    model, report = spinfer.refine(X, start, expectations="exact", seed=3)
    assert report["converged"]
    assert rms(model, ml) < 1e-6 and rms(start, ml) > 1e-4


def test_same_seed_same_result_for_any_thread_count(case):
    X = case["X"][:4000]
    start = spinfer.fit_closed_form(X, "tap")
    a, ra = spinfer.refine(X, start, expectations="sampled", seed=9, threads=1, max_iterations=10)
    b, rb = spinfer.refine(X, start, expectations="sampled", seed=9, threads=2, max_iterations=10)
    np.testing.assert_array_equal(a.fields, b.fields)
    np.testing.assert_array_equal(a.couplings, b.couplings)
    assert ra["iterations"] == rb["iterations"]


def test_progress_callback_and_ctrl_c_stop_it(case):
    X = case["X"]
    start = spinfer.IsingModel(np.zeros(8), np.zeros((8, 8)))
    seen = []

    def stop_after_two(p):
        seen.append(p["done"])
        return not (p["stage"] == "boltzmann learning" and p["done"] >= 2)

    with pytest.raises(KeyboardInterrupt):
        spinfer.refine(X, start, expectations="sampled", noise="iid", progress=stop_after_two)
    assert 2 in seen
    # Ctrl-C: a run that cannot converge (threshold far below the noise floor).
    timer = threading.Timer(0.5, lambda: os.kill(os.getpid(), signal.SIGINT))
    timer.start()
    try:
        with pytest.raises(KeyboardInterrupt):
            spinfer.refine(X, start, expectations="sampled", noise="iid", threshold=1e-9,
                           max_iterations=10 ** 6)
    finally:
        timer.cancel()


def test_bad_input(case):
    X = case["X"]
    with pytest.raises(ValueError, match="units"):
        spinfer.refine(X, spinfer.IsingModel(np.zeros(3), np.zeros((3, 3))))
    with pytest.raises(TypeError):
        spinfer.refine(X, {"fields": np.zeros(8)})
    with pytest.raises(TypeError, match="unexpected"):
        spinfer.refine(X, case["truth"], learning_speed=2)
    with pytest.raises(ValueError, match="expectations"):
        spinfer.refine(X, case["truth"], expectations="fast")
    Y = X.copy()
    Y[:, 2] = -1
    with pytest.raises(ValueError, match="never active"):
        spinfer.refine(Y, case["truth"])
