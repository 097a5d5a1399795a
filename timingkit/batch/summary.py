"""The batch's shared outputs: summary.csv and summary.json (one row per source), the
P-Pdot diagram and the overview page.
"""

from __future__ import annotations

import csv
import io
import json
import math
import time
from pathlib import Path
from typing import Any

from timingkit.physics.spin import ASSUMPTIONS as DERIVED_ASSUMPTIONS
from timingkit.outputs.residual_table import atomic_output
from timingkit.batch.outcomes import (
    STATUS_FAILED,
    STATUS_NOT_CONVERGED,
    STATUS_OK,
    BatchResult,
    SourceOutcome,
    one_line,
)


SUMMARY_COLUMNS = (
    "source", "status", "toas", "first_mjd", "last_mjd", "span_days", "reduced_chi2",
    "rms_us", "spin_epoch_mjd", "frequency_hz", "frequency_hz_uncertainty",
    "frequency_derivative", "frequency_derivative_uncertainty", "dm", "dm_uncertainty",
    "orbital_period_days", "orbital_period_days_uncertainty", "period_s",
    "period_s_uncertainty", "period_derivative", "period_derivative_uncertainty",
    "characteristic_age_yr", "surface_dipole_field_gauss", "spin_down_luminosity_erg_per_s",
    "glitch_candidates", "message",
)

# Model parameters in the summary: column -> parameter name in report.json. Values stay
# the report's exact decimal strings; the uncertainty goes in COLUMN_uncertainty.
PARAMETER_COLUMNS = {
    "frequency_hz": "spin.frequency_hz", "frequency_derivative": "spin.frequency_derivatives.0",
    "dm": "dispersion.dm", "orbital_period_days": "binary.orbital_period_days",
}

# What the overview page shows in each column header.
COLUMN_HEADERS = {
    "source": "Source", "status": "Status", "toas": "TOAs", "first_mjd": "First TOA (MJD)",
    "last_mjd": "Last TOA (MJD)", "span_days": "Span (days)", "reduced_chi2": "Reduced χ²",
    "rms_us": "RMS residual (µs)", "spin_epoch_mjd": "Spin epoch (MJD)",
    "frequency_hz": "Spin frequency (Hz)", "frequency_derivative": "Frequency derivative (Hz/s)",
    "dm": "DM (pc cm⁻³)", "orbital_period_days": "Orbital period (days)",
    "period_s": "Period P (s)", "period_derivative": "Period derivative Ṗ (s/s)",
    "characteristic_age_yr": "Characteristic age (yr)",
    "surface_dipole_field_gauss": "Surface dipole field (G)",
    "spin_down_luminosity_erg_per_s": "Spin-down luminosity (erg/s)",
    "glitch_candidates": "Glitch candidates", "message": "Notes",
}

# The page folds each uncertainty into its value's cell ("value ± σ").
PAGE_COLUMNS = tuple(c for c in SUMMARY_COLUMNS if not c.endswith("_uncertainty"))
PAGE_UNCERTAINTIES = {c[:-len("_uncertainty")]: c for c in SUMMARY_COLUMNS
                      if c.endswith("_uncertainty")}

# A source's figures, in the order the page shows them (those present are shown).
SOURCE_FIGURES = (("residuals", "residuals.png"),
                  ("residuals by day of year", "residuals_day_of_year.png"),
                  ("residuals by observing frequency", "residuals_frequency.png"),
                  ("residuals by orbital phase", "residuals_orbital_phase.png"),
                  ("glitch search", "glitch_search.png"),
                  ("power spectrum", "power_spectrum.png"))
THUMBNAIL_FOLDER = "thumbnails"


DERIVED_COLUMNS = ("period_s", "period_derivative", "characteristic_age_yr",
                   "surface_dipole_field_gauss", "spin_down_luminosity_erg_per_s")


REPORT_FILE = "report.json"


GLITCH_FILE = "glitches.json"




def _value(entry: Any) -> Any:
    return entry.get("value") if isinstance(entry, dict) else None


def _uncertainty(entry: Any) -> Any:
    return entry.get("uncertainty") if isinstance(entry, dict) else None


def _spin_epoch(folder: Path) -> str | None:
    """The fitted model's spin epoch (MJD, the exact decimal string)."""
    import tomllib
    try:
        with open(folder / "fitted.toml", "rb") as fh:
            value = tomllib.load(fh).get("spin", {}).get("epoch_mjd")
    except (OSError, ValueError):
        return None
    return None if value is None else str(value)


