"""Fitting a timing model to TOAs.

- ``fitter``: design matrix, weighted least squares by SVD, iterations, pulse numbering,
  :func:`fit` -> :class:`FitResult`; :class:`ResidualSet`.
- ``gls``: generalised least squares with red noise on a Fourier basis (Woodbury).
- ``noise_fit``: maximum-likelihood noise parameters.
- ``model_selection``: F-test, AIC/BIC and suggested additions to the model.
"""

from timingkit import lazy_exports

EXPORTS = {
    "fit": "fitter", "FitResult": "fitter", "ResidualSet": "fitter", "compute_residuals":
    "fitter", "suggest": "model_selection",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
