"""A scikit-learn style estimator: ``PairwiseNetwork().fit(X)`` for notebooks and pipelines.

X is always (n_samples, n_features): rows are time bins or cells, columns are neurons or genes
(neuro code often stores units x bins: transpose it first). Values may be counts, floats, bools,
0/1 or -1/+1: with ``binarize=t`` (default 0.0) a value counts as active when it is > t, so spike
counts, UMI counts, 0/1 and -1/+1 data all work unchanged. numpy arrays, pandas DataFrames (column
names become unit names) and scipy.sparse matrices are accepted.

Units that are never or always active after binarization make ``fit`` raise ``ValueError`` naming
them: their maximum-entropy field would be infinite. Drop such columns (or pick another
``binarize`` threshold) first.

``score`` is the mean per-sample **pseudo**-log-likelihood (higher is better): the exact
likelihood needs the partition function, which is intractable beyond ~25 units. Time bins are
autocorrelated, so cross-validate with contiguous folds (``KFold(shuffle=False)``,
``TimeSeriesSplit`` or ``GroupKFold`` by trial), never shuffled ones.

Works without scikit-learn installed (then ``get_params``/``set_params`` come from a small
fallback); with it, ``clone``, ``Pipeline``, ``GridSearchCV`` and pickling work as usual.
"""
from __future__ import annotations

import inspect
import os
from typing import Optional

import numpy as np

from .checking import check as _check, check_table as _check_table
from .estimate import fit as _fit
from .fitting import pseudo_log_likelihood as _pseudo_log_likelihood
from .models import save_model as _save_model
from .network import edge_table as _edge_table
from .sampling import sample as _sample

try:  # scikit-learn is optional
    from sklearn.base import BaseEstimator as _Base, DensityMixin as _Density
    from sklearn.exceptions import ConvergenceWarning, NotFittedError
    from sklearn.utils import check_random_state as _check_random_state
    from sklearn.utils.validation import check_is_fitted as _check_is_fitted
    try:  # sklearn >= 1.6
        from sklearn.utils.validation import validate_data as _sk_validate_data
    except ImportError:  # sklearn <= 1.5: the private method on BaseEstimator
        _sk_validate_data = None
    _HAVE_SKLEARN = True
except ImportError:  # pragma: no cover - exercised only without scikit-learn
    _HAVE_SKLEARN = False
    _sk_validate_data = None

    class ConvergenceWarning(UserWarning):
        """The fit stopped at max_iter before reaching tol."""

    class NotFittedError(ValueError, AttributeError):
        """The estimator is used before fit."""

    def _check_random_state(seed):
        if seed is None or seed is np.random:
            return np.random.mtrand._rand
        if isinstance(seed, np.random.RandomState):
            return seed
        return np.random.RandomState(int(seed))

    def _check_is_fitted(estimator, attributes=None):
        if not hasattr(estimator, "model_"):
            raise NotFittedError(f"This {type(estimator).__name__} instance is not fitted yet; "
                                 "call 'fit' first.")

    class _Density:
        """What scikit-learn's DensityMixin provides: the estimator-type marker."""

        _estimator_type = "DensityEstimator"

    class _Base:
        """get_params / set_params / repr in the scikit-learn manner (fallback)."""

        @classmethod
        def _get_param_names(cls):
            sig = inspect.signature(cls.__init__)
            return sorted(p for p in sig.parameters if p != "self")

        def get_params(self, deep=True):
            return {k: getattr(self, k) for k in self._get_param_names()}

        def set_params(self, **params):
            valid = self._get_param_names()
            for k, v in params.items():
                if k not in valid:
                    raise ValueError(f"Invalid parameter {k!r} for estimator {type(self).__name__}; "
                                     f"valid parameters: {', '.join(valid)}")
                setattr(self, k, v)
            return self

        def __repr__(self):
            sig = inspect.signature(type(self).__init__)
            changed = [f"{k}={v!r}" for k, v in self.get_params().items()
                       if sig.parameters[k].default is not v
                       and not (isinstance(v, (int, float, str)) and v == sig.parameters[k].default)]
            return f"{type(self).__name__}({', '.join(changed)})"


