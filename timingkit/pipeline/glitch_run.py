"""Search one source for glitches, fit them, write the results.

Outputs in OUTDIR: ``glitches.json`` (candidates with their brackets,
steps, uncertainties and false-alarm probabilities), ``fitted.toml`` (the
starting model with the glitches added and everything fitted),
``glitch_search.png`` (residuals before the glitch terms, the local
frequency track with the candidate epochs, the frequency-derivative track),
and the files of a fit (residuals.csv, prefit_residuals.csv,
residuals.png, report.json with ``glitch_candidates``); the pre-fit residuals
(prefit_residuals.csv, the upper panel of residuals.png, ``prefit_rms_us``) are
those of the model as given, before the search added its glitch terms. :func:`glitch_files`
takes the same arguments as :func:`timingkit.pipeline.fit_files`, so the
batch runner can use it as its fit function.
"""

from __future__ import annotations

import os

from timingkit.formats.errors import FitError
from timingkit.glitch.results import GlitchSearchResult, GlitchSearchSettings
from timingkit.glitch.search import search_glitches
from timingkit.pipeline.inputs import load_inputs
from timingkit.pipeline.fit_run import check_before_work, write_fit_outputs
from timingkit.pipeline.left_out import selection_entry
from timingkit.outputs.output_set import output_set
from timingkit.outputs.report import build_report, write_json


GLITCH_FILE = "glitches.json"


FIGURE_FILE = "glitch_search.png"


STARTING_LABEL = "pre-fit: model as given, before the search"


def starting_residuals(model, obs, reference=None):
    """ResidualSet of the user's model, unfitted, on ``obs`` (the TOAs the final fit
    used), numbered as a fit of that model would number them (the table's pulse
    column when there is one, else the model's nearest pulses): the pre-fit residuals
    of a glitch run, not those of the last fit, whose model already has the glitches."""
    from timingkit.fit.least_squares import compute_residuals, pulse_numbers_from_table
    ev = model.evaluate(obs, reference)
    return compute_residuals(model, obs, pulse_numbers_from_table(obs, ev), reference,
                             evaluation=ev)


def glitch_report(result: GlitchSearchResult) -> dict:
    """report.json of a glitch run: the fit report plus the search summary."""
    report = build_report(result.fit, result.obs)
    report["glitch_candidates"] = len(result.candidates)
    report["glitch_search"] = {
        "candidates_file": GLITCH_FILE,
        "epochs_mjd": [float(c.epoch_mjd) for c in result.candidates],
        "fractional_sizes": [c.fractional_size for c in result.candidates],
        "false_alarm_probabilities": [c.false_alarm_probability for c in result.candidates],
        "false_alarm_probability_upper_limits": [c.false_alarm_probability_upper_limit
                                                 for c in result.candidates],
        "detection_limit": result.detection_limit,
        "settings": result.settings.as_dict(),
        "toas_left_out": result.dropped_toas,
        "assumptions": result.assumptions,
        "null_noise": result.null_noise,
    }
    report["warnings"] = list(report.get("warnings", [])) + list(result.warnings)
    return report


def write_glitch_figure(result: GlitchSearchResult, path: str, title: str | None = None):
    from timingkit.outputs.plotting import plot_glitch_search
    track = result.track
    return plot_glitch_search(
        result.residual_mjd, result.residual_us, result.residual_err_us, track.mjd,
        track.frequency_offset_hz, track.frequency_err_hz, track.frequency_derivative,
        track.frequency_derivative_err, [float(c.epoch_mjd) for c in result.candidates],
        path=path, frequency_reference_hz=0.0, offset_name="frequency − fitted spin-down",
        title=title or "glitch search: frequency relative to the fitted spin-down (no glitch terms)")


def glitch_files(toas_path, model_path, outdir, *, free=(), fix=(), sites_paths=(),
                 ephemeris=None, clock_paths=(), make_plots=True, progress=False,
                 color_by="site", settings: GlitchSearchSettings | None = None,
                 exclude_paths=(), select=(), leave_out=()) -> dict:
    """Search one source for glitches and write the outputs (module docstring);
    ``exclude_paths``, ``select``, ``leave_out`` as for ``fit_files``.
    Returns the report dict (also written to ``outdir/report.json``)."""
    inputs = load_inputs(toas_path, model_path, free=free, fix=fix, sites_paths=sites_paths,
                         ephemeris=ephemeris, clock_paths=clock_paths,
                         exclude_paths=exclude_paths, select=select, leave_out=leave_out)
    check_before_work(inputs, outdir, make_plots, color_by)
    result = search_glitches(inputs.model, inputs.obs, settings, reference=inputs.reference)
    if result.fit is None:
        raise FitError("the glitch search found nothing and the starting model could not be "
                       "fitted: " + "; ".join(result.warnings))
    report = glitch_report(result)
    report.update(selection_entry(inputs.selection))
    starting = (inputs.model, starting_residuals(inputs.model, result.obs, inputs.reference))
    report["prefit_rms_us"] = starting[1].rms_us()
    with output_set(outdir, inputs=inputs.paths) as work:
        write_json(os.path.join(work, GLITCH_FILE), result.to_json())
        if make_plots:
            write_glitch_figure(result, os.path.join(work, FIGURE_FILE),
                                title=f"{inputs.model.name}: glitch search "
                                      "(frequency relative to the fitted spin-down)")
        write_fit_outputs(result.fit, result.obs, report, str(work), make_plots, color_by,
                          selection=inputs.selection, kept_obs=inputs.obs,
                          reference=inputs.reference, starting=starting,
                          prefit_label=STARTING_LABEL)
    return report
