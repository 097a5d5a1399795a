"""Generalised least squares for timing residuals with red noise on a Fourier basis.

The data model is r = M delta + F a + n: ``M`` the design matrix (timing
parameters, linearised), ``F`` the (N, 2m) Fourier basis of the red noise
with independent Gaussian coefficients a ~ N(0, Phi), ``n`` white noise with
diagonal variances N = diag(sigma'^2). The timing parameters get a flat prior
and are marginalised analytically, as are the Fourier coefficients: this is
the Fourier-basis method of van Haasteren & Vallisneri 2014 (MNRAS 446, 1170;
the "reduced-rank" Woodbury form of the likelihood). The full covariance
C = N + F Phi F^T is never formed: every step works on the N x (p + 2m)
stacked matrix, so time and memory grow linearly with the number of TOAs.

Numerics. The Fourier columns are scaled by sqrt(phi) (so their prior is the
identity), the timing columns by their weighted norms, and the penalised
least-squares problem

    minimise |N^-1/2 (r - M delta - F a)|^2 + a^T Phi^-1 a

is solved by a Householder QR of the stacked matrix [prior rows; weighted
data rows] followed by an SVD of the small triangular factor -- never a
normal-equation inverse. Its minimum is the generalised chi-square
r_post^T C^-1 r_post of the post-fit timing residual, and the log marginal
likelihood (timing parameters integrated with a flat prior) is

    ln L = -1/2 [chi2_min + ln|N| + ln|Phi| + ln|Sigma|] - (N - p)/2 ln(2 pi),

Sigma = T^T N^-1 T + diag(0, Phi^-1), T = [M F] (the determinant identity
behind it: ln|C| + ln|M^T C^-1 M| = ln|N| + ln|Phi| + ln|Sigma|).

:func:`dense_gls` is the covariance-whitening approach of Coles et al. 2011
(MNRAS 418, 561): Cholesky factor of the dense C, whiten, ordinary least
squares. It is O(N^3) and kept only as the independent cross-check for small
problems (tests).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.linalg

from timingkit.formats.errors import FitError

DEGENERACY_RCOND = 1e-10   # smallest/largest singular value of the scaled factor
LOG_2PI = math.log(2.0 * math.pi)


@dataclass
class GlsSolution:
    """Result of one linear GLS solve (units of the design matrix columns)."""
    delta: np.ndarray              # (p,) parameter corrections: r ~ M delta
    covariance: np.ndarray         # (p, p), marginalised over the red-noise coefficients
    coefficients_s: np.ndarray     # (2m,) maximum-a-posteriori Fourier coefficients
    red_realisation_s: np.ndarray  # (N,) F @ coefficients: the ML red-noise realisation
    postfit_s: np.ndarray          # (N,) r - M delta (timing residual, red noise included)
    chi2: float                    # generalised chi-square r_post^T C^-1 r_post
    log_likelihood: float          # log marginal likelihood (module docstring)


def _weighted_columns(design_s, basis, err_s, names):
    """Weighted timing columns scaled to unit norm (norms returned) and the
    weighted basis; names parameters that do not act on the data."""
    a_m = design_s / err_s[:, None]
    norms = np.sqrt(np.sum(a_m ** 2, axis=0))
    dead = [names[j] for j in range(len(norms)) if not np.isfinite(norms[j]) or norms[j] == 0]
    if dead:
        raise FitError(f"unconstrained parameter(s): {', '.join(dead)} have no effect on these "
                       "TOAs; fix them or add data that constrain them")
    a_f = basis / err_s[:, None] if basis is not None else np.zeros((len(err_s), 0))
    return a_m / norms, norms, a_f


def _qr_r(matrix: np.ndarray) -> np.ndarray:
    """Upper-triangular factor of a Householder QR (square, padded if short)."""
    r = scipy.linalg.qr(matrix, mode="r", overwrite_a=True, check_finite=False)[0]
    k = matrix.shape[1]
    if r.shape[0] < k:
        r = np.vstack([r, np.zeros((k - r.shape[0], k))])
    return r[:k, :k]


def _stacked_factor(a_f_scaled, a_m, b):
    """R of [[I, 0, 0], [A_f', A_m', b]] (prior rows first: they may dominate)."""
    n_basis = a_f_scaled.shape[1]
    p = a_m.shape[1]
    prior = np.hstack([np.eye(n_basis), np.zeros((n_basis, p + 1))])
    data = np.hstack([a_f_scaled, a_m, b[:, None]])
    return _qr_r(np.vstack([prior, data]))


def _log_likelihood_from_factor(r, n_toas, p, log_det_white, log_norms):
    k = r.shape[0] - 1
    chi2 = float(r[k, k] ** 2)
    diag = np.abs(np.diag(r)[:k])
    if np.any(diag == 0):
        return chi2, -math.inf
    log_det_sigma = 2.0 * float(np.sum(np.log(diag))) + 2.0 * log_norms
    loglike = -0.5 * (chi2 + log_det_white + log_det_sigma) - 0.5 * (n_toas - p) * LOG_2PI
    return chi2, loglike


class FourierFactor:
    """The part of the GLS problem fixed by the noise model: a Householder QR
    (LAPACK geqrf) of the stacked prior and weighted-basis block
    [I; N^-1/2 F Phi^1/2], computed once per set of noise values and reused
    for every linearisation of the timing model. Each solve then applies the
    stored reflectors to the p + 1 timing and residual columns (LAPACK ormqr,
    O(N 2m p)) and factors only what is left (QR of N x (p + 1)), instead of
    a QR of the whole N x (2m + p + 1) matrix: the standard update of a QR
    factorisation by added columns."""

    def __init__(self, err_s: np.ndarray, basis: np.ndarray, prior_var_s2: np.ndarray):
        self.err_s = err_s
        self.basis = basis
        self.sqrt_phi = np.sqrt(prior_var_s2)
        self.n_basis = n_basis = basis.shape[1]
        stacked = np.empty((n_basis + len(err_s), n_basis), order="F")
        stacked[:n_basis] = np.eye(n_basis)
        stacked[n_basis:] = basis * (self.sqrt_phi[None, :] / err_s[:, None])
        geqrf, self._ormqr = scipy.linalg.lapack.get_lapack_funcs(("geqrf", "ormqr"),
                                                                   (stacked,))
        lwork = int(geqrf(stacked, lwork=-1)[2][0])
        self.qr, self.tau, _, info = geqrf(stacked, lwork=max(lwork, 1), overwrite_a=True)
        if info != 0:
            raise FitError(f"QR factorisation of the red-noise basis failed (LAPACK info {info})")
        self.r = np.triu(self.qr[:n_basis, :n_basis])
        self.log_det_r = 2.0 * float(np.sum(np.log(np.abs(np.diag(self.r)))))

    def project(self, w_data: np.ndarray):
        """(C, E): Q^T applied to ``w`` (zero prior rows, data rows ``w_data``),
        split into the rows of the factor's columns and the rest."""
        n_basis = self.n_basis
        w = np.zeros((n_basis + w_data.shape[0], w_data.shape[1]), order="F")
        w[n_basis:] = w_data
        lwork = int(self._ormqr("L", "T", self.qr, self.tau, w, lwork=-1)[1][0])
        cq, _, info = self._ormqr("L", "T", self.qr, self.tau, w, lwork=max(lwork, 1),
                                  overwrite_c=True)
        if info != 0:
            raise FitError(f"applying the red-noise QR failed (LAPACK info {info})")
        return cq[:n_basis], cq[n_basis:]


