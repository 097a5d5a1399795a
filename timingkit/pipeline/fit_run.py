"""From files to results: load inputs, barycentre, fit, write the outputs.

These are the functions the command line and the batch runner call; they
are also the simplest Python entry points::

    from timingkit.pipeline.fit_run import fit_files
    report = fit_files("psr.toas", "psr.toml", "out/")
"""

from __future__ import annotations

import os

from timingkit.fit.least_squares import FitResult, compute_residuals, fit, goodness_warnings
from timingkit.geometry.observations import Observations
from timingkit.outputs.output_set import check_before_writing, output_set
from timingkit.outputs.report import build_report, residual_table, settings_entry, write_json
from timingkit.pipeline.inputs import Inputs, check_color_by, load_inputs
from timingkit.pipeline.left_out import full_tables, selection_entry


NOT_CONVERGED_MARK = "NOT CONVERGED"


def _fitted_comment(report: dict) -> str:
    mark = "" if report["converged"] else (
        f"{NOT_CONVERGED_MARK}: the fit stopped after {report['iterations']} iteration"
        f"{'' if report['iterations'] == 1 else 's'} with "
        "parameters still moving; these values are not a solution\n")
    return mark + (f"fitted by timingkit {report['timingkit_version']}: {report['toas']} TOAs, "
            f"reduced chi2 {report['reduced_chi2']:.3f}, weighted rms "
            f"{report['weighted_rms_us']:.4g} us\n"
            f"ephemeris: {report['settings']['ephemeris']}; clock corrections: "
            f"{report['settings']['clock_corrections']}")


def fit_inputs(inputs: Inputs, outdir: str | None = None, make_plots: bool = True,
               color_by: str = "site", progress: bool = False, suggest: bool = False,
               suggest_level: float = 0.01, glitch_epochs_mjd=(),
               max_iterations: int = 20) -> tuple[FitResult, dict]:
    """Fit, build the report and (with ``outdir``) write the outputs. With
    ``suggest``: also try the candidate additions (timingkit.fit.model_selection)
    and list them under ``suggestions`` in the report."""
    bar = _stage_bar(progress, "fitting")
    result = fit(inputs.model, inputs.obs, reference=inputs.reference,
                 max_iterations=max_iterations,
                 progress=(lambda k: bar.set_postfix_str(f"iteration {k}")) if bar else None)
    report = build_report(result, inputs.obs)
    report.update(selection_entry(inputs.selection))
    if bar:
        bar.update(1)
        bar.set_description("writing outputs")
    if suggest:
        from timingkit.fit.model_selection import suggest as suggest_additions, suggestions_entry
        comparisons = suggest_additions(result, inputs.obs, inputs.reference, level=suggest_level,
                                        glitch_epochs_mjd=glitch_epochs_mjd)
        report["suggestions"] = suggestions_entry(comparisons, suggest_level)
    if outdir is not None:
        with output_set(outdir, inputs=inputs.paths) as work:
            write_fit_outputs(result, inputs.obs, report, str(work), make_plots, color_by,
                              selection=inputs.selection, reference=inputs.reference)
    if bar:
        bar.update(1)
        bar.close()
    return result, report


def _stage_bar(progress: bool, description: str):
    """A two-stage progress bar (fit, write) for long runs on a terminal; None
    when progress is off."""
    if not progress:
        return None
    from tqdm import tqdm
    return tqdm(total=2, desc=description, unit="stage", leave=False,
                bar_format="{desc}: {bar} {n_fmt}/{total_fmt} [{elapsed}] {postfix}")


def write_fit_outputs(result: FitResult, obs: Observations, report: dict, outdir: str,
                      make_plots: bool = True, color_by: str = "site", *, selection=None,
                      kept_obs: Observations | None = None, reference=None,
                      starting=None, prefit_label: str = "pre-fit") -> None:
    """The outputs of a fit, written into ``outdir`` (callers pass the work folder of an
    output set, so the files appear together or not at all). With ``selection`` (pipeline.left_out) the residual
    tables and figures also show the left-out TOAs, marked; ``kept_obs``: the
    TOAs the selection kept, when the fit used only part of them (``obs``).
    ``starting``: (model, ResidualSet on ``obs``) shown as the pre-fit residuals
    (prefit_residuals.csv and the upper panel, titled ``prefit_label``) instead of
    those of the model the last fit started from (the glitch search: the user's model)."""
    os.makedirs(outdir, exist_ok=True)
    pre_model, pre_res = starting or (result.prefit_model, result.prefit)
    post, pre = full_tables([(residual_table(obs, result.postfit), result.model, result.postfit),
                             (residual_table(obs, pre_res), pre_model, pre_res)],
                            obs, selection, kept_obs or obs, reference)
    result.model.write(os.path.join(outdir, "fitted.toml"), comment=_fitted_comment(report))
    post.converged = bool(report["converged"])     # a fit_status column when it is not
    post.write_csv(os.path.join(outdir, "residuals.csv"))
    pre.write_csv(os.path.join(outdir, "prefit_residuals.csv"))
    if make_plots:
        from timingkit.outputs.plotting import plot_residuals
        red = result.noise is not None and result.noise.red_realisation_s is not None
        path = os.path.join(outdir, "residuals.png")
        fig = plot_residuals(post, prefit=pre, color_by=color_by, prefit_label=prefit_label,
                             title=f"{report['source']}: {report['toas']} TOAs"
                             + ("" if report["converged"] else f" ({NOT_CONVERGED_MARK})"),
                             frequency_hz=result.model.spin.frequency.value,
                             glitch_epochs_mjd=glitch_epochs(result.model),
                             path=None if red else path)
        if red:   # ML red-noise curve on the post-fit panel, and power_spectrum.png
            from timingkit.outputs.noise_outputs import write_noise_figures
            write_noise_figures(result, obs, outdir, residual_figure=fig, residual_path=path)
        del fig
        _write_phase_plots(result, post, report, outdir, color_by)
    write_json(os.path.join(outdir, "report.json"), report)


