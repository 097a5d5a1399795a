"""The fit report: report.json (stable keys of DESIGN.md §5), the residual
table, and the short human summary printed on the terminal."""

from __future__ import annotations

import json
import math

import numpy as np

from timingkit.physics import spin as derived_mod
from timingkit.physics.binary_report import extra_report_sections
from timingkit.physics.binary_report import summary_lines as binary_summary_lines
from timingkit.fit.fitter import FitResult, ResidualSet
from timingkit.model.astrometry import angle_entry, format_dec, format_ra
from timingkit.model.timing_model import TimingModel
from timingkit.formats.model_file import atomic_write_text
from timingkit.outputs.noise_outputs import noise_report_entry
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
    """Derived physics from the model's spin; covariance from the fit when the
    spin terms were fitted, else the model's own uncertainties (diagonal)."""
    spin = model.spin
    names = [spin.frequency.name] + [p.name for p in spin.derivatives[:2]]
    values = [spin.frequency.value] + [p.value for p in spin.derivatives[:2]]
    cov = np.zeros((len(names), len(names)))
    have = True
    for i, name in enumerate(names):
        p = model.parameter(name)
        if p.uncertainty is None:
            have = False
        else:
            cov[i, i] = p.uncertainty ** 2
    if result is not None and all(n in result.free_names for n in names):
        idx = [result.free_names.index(n) for n in names]
        cov = result.covariance[np.ix_(idx, idx)]
        have = True
    return derived_mod.derive_spin(values[0], values[1:], cov if have else None)


def build_report(result: FitResult, obs: Observations, source_path: str | None = None) -> dict:
    model = result.model
    post = result.postfit
    derived = derived_for(model, result)
    names = model.parameter_names()
    corr = result.correlation
    report = {
        "source": model.name,
        "toas": int(len(obs)),
        "free_parameters": len(result.free_names),
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
        "settings": settings_entry(obs),
        "span_mjd": [float(np.min(obs.toas.mjd_day + obs.toas.mjd_frac)),
                     float(np.max(obs.toas.mjd_day + obs.toas.mjd_frac))],
        "warnings": list(obs.warnings) + list(result.warnings),
        "timingkit_version": __version__,
    }
    if result.noise is not None:
        report["noise"] = noise_report_entry(result)
        report["cautions"] = list(report["cautions"]) + report["noise"]["cautions"]
    report.update(extra_report_sections(model, derived, result))   # position, binary, kinematic
    return report


def settings_entry(obs: Observations) -> dict:
    return {"ephemeris": obs.ephemeris_label,
            "clock_corrections": "; ".join(obs.clock_corrections) or "none applied"}


def residual_table(obs: Observations, res: ResidualSet) -> ResidualTable:
    toas = obs.toas
    return ResidualTable(
        mjd_text=toas.mjd_text, mjd=toas.mjd_day + toas.mjd_frac, site=toas.site,
        freq_mhz=toas.freq_mhz, err_us=toas.err_us, residual_us=res.time_s * 1e6,
        residual_phase=res.phase, pulse_number=np.round(res.pulse_number).astype(np.int64),
        flags=dict(toas.flags))


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
    unc = "" if entry.get("uncertainty") is None else f" ± {entry['uncertainty']:.3g}"
    return f"{entry['value']:.4g}{unc}" + (" (fitted)" if entry.get("free") else "")


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


def summary_text(report: dict) -> str:
    """Short human summary of a fit report for the terminal."""
    lines = [f"source {report['source']}: {report['toas']} TOAs, "
             f"{report['free_parameters']} free parameters, {report['iterations']} iterations"
             + ("" if report["converged"] else " (NOT converged)"),
             f"  chi2 = {report['chi2']:.2f} for {report['dof']} dof "
             f"(reduced {report['reduced_chi2']:.3f}); rms {report['rms_us']:.4g} µs, "
             f"weighted rms {report['weighted_rms_us']:.4g} µs (pre-fit rms "
             f"{report['prefit_rms_us']:.4g} µs)", "", "  fitted parameters:"]
    for name, e in report["parameters"].items():
        if not e["free"]:
            continue
        unc = "" if e["uncertainty"] is None else f" ± {e['uncertainty']:.3g}"
        lines.append(f"    {name:40s} {e['value']}{unc}  {e.get('unit', '')}")
    lines.append("")
    lines.append("  derived (assumptions below):")
    for key, q in report["derived"].items():
        if q["value"] is None:
            lines.append(f"    {key:40s} —  ({q.get('note') or 'not available'})")
            continue
        unc = "" if q["uncertainty"] is None else f" ± {q['uncertainty']:.3g}"
        lines.append(f"    {key:40s} {q['value']:.6g}{unc}")
    lines.extend(binary_summary_lines(report))
    lines.append(f"  assumptions: {report['assumptions']}")
    for c in report.get("cautions", []):
        if c != report["assumptions"]:
            lines.append(f"  caution: {c}")
    if "noise" in report:
        lines.extend(noise_summary_lines(report["noise"]))
    if "suggestions" in report:
        from timingkit.fit.model_selection import suggestions_text
        lines.append(suggestions_text(report["suggestions"]))
    s = report["settings"]
    lines.append(f"  ephemeris: {s['ephemeris']}; clock corrections: {s['clock_corrections']}")
    for w in report["warnings"]:
        lines.append(f"  warning: {w}")
    return "\n".join(lines)