def gls_solve(design_s: np.ndarray, resid_s: np.ndarray, err_s: np.ndarray,
              basis: np.ndarray | None, prior_var_s2: np.ndarray | None,
              names: list[str], factor: FourierFactor | None = None) -> GlsSolution:
    """GLS fit of ``resid_s`` ~ ``design_s`` @ delta with white errors ``err_s``
    and red noise ``basis`` @ a, a ~ N(0, diag(prior_var_s2)); ``basis=None``
    gives plain weighted least squares. ``factor``: a :class:`FourierFactor`
    of the same errors and prior, to reuse. Degenerate parameters (given the
    noise model) are named (FitError), never a LinAlgError."""
    n, p = design_s.shape
    a_m, norms, _ = _weighted_columns(design_s, None, err_s, names)
    w = np.column_stack([a_m, resid_s / err_s])
    if basis is None:
        n_basis, c, e = 0, np.zeros((0, p + 1)), w
    else:
        factor = factor if factor is not None else FourierFactor(err_s, basis, prior_var_s2)
        n_basis = basis.shape[1]
        c, e = factor.project(w)
    r_e = _qr_r(e)                       # R of the timing block after the red noise
    r_mm, qtb_m = r_e[:p, :p], r_e[:p, p]
    chi2 = float(r_e[p, p] ** 2)
    u, s, vt = scipy.linalg.svd(r_mm, lapack_driver="gesdd")
    if not s[-1] > DEGENERACY_RCOND * s[0]:
        v = vt[-1]
        involved = [names[j] for j in np.argsort(-np.abs(v)) if abs(v[j]) > 0.2]
        raise FitError(f"degenerate fit: {', '.join(involved) or 'the timing parameters'} cannot "
                       "be separated by these TOAs (fix one of them, or add TOAs over a longer "
                       "span / more frequencies)")
    x_m = vt.T @ ((u.T @ qtb_m) / s)
    delta = x_m / norms
    cov = ((vt.T / s ** 2) @ vt) / np.outer(norms, norms)
    log_det_sigma = 2.0 * float(np.sum(np.log(s)) + np.sum(np.log(norms)))
    if n_basis:
        x_f = scipy.linalg.solve_triangular(factor.r, c[:, p] - c[:, :p] @ x_m)
        coef = x_f * factor.sqrt_phi
        red = basis @ coef
        log_det_sigma += factor.log_det_r
    else:
        coef, red = np.zeros(0), np.zeros(n)
    log_det_white = 2.0 * float(np.sum(np.log(err_s)))
    loglike = -0.5 * (chi2 + log_det_white + log_det_sigma) - 0.5 * (n - p) * LOG_2PI
    return GlsSolution(delta=delta, covariance=cov, coefficients_s=coef,
                       red_realisation_s=red, postfit_s=resid_s - design_s @ delta,
                       chi2=chi2, log_likelihood=loglike)


