"""spinfer.PairwiseNetwork: the scikit-learn estimator API over spinfer.fit.

scikit-learn's own estimator checks run on ``PairwiseNetwork(binarize=0.5)`` with the default
pseudo-likelihood method and with ``method="screening"``. The checks feed random floats; with
threshold 0.5 their uniform [0, 1) data give columns that are active about half the time. Checks
expected to fail, by design (both instances):

- check_fit2d_1feature: 10 samples of 10 * uniform(0, 1) in one column are all > 0.5, a constant
  column, so fit raises "constant column" instead of the expected "1 feature(s)" message. A single
  non-constant feature does fit (tested below).
- check_fit_idempotent, check_fit_check_is_fitted, check_n_features_in: the data are
  normal(loc=100), so every column is always active; fields would be infinite and fit raises
  ValueError naming the constant columns.
- check_positive_only_tag_during_fit: iris minus its global mean leaves columns (e.g. petal width)
  that are never above the threshold: constant columns again. Negative values as such are fine.

check_array_api_input skips itself unless SCIPY_ARRAY_API is set (the estimator is numpy-only).
The instance with the default ``binarize=0.0`` fails more of these checks for the same reason
(most check data are positive, so all columns are always active); it is not run through them.
"""
import pickle
import warnings

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp

import spinfer
from spinfer import PairwiseNetwork

sklearn = pytest.importorskip("sklearn")
from sklearn.base import clone  # noqa: E402
from sklearn.exceptions import ConvergenceWarning, NotFittedError  # noqa: E402
from sklearn.model_selection import GridSearchCV, KFold  # noqa: E402
from sklearn.pipeline import Pipeline  # noqa: E402
from sklearn.preprocessing import FunctionTransformer  # noqa: E402
from sklearn.utils.estimator_checks import parametrize_with_checks  # noqa: E402

_CONSTANT = "feeds constant columns (fields would be infinite): fit raises ValueError by design"
_EXPECTED_FAILURES = {
    "check_fit2d_1feature": _CONSTANT,
    "check_fit_idempotent": _CONSTANT,
    "check_fit_check_is_fitted": _CONSTANT,
    "check_n_features_in": _CONSTANT,
    "check_positive_only_tag_during_fit": _CONSTANT,
}


def _counts(n=600, units=6, seed=1):
    """Correlated spike counts: a shared Poisson drive plus independent noise."""
    rng = np.random.default_rng(seed)
    drive = rng.poisson(0.6, size=(n, 1))
    return rng.poisson(0.5, size=(n, units)) + drive * (rng.random((1, units)) < 0.7)


X_COUNTS = _counts()
X_BIN = (X_COUNTS > 0).astype(np.uint8)
NAMES = [f"cell{k}" for k in range(X_BIN.shape[1])]


@pytest.fixture(scope="module")
def fitted():
    return PairwiseNetwork().fit(X_COUNTS)


# ---- the API contract -----------------------------------------------------------------------

def test_constructor_stores_parameters_verbatim():
    marker = object()
    params = dict(method="screening", symmetric=True, logarithmic=True, l1=0.01, l2="auto",
                  shrinkage=0.2, binarize=None, convention="spin", max_iter=7, tol=1e-3,
                  n_jobs=-1, random_state=marker, progress=True, warm_start=True)
    est = PairwiseNetwork(**params)
    got = est.get_params()
    assert set(got) == set(params)
    for k, v in params.items():
        assert got[k] is v, k
    # invalid settings are accepted by the constructor and rejected by fit
    bad = PairwiseNetwork(convention="bits")
    assert bad.convention == "bits"
    with pytest.raises(ValueError, match="convention"):
        bad.fit(X_BIN)


