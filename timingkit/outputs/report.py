"""The fit report: report.json (stable keys of DESIGN.md §5), the residual
table, and the short human summary printed on the terminal."""

from __future__ import annotations

import json
import math

import numpy as np

from timingkit.physics import spin as derived_mod
from timingkit.physics.binary_report import extra_report_sections
from timingkit.fit.least_squares import LOUD_WARNINGS, FitResult, ResidualSet
from timingkit.model.astrometry import angle_entry, format_dec, format_ra
from timingkit.model.correlations import covariance_of, with_fitted_covariance
from timingkit.model.timing_model import TimingModel
from timingkit.formats.model_file import atomic_write_text
from timingkit.outputs.noise_outputs import noise_report_entry
from timingkit.outputs.numbers import angle_text, format_quantity, format_value
from timingkit.geometry.delays import (DISPERSION_CONSTANT_SOURCES, DISPERSION_CONSTANTS_S_MHZ2,
                                      PLANET_MASSES_SOURCE)
from timingkit.geometry.observations import Observations
from timingkit.outputs.residual_table import ResidualTable

__version__ = "0.1.0"


def parameter_entry(model: TimingModel, name: str, prefit: TimingModel | None = None) -> dict:
    p = model.parameter(name)
    angle = angle_entry(p, None if prefit is None else prefit.parameter(name))
    if angle is not None:        # sky angles (either frame): sexagesimal, degrees, mas
        return angle
    entry: dict = {}
    if name == "position.ra":
        entry = {"value": format_ra(p.value), "degrees": math.degrees(p.value),
                 "unit": "hms (uncertainty in mas)"}
    elif name == "position.dec":
        entry = {"value": format_dec(p.value), "degrees": math.degrees(p.value),
                 "unit": "dms (uncertainty in mas)"}
    else:
        entry = {"value": p.text(), "unit": p.unit}
    entry["uncertainty"] = None if p.uncertainty is None else float(p.uncertainty) * p.file_scale
    if prefit is not None:
        q = prefit.parameter(name)
        entry["prefit"] = (format_ra(q.value) if name == "position.ra" else
                           format_dec(q.value) if name == "position.dec" else q.text())
    entry["free"] = bool(p.free)
    return entry


def derived_for(model: TimingModel, result: FitResult | None = None) -> dict:
    """Derived physics from the model's spin: the fit's covariance for the spin
    terms it fitted, else the model's uncertainties and [correlation] section;
    a quantity that needs a term without an uncertainty gets none."""
    spin = model.spin
    params = [spin.frequency] + list(spin.derivatives[:2])
    names = [p.name for p in params]
    cov = with_fitted_covariance(covariance_of(model, names), names, result)
    measured = [p.uncertainty is not None and p.uncertainty > 0 for p in params]
    return derived_mod.derive_spin(params[0].value, [p.value for p in params[1:]],
                                   cov if any(measured) else None, measured=measured)


def build_report(result: FitResult, obs: Observations, source_path: str | None = None) -> dict:
    model = result.model
    post = result.postfit
    derived = derived_for(model, result)
    names = model.parameter_names()
    corr = result.correlation
    report = {
        "source": model.name,
        "toas": int(len(obs)),
        "free_parameters": len(model.free_names),     # timing and noise
        "free_timing_parameters": len(result.free_names),
        "chi2": float(result.chi2),
        "dof": int(result.dof),
        "reduced_chi2": float(result.reduced_chi2),
        "rms_us": post.rms_us(),
        "weighted_rms_us": post.weighted_rms_us(),
        "prefit_rms_us": result.prefit.rms_us(),
        "iterations": result.iterations,
        "converged": result.converged,
        "parameters": {n: parameter_entry(model, n, result.prefit_model) for n in names},
        "phase_offset_cycles": {"uncertainty": float(np.sqrt(result.covariance[-1, -1]))},
        "correlation": {"parameters": result.free_names + ["phase_offset_cycles"],
                        "matrix": [[round(float(x), 6) for x in row] for row in corr]},
        "derived": derived,
        "assumptions": derived_mod.ASSUMPTIONS,
        "cautions": derived_mod.cautions_for(derived),
        "settings": settings_entry(obs, model),
        "span_mjd": [float(np.min(obs.toas.mjd_day + obs.toas.mjd_frac)),
                     float(np.max(obs.toas.mjd_day + obs.toas.mjd_frac))],
        "warnings": list(obs.warnings) + list(result.warnings),
        "timingkit_version": __version__,
    }
    if result.noise is not None:
        report["noise"] = noise_report_entry(result)
        report["cautions"] = list(report["cautions"]) + report["noise"]["cautions"]
    report.update(extra_report_sections(model, derived, result,     # position, binary, kinematic
                                        median_error_us=float(np.median(obs.toas.err_us))))
    return report