def marginal_log_likelihood(design_s: np.ndarray, resid_s: np.ndarray, err_s: np.ndarray,
                            basis: np.ndarray | None = None,
                            prior_var_s2: np.ndarray | None = None) -> float:
    """ln L of the noise model (timing parameters and red-noise coefficients
    marginalised); O(N (p + 2m)^2)."""
    n, p = design_s.shape
    names = [f"column {j}" for j in range(p)]
    a_m, norms, a_f = _weighted_columns(design_s, basis, err_s, names)
    if basis is not None:
        a_f = a_f * np.sqrt(prior_var_s2)
    r = _stacked_factor(a_f, a_m, resid_s / err_s)
    return _log_likelihood_from_factor(r, n, p, 2.0 * float(np.sum(np.log(err_s))),
                                       float(np.sum(np.log(norms))))[1]


class RedLikelihood:
    """ln L as a function of the red-noise prior only, for fixed white errors:
    the O(N) work (one QR of the weighted data) is done once, each call then
    costs O((p + 2m)^3), independent of the number of TOAs."""

    def __init__(self, design_s, resid_s, err_s, basis):
        self.n, self.p = design_s.shape
        names = [f"column {j}" for j in range(self.p)]
        a_m, norms, a_f = _weighted_columns(design_s, basis, err_s, names)
        self.n_basis = a_f.shape[1]
        self.log_norms = float(np.sum(np.log(norms)))
        self.log_det_white = 2.0 * float(np.sum(np.log(err_s)))
        self.data_r = _qr_r(np.hstack([a_f, a_m, (resid_s / err_s)[:, None]]))

    def __call__(self, prior_var_s2: np.ndarray) -> float:
        scale = np.concatenate([np.sqrt(prior_var_s2), np.ones(self.p + 1)])
        n_basis, p = self.n_basis, self.p
        prior = np.hstack([np.eye(n_basis), np.zeros((n_basis, p + 1))])
        r = _qr_r(np.vstack([prior, self.data_r * scale[None, :]]))
        return _log_likelihood_from_factor(r, self.n, p, self.log_det_white, self.log_norms)[1]


# ------------------------------------------------------------ dense cross-check

def red_covariance_dense(basis: np.ndarray, prior_var_s2: np.ndarray) -> np.ndarray:
    """F Phi F^T (N x N): for small cross-checks only."""
    return (basis * prior_var_s2[None, :]) @ basis.T


def dense_gls(design_s: np.ndarray, resid_s: np.ndarray, covariance_s2: np.ndarray):
    """Covariance whitening (Coles et al. 2011): L = chol(C), whiten M and r by
    L^-1, ordinary least squares. Returns (delta, covariance, chi2, ln L) with
    ln L marginalised over the parameters as in :func:`gls_solve`. O(N^3)."""
    n, p = design_s.shape
    chol = scipy.linalg.cholesky(covariance_s2, lower=True)
    mw = scipy.linalg.solve_triangular(chol, design_s, lower=True)
    rw = scipy.linalg.solve_triangular(chol, resid_s, lower=True)
    norms = np.sqrt(np.sum(mw ** 2, axis=0))
    u, s, vt = scipy.linalg.svd(mw / norms, full_matrices=False)
    delta = (vt.T @ ((u.T @ rw) / s)) / norms
    cov = ((vt.T / s ** 2) @ vt) / np.outer(norms, norms)
    chi2 = float(np.sum((rw - mw @ delta) ** 2))
    log_det_c = 2.0 * float(np.sum(np.log(np.diag(chol))))
    log_det_mcm = 2.0 * float(np.sum(np.log(s)) + np.sum(np.log(norms)))
    loglike = -0.5 * (chi2 + log_det_c + log_det_mcm) - 0.5 * (n - p) * LOG_2PI
    return delta, cov, chi2, loglike
