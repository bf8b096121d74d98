"""Closed-form fits, model class and model files through the Python package.

Closed forms are compared with a direct numpy implementation of the published formulas
(Kappen & Rodriguez 1998, Tanaka 1998, Roudi, Aurell & Hertz 2009, Sessak & Monasson 2009,
Ricci-Tersenghi 2012 / Nguyen & Berg 2012),
written here independently of the C++ code, on moments computed by numpy."""
import json
import math

import numpy as np
import pytest

import spinfer


def sampled_data(seed=0, n=6, t=4000):
    """Correlated 0/1 data: a shared latent input drives every unit (not an Ising model)."""
    rng = np.random.default_rng(seed)
    z = rng.normal(size=(t, 1))
    drive = z * rng.uniform(0.3, 0.8, n) + rng.normal(size=(t, n)) + rng.uniform(-0.6, 0.3, n)
    return (drive > 0).astype(np.uint8)


def numpy_moments(X):
    S = 2.0 * X - 1.0
    m = S.mean(axis=0)
    C = (S.T @ S) / len(S) - np.outer(m, m)
    return m, C


def published_formulas(m, C):
    n = len(m)
    Ci = np.linalg.inv(C)
    L = 1 - m ** 2
    off = ~np.eye(n, dtype=bool)
    out = {}
    # §1.1 naive mean-field
    J = np.where(off, -Ci, 0.0)
    out["mean-field"] = (J, np.arctanh(m) - J @ m)
    # §1.2 TAP
    Jt = np.where(off, -2 * Ci / (1 + np.sqrt(1 - 8 * Ci * np.outer(m, m))), 0.0)
    tap_h = lambda J: np.arctanh(m) - J @ m + m * ((J ** 2) @ (1 - m ** 2))  # noqa: E731
    out["tap"] = (Jt, tap_h(Jt))
    # §1.3 independent pair
    Jip = np.zeros((n, n))
    hip = np.arctanh(m).copy()
    for i in range(n):
        for j in range(n):
            if i == j:
                continue
            c = C[i, j] + m[i] * m[j]
            p = {(a, b): 0.25 * (1 + a * m[i] + b * m[j] + a * b * c) for a in (1, -1) for b in (1, -1)}
            Jip[i, j] = 0.25 * math.log(p[1, 1] * p[-1, -1] / (p[1, -1] * p[-1, 1]))
            hij = 0.25 * math.log(p[1, 1] * p[1, -1] / (p[-1, 1] * p[-1, -1]))
            hip[i] += hij - np.arctanh(m[i])
    out["independent-pair"] = (Jip, hip)
    # §1.4 Sessak-Monasson, fields by the TAP rule
    denom = np.outer(L, L) - C ** 2
    np.fill_diagonal(denom, 1.0)  # unused diagonal (L_i^2 - C_ii^2 = 0)
    Jsm = np.where(off, -Ci + Jip - C / denom, 0.0)
    out["sessak-monasson"] = (Jsm, tap_h(Jsm))
    # §1.5 Bethe, verbatim
    Jb = np.zeros((n, n))
    for i in range(n):
        for j in range(n):
            if i == j:
                continue
            x = Ci[i, j]
            r = math.sqrt(1 + 4 * L[i] * L[j] * x * x)
            Jb[i, j] = -math.atanh(r / (2 * x) - m[i] * m[j]
                                   - math.sqrt((r - 2 * m[i] * m[j] * x) ** 2 - 4 * x * x) / (2 * x))

    def f(m1, m2, t):
        return (1 - t * t - math.sqrt((1 - t * t) ** 2 - 4 * t * (m1 - m2 * t) * (m2 - m1 * t))) / (
            2 * t * (m2 - m1 * t))

    hb = np.arctanh(m).copy()
    for i in range(n):
        for j in range(n):
            if i != j:
                t = math.tanh(Jb[i, j])
                hb[i] -= math.atanh(t * f(m[j], m[i], t))
    out["bethe"] = (Jb, hb)
    return out


@pytest.mark.parametrize("method", ["mean-field", "tap", "independent-pair", "sessak-monasson", "bethe"])
def test_closed_forms_match_the_published_formulas(method):
    X = sampled_data()
    m, C = numpy_moments(X)
    J_ref, h_ref = published_formulas(m, C)[method]
    fit = spinfer.fit_closed_form(X, method)
    assert fit.convention == "spin"
    np.testing.assert_allclose(fit.couplings, J_ref, atol=1e-9)
    np.testing.assert_allclose(fit.fields, h_ref, atol=1e-9)
    assert fit.provenance["method"] == method
    assert fit.provenance["samples"] == len(X)
    assert fit.provenance["units"] == X.shape[1]
    assert fit.provenance["version"] == spinfer.__version__
    # Same answer from a moments dict in either convention, or from -1/+1 data.
    for conv in ("binary", "spin"):
        again = spinfer.fit_closed_form(spinfer.moments(X, convention=conv), method)
        np.testing.assert_allclose(again.couplings, fit.couplings, atol=1e-12)
    pm = spinfer.fit_closed_form(2 * X.astype(np.int8) - 1, method)
    np.testing.assert_allclose(pm.couplings, fit.couplings, atol=1e-12)


