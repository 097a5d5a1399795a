"""Correlations between a model's parameter uncertainties: the ``[correlation]``
section of a model file, and covariance matrices built from (and written back
into) the parameters' uncertainties.

The section lists the parameters and their correlation matrix::

    [correlation]
    parameters = ["position.ra", "position.dec", "spin.frequency_hz"]
    matrix = [[1.0, 0.31, 0.0], [0.31, 1.0, -0.02], [0.0, -0.02, 1.0]]

A fit writes the correlations of the parameters it fitted (so that ``derive``
and ``convert`` see what the fit saw); ``convert`` carries them through the
Jacobian of its transformation. Parameters not listed are uncorrelated.
Covariances here are in the parameters' internal units (``Parameter.value``).
"""

from __future__ import annotations

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.formats.model_file import Key, take_section

SECTION = "correlation"
KEYS = {"parameters": Key("list_text", default=list),
        "matrix": Key("list_list_number", default=list)}
SYMMETRY_TOLERANCE = 1e-6
WRITTEN_DIGITS = 6          # correlation coefficients are written rounded to this many places


def read_correlations(section, model, path) -> dict[tuple[str, str], float]:
    """Pairs (a, b), a before b in the listed order, -> correlation, checked."""
    s = take_section(section, SECTION, KEYS, path, allow_uncertainty=False)
    names, matrix = s["parameters"], np.array(s["matrix"], dtype=float)
    if len(set(names)) != len(names):
        raise InputError("a parameter is listed twice", path=path, field="correlation.parameters")
    for name in names:
        model.parameter(name, path=path, field="correlation.parameters")
    n = len(names)
    if matrix.shape != (n, n):
        raise InputError(f"expected a {n} x {n} matrix (one row and column per listed "
                         f"parameter), found shape {matrix.shape}", path=path,
                         field="correlation.matrix")
    if (not np.all(np.isfinite(matrix)) or np.any(np.abs(matrix) > 1 + SYMMETRY_TOLERANCE)
            or np.max(np.abs(matrix - matrix.T), initial=0.0) > SYMMETRY_TOLERANCE
            or np.any(np.abs(np.diag(matrix) - 1.0) > SYMMETRY_TOLERANCE)):
        raise InputError("a correlation matrix is symmetric with ones on the diagonal and "
                         "entries between -1 and 1", path=path, field="correlation.matrix")
    return {(names[i], names[j]): float(matrix[i, j])
            for i in range(n) for j in range(i + 1, n) if matrix[i, j] != 0.0}


def correlation_of(correlations: dict, a: str, b: str) -> float:
    if a == b:
        return 1.0
    return correlations.get((a, b), correlations.get((b, a), 0.0))


def covariance_of(model, names) -> np.ndarray:
    """Covariance of the parameters ``names`` (internal units) from their
    uncertainties (None: 0) and the model's correlations."""
    sig = np.array([model.parameter(n).uncertainty or 0.0 for n in names], dtype=float)
    corr = np.array([[correlation_of(model.correlations, a, b) for b in names] for a in names])
    return corr * np.outer(sig, sig)


def with_fitted_covariance(cov: np.ndarray, names, result) -> np.ndarray:
    """``cov`` (of ``names``) with the block of the parameters a FitResult
    ``result`` fitted replaced by the fit's covariance (correlations kept)."""
    if result is not None:
        idx = [(i, result.free_names.index(n)) for i, n in enumerate(names)
               if n in result.free_names]
        for i, a in idx:
            for j, b in idx:
                cov[i, j] = result.covariance[a, b]
    return cov


def set_covariance(model, names, covariance) -> None:
    """Uncertainties (square roots of the diagonal; None where it is zero) and
    correlations among ``names`` from ``covariance``; correlations of these
    parameters with others are dropped."""
    cov = np.asarray(covariance, dtype=float)
    sig = np.sqrt(np.maximum(np.diag(cov), 0.0))
    chosen = set(names)
    model.correlations = {k: v for k, v in model.correlations.items()
                          if k[0] not in chosen and k[1] not in chosen}
    for name, s in zip(names, sig):
        model.parameter(name).uncertainty = float(s) if s > 0 else None
    for i, a in enumerate(names):
        for j in range(i + 1, len(names)):
            if sig[i] > 0 and sig[j] > 0:
                r = float(np.clip(cov[i, j] / (sig[i] * sig[j]), -1.0, 1.0))
                if round(r, WRITTEN_DIGITS) != 0.0:
                    model.correlations[(a, names[j])] = r


def correlation_section(model) -> dict | None:
    """The ``[correlation]`` section for the model file, or None without any."""
    present = {p.name for p in model.parameters() if p.uncertainty}
    names: list[str] = []
    for a, b in model.correlations:
        if a not in present or b not in present:
            continue        # a renamed or no longer measured parameter
        for n in (a, b):
            if n not in names:
                names.append(n)
    if not names:
        return None
    order = {n: k for k, n in enumerate(model.parameter_names())}
    names.sort(key=lambda n: order.get(n, len(order)))
    matrix = [[round(correlation_of(model.correlations, a, b), WRITTEN_DIGITS) for b in names]
              for a in names]
    return {"parameters": names, "matrix": matrix}


__all__ = ["read_correlations", "covariance_of", "set_covariance", "correlation_section",
           "correlation_of", "with_fitted_covariance"]