def test_fit_returns_self_and_sets_fitted_attributes(fitted):
    est = PairwiseNetwork()
    assert est.fit(X_COUNTS) is est
    n = X_BIN.shape[1]
    assert fitted.fields_.shape == (n,) and fitted.couplings_.shape == (n, n)
    np.testing.assert_array_equal(fitted.couplings_, fitted.couplings_.T)
    np.testing.assert_array_equal(np.diag(fitted.couplings_), 0.0)
    assert fitted.convention_ == "binary" and fitted.n_features_in_ == n
    assert not hasattr(fitted, "feature_names_in_")  # numpy input has no names
    assert fitted.converged_ and fitted.n_iter_ >= 1
    assert fitted.provenance_["method"] == "pseudo-likelihood"
    assert fitted.provenance_["samples"] == X_BIN.shape[0]
    assert isinstance(fitted.model_, spinfer.IsingModel)
    np.testing.assert_array_equal(fitted.model_.couplings, fitted.couplings_)


@pytest.mark.parametrize("call", [
    lambda e: e.score(X_BIN), lambda e: e.score_samples(X_BIN), lambda e: e.sample(5),
    lambda e: e.check(X_BIN), lambda e: e.edges(), lambda e: e.to_model(),
    lambda e: e.save("never-written.json"),
])
def test_not_fitted_error_before_fit(call):
    with pytest.raises(NotFittedError):
        call(PairwiseNetwork())


def test_set_params_and_clone(fitted):
    est = PairwiseNetwork()
    assert est.set_params(l2=0.05, method="screening") is est
    assert est.l2 == 0.05 and est.method == "screening"
    with pytest.raises(ValueError):
        est.set_params(alpha=1.0)
    c = clone(fitted)
    assert c.get_params() == fitted.get_params()
    assert not hasattr(c, "couplings_")
    assert "l2=0.05" in repr(est)


def test_pickle_round_trip_gives_identical_results(fitted):
    back = pickle.loads(pickle.dumps(fitted))
    np.testing.assert_array_equal(back.couplings_, fitted.couplings_)
    np.testing.assert_array_equal(back.fields_, fitted.fields_)
    assert back.score(X_COUNTS) == fitted.score(X_COUNTS)
    np.testing.assert_array_equal(back.score_samples(X_COUNTS), fitted.score_samples(X_COUNTS))
    np.testing.assert_array_equal(back.sample(40, random_state=3), fitted.sample(40, random_state=3))


# ---- the same numbers as spinfer.fit ----------------------------------------------------------

@pytest.mark.parametrize("params, options", [
    ({}, {}),
    ({"l2": 0.01, "convention": "spin"}, {"l2": 0.01, "convention": "spin"}),
    ({"symmetric": True, "l2": 0.02}, {"symmetric": True, "l2": 0.02}),
    ({"method": "screening"}, {}),
    ({"method": "tap", "shrinkage": 0.1}, {"shrinkage": 0.1}),
])
def test_equals_spinfer_fit_on_the_same_binarized_data(params, options):
    est = PairwiseNetwork(binarize=1, **params).fit(X_COUNTS)
    B = (X_COUNTS > 1).astype(np.uint8)
    ref = spinfer.fit(B, params.get("method", "pseudo-likelihood"),
                      **{"convention": "binary", **options})
    np.testing.assert_allclose(est.couplings_, ref.couplings, rtol=0, atol=1e-12)
    np.testing.assert_allclose(est.fields_, ref.fields, rtol=0, atol=1e-12)
    assert est.convention_ == ref.convention
    # score is spinfer.pseudo_log_likelihood of the binarized data
    assert est.score(X_COUNTS) == pytest.approx(spinfer.pseudo_log_likelihood(ref, B), abs=1e-12)


def test_score_samples_match_the_pseudo_likelihood_formula(fitted):
    # Besag (1975), "Statistical analysis of non-lattice data": log PL = sum_i log P(s_i | s_rest),
    # here P(s_i | rest) = exp(s_i H_i) / (2 cosh H_i), H = h + J s in the spin convention; the
    # per-row values are recomputed from the fitted binary-convention parameters with numpy.
    h, J = fitted.fields_, fitted.couplings_
    hs, Js = h / 2 + J.sum(axis=1) / 4, J / 4  # x = (s + 1) / 2 substituted into h.x + x.J.x / 2
    s = 2.0 * X_BIN - 1
    H = hs + s @ Js
    expected = np.sum(s * H - np.log(2 * np.cosh(H)), axis=1)
    np.testing.assert_allclose(fitted.score_samples(X_COUNTS), expected, rtol=1e-12, atol=1e-12)
    assert fitted.score(X_COUNTS) == pytest.approx(expected.mean(), abs=1e-12)


