"""Fitting a timing model to TOAs.

- ``least_squares``: design matrix, weighted least squares by SVD, iterations, pulse numbering,
  :func:`fit` -> :class:`FitResult`; :class:`ResidualSet`.
- ``gls``: generalised least squares with red noise on a Fourier basis (Woodbury).
- ``noise_fit``: maximum-likelihood noise parameters.
- ``model_selection``: F-test, AIC/BIC and suggested additions to the model.
"""

from timingkit import lazy_exports

EXPORTS = {
    "fit": "least_squares", "FitResult": "least_squares", "ResidualSet": "least_squares",
    "compute_residuals": "least_squares", "suggest": "model_selection",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
