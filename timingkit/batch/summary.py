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
    "source", "status", "toas", "reduced_chi2", "rms_us", "frequency_hz",
    "frequency_derivative", "period_s", "period_derivative", "characteristic_age_yr",
    "surface_dipole_field_gauss", "spin_down_luminosity_erg_per_s", "glitch_candidates",
    "message",
)


DERIVED_COLUMNS = ("period_s", "period_derivative", "characteristic_age_yr",
                   "surface_dipole_field_gauss", "spin_down_luminosity_erg_per_s")


REPORT_FILE = "report.json"


RESIDUAL_PLOT_FILE = "residuals.png"


GLITCH_FILE = "glitches.json"




def _value(entry: Any) -> Any:
    return entry.get("value") if isinstance(entry, dict) else None


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
        outcome.message = one_line(f"cannot read {folder / REPORT_FILE}: {exc}")
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
    row.update(
        toas=report.get("toas"), reduced_chi2=report.get("reduced_chi2"),
        rms_us=report.get("rms_us"),
        frequency_hz=_value(parameters.get("spin.frequency_hz")),
        frequency_derivative=_value(parameters.get("spin.frequency_derivatives.0")),
        glitch_candidates=_glitch_candidates(report, folder),
    )
    for key in DERIVED_COLUMNS:
        row[key] = _value(derived.get(key))
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


def write_summaries(result: BatchResult, software: dict[str, str],
                    notes: dict[str, dict[str, list[str]]]) -> dict[str, Path]:
    """Write summary.csv, summary.json, ppdot.png and overview.html atomically.
    ``notes``: source -> {"warnings": [...], "cautions": [...]} from its report."""
    from timingkit.outputs.overview_page import write_overview_html
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
    residual_plots = {o.name: outdir / o.name / RESIDUAL_PLOT_FILE for o in result.outcomes}
    write_overview_html(
        files["overview_html"], result.rows, SUMMARY_COLUMNS,
        ppdot_png=files["ppdot_png"], residual_plots=residual_plots,
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
