"""The glitch search: find glitches in the residuals and fit them into the model.

- ``search``: :func:`search_glitches`, the driver (passes of scan and fit).
- ``results``: settings, candidates, frequency track and result records.
- ``tracking``: pulse numbering through glitches (seed solutions, joining pieces).
- ``scan``: gap windows, the change statistic and its simulated null distribution.
- ``candidates``: one pass's phase data, scan and candidate choice.
- ``refine``: decays, placement, epochs and uncertainties of fitted glitches.
- ``reinclude``: TOAs left out while numbering, put back once the final model fits.
- ``epochs``: times of the search (seconds since the spin epoch <-> MJDs).
"""

from timingkit import lazy_exports

EXPORTS = {
    "search_glitches": "search", "GlitchSearchSettings": "results", "GlitchSearchResult":
    "results", "GlitchCandidate": "results",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
