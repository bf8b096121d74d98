"""ln Z, log-likelihood, entropy and multi-information from Python, checked against exact
enumeration, Kaufman's exact partition function of the periodic 2D lattice, numpy's Gauss-Legendre
rule and plug-in entropies computed here with numpy. Statistical checks allow 4 standard errors;
seeds are fixed, so the tests are deterministic."""
import numpy as np
import pytest

import spinfer

mpmath = pytest.importorskip("mpmath")


def torus_couplings(L, K):
    """Nearest-neighbour couplings K on an L x L periodic lattice (spin convention)."""
    N = L * L
    J = np.zeros((N, N))
    for r in range(L):
        for c in range(L):
            i = r * L + c
            for j in (r * L + (c + 1) % L, ((r + 1) % L) * L + c):
                J[i, j] = J[j, i] = K
    return J


def kaufman_log_z(m, n, K):
    """ln Z of the isotropic Ising model on an m x n torus, E = -K sum_<ij> s_i s_j.

    Kaufman, Phys. Rev. 76:1232 (1949), with gamma_0 = 2K + ln tanh K (negative below K_c):
      Z = 1/2 (2 sinh 2K)^{mn/2} [prod_r 2cosh(m g_{2r-1}/2) + prod_r 2sinh(m g_{2r-1}/2)
                                  + prod_r 2cosh(m g_{2r}/2) + prod_r 2sinh(m g_{2r}/2)],  r = 1..n,
      cosh g_k = cosh 2K coth 2K - cos(pi k / n) with g_k > 0, and the signed
      g_0 = g_{2n} = 2K + ln tanh K (negative below K_c: the sign matters).
    Evaluated with 60-digit mpmath because the sinh products cancel heavily.
    """
    mp = mpmath.mp
    mp.dps = 60
    K = mpmath.mpf(K)
    c = mpmath.cosh(2 * K) * mpmath.coth(2 * K)

    def gamma(k):
        if k % (2 * n) == 0:
            return 2 * K + mpmath.log(mpmath.tanh(K))
        return mpmath.acosh(c - mpmath.cos(mpmath.pi * k / n))

    odd = [gamma(2 * r - 1) for r in range(1, n + 1)]
    even = [gamma(2 * r) for r in range(1, n + 1)]
    total = (mpmath.fprod(2 * mpmath.cosh(m * g / 2) for g in odd)
             + mpmath.fprod(2 * mpmath.sinh(m * g / 2) for g in odd)
             + mpmath.fprod(2 * mpmath.cosh(m * g / 2) for g in even)
             + mpmath.fprod(2 * mpmath.sinh(m * g / 2) for g in even))
    return float(mpmath.log(total / 2) + (m * n / mpmath.mpf(2)) * mpmath.log(2 * mpmath.sinh(2 * K)))


def random_model(N, seed, convention="spin", scale=1.5):
    rng = np.random.default_rng(seed)
    h = rng.uniform(-0.5, 0.5, N)
    J = np.triu(rng.uniform(-1, 1, (N, N)) * scale / np.sqrt(N), 1)
    J = J + J.T
    if convention == "binary":
        h, J = 2 * h, 4 * J
    return spinfer.IsingModel(h, J, convention)


def exact_draws(model, T, seed):
    p = spinfer.exact_state_probabilities(model)
    k = np.random.default_rng(seed).choice(p.size, size=T, p=p / p.sum())
    return ((k[:, None] >> np.arange(model.n_units)) & 1).astype(np.uint8)


def test_kaufman_formula_matches_enumeration_at_4x4():
    Kc = 0.5 * np.log(1 + np.sqrt(2))
    # ln Z(4x4, K_c) = 15.5219154587553, a brute-force sum over all 65,536 states (computed; recalled value).
    assert kaufman_log_z(4, 4, Kc) == pytest.approx(15.5219154587553, abs=1e-12)
    for K in (0.2, 0.3, Kc, 0.6):
        exact = spinfer.exact_log_partition(np.zeros(16), torus_couplings(4, K), "spin")
        assert kaufman_log_z(4, 4, K) == pytest.approx(exact, abs=1e-11)


@pytest.mark.parametrize("method", ["ais", "thermodynamic"])
def test_8x8_torus_against_kaufman(method):
    K = 0.3
    exact = kaufman_log_z(8, 8, K)
    model = (np.zeros(64), torus_couplings(8, K), "spin")
    r = spinfer.log_partition(model, method, seed=3, ais_runs=100, ais_steps=1000, ti_nodes=16,
                              samples=4000)
    assert r["method"] == method
    assert 0 < r["error"] < 0.05
    assert abs(r["value"] - exact) <= 4 * r["error"], (r["value"], exact, r["error"])
    if method == "ais":
        assert r["lower_bound"]
        assert r["effective_runs"] > 50
        assert len(r["log_weights"]) == 100
    else:
        assert len(r["node_mean"]) == 16
        assert np.all(r["node_error"] > 0)