def _n_threads(n_jobs) -> int:
    """joblib meaning: None -> 1, -1 -> all CPUs, -2 -> all but one, k > 0 -> k."""
    if n_jobs is None:
        return 1
    n_jobs = int(n_jobs)
    if n_jobs == 0:
        raise ValueError("n_jobs: 0 is not a valid number of jobs (use None, -1 or a count >= 1)")
    if n_jobs < 0:
        return max(1, (os.cpu_count() or 1) + 1 + n_jobs)
    return n_jobs


def _is_sparse(X) -> bool:
    try:
        import scipy.sparse as sp
    except ImportError:  # pragma: no cover
        return False
    return sp.issparse(X)


class PairwiseNetwork(_Density, _Base):
    """Pairwise maximum-entropy (inverse Ising) network of binary activity.

    Parameters (stored verbatim; checked in ``fit``):

    method: "pseudo-likelihood", "screening" or a closed form ("mean-field", "tap",
        "independent-pair", "sessak-monasson", "bethe"); see :func:`spinfer.fit_methods`.
    symmetric: joint (symmetric) objective instead of per-unit fits averaged.
    logarithmic: log-RISE instead of RISE (method "screening").
    l1, l2: per-sample penalties, "auto", or None for the method's default (held-out choice
        for the main penalty of pseudo-likelihood (l2) and screening (l1)).
    shrinkage: covariance shrinkage (0..1) of the closed forms.
    binarize: values > binarize are active; None means X already holds 0/1 or -1/+1.
    convention: "binary" (0/1) or "spin" (-1/+1): the convention of ``fields_``/``couplings_``
        and of ``sample``'s output.
    max_iter, tol: iteration limit and tolerance of the iterative methods.
    n_jobs: threads (joblib meaning: None -> 1, -1 -> all CPUs).
    random_state: None, an int or a RandomState; seeds ``sample`` when it gets none itself.
    progress: show a tqdm.auto bar during fit. Ctrl-C still interrupts (KeyboardInterrupt).
    warm_start: start from the previous fit's parameters (same number of features).

    Fitted attributes: ``fields_`` (N,), ``couplings_`` (N, N, symmetric, zero diagonal),
    ``convention_``, ``n_features_in_``, ``feature_names_in_`` (all-string DataFrame columns
    only), ``n_iter_``, ``converged_``, ``provenance_`` (dict) and ``model_``
    (:class:`spinfer.IsingModel`, with the unit names).
    """

    def __init__(self, method="pseudo-likelihood", *, symmetric=False, logarithmic=False,
                 l1=None, l2=None, shrinkage=0.0, binarize=0.0, convention="binary",
                 max_iter=1000, tol=1e-5, n_jobs=None, random_state=None, progress=False,
                 warm_start=False):
        self.method = method
        self.symmetric = symmetric
        self.logarithmic = logarithmic
        self.l1 = l1
        self.l2 = l2
        self.shrinkage = shrinkage
        self.binarize = binarize
        self.convention = convention
        self.max_iter = max_iter
        self.tol = tol
        self.n_jobs = n_jobs
        self.random_state = random_state
        self.progress = progress
        self.warm_start = warm_start

    # ---- scikit-learn plumbing -------------------------------------------------------------
    def __sklearn_tags__(self):  # sklearn >= 1.6
        tags = super().__sklearn_tags__()
        tags.input_tags.sparse = True
        tags.input_tags.allow_nan = False
        tags.target_tags.required = False
        return tags

    def _more_tags(self):  # sklearn <= 1.5
        return {"requires_y": False, "X_types": ["2darray", "sparse"], "allow_nan": False}

    def _validated(self, X, reset: bool):
        """Validated X (ndarray or CSR) and unit names, also setting n_features_in_ on reset."""
        names = raw_names = None
        if hasattr(X, "columns") and hasattr(X, "to_numpy"):
            raw_names = list(X.columns)
            names = [str(c) for c in raw_names]
        kw = dict(accept_sparse=("csr", "csc", "coo"), dtype="numeric",
                  ensure_min_samples=2 if reset else 1, reset=reset)
        if not _HAVE_SKLEARN:
            X = X if _is_sparse(X) else np.asarray(X.to_numpy() if names else X)
            if not _is_sparse(X):
                if X.ndim != 2:
                    raise ValueError(f"X: expected a 2-D array (n_samples, n_features), got {X.ndim}-D")
                if X.dtype.kind not in "biuf":
                    X = X.astype(np.float64)
                if X.dtype.kind == "f" and not np.isfinite(X).all():
                    raise ValueError("X: contains NaN or infinity")
            if X.shape[0] < (2 if reset else 1):
                raise ValueError(f"X: found {X.shape[0]} sample(s); fit needs at least 2")
            if reset:
                self.n_features_in_ = X.shape[1]
                if raw_names is not None and all(isinstance(c, str) for c in raw_names):
                    self.feature_names_in_ = np.asarray(names, dtype=object)
            elif X.shape[1] != self.n_features_in_:
                raise ValueError(f"X has {X.shape[1]} features, but {type(self).__name__} is "
                                 f"expecting {self.n_features_in_} features as input")
        elif _sk_validate_data is not None:
            X = _sk_validate_data(self, X, **kw)
        else:  # sklearn <= 1.5
            X = self._validate_data(X, **kw)
        if _is_sparse(X):
            X = X.tocsr()
        return X, names

    # ---- data -------------------------------------------------------------------------------
    def _binary(self, X) -> np.ndarray:
        """X (validated) as a C-contiguous uint8 0/1 array (active = 1)."""
        t = self.binarize
        if _is_sparse(X):
            if t is not None and float(t) >= 0:
                # implicit zeros stay inactive, so threshold the stored values only
                B = X.copy()
                B.data = (B.data > float(t)).astype(np.uint8)
                B.eliminate_zeros()
                return np.ascontiguousarray(B.toarray(), dtype=np.uint8)
            if t is None:
                vals = np.unique(X.data)
                if np.isin(vals, (0, 1)).all():
                    B = X.copy()
                    B.data = (B.data != 0).astype(np.uint8)
                    return np.ascontiguousarray(B.toarray(), dtype=np.uint8)
            X = X.toarray()  # a negative threshold makes implicit zeros active, or -1/+1 data
        X = np.asarray(X)
        if t is not None:
            return np.ascontiguousarray(X > float(t), dtype=np.uint8)
        vals = np.unique(X)
        if np.isin(vals, (0, 1)).all():
            return np.ascontiguousarray(X != 0, dtype=np.uint8)
        if np.isin(vals, (-1, 1)).all():
            return np.ascontiguousarray(X == 1, dtype=np.uint8)
        shown = ", ".join(f"{v:g}" for v in vals[:5].astype(float))
        raise ValueError(f"X: with binarize=None values must be all 0/1 or all -1/+1; found {shown}"
                         f"{', ...' if vals.size > 5 else ''} (set binarize to a threshold)")

    @staticmethod
    def _unit_names(names, n: int) -> list:
        return list(names) if names is not None else [str(i) for i in range(n)]

    # ---- fit --------------------------------------------------------------------------------
    def fit(self, X, y=None):
        """Fit to X (n_samples, n_features); ``y`` is ignored. Returns self."""
        previous = getattr(self, "model_", None) if self.warm_start else None
        Xv, names = self._validated(X, reset=True)
        if self.convention not in ("binary", "spin"):
            raise ValueError(f"convention: expected 'binary' or 'spin', got {self.convention!r}")
        B = self._binary(Xv)
        labels = self._unit_names(names, B.shape[1])
        active = B.sum(axis=0)
        constant = np.flatnonzero((active == 0) | (active == B.shape[0]))
        if constant.size:
            listed = ", ".join(f"{labels[i]} ({'never' if active[i] == 0 else 'always'} active)"
                               for i in constant[:10])
            more = f" and {constant.size - 10} more" if constant.size > 10 else ""
            raise ValueError(f"X: {constant.size} constant column(s) after binarization: {listed}"
                             f"{more}; their fields would be infinite, drop them first")
        options = dict(symmetric=bool(self.symmetric), logarithmic=bool(self.logarithmic),
                       l1=self.l1, l2=self.l2, max_iterations=int(self.max_iter),
                       tolerance=float(self.tol), threads=_n_threads(self.n_jobs),
                       convention=self.convention)
        if self.shrinkage:
            options["shrinkage"] = float(self.shrinkage)
        if previous is not None and previous.n_units == B.shape[1]:
            options["warm_start"] = previous
        bar = None
        if self.progress:
            from tqdm.auto import tqdm

            bar = tqdm(desc=str(self.method), unit="it")

            def report(d):
                if d["stage"] != bar.desc:  # e.g. penalty selection, then the final fit
                    bar.reset(total=int(d["total"]) or None)
                    bar.set_description(d["stage"], refresh=False)
                if d.get("total"):
                    bar.total = int(d["total"])
                bar.n = int(d["done"])
                bar.set_postfix(objective=f"{d['objective']:.6g}", refresh=False)
                bar.refresh()
                return True

            options["progress"] = report
        try:
            model = _fit(B, self.method, data_convention="binary", **options)
        finally:
            if bar is not None:
                bar.close()
        if names is not None:
            model.names = list(names)
        self.model_ = model
        self.fields_ = np.array(model.fields, dtype=np.float64)
        self.couplings_ = np.array(model.couplings, dtype=np.float64)
        self.convention_ = model.convention
        self.provenance_ = dict(model.provenance)
        self.n_iter_ = int(self.provenance_.get("iterations", 0))
        self.converged_ = bool(self.provenance_.get("converged", True))
        if not self.converged_:
            import warnings

            warnings.warn(f"{type(self).__name__}: {self.method} did not converge in max_iter="
                          f"{self.max_iter} iterations (tol={self.tol}); raise max_iter or tol",
                          ConvergenceWarning, stacklevel=2)
        return self

    # ---- using a fitted model ---------------------------------------------------------------
    def _fitted(self):
        _check_is_fitted(self, "model_")

    def score(self, X, y=None) -> float:
        """Mean per-sample pseudo-log-likelihood of X (nats; higher is better)."""
        self._fitted()
        B = self._binary(self._validated(X, reset=False)[0])
        return float(_pseudo_log_likelihood(self.model_, B, convention="binary",
                                            threads=_n_threads(self.n_jobs)))

    def score_samples(self, X) -> np.ndarray:
        """Per-sample pseudo-log-likelihood ``sum_i [s_i H_i - log 2cosh H_i]``, H = h + J s (spin)."""
        self._fitted()
        B = self._binary(self._validated(X, reset=False)[0])
        spin = self.model_.to_convention("spin")
        s = 2.0 * B - 1.0
        H = spin.fields[None, :] + s @ spin.couplings  # couplings symmetric, zero diagonal
        return np.sum(s * H - np.logaddexp(H, -H), axis=1)

    def sample(self, n_samples: int = 1, random_state=None) -> np.ndarray:
        """``n_samples`` Gibbs samples (n_samples, N) in the estimator's convention.

        ``random_state`` (default: the estimator's) seeds the sampler; the same seed gives the
        same samples.
        """
        self._fitted()
        n = int(n_samples)
        if n < 1:
            raise ValueError(f"n_samples: expected a count >= 1, got {n_samples}")
        rs = self.random_state if random_state is None else random_state
        seed = int(_check_random_state(rs).randint(2**31 - 1))
        samples, _ = _sample(self.fields_, self.couplings_, self.convention_, n, seed=seed,
                             chains=min(4, n), threads=_n_threads(self.n_jobs))
        return np.asarray(samples)

    def check(self, X, **options):
        """How well the model explains X: :func:`spinfer.check_table` of :func:`spinfer.check`.

        ``options`` go to :func:`spinfer.check` (triplets, replicates, seed, ...).
        """
        self._fitted()
        Xv, names = self._validated(X, reset=False)
        B = self._binary(Xv)
        options.setdefault("threads", _n_threads(self.n_jobs))
        return _check_table(_check(self.model_, B, convention="binary", **options))

    def edges(self, threshold: Optional[float] = 0.0, top: Optional[int] = None):
        """The couplings as a ranked edge table (DataFrame, see :func:`spinfer.edge_table`)."""
        self._fitted()
        return _edge_table(self.couplings_, names=self.model_.names, threshold=threshold, top=top)

    def to_model(self):
        """A copy of the fitted :class:`spinfer.IsingModel`."""
        self._fitted()
        m = self.model_
        return type(m)(m.fields.copy(), m.couplings.copy(), m.convention,
                       None if m.names is None else list(m.names), dict(m.provenance))

    def save(self, path, couplings_file: str = "auto") -> None:
        """Write the fitted model to a JSON model file (:func:`spinfer.save_model`; ``couplings_file``
        is ``"auto"``, ``"inline"`` or ``"npy"``)."""
        self._fitted()
        _save_model(path, self.model_, couplings_file)


__all__ = ["PairwiseNetwork"]
