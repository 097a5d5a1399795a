"""What a fit writes: report.json, residual tables, figures, the overview page.

- ``report``: report.json and the terminal summary.
- ``numbers``: values rounded to their uncertainty, units as physicists write them.
- ``residual_table``: residuals.csv (read and write).
- ``figure_basics``: Agg figures, atomic saving, units by scale, the outside colour key.
- ``plotting``: residual figures (against MJD, day of year, orbital phase, frequency).
- ``diagnostic_figures``: the P–Pdot diagram, the glitch-search figure, the power spectrum.
- ``noise_outputs``: the power spectrum and the red-noise part of the report.
- ``overview_page``: the HTML overview of a batch (embedded figures, or linked thumbnails).
- ``profile_figure``: profile.png of folded photon events (two cycles, unpulsed level).
- ``explorer_page``: explorer.html, the interactive residual explorer of one fit.
- ``output_set``: a command's output folder written as one marked set (:func:`output_set`).
- ``folder_lock``: one run at a time per output folder or file (:func:`lock_output`), a lock
  file beside it; flock where there is fcntl, an O_EXCL file elsewhere.
- ``stop_signals``: SIGTERM/SIGHUP raised as KeyboardInterrupt, so clean-up runs.
"""

from timingkit import lazy_exports

EXPORTS = {
    "build_report": "report", "write_json": "report", "ResidualTable": "residual_table",
    "plot_residuals": "plotting", "format_value": "numbers", "format_quantity": "numbers",
    "plot_event_profile": "profile_figure",
    "write_explorer": "explorer_page",
    "plot_residuals_vs_frequency": "plotting",
    "plot_ppdot": "diagnostic_figures", "plot_glitch_search": "diagnostic_figures",
}
__getattr__, __dir__ = lazy_exports(__name__, EXPORTS)
__all__ = list(EXPORTS)