# ---- pandas, sparse and binarize -------------------------------------------------------------

def test_pandas_names_reach_edges_check_and_saved_model(tmp_path):
    df = pd.DataFrame(X_COUNTS, columns=NAMES)
    est = PairwiseNetwork().fit(df)
    np.testing.assert_array_equal(est.feature_names_in_, np.array(NAMES, dtype=object))
    assert est.model_.names == NAMES
    edges = est.edges(threshold=None)
    assert len(edges) == 15 and set(edges["source"]) | set(edges["target"]) == set(NAMES)
    row = edges.iloc[0]
    assert row["source"] == NAMES[row["i"]] and row["target"] == NAMES[row["j"]]
    assert row["coupling"] == est.couplings_[row["i"], row["j"]]
    assert len(est.edges(top=3)) == 3
    table = est.check(df, replicates=20, triplets=10)
    assert list(table.index) == ["means", "correlations", "triplets", "active_counts"]
    # names are validated: renamed columns are refused
    with pytest.raises(ValueError, match="feature names"):
        est.check(df.rename(columns={"cell0": "other"}), replicates=20)
    est.save(tmp_path / "m.json")
    back = spinfer.load_model(tmp_path / "m.json")
    assert back.names == NAMES
    np.testing.assert_allclose(back.couplings, est.couplings_, atol=1e-15)
    # the same numbers as the numpy fit
    np.testing.assert_array_equal(est.couplings_, PairwiseNetwork().fit(X_COUNTS).couplings_)


def test_non_string_columns_give_no_feature_names_but_model_names():
    est = PairwiseNetwork().fit(pd.DataFrame(X_COUNTS))
    assert not hasattr(est, "feature_names_in_")
    assert est.model_.names == [str(k) for k in range(X_BIN.shape[1])]


@pytest.mark.parametrize("binarize, shift", [(0.0, 0), (1.5, 0), (None, 0), (-0.5, -1)])
def test_sparse_input_equals_dense_input(binarize, shift):
    dense = (X_BIN if binarize is None else X_COUNTS + shift).astype(np.float64)
    for kind in (sp.csr_matrix, sp.csc_matrix, sp.coo_matrix, sp.csr_array):
        sparse = kind(dense)
        a = PairwiseNetwork(binarize=binarize).fit(sparse)
        b = PairwiseNetwork(binarize=binarize).fit(dense)
        np.testing.assert_array_equal(a.couplings_, b.couplings_)
        assert a.score(sparse) == b.score(dense)


def test_binarize_threshold():
    t = 1
    a = PairwiseNetwork(binarize=t).fit(X_COUNTS)
    b = PairwiseNetwork(binarize=None).fit((X_COUNTS > t).astype(int))
    np.testing.assert_array_equal(a.couplings_, b.couplings_)
    # values equal to the threshold are inactive: shifting counts by +1 and threshold by +1 agree
    c = PairwiseNetwork(binarize=t + 1).fit(X_COUNTS + 1)
    np.testing.assert_array_equal(a.couplings_, c.couplings_)
    # binarize=None reads -1/+1 and bools like 0/1
    spins = 2 * X_BIN.astype(np.int8) - 1
    for data in (spins, X_BIN.astype(bool), X_BIN.astype(np.float32)):
        np.testing.assert_array_equal(PairwiseNetwork(binarize=None).fit(data).couplings_,
                                      PairwiseNetwork(binarize=None).fit(X_BIN).couplings_)
    with pytest.raises(ValueError, match="binarize=None"):
        PairwiseNetwork(binarize=None).fit(X_COUNTS)


