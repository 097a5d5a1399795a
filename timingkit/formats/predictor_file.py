"""The phase-predictor file: Chebyshev segments of pulse phase against time at
one site and observing frequency, as JSON (our own format, README "Phase
predictor").

::

    {"format": "timingkit-phase-predictor", "version": 1,
     "source": "...", "site": "...", "freq_mhz": 1400.0 (or "inf"),
     "time_scale": "...", "accuracy_cycles": 1e-9, "estimated_max_error_cycles": ...,
     "created_by": "timingkit 0.1.0", "model_file": "...", "warnings": [...],
     "flags": {"backend": "..."},
     "time_offsets_applied": [{"flag": "backend", "value": "...", "offset_s": ...}],
     "segments": [{"start_mjd": "60000.0", "end_mjd": "60000.03125",
                   "seconds_per_day": 86400, "phase_integer": 123, "phase_fraction": 0.25,
                   "coefficients": [...]}, ...]}

In a segment, with x = 2 (t - start) / (end - start) - 1 for a time t (MJD, UTC
at the site), the phase is phase_integer + phase_fraction + sum_k c_k T_k(x)
cycles (T_k the Chebyshev polynomials). The integer and fraction carry the
phase exactly; the series is relative to them, so double precision suffices.
This module reads and writes the file; :mod:`timingkit.predict` evaluates it.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field

import numpy as np

from timingkit.formats.errors import InputError, excerpt, excerpt_value
from timingkit.formats.mjd_text import parse_mjd_strings
from timingkit.formats.model_file import atomic_write_text
from timingkit.formats.textfile import read_text_file

FORMAT_NAME = "timingkit-phase-predictor"
FORMAT_VERSION = 1
TIME_SCALE = ("UTC at the site, as the TOA table gives it (the site clock when clock "
              "tables are applied)")
SEGMENT_KEYS = ("start_mjd", "end_mjd", "seconds_per_day", "phase_integer", "phase_fraction",
                "coefficients")
HEADER_KEYS = ("format", "version", "source", "site", "freq_mhz", "time_scale",
               "accuracy_cycles", "estimated_max_error_cycles", "created_by", "model_file",
               "warnings", "flags", "time_offsets_applied", "segments")
OFFSET_KEYS = ("flag", "value", "offset_s")


@dataclass
class PredictorData:
    """The content of a predictor file, one array entry per segment.

    ``start_text``/``end_text``: the segment edges as exact MJD strings, and
    their two-part values ``start_day``/``start_frac``, ``end_day``/``end_frac``;
    ``seconds_per_day``: SI seconds in that UTC day (86401 on a day with a leap
    second); ``phase_integer`` (int64) and ``phase_fraction`` (float, [0, 1));
    ``coefficients``: (segments, terms), zero-padded to the longest series;
    ``degrees``: the degree of each segment's series.
    """

    source: str
    site: str
    freq_mhz: float
    start_text: np.ndarray
    end_text: np.ndarray
    seconds_per_day: np.ndarray
    phase_integer: np.ndarray
    phase_fraction: np.ndarray
    coefficients: np.ndarray
    degrees: np.ndarray
    accuracy_cycles: float = float("nan")
    estimated_max_error_cycles: float = float("nan")
    created_by: str = ""
    model_file: str = ""
    warnings: list[str] = field(default_factory=list)
    flags: dict = field(default_factory=dict)
    time_offsets_applied: list = field(default_factory=list)
    time_scale: str = TIME_SCALE
    path: str | None = None

    def __post_init__(self):
        self.start_text = np.asarray(self.start_text, dtype=str)
        self.end_text = np.asarray(self.end_text, dtype=str)
        self.start_day, self.start_frac = parse_mjd_strings(self.start_text)
        self.end_day, self.end_frac = parse_mjd_strings(self.end_text)
        self.seconds_per_day = np.asarray(self.seconds_per_day, dtype=float)
        self.phase_integer = np.asarray(self.phase_integer, dtype=np.int64)
        self.phase_fraction = np.asarray(self.phase_fraction, dtype=float)
        self.coefficients = np.atleast_2d(np.asarray(self.coefficients, dtype=float))
        self.degrees = np.asarray(self.degrees, dtype=np.int64)

    def __len__(self) -> int:
        return len(self.start_text)


def _segment_record(data: PredictorData, i: int) -> dict:
    return {"start_mjd": str(data.start_text[i]), "end_mjd": str(data.end_text[i]),
            "seconds_per_day": int(data.seconds_per_day[i]),
            "phase_integer": int(data.phase_integer[i]),
            "phase_fraction": float(data.phase_fraction[i]),
            "coefficients": [float(c) for c in data.coefficients[i, :data.degrees[i] + 1]]}


def predictor_text(data: PredictorData) -> str:
    """The JSON text: the header keys indented, one line per segment."""
    freq = "inf" if math.isinf(data.freq_mhz) else float(data.freq_mhz)
    header = {"format": FORMAT_NAME, "version": FORMAT_VERSION, "source": data.source,
              "site": data.site, "freq_mhz": freq, "time_scale": data.time_scale,
              "accuracy_cycles": _or_null(data.accuracy_cycles),
              "estimated_max_error_cycles": _or_null(data.estimated_max_error_cycles),
              "created_by": data.created_by, "model_file": data.model_file,
              "warnings": list(data.warnings), "flags": dict(data.flags),
              "time_offsets_applied": [dict(o) for o in data.time_offsets_applied]}
    head = json.dumps(header, indent=1, allow_nan=False)      # ends with "\n}"
    segments = [json.dumps(_segment_record(data, i), allow_nan=False) for i in range(len(data))]
    return head[:-2] + ',\n "segments": [\n  ' + ",\n  ".join(segments) + "\n ]\n}\n"


def write_predictor_file(data: PredictorData, path: str) -> None:
    """Write atomically; the text is read back first, so a file that could not
    be read is never written."""
    text = predictor_text(data)
    parse_predictor_text(text, path)
    atomic_write_text(path, text)


def read_predictor_file(path: str) -> PredictorData:
    """Read and check a predictor file; errors name the file, line and field."""
    return parse_predictor_text(read_text_file(path, "phase-predictor file"), path)


def _line_of(text: str, index: int) -> int | None:
    """1-based line of segment ``index`` (the writer puts one per line)."""
    start = text.find('"segments"')
    if start < 0:
        return None
    lines = text[start:].splitlines()
    seen = -1
    for k, row in enumerate(lines):
        if '"start_mjd"' in row:
            seen += 1
            if seen == index:
                return text[:start].count("\n") + k + 1
    return None


def parse_predictor_text(text: str, path: str | None = None) -> PredictorData:
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"not valid JSON ({exc.msg})", path=path, line=exc.lineno) from None
    if not isinstance(doc, dict) or doc.get("format") != FORMAT_NAME:
        raise InputError(f"not a phase-predictor file (expected \"format\": \"{FORMAT_NAME}\")",
                         path=path, field="format")
    if doc.get("version") != FORMAT_VERSION:
        raise InputError(f"version {excerpt_value(doc.get('version'))} is not supported (this "
                         f"timingkit reads version {FORMAT_VERSION})", path=path,
                         field="version", quoted=(str(doc.get("version")),))
    unknown = [k for k in doc if k not in HEADER_KEYS]
    if unknown:
        raise InputError(f"unknown key {excerpt(unknown[0])}; legal: {', '.join(HEADER_KEYS)}",
                         path=path, field=unknown[0], quoted=(unknown[0],))
    for key in ("site", "freq_mhz", "segments"):
        if key not in doc:
            raise InputError("missing required key", path=path, field=key)
    freq = doc["freq_mhz"]
    if freq == "inf":
        freq = float("inf")
    if isinstance(freq, bool) or not isinstance(freq, (int, float)) or not freq > 0:
        raise InputError("expected a frequency in MHz > 0 or \"inf\", found "
                         f"{excerpt_value(freq)}", path=path, field="freq_mhz",
                         quoted=(str(freq),))
    segments = doc["segments"]
    if not isinstance(segments, list) or not segments:
        raise InputError("expected a non-empty list of segments", path=path, field="segments")
    rows = [_check_segment(seg, i, path, _line_of(text, i)) for i, seg in enumerate(segments)]
    terms = max(len(r["coefficients"]) for r in rows)
    coefficients = np.zeros((len(rows), terms))
    for i, r in enumerate(rows):
        coefficients[i, :len(r["coefficients"])] = r["coefficients"]
    data = PredictorData(
        source=str(doc.get("source", "")), site=str(doc["site"]), freq_mhz=float(freq),
        start_text=[r["start_mjd"] for r in rows], end_text=[r["end_mjd"] for r in rows],
        seconds_per_day=[r["seconds_per_day"] for r in rows],
        phase_integer=[r["phase_integer"] for r in rows],
        phase_fraction=[r["phase_fraction"] for r in rows], coefficients=coefficients,
        degrees=[len(r["coefficients"]) - 1 for r in rows],
        accuracy_cycles=_number(doc, "accuracy_cycles", path),
        estimated_max_error_cycles=_number(doc, "estimated_max_error_cycles", path),
        created_by=str(doc.get("created_by", "")), model_file=str(doc.get("model_file", "")),
        warnings=[str(w) for w in doc.get("warnings", [])],
        flags=_flags(doc.get("flags", {}), path),
        time_offsets_applied=_offsets(doc.get("time_offsets_applied", []), path),
        time_scale=str(doc.get("time_scale", TIME_SCALE)), path=path)
    _check_order(data, path, text)
    return data


def _flags(value, path) -> dict:
    if not isinstance(value, dict):
        raise InputError("expected an object of flag names and values", path=path,
                         field="flags")
    for name, text in value.items():
        if not isinstance(text, str) or not text:
            raise InputError(f"expected the flag's value as text, found {text!r}", path=path,
                             field=f"flags.{name}")
    return dict(value)


def _offsets(value, path) -> list[dict]:
    if not isinstance(value, list):
        raise InputError("expected a list of time-offset groups", path=path,
                         field="time_offsets_applied")
    for i, group in enumerate(value):
        where = f"time_offsets_applied.{i}"
        if not isinstance(group, dict) or sorted(group) != sorted(OFFSET_KEYS):
            raise InputError(f"expected an object with the keys {', '.join(OFFSET_KEYS)}",
                             path=path, field=where)
        if not (isinstance(group["flag"], str) and isinstance(group["value"], str)):
            raise InputError("expected the flag and value as text", path=path, field=where)
        offset = group["offset_s"]
        if isinstance(offset, bool) or not isinstance(offset, (int, float)):
            raise InputError(f"expected seconds, found {offset!r}", path=path,
                             field=f"{where}.offset_s")
    return [dict(g) for g in value]


def _or_null(value: float):
    return float(value) if math.isfinite(value) else None


def _number(doc: dict, key: str, path) -> float:
    value = doc.get(key)
    if value is None:
        return float("nan")
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"expected a number, found {excerpt_value(value)}", path=path,
                         field=key, quoted=(str(value),))
    return float(value)


def _check_segment(seg, i: int, path, line) -> dict:
    where = f"segments.{i}"
    if not isinstance(seg, dict):
        raise InputError("expected an object", path=path, line=line, field=where)
    for key in SEGMENT_KEYS:
        if key not in seg:
            raise InputError("missing required key", path=path, line=line,
                             field=f"{where}.{key}")
    unknown = [k for k in seg if k not in SEGMENT_KEYS]
    if unknown:
        raise InputError(f"unknown key; legal: {', '.join(SEGMENT_KEYS)}", path=path, line=line,
                         field=f"{where}.{unknown[0]}")
    for key in ("start_mjd", "end_mjd"):
        if not isinstance(seg[key], str):
            raise InputError("expected an MJD as a decimal string (exact)", path=path,
                             line=line, field=f"{where}.{key}")
        try:
            parse_mjd_strings([seg[key]])
        except InputError as exc:
            raise InputError(exc.message.removeprefix("entry 0: "), path=path, line=line,
                             field=f"{where}.{key}", quoted=exc.quoted) from None
    if seg["seconds_per_day"] not in (86399, 86400, 86401):
        raise InputError(f"expected 86400 (or 86401/86399 on a leap-second day), found "
                         f"{excerpt_value(seg['seconds_per_day'])}", path=path, line=line,
                         field=f"{where}.seconds_per_day", quoted=(str(seg["seconds_per_day"]),))
    if isinstance(seg["phase_integer"], bool) or not isinstance(seg["phase_integer"], int):
        raise InputError("expected an integer number of cycles", path=path, line=line,
                         field=f"{where}.phase_integer")
    if abs(seg["phase_integer"]) >= 2 ** 62:
        raise InputError("integer phase too large", path=path, line=line,
                         field=f"{where}.phase_integer")
    frac = seg["phase_fraction"]
    if isinstance(frac, bool) or not isinstance(frac, (int, float)) or not -1 < frac < 1:
        raise InputError("expected a fraction of a cycle (-1 < f < 1), found "
                         f"{excerpt_value(frac)}", path=path, line=line,
                         field=f"{where}.phase_fraction", quoted=(str(frac),))
    coeffs = seg["coefficients"]
    if (not isinstance(coeffs, list) or not coeffs
            or any(isinstance(c, bool) or not isinstance(c, (int, float)) for c in coeffs)):
        raise InputError("expected a non-empty list of numbers", path=path, line=line,
                         field=f"{where}.coefficients")
    return seg


def _check_order(data: PredictorData, path, text: str) -> None:
    length = (data.end_day - data.start_day) + (data.end_frac - data.start_frac)
    for i in np.flatnonzero(~(length > 0)):
        raise InputError(f"segment ends ({data.end_text[i]}) at or before its start "
                         f"({data.start_text[i]})", path=path, line=_line_of(text, int(i)),
                         field=f"segments.{i}.end_mjd")
    gap = (data.start_day[1:] - data.end_day[:-1]) + (data.start_frac[1:] - data.end_frac[:-1])
    for i in np.flatnonzero(gap < 0):
        raise InputError(f"segment starts ({data.start_text[i + 1]}) before the previous one "
                         f"ends ({data.end_text[i]}): segments must be in time order without "
                         "overlaps", path=path, line=_line_of(text, int(i) + 1),
                         field=f"segments.{i + 1}.start_mjd")