def test_exact_moments_of_a_tree_give_back_the_model_with_bethe():
    # Bethe is exact on trees: here a star with fields, through the Python API.
    n = 7
    rng = np.random.default_rng(12)
    J = np.zeros((n, n))
    J[0, 1:] = J[1:, 0] = rng.uniform(-0.8, 0.8, n - 1)
    h = rng.normal(0, 0.4, n)
    mo = spinfer.exact_statistics(h, J, "spin", moments_convention="binary")
    fit = spinfer.fit_closed_form(mo, "bethe")
    np.testing.assert_allclose(fit.couplings, J, atol=1e-10)
    np.testing.assert_allclose(fit.fields, h, atol=1e-10)
    # Binary twin of the fit equals the binary twin of the truth.
    np.testing.assert_allclose(fit.to_convention("binary").fields,
                               spinfer.IsingModel(h, J).to_convention("binary").fields, atol=1e-9)


def test_duplicated_unit_needs_shrinkage():
    X = sampled_data(seed=1, n=4)
    X = np.hstack([X, X[:, :1]])
    with pytest.raises(ArithmeticError, match="condition number"):
        spinfer.fit_closed_form(X, "tap")
    with pytest.raises(ArithmeticError, match=r"pair \(unit 1, unit 5\)"):
        spinfer.fit_closed_form(X, "independent-pair")
    lam = 0.1
    fit = spinfer.fit_closed_form(X, "mean-field", shrinkage=lam)
    m, C = numpy_moments(X)
    Cs = (1 - lam) * C + lam * np.diag(np.diag(C))  # documented shrinkage rule
    np.testing.assert_allclose(fit.couplings, np.where(np.eye(5) > 0, 0, -np.linalg.inv(Cs)), atol=1e-9)
    assert np.all(np.isfinite(fit.fields))
    with pytest.raises(ValueError, match="shrinkage"):
        spinfer.fit_closed_form(X, "tap", shrinkage=2)
    with pytest.raises(ValueError, match="choose one of"):
        spinfer.fit_closed_form(X, "nonsense")


def test_constant_unit_is_an_arithmetic_error():
    X = sampled_data(seed=2, n=3)
    X[:, 1] = 1
    with pytest.raises(ArithmeticError, match=r"unit 2 has \|m\| = 1"):
        spinfer.fit_closed_form(X, "mean-field")


def test_model_file_round_trip(tmp_path):
    rng = np.random.default_rng(3)
    J = np.triu(rng.normal(size=(5, 5)) / 7, 1)
    model = spinfer.IsingModel(rng.normal(size=5) / 3, J + J.T, "binary", names=list("abcde"),
                               provenance={"method": "tap", "seed": 2**64 - 1, "extra": {"note": [1, 2.5]}})
    path = tmp_path / "model.json"
    spinfer.save_model(path, model)
    back = spinfer.load_model(path)
    assert np.array_equal(back.fields, model.fields)
    assert np.array_equal(back.couplings, model.couplings)
    assert back.names == list("abcde")
    assert back.convention == "binary"
    assert back.provenance["seed"] == 2**64 - 1
    assert back.provenance["extra"] == {"note": [1, 2.5]}
    doc = json.loads(path.read_text())  # plain JSON any tool can read
    assert doc["format"] == "spinfer-model" and doc["format_version"] == 1
    assert np.array_equal(np.array(doc["couplings"]), model.couplings)
    # Fitted models keep their provenance through a file.
    fit = spinfer.fit_closed_form(sampled_data(), "bethe")
    spinfer.save_model(path, fit)
    assert spinfer.load_model(path).provenance == fit.provenance


def test_model_file_errors(tmp_path):
    path = tmp_path / "m.json"
    with pytest.raises(OSError):
        spinfer.load_model(tmp_path / "missing.json")
    path.write_text('{"format": "spinfer-model"}')
    with pytest.raises(ValueError, match=r"m\.json: key 'format_version': missing"):
        spinfer.load_model(path)
    path.write_text("not json")
    with pytest.raises(ValueError, match="not valid JSON"):
        spinfer.load_model(path)
    with pytest.raises(OSError):
        spinfer.save_model(tmp_path / "no" / "dir" / "m.json", spinfer.IsingModel(np.zeros(2), np.zeros((2, 2))))
    with pytest.raises(ValueError, match="JSON types only"):
        spinfer.IsingModel(np.zeros(2), np.zeros((2, 2)), provenance={"extra": {"x": object()}})