def test_constant_columns_are_named():
    df = pd.DataFrame(X_COUNTS, columns=NAMES)
    df["silent"] = 0
    df["always"] = 5
    with pytest.raises(ValueError, match=r"silent \(never active\), always \(always active\)"):
        PairwiseNetwork().fit(df)


def test_one_feature_fits_a_field_only():
    est = PairwiseNetwork().fit(X_COUNTS[:, :1])
    p = X_BIN[:, 0].mean()
    # P(x=1) = e^h / (1 + e^h) for one unit, so h = logit(p) (no penalty on fields)
    assert est.fields_[0] == pytest.approx(np.log(p / (1 - p)), abs=1e-4)
    assert est.couplings_.shape == (1, 1)


# ---- sampling ---------------------------------------------------------------------------------

def test_sample_reproducible_and_in_the_convention(fitted):
    a = fitted.sample(200, random_state=5)
    assert a.shape == (200, X_BIN.shape[1]) and set(np.unique(a)) <= {0, 1}
    np.testing.assert_array_equal(a, fitted.sample(200, random_state=5))
    one = fitted.sample()
    assert one.shape == (1, X_BIN.shape[1])
    spin = PairwiseNetwork(convention="spin", random_state=2).fit(X_COUNTS)
    s = spin.sample(100)
    assert set(np.unique(s)) <= {-1, 1}
    np.testing.assert_array_equal(s, spin.sample(100))  # the estimator's random_state
    with pytest.raises(ValueError, match="n_samples"):
        fitted.sample(0)


def test_sample_means_match_exact_enumeration(fitted):
    # exact means by enumerating all 2^6 states with numpy (binary convention,
    # P(x) ∝ exp(h.x + sum_{i<j} J_ij x_i x_j)).
    n = X_BIN.shape[1]
    states = ((np.arange(2 ** n)[:, None] >> np.arange(n)) & 1).astype(float)
    logp = states @ fitted.fields_ + 0.5 * np.einsum("bi,ij,bj->b", states, fitted.couplings_, states)
    p = np.exp(logp - logp.max())
    p /= p.sum()
    exact = p @ states
    draws = fitted.sample(20000, random_state=0)
    # naive SE <= 0.5/sqrt(20000) = 0.0035; 0.03 allows Gibbs autocorrelation of ~70 sweeps at 1
    # naive SE, far beyond what 6 weakly coupled units show. Seed is fixed: cannot flake.
    np.testing.assert_allclose(draws.mean(axis=0), exact, atol=0.03)


# ---- iteration control, threads, progress, warm start ----------------------------------------

def test_convergence_warning():
    with pytest.warns(ConvergenceWarning):
        est = PairwiseNetwork(l2=1e-4, max_iter=1, tol=1e-14).fit(X_COUNTS)
    assert not est.converged_ and est.n_iter_ == 1


def test_n_jobs_and_progress_do_not_change_the_result(fitted, capsys):
    for kw in ({"n_jobs": -1}, {"n_jobs": 2}, {"progress": True}):
        est = PairwiseNetwork(**kw).fit(X_COUNTS)
        np.testing.assert_allclose(est.couplings_, fitted.couplings_, rtol=0, atol=1e-10)
    with pytest.raises(ValueError, match="n_jobs"):
        PairwiseNetwork(n_jobs=0).fit(X_COUNTS)


def test_progress_callback_can_be_interrupted(monkeypatch):
    import tqdm.auto

    class Stop(tqdm.auto.tqdm):
        def refresh(self, *a, **k):
            raise KeyboardInterrupt

    monkeypatch.setattr(tqdm.auto, "tqdm", Stop)
    with pytest.raises(KeyboardInterrupt):
        PairwiseNetwork(progress=True).fit(X_COUNTS)