def settings_entry(obs: Observations, model: TimingModel | None = None) -> dict:
    """What the delays rest on: ephemeris, clock corrections and, with the
    model, the bodies of the Shapiro delay, the dispersion constant and the files
    its [settings] name outside its own folder (``files_outside_model_folder``)."""
    out = {"ephemeris": obs.ephemeris_label,
           "clock_corrections": "; ".join(obs.clock_corrections) or "none applied"}
    if model is not None:
        name = model.settings["dispersion_constant"]
        wind = [c for c in model.extra if c.section == "solar_wind"]
        out.update({
            "shapiro_delay_bodies": ["sun", *model.astrometry.shapiro_planets(obs)],
            "shapiro_delay_masses": PLANET_MASSES_SOURCE,
            "dispersion_constant": {"name": name,
                                    "value_s_mhz2_cm3_per_pc": DISPERSION_CONSTANTS_S_MHZ2[name],
                                    "source": DISPERSION_CONSTANT_SOURCES[name]},
            "solar_wind": ({"model": "spherical, n0 (1 au / r)^2",
                            "electron_density_at_1au_cm3": wind[0].density.value}
                           if wind else "not modelled"),
            "files_outside_model_folder": model.files_outside_own_folder(),
        })
    return out


def residual_table(obs: Observations, res: ResidualSet) -> ResidualTable:
    """The residuals.csv table of ``res``, with the TOAs' table lines and, for a
    binary, the orbital phase (cycles in [0, 1))."""
    from timingkit.model.binary import orbital_phase_cycles
    toas = obs.toas
    orbital = orbital_phase_cycles(res.evaluation)
    return ResidualTable(
        mjd_text=toas.mjd_text, mjd=toas.mjd_day + toas.mjd_frac,
        site=obs.site_names,            # other names merged into the site's name
        freq_mhz=toas.freq_mhz, err_us=toas.err_us, residual_us=res.time_s * 1e6,
        residual_phase=res.phase, pulse_number=np.round(res.pulse_number).astype(np.int64),
        flags=dict(toas.flags), toa_line=toas.line_numbers,
        orbital_phase=None if orbital is None else np.mod(orbital, 1.0))


def write_json(path: str, data: dict) -> None:
    atomic_write_text(path, json.dumps(_clean(data), indent=2) + "\n")


