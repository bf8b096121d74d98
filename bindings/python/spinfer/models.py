"""Ising models: the model class, exact enumeration, closed-form fits and model files.

Energy and probability (both conventions, parameters dimensionless)::

    E(v) = -sum_i h_i v_i - sum_{i<j} J_ij v_i v_j,   P(v) = exp(-E(v) / T) / Z

with v in {0, 1} ("binary") or {-1, +1} ("spin"). ``couplings`` is symmetric with a zero diagonal.
"""
from __future__ import annotations

import os
from dataclasses import dataclass, field
from typing import Optional, Sequence

import numpy as np

from . import _core
from ._data import as_matrix, moments as _moments


@dataclass
class IsingModel:
    """Fields ``h`` (N,), couplings ``J`` (N, N) in a stated convention, unit names, provenance."""

    fields: np.ndarray
    couplings: np.ndarray
    convention: str = "spin"
    names: Optional[list] = None
    provenance: dict = field(default_factory=dict)

    def __post_init__(self):
        d = _core.validate_model(self._to_core())  # checks shapes, symmetry, diagonal, finiteness
        self.fields, self.couplings = d["fields"], d["couplings"]
        self.convention = d["convention"]
        self.names = d["names"]
        self.provenance = d["provenance"]

    @property
    def n_units(self) -> int:
        return int(self.fields.shape[0])

    def to_convention(self, convention: str) -> "IsingModel":
        """The same distribution with parameters in the other convention (exact)."""
        return IsingModel._from_core(_core.convert_model(self._to_core(), convention))

    def log_partition_shift(self, convention: str) -> float:
        """c such that log Z of ``to_convention(convention)`` equals log Z of this model plus c."""
        return _core.log_partition_shift(self._to_core(), convention)

    def _to_core(self) -> dict:
        return {
            "convention": self.convention,
            "fields": np.asarray(self.fields, dtype=np.float64),
            "couplings": np.asarray(self.couplings, dtype=np.float64),
            "names": None if self.names is None else [str(n) for n in self.names],
            "provenance": self.provenance,
        }

    @classmethod
    def _from_core(cls, d: dict) -> "IsingModel":
        return cls(d["fields"], d["couplings"], d["convention"], d["names"], d["provenance"])


def _model(h, J, convention) -> IsingModel:
    if isinstance(h, IsingModel):
        if J is not None:
            raise ValueError("pass either a model or (h, J), not both")
        return h
    if J is None:
        raise ValueError("couplings J are required with fields h")
    return IsingModel(np.asarray(h, dtype=np.float64), np.asarray(J, dtype=np.float64), convention)


def convert_model(model: IsingModel, convention: str) -> IsingModel:
    """The same distribution in ``convention`` ("binary" or "spin"); exact."""
    return model.to_convention(convention)


def exact_statistics(h, J=None, convention: str = "spin", temperature: float = 1.0,
                     moments_convention: Optional[str] = None, threads: int = 1) -> dict:
    """Exact statistics by enumerating all 2^N states (N <= 24).

    ``h`` may be an :class:`IsingModel` (then leave ``J`` out). Returns a dict with
    ``log_partition`` (log Z in the model's convention), ``mean``, ``second``, ``connected``
    (moments in ``moments_convention``, default: the model's), ``active_count`` (P(K), K = 0..N),
    ``entropy`` (nats), ``mean_energy`` (model's convention) and ``specific_heat``
    (Var(E) / (N T^2)).
    """
    model = _model(h, J, convention)
    conv = moments_convention or model.convention
    return _core.exact_statistics(model._to_core(), float(temperature), conv, threads)


def exact_log_partition(h, J=None, convention: str = "spin", temperature: float = 1.0,
                        threads: int = 1) -> float:
    """log Z by exact enumeration (N <= 24)."""
    return _core.exact_log_partition(_model(h, J, convention)._to_core(), float(temperature), threads)


def exact_state_probabilities(h, J=None, convention: str = "spin", temperature: float = 1.0,
                              threads: int = 1) -> np.ndarray:
    """The 2^N state probabilities; state k has unit i active iff bit i of k is set."""
    return _core.exact_state_probabilities(_model(h, J, convention)._to_core(), float(temperature),
                                           threads)