def test_warm_start_reuses_the_previous_fit():
    cold = PairwiseNetwork(l2=0.001, tol=1e-7).fit(X_COUNTS)
    warm = PairwiseNetwork(l2=0.001, tol=1e-7, warm_start=True).fit(X_COUNTS)
    first = warm.n_iter_
    warm.fit(X_COUNTS)
    assert warm.n_iter_ < first
    np.testing.assert_allclose(warm.couplings_, cold.couplings_, atol=1e-6)


# ---- pipelines and model selection ------------------------------------------------------------

def test_pipeline_after_a_function_transformer():
    pipe = Pipeline([("rates", FunctionTransformer(lambda X: X / 2.0)),
                     ("net", PairwiseNetwork(binarize=0.6))])
    pipe.fit(X_COUNTS)
    direct = PairwiseNetwork(binarize=1.2).fit(X_COUNTS)  # x / 2 > 0.6  <=>  x > 1.2
    np.testing.assert_array_equal(pipe.named_steps["net"].couplings_, direct.couplings_)
    assert pipe.score(X_COUNTS) == direct.score(X_COUNTS)


def test_grid_search_over_l2_with_contiguous_folds():
    grid = [1e-3, 1e-2, 1e-1, 1.0]
    cv = KFold(4, shuffle=False)
    search = GridSearchCV(PairwiseNetwork(), {"l2": grid}, cv=cv).fit(X_COUNTS)
    # the same held-out means computed by hand (higher score is better)
    means = []
    for l2 in grid:
        scores = [PairwiseNetwork(l2=l2).fit(X_COUNTS[tr]).score(X_COUNTS[te])
                  for tr, te in cv.split(X_COUNTS)]
        means.append(np.mean(scores))
    np.testing.assert_allclose(search.cv_results_["mean_test_score"], means, rtol=0, atol=1e-12)
    assert search.best_params_ == {"l2": grid[int(np.argmax(means))]}
    assert grid[int(np.argmax(means))] < 1.0  # a strong penalty flattens real correlations


# ---- scikit-learn's estimator checks ----------------------------------------------------------

@parametrize_with_checks(
    [PairwiseNetwork(binarize=0.5), PairwiseNetwork(binarize=0.5, method="screening")],
    expected_failed_checks=lambda est: _EXPECTED_FAILURES,
)
def test_sklearn_estimator_checks(estimator, check):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        check(estimator)


def test_works_without_scikit_learn(monkeypatch):
    import importlib.util
    import sys

    for mod in [m for m in sys.modules if m == "sklearn" or m.startswith("sklearn.")]:
        monkeypatch.setitem(sys.modules, mod, None)
    monkeypatch.setitem(sys.modules, "sklearn", None)  # any import of sklearn now fails
    spec = importlib.util.spec_from_file_location("spinfer._estimator_without_sklearn",
                                                  spinfer.estimator.__file__)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    assert not module._HAVE_SKLEARN
    Est = module.PairwiseNetwork
    est = Est(l2=0.01)
    assert est.get_params()["l2"] == 0.01 and repr(est) == "PairwiseNetwork(l2=0.01)"
    assert est.set_params(l2=0.02) is est and est.l2 == 0.02
    with pytest.raises(ValueError, match="Invalid parameter"):
        est.set_params(alpha=1)
    with pytest.raises(module.NotFittedError):
        est.score(X_BIN)
    df = pd.DataFrame(X_COUNTS, columns=NAMES)
    assert est.fit(df) is est
    ref = PairwiseNetwork(l2=0.02).fit(df)
    np.testing.assert_array_equal(est.couplings_, ref.couplings_)
    np.testing.assert_array_equal(est.feature_names_in_, ref.feature_names_in_)
    assert est.score(df) == ref.score(df)
    np.testing.assert_array_equal(est.sample(30, random_state=4), ref.sample(30, random_state=4))
    with pytest.raises(ValueError, match="features"):
        est.score(df.iloc[:, :3])
    with pytest.raises(ValueError, match="NaN"):
        Est().fit(np.where(X_COUNTS > 2, np.nan, X_COUNTS))