def _clean(x):
    if isinstance(x, dict):
        return {k: _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    if isinstance(x, (np.floating, float)):
        x = float(x)
        return x if math.isfinite(x) else None
    if isinstance(x, np.integer):
        return int(x)
    return x


def _noise_value(entry: dict) -> str:
    return format_value(entry["value"], entry.get("uncertainty")) + \
        (" (fitted)" if entry.get("free") else "")


def noise_summary_lines(noise: dict) -> list[str]:
    lines = ["", f"  noise model ({noise['method']}; ln L = {noise['log_likelihood']:.2f}):"]
    for g in noise["white_noise"]:
        label = "all other TOAs" if g["flag"] is None else f"{g['flag']} = {g['value']}"
        lines.append(f"    white noise [{label}, {g['toas']} TOAs]: error scale "
                     f"{_noise_value(g['error_scale'])}, added "
                     f"{_noise_value(g['added_error_us'])} µs")
    red = noise.get("red_noise")
    if red:
        lines.append(f"    red noise: log10 amplitude {_noise_value(red['amplitude_log10'])}, "
                     f"spectral index {_noise_value(red['spectral_index'])}, "
                     f"{red['frequencies']} frequencies over {red['span_days']:.0f} d; "
                     f"ML realisation rms {red['realisation_rms_us']:.4g} µs")
    return lines


def parameter_line(name: str, entry: dict) -> str:
    """One fitted parameter for the terminal: rounded to its uncertainty."""
    if entry.get("value") is not None and "(uncertainty in mas)" in str(entry.get("unit", "")):
        return f"    {name:40s} {angle_text(name, entry['degrees'], entry['uncertainty'])}"
    return f"    {name:40s} " + format_quantity(entry["value"], entry.get("uncertainty"),
                                               entry.get("unit"))


def quantity_lines(quantities: dict, width: int = 40) -> list[str]:
    """Derived quantities (value, uncertainty, unit, note) for the terminal: a
    value whose inputs carry no uncertainty is shown without one, and says so."""
    lines = []
    for key, q in quantities.items():
        if q.get("value") is None:
            lines.append(f"    {key:{width}s} —  ({q.get('note') or 'not available'})")
            continue
        text = format_quantity(q["value"], q.get("uncertainty"), q.get("unit"))
        if not q.get("uncertainty"):
            text += "  (no uncertainty: inputs not measured)"
        lines.append(f"    {key:{width}s} {text}")
    return lines


def derived_lines(report: dict) -> list[str]:
    """The derived spin, binary and kinematic quantities with the assumptions and
    cautions (the same for ``fit`` and ``derive``)."""
    lines = ["  derived (assumptions below):"] + quantity_lines(report["derived"])
    for key, title in (("derived_binary", "binary"), ("derived_kinematic", "kinematic")):
        sec = report.get(key)
        if not sec:
            continue
        lines.append(f"  derived ({title}{', ' + sec['model'] if 'model' in sec else ''}):")
        if key == "derived_kinematic":
            lines.append(f"    {'distance_kpc':40s} "
                         + format_quantity(sec["distance_kpc"], sec["distance_uncertainty_kpc"],
                                           "kpc") + f"  ({sec['distance_source']})")
        lines += quantity_lines(sec["quantities"])
        for c in sec.get("cautions", []):
            lines.append(f"  caution: {c}")
    lines.append(f"  assumptions: {report['assumptions']}")
    for c in report.get("cautions", []):
        if c != report["assumptions"]:
            lines.append(f"  caution: {c}")
    return lines


def summary_text(report: dict) -> str:
    """Short human summary of a fit report for the terminal."""
    free = [name for name, e in report["parameters"].items() if e["free"]]
    timing = report.get("free_timing_parameters", len(free))
    split = f" ({timing} timing, {len(free) - timing} noise)" if timing != len(free) else ""
    lines = [f"source {report['source']}: {report['toas']} TOAs, "
             f"{len(free)} free parameter{'' if len(free) == 1 else 's'}{split}, "
             f"{report['iterations']} iteration{'' if report['iterations'] == 1 else 's'}"
             + ("" if report["converged"] else " (NOT CONVERGED)")]
    for w in report["warnings"]:
        if w.startswith(LOUD_WARNINGS):
            lines.append(f"  WARNING: {w}")
    lines += [f"  chi2 = {report['chi2']:.2f} for {report['dof']} dof "
              f"(reduced {report['reduced_chi2']:.3f}); rms {report['rms_us']:.4g} µs, "
              f"weighted rms {report['weighted_rms_us']:.4g} µs (pre-fit rms "
              f"{report['prefit_rms_us']:.4g} µs)", "", "  fitted parameters:"]
    lines += [parameter_line(name, report["parameters"][name]) for name in free]
    lines.append("")
    lines += derived_lines(report)
    if "noise" in report:
        lines.extend(noise_summary_lines(report["noise"]))
    if "suggestions" in report:
        from timingkit.fit.model_selection import suggestions_text
        lines.append(suggestions_text(report["suggestions"]))
    s = report["settings"]
    lines.append(f"  ephemeris: {s['ephemeris']}; clock corrections: {s['clock_corrections']}")
    for w in report["warnings"]:
        if not w.startswith(LOUD_WARNINGS):
            lines.append(f"  warning: {w}")
    return "\n".join(lines)