def _glitch_candidates(report: dict, folder: Path) -> int | None:
    """Number of glitch candidates: from the report, else from ``glitches.json``;
    None (blank) when no glitch search was run."""
    value = report.get("glitch_candidates")
    if isinstance(value, list):
        return len(value)
    if isinstance(value, int) and not isinstance(value, bool):
        return value
    try:
        found = json.loads((folder / GLITCH_FILE).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if isinstance(found, dict):
        found = found.get("candidates", found.get("glitches"))
    return len(found) if isinstance(found, list) else None


def read_report(folder: Path, outcome: SourceOutcome) -> dict | None:
    """``folder/report.json`` of a successful source; an unreadable one turns the
    outcome into a failure."""
    if outcome.status != STATUS_OK:
        return None
    try:
        report = json.loads((folder / REPORT_FILE).read_text(encoding="utf-8"))
        if not isinstance(report, dict):
            raise ValueError("not a JSON object")
        return report
    except (OSError, ValueError) as exc:
        outcome.status = STATUS_FAILED
        outcome.message = one_line(f"cannot read {folder.name}/{REPORT_FILE} "
                                   f"({type(exc).__name__})")
        return None


def summary_row(folder: Path, outcome: SourceOutcome, report: dict | None) -> dict:
    """One summary row (keys :data:`SUMMARY_COLUMNS`) from the source's report.
    Values keep the report's types (high-precision values stay decimal strings)."""
    row = dict.fromkeys(SUMMARY_COLUMNS)
    row.update(source=outcome.name, status=outcome.status, message=outcome.message)
    if outcome.status != STATUS_OK or report is None:
        return row
    if report.get("converged") is False:
        outcome.status = row["status"] = STATUS_NOT_CONVERGED
    parameters = report.get("parameters", {})
    derived = report.get("derived", {})
    span = report.get("span_mjd") or [None, None]
    row.update(
        toas=report.get("toas"), reduced_chi2=report.get("reduced_chi2"),
        rms_us=report.get("rms_us"), first_mjd=span[0], last_mjd=span[-1],
        span_days=(span[-1] - span[0]) if None not in (span[0], span[-1]) else None,
        spin_epoch_mjd=_spin_epoch(folder),
        glitch_candidates=_glitch_candidates(report, folder),
    )
    for column, name in PARAMETER_COLUMNS.items():
        row[column] = _value(parameters.get(name))
        row[f"{column}_uncertainty"] = _uncertainty(parameters.get(name))
    for key in DERIVED_COLUMNS:
        row[key] = _value(derived.get(key))
        if f"{key}_uncertainty" in row:
            row[f"{key}_uncertainty"] = _uncertainty(derived.get(key))
    notes = (["reused: inputs unchanged since the last successful run"] if outcome.reused else [])
    notes += [str(w) for w in report.get("warnings", [])]
    row["message"] = one_line("; ".join(notes)) if notes else ""
    return row


def _csv_text(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else ""
    return str(value)


def _as_float(value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return float("nan")


def _thumbnail_maker(outdir: Path):
    """path -> (link to the full figure, thumbnail), relative to OUTDIR; the thumbnail
    is written to OUTDIR/thumbnails/ (kept when the figure is older than it)."""
    from timingkit.outputs.overview_page import make_thumbnail

    def thumbnail_of(path):
        path = Path(path)
        relative = path.relative_to(outdir)
        thumb = outdir / THUMBNAIL_FOLDER / ("--".join(relative.parts))
        if not thumb.exists() or thumb.stat().st_mtime < path.stat().st_mtime:
            make_thumbnail(path, thumb)
        return relative.as_posix(), thumb.relative_to(outdir).as_posix()

    return thumbnail_of


def write_summaries(result: BatchResult, software: dict[str, str],
                    notes: dict[str, dict[str, list[str]]]) -> dict[str, Path]:
    """Write summary.csv, summary.json, ppdot.png and overview.html atomically.
    ``notes``: source -> {"warnings": [...], "cautions": [...]} from its report."""
    from timingkit.outputs.overview_page import EMBED_UP_TO_SOURCES, write_overview_html
    from timingkit.outputs.plotting import plot_ppdot

    outdir = result.outdir
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(SUMMARY_COLUMNS)
    for row in result.rows:
        writer.writerow([_csv_text(row[c]) for c in SUMMARY_COLUMNS])
    files = {"summary_csv": outdir / "summary.csv", "summary_json": outdir / "summary.json",
             "ppdot_png": outdir / "ppdot.png", "overview_html": outdir / "overview.html"}
    with atomic_output(files["summary_csv"]) as handle:
        handle.write(buffer.getvalue())

    document = {
        "columns": list(SUMMARY_COLUMNS),
        "sources": result.rows,
        "counts": {"sources": len(result.rows), "ok": len(result.succeeded),
                   "failed": len(result.failed), "not_converged": len(result.not_converged),
                   "reused": sum(o.reused for o in result.outcomes)},
        "engine": result.engine,
        "elapsed_s": round(result.elapsed_s, 3),
        "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "software": software,
        "cautions": [DERIVED_ASSUMPTIONS],
        "source_notes": {name: n for name, n in notes.items() if n["warnings"] or n["cautions"]},
    }
    with atomic_output(files["summary_json"]) as handle:
        handle.write(json.dumps(document, indent=1, allow_nan=False, default=str) + "\n")

    fitted = [r for r in result.rows if r["status"] == STATUS_OK]
    plot_ppdot([_as_float(r["period_s"]) for r in fitted],
               [_as_float(r["period_derivative"]) for r in fitted],
               [r["source"] for r in fitted], files["ppdot_png"],
               title=f"P-Pdot diagram of {len(fitted)} fitted source(s)")
    figures = {o.name: [(label, outdir / o.name / file) for label, file in SOURCE_FIGURES
                        if (outdir / o.name / file).exists()] for o in result.outcomes}
    thumbnail_of = None
    if len(result.rows) > EMBED_UP_TO_SOURCES:
        thumbnail_of = _thumbnail_maker(outdir)
    write_overview_html(
        files["overview_html"], result.rows, PAGE_COLUMNS, headers=COLUMN_HEADERS,
        uncertainties=PAGE_UNCERTAINTIES, thumbnail_of=thumbnail_of,
        ppdot_png=files["ppdot_png"], figures=figures,
        warnings={name: n["warnings"] for name, n in notes.items()},
        source_cautions={name: n["cautions"] for name, n in notes.items()},
        cautions=[DERIVED_ASSUMPTIONS],
        note=(f"{len(result.succeeded)} of {len(result.rows)} source(s) fitted"
              + (f" ({document['counts']['reused']} kept unchanged from the previous run)"
                 if document["counts"]["reused"] else "")
              + (f", {len(result.not_converged)} did not converge"
                 if result.not_converged else "")
              + f", {len(result.failed)} failed; engine: {result.engine}; timingkit "
              f"{software.get('timingkit', '?')}; written {document['created_utc']}"))
    return files