def test_random_models_against_enumeration():
    for N, conv, seed in ((12, "spin", 1), (16, "binary", 2)):
        model = random_model(N, seed, conv)
        exact = spinfer.exact_log_partition(model)
        for method in ("ais", "thermodynamic"):
            r = spinfer.log_partition(model, method, seed=5, ais_steps=400, ti_nodes=12, samples=2000)
            assert 0 < r["error"] < 0.05
            assert abs(r["value"] - exact) <= 4 * r["error"], (method, r["value"], exact, r["error"])
        assert spinfer.log_partition(model)["method"] == "exact"
        assert spinfer.log_partition(model)["value"] == pytest.approx(exact, abs=1e-12)


def test_gauss_legendre_matches_numpy():
    # numpy.polynomial.legendre.leggauss on [-1, 1], mapped to [0, 1].
    x, w = np.polynomial.legendre.leggauss(16)
    nodes, weights = spinfer._core.gauss_legendre_unit(16)
    np.testing.assert_allclose(nodes, (x + 1) / 2, atol=1e-14)
    np.testing.assert_allclose(weights, w / 2, atol=1e-14)
    r = spinfer.log_partition(random_model(10, 0), "thermodynamic", ti_nodes=16, samples=200)
    np.testing.assert_allclose(r["nodes"], (x + 1) / 2, atol=1e-14)


def test_log_likelihood_identity():
    model = random_model(14, 8, "binary")
    X = exact_draws(model, 2000, 1)
    exact = spinfer.exact_log_likelihood(model, X)
    r = spinfer.log_likelihood(model, X, "exact")
    assert r["value"] == pytest.approx(exact, abs=1e-10)
    assert r["error"] == 0
    a = spinfer.log_likelihood(model, X, "ais", ais_steps=400, seed=2)
    assert abs(a["value"] - exact) <= 4 * a["error"]
    # Spin-valued input is the same states; the identity -<E>_data - ln Z holds for (h, J) too.
    s = spinfer.log_likelihood((model.fields, model.couplings, "binary"), 2 * X.astype(np.int8) - 1, "exact")
    assert s["value"] == pytest.approx(exact, abs=1e-10)
    with pytest.raises(ValueError):
        spinfer.log_likelihood(model, X[:, :5], "exact")


def test_entropy_against_exact():
    model = random_model(15, 4)
    exact = spinfer.exact_statistics(model)["entropy"]
    assert spinfer.entropy(model)["value"] == pytest.approx(exact, abs=1e-10)
    r = spinfer.entropy(model, "ais", ais_steps=400, samples=4000, seed=1)
    assert 0 < r["error"] < 0.1
    assert abs(r["value"] - exact) <= 4 * r["error"]


def test_multi_information_pairwise_and_independent():
    model = random_model(8, 12, scale=3.0)
    X = exact_draws(model, 200000, 3)
    r = spinfer.multi_information(model, X)
    # S_1 and the plug-in S_N recomputed with numpy.
    p = X.mean(axis=0)
    S1 = -np.sum(p * np.log(p) + (1 - p) * np.log(1 - p))
    _, counts = np.unique(X, axis=0, return_counts=True)
    f = counts / counts.sum()
    SN = -np.sum(f * np.log(f))
    assert r["independent_entropy"] == pytest.approx(S1, abs=1e-10)
    assert r["pattern_entropy"] == pytest.approx(SN, abs=1e-10)
    assert r["pattern_entropy_corrected"] == pytest.approx(SN + (len(counts) - 1) / (2 * len(X)), abs=1e-10)
    assert r["reliable"]
    assert abs(r["ratio"] - 1) <= 4 * r["ratio_error"]
    assert r["ratio_error"] < 0.05

    independent = spinfer.IsingModel(model.fields, np.zeros((8, 8)), "spin")
    Y = exact_draws(independent, 20000, 4)
    z = spinfer.multi_information(independent, Y)
    assert not z["reliable"]
    assert any("not clearly above zero" in w for w in z["warnings"])


def test_interrupt_and_bad_options():
    model = random_model(30, 1)
    with pytest.raises(KeyboardInterrupt):
        spinfer.log_partition(model, "ais", progress=lambda p: False)
    with pytest.raises(KeyboardInterrupt):
        spinfer.log_partition(model, "thermodynamic", progress=lambda p: False)
    with pytest.raises(ValueError, match="method"):
        spinfer.log_partition(model, "magic")
    with pytest.raises(TypeError):
        spinfer.log_partition(model, runs=3)
    with pytest.raises(TypeError):
        spinfer.log_partition("not a model")
    seen = []
    spinfer.log_partition(model, "ais", ais_steps=20, progress=lambda p: seen.append(p["stage"]) or True)
    assert seen and seen[-1] == "annealed importance sampling"
