"""What a fit writes: report.json, residual tables, figures, the overview page.

- ``report``: report.json and the terminal summary.
- ``numbers``: values rounded to their uncertainty, units as physicists write them.
- ``residual_table``: residuals.csv (read and write) and atomic output folders.
- ``plotting``: matplotlib figures (Agg, no pyplot state).
- ``noise_outputs``: the power spectrum and the red-noise part of the report.
- ``overview_page``: the self-contained HTML overview of a batch.
- ``profile_figure``: profile.png of folded photon events (two cycles, unpulsed level).
- ``explorer_page``: explorer.html, the interactive residual explorer of one fit.
"""

from timingkit import lazy_exports

EXPORTS = {
    "build_report": "report", "write_json": "report", "ResidualTable": "residual_table",
    "plot_residuals": "plotting", "format_value": "numbers", "format_quantity": "numbers",
    "plot_event_profile": "profile_figure",
    "write_explorer": "explorer_page",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