def exact_log_likelihood(model: IsingModel, X, weights=None, threads: int = 1,
                         copy: bool = True) -> float:
    """Mean log-probability per sample (nats) of the rows of ``X`` under ``model`` (T = 1)."""
    data = as_matrix(X, copy=copy, weights=weights)
    return _core.exact_log_likelihood(model._to_core(), data, threads)


def closed_form_methods() -> list:
    """Names accepted by :func:`fit_closed_form`."""
    return list(_core.closed_form_methods())


def fit_closed_form(data, method: str = "tap", shrinkage: float = 0.0, convention: Optional[str] = None,
                    max_condition: float = 1e12, mean_field_fallback: bool = False,
                    threads: int = 1, copy: bool = True) -> IsingModel:
    """Closed-form inverse Ising estimate from means and connected correlations.

    ``data`` is a (n_samples, n_units) array of 0/1 or -1/+1 values (``convention`` may state
    which), a matrix from :func:`spinfer.as_matrix`, or a moments dict as returned by
    :func:`spinfer.moments` / :func:`exact_statistics` (keys ``mean``, ``connected`` and
    ``convention``). ``method`` is one of "mean-field", "tap", "independent-pair",
    "sessak-monasson", "bethe". The model is returned in the spin convention
    (``.to_convention("binary")`` converts it).

    ``shrinkage`` (0..1) replaces C by (1 - shrinkage) C + shrinkage diag(C): needed when C is
    singular (duplicated units, fewer samples than units). Without it such data raise
    ``ArithmeticError`` naming the condition number, as do pairs with no real solution (unless
    ``mean_field_fallback``).
    """
    names = None
    if isinstance(data, dict):
        mo = dict(data)
        mo.setdefault("convention", "binary")
    else:
        matrix = as_matrix(data, convention=convention, copy=copy)
        names = list(matrix.names) or None
        mo = _moments(matrix, convention="spin", threads=threads)
    model = IsingModel._from_core(
        _core.fit_closed_form(mo, method, float(shrinkage), float(max_condition), bool(mean_field_fallback)))
    if names is not None:
        model.names = names
    return model


def save_model(path, model: IsingModel, couplings_file: str = "auto") -> None:
    """Write ``model`` to a JSON model file (schema: lib/include/spinfer/model_io.hpp), atomically.

    ``couplings_file`` says where the couplings go: ``"inline"`` (N lists in the JSON), ``"npy"``
    (a sibling ``NAME.couplings.npy`` beside ``NAME.json``, referenced from the JSON with its
    shape and checksum; ``numpy.load`` reads it) or ``"auto"`` (inline up to
    :data:`INLINE_COUPLINGS_MAX_UNITS` units, the sibling file above). Both files are written
    together: a failure leaves neither new file. Existing files are replaced.
    """
    _core.save_model(os.fspath(path), model._to_core(), str(couplings_file))


def load_model(path) -> IsingModel:
    """Read and validate a model file (and its sibling couplings file, if it has one).

    A couplings file that does not match the model file (another model's, or replaced since)
    raises ``ValueError`` naming both files; a missing one raises ``OSError``.
    """
    return IsingModel._from_core(_core.load_model(os.fspath(path)))


def couplings_sibling_path(path) -> str:
    """The couplings file that goes with a model file: ``DIR/NAME.json`` -> ``DIR/NAME.couplings.npy``."""
    return _core.couplings_sibling_path(os.fspath(path))


#: The largest model whose couplings ``couplings_file="auto"`` writes inline.
INLINE_COUPLINGS_MAX_UNITS: int = int(_core.inline_couplings_max_units)


__all__: Sequence[str] = [
    "IsingModel",
    "convert_model",
    "exact_statistics",
    "exact_log_partition",
    "exact_state_probabilities",
    "exact_log_likelihood",
    "closed_form_methods",
    "fit_closed_form",
    "save_model",
    "load_model",
    "couplings_sibling_path",
    "INLINE_COUPLINGS_MAX_UNITS",
]