def glitch_epochs(model) -> list[float]:
    """MJDs of the model's glitches (for marking them on residual plots)."""
    from timingkit.model.glitch import model_glitches
    return [g.epoch_mjd for g in model_glitches(model)]


def _write_phase_plots(result: FitResult, post, report: dict, outdir: str, color_by: str):
    """residuals_day_of_year.png and residuals_frequency.png always;
    residuals_orbital_phase.png with a binary."""
    from timingkit.outputs.plotting import (plot_residuals_vs_day_of_year,
                                            plot_residuals_vs_frequency,
                                            plot_residuals_vs_orbital_phase)
    common = dict(color_by=color_by, frequency_hz=result.model.spin.frequency.value)
    plot_residuals_vs_day_of_year(post, os.path.join(outdir, "residuals_day_of_year.png"),
                                  title=f"{report['source']}: post-fit residuals by day of year",
                                  **common)
    plot_residuals_vs_frequency(post, os.path.join(outdir, "residuals_frequency.png"),
                                title=f"{report['source']}: post-fit residuals by observing "
                                      "frequency", **common)
    phase = post.orbital_phase
    if phase is not None:
        plot_residuals_vs_orbital_phase(
            post, phase, os.path.join(outdir, "residuals_orbital_phase.png"),
            title=f"{report['source']}: post-fit residuals by orbital phase", **common)


def check_before_work(inputs: Inputs, outdir, make_plots: bool, color_by: str) -> None:
    """Options and the output folder (and that no other run is writing it) are checked
    before the fit, not after it."""
    if make_plots:
        check_color_by(inputs.toas, color_by)
    if outdir is not None:
        check_before_writing(outdir, inputs.paths)


def fit_files(toas_path, model_path, outdir, *, free=(), fix=(), sites_paths=(), ephemeris=None,
              clock_paths=(), make_plots=True, progress=False, color_by="site",
              suggest=False, suggest_level=0.01, glitch_epochs_mjd=(),
              max_iterations=20, exclude_paths=(), select=(), leave_out=()) -> dict:
    """Fit one source from its files and write fitted.toml, residuals.csv,
    residuals.png and report.json into ``outdir`` (with red noise also
    power_spectrum.png). ``exclude_paths``, ``select``, ``leave_out``: TOAs
    to leave out (:func:`timingkit.pipeline.load_inputs`). Returns the report
    dict; ``report["converged"]`` is False (and every output says so) when the
    fit did not converge."""
    if progress:
        import sys
        print("reading and barycentring the TOAs ...", file=sys.stderr, flush=True)
    inputs = load_inputs(toas_path, model_path, free=free, fix=fix, sites_paths=sites_paths,
                         ephemeris=ephemeris, clock_paths=clock_paths,
                         exclude_paths=exclude_paths, select=select, leave_out=leave_out)
    check_before_work(inputs, outdir, make_plots, color_by)
    _, report = fit_inputs(inputs, outdir, make_plots=make_plots, color_by=color_by,
                           progress=progress, suggest=suggest, suggest_level=suggest_level,
                           glitch_epochs_mjd=glitch_epochs_mjd, max_iterations=max_iterations)
    return report


def residual_files(toas_path, model_path, outdir, *, sites_paths=(), ephemeris=None,
                   clock_paths=(), make_plots=True, color_by="site", exclude_paths=(),
                   select=(), leave_out=()) -> dict:
    """ResidualSet of the model as given (no fit); writes residuals.csv/.png and
    a report.json with the statistics (of the TOAs not left out)."""
    inputs = load_inputs(toas_path, model_path, sites_paths=sites_paths, ephemeris=ephemeris,
                         clock_paths=clock_paths, exclude_paths=exclude_paths, select=select,
                         leave_out=leave_out)
    check_before_work(inputs, outdir, make_plots, color_by)
    res = compute_residuals(inputs.model, inputs.obs, reference=inputs.reference)
    [table] = full_tables([(residual_table(inputs.obs, res), inputs.model, res)], inputs.obs,
                          inputs.selection, inputs.obs, inputs.reference)
    with output_set(outdir, inputs=inputs.paths) as work:
        return _write_residual_outputs(inputs, res, table, str(work), make_plots, color_by)


def _write_residual_outputs(inputs: Inputs, res, table, outdir: str, make_plots: bool,
                            color_by: str) -> dict:
    table.write_csv(os.path.join(outdir, "residuals.csv"))
    stats = {"source": inputs.model.name, "toas": len(inputs.obs), "fitted": False,
             "chi2": res.chi_square(), "dof": len(inputs.obs) - 1,
             "reduced_chi2": res.chi_square() / max(len(inputs.obs) - 1, 1),
             "rms_us": res.rms_us(), "weighted_rms_us": res.weighted_rms_us(),
             "settings": settings_entry(inputs.obs, inputs.model),
             "warnings": inputs.obs.warnings + goodness_warnings(
                 res.chi_square(), len(inputs.obs) - 1,
                 red_noise=bool(inputs.model.noise_sections()), fitted=False),
             **selection_entry(inputs.selection)}
    if make_plots:
        from timingkit.outputs.plotting import plot_residuals
        plot_residuals(table, color_by=color_by, title=f"{inputs.model.name}: model residuals",
                       frequency_hz=inputs.model.spin.frequency.value,
                       glitch_epochs_mjd=glitch_epochs(inputs.model),
                       path=os.path.join(outdir, "residuals.png"))
    write_json(os.path.join(outdir, "report.json"), stats)
    return stats
