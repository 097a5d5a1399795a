"""The residuals table (``residuals.csv``, DESIGN.md §5) and its reader/writer.

Columns, in this order: ``mjd`` (the arrival time exactly as read from the TOA
table), ``site``, ``freq_mhz``, ``err_us``, ``residual_us``, ``residual_phase``,
``pulse_number``; then, when known, ``toa_line`` (the TOA's line in its table)
and ``orbital_phase`` (cycles, binaries); then one column per TOA flag (e.g.
``backend``); then, when some TOAs were left out of the fit, ``left_out`` (the
reason, empty for fitted TOAs); last, when the fit did not converge, ``fit_status``
(``not_converged`` in every row: these residuals are not those of a solution).

Printed precision: ``residual_us`` with 6 decimals (1 ps steps, well below a
nanosecond), ``residual_phase`` with 13 significant digits, ``freq_mhz`` and
``err_us`` as the shortest text that reads back to the same float64.
"""

from __future__ import annotations

import csv
import io
import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from timingkit.formats.atomic_file import atomic_output
from timingkit.formats.errors import InputError

CORE_COLUMNS = ("mjd", "site", "freq_mhz", "err_us", "residual_us",
                "residual_phase", "pulse_number")
OPTIONAL_COLUMNS = ("toa_line", "orbital_phase", "left_out", "fit_status")
NOT_CONVERGED_STATUS = "not_converged"   # fit_status of the rows of a fit that did not converge

# A decimal MJD: digits with an optional fraction, no exponent (kept as text
# so no precision is lost between the TOA table and this file).
_MJD_TEXT = re.compile(r"^[+-]?(\d+(\.\d*)?|\.\d+)$")
_INTEGER_TEXT = re.compile(r"^[+-]?\d+$")


def _text_array(values) -> np.ndarray:
    """A 1-d numpy array of Python str (object dtype, so any length fits)."""
    if not isinstance(values, list):      # a list of str is taken as it is (fast)
        values = np.atleast_1d(values)
    return np.fromiter(map(str, values), dtype=object, count=len(values))


@dataclass
class ResidualTable:
    """Per-TOA residuals, one row per arrival time.

    ``mjd_text``: the MJD as read (str); ``mjd``: the same as float64 (good to
    ~1 µs, for plotting only); ``site``: site names (str); ``freq_mhz``:
    observing frequency in MHz (``inf`` = no dispersion); ``err_us``: 1σ TOA
    uncertainty in µs; ``residual_us``: residual in µs; ``residual_phase``:
    residual in pulse cycles; ``pulse_number``: int64 pulse numbers;
    ``flags``: flag name -> array of str, in column order. Optional:
    ``toa_line`` (int64, 0 = unknown), ``orbital_phase`` (cycles) and
    ``left_out`` (str, the reason a TOA was left out of the fit, '' if fitted);
    ``converged``: False for the residuals of a fit that did not converge (written
    as the ``fit_status`` column).
    """

    mjd_text: np.ndarray
    mjd: np.ndarray
    site: np.ndarray
    freq_mhz: np.ndarray
    err_us: np.ndarray
    residual_us: np.ndarray
    residual_phase: np.ndarray
    pulse_number: np.ndarray
    flags: dict[str, np.ndarray] = field(default_factory=dict)
    toa_line: np.ndarray | None = None
    orbital_phase: np.ndarray | None = None
    left_out: np.ndarray | None = None
    converged: bool = True

    def __post_init__(self):
        self.mjd_text = _text_array(self.mjd_text)
        self.mjd = np.atleast_1d(np.asarray(self.mjd, dtype=float))
        self.site = _text_array(self.site)
        self.freq_mhz = np.atleast_1d(np.asarray(self.freq_mhz, dtype=float))
        self.err_us = np.atleast_1d(np.asarray(self.err_us, dtype=float))
        self.residual_us = np.atleast_1d(np.asarray(self.residual_us, dtype=float))
        self.residual_phase = np.atleast_1d(np.asarray(self.residual_phase, dtype=float))
        self.pulse_number = np.atleast_1d(np.asarray(self.pulse_number, dtype=np.int64))
        self.flags = {str(name): _text_array(values)
                      for name, values in dict(self.flags).items()}
        n = len(self.mjd_text)
        columns = {"mjd": self.mjd, "site": self.site, "freq_mhz": self.freq_mhz,
                   "err_us": self.err_us, "residual_us": self.residual_us,
                   "residual_phase": self.residual_phase,
                   "pulse_number": self.pulse_number}
        columns.update(self.flags)
        if self.toa_line is not None:
            self.toa_line = columns["toa_line"] = np.atleast_1d(np.asarray(self.toa_line,
                                                                           dtype=np.int64))
        if self.orbital_phase is not None:
            self.orbital_phase = columns["orbital_phase"] = np.atleast_1d(
                np.asarray(self.orbital_phase, dtype=float))
        if self.left_out is not None:
            self.left_out = columns["left_out"] = _text_array(self.left_out)
        for name, values in columns.items():
            if values.ndim != 1 or len(values) != n:
                raise ValueError(f"ResidualTable column '{name}' has {len(values)} "
                                 f"entries, mjd_text has {n}")
        for name in self.flags:
            if name in CORE_COLUMNS + OPTIONAL_COLUMNS or not name or name != name.strip():
                raise ValueError(f"bad flag name {name!r}: must be non-empty, without "
                                 "surrounding blanks, and not one of "
                                 f"{', '.join(CORE_COLUMNS + OPTIONAL_COLUMNS)}")

    @classmethod
    def from_columns(cls, mjd_text, site, freq_mhz, err_us, residual_us,
                     residual_phase, pulse_number, flags=None) -> "ResidualTable":
        """Build a table, deriving the float ``mjd`` from the MJD text."""
        mjd_text = _text_array(mjd_text)
        mjd = np.fromiter(map(float, mjd_text), dtype=float, count=len(mjd_text))
        return cls(mjd_text, mjd, site, freq_mhz, err_us, residual_us,
                   residual_phase, pulse_number, dict(flags or {}))

    @classmethod
    def read_csv(cls, path) -> "ResidualTable":
        """Same as the module function :func:`read_csv`."""
        return read_csv(path)

    def __len__(self) -> int:
        return len(self.mjd_text)

    @property
    def columns(self) -> list[str]:
        """Column names as written to the CSV file."""
        optional = [name for name in OPTIONAL_COLUMNS[:2] if getattr(self, name) is not None]
        last = ["left_out"] if self.left_out is not None and any(self.left_out) else []
        status = [] if self.converged else ["fit_status"]
        return list(CORE_COLUMNS) + optional + list(self.flags) + last + status

    def fitted_mask(self) -> np.ndarray:
        """True for the TOAs the fit used (all of them without ``left_out``)."""
        if self.left_out is None:
            return np.ones(len(self), dtype=bool)
        return self.left_out == ""

    def subset(self, index) -> "ResidualTable":
        """Rows selected by a boolean mask or index array."""
        pick = (lambda a: None if a is None else a[index])
        return ResidualTable(self.mjd_text[index], self.mjd[index], self.site[index],
                             self.freq_mhz[index], self.err_us[index],
                             self.residual_us[index], self.residual_phase[index],
                             self.pulse_number[index],
                             {k: v[index] for k, v in self.flags.items()},
                             pick(self.toa_line), pick(self.orbital_phase), pick(self.left_out),
                             self.converged)

    @classmethod
    def concatenate(cls, tables) -> "ResidualTable":
        """The rows of ``tables`` one after the other (same flags in each)."""
        def join(name):
            parts = [getattr(t, name) for t in tables]
            return None if any(p is None for p in parts) else np.concatenate(parts)
        flags = {k: np.concatenate([t.flags[k] for t in tables]) for k in tables[0].flags}
        return cls(*(join(name) for name in ("mjd_text", "mjd", "site", "freq_mhz", "err_us",
                                              "residual_us", "residual_phase", "pulse_number")),
                   flags, join("toa_line"), join("orbital_phase"), join("left_out"),
                   all(t.converged for t in tables))

    def rms_us(self) -> float:
        """Root-mean-square residual about zero, µs (nan for an empty table)."""
        if len(self) == 0:
            return math.nan
        return float(np.sqrt(np.mean(self.residual_us ** 2)))

    def weighted_rms_us(self) -> float:
        """RMS about zero with weights 1/err_us², µs (nan for an empty table)."""
        if len(self) == 0:
            return math.nan
        weights = 1.0 / self.err_us ** 2
        return float(np.sqrt(np.sum(weights * self.residual_us ** 2) / np.sum(weights)))

    def write_csv(self, path) -> None:
        """Write ``residuals.csv`` atomically (temp file in the same folder, then rename)."""
        path = Path(path)
        bad = ~np.isfinite(self.residual_us) | ~np.isfinite(self.residual_phase)
        if np.any(bad):
            raise ValueError(f"{int(np.sum(bad))} non-finite residual(s); "
                             f"first at row {int(np.argmax(bad))}")
        with atomic_output(path) as handle:
            writer = csv.writer(handle, lineterminator="\n")
            columns = self.columns
            writer.writerow(columns)
            extra = {"toa_line": lambda i: str(self.toa_line[i]) if self.toa_line[i] else "",
                     "orbital_phase": lambda i: "%.9f" % self.orbital_phase[i]}
            before = [extra[name] for name in columns[len(CORE_COLUMNS):] if name in extra]
            flag_columns = list(self.flags.values())
            if "left_out" in columns:
                flag_columns.append(self.left_out)
            if not self.converged:
                flag_columns.append([NOT_CONVERGED_STATUS] * len(self))
            for i in range(len(self)):
                writer.writerow([
                    self.mjd_text[i],
                    self.site[i],
                    repr(float(self.freq_mhz[i])),
                    repr(float(self.err_us[i])),
                    "%.6f" % self.residual_us[i],
                    "%.12e" % self.residual_phase[i],
                    str(int(self.pulse_number[i])),
                    *(cell(i) for cell in before),
                    *(column[i] for column in flag_columns),
                ])


def _parse_float(text: str, path, line: int, name: str, *, positive: bool = False,
                 allow_inf: bool = False) -> float:
    try:
        value = float(text)
    except ValueError:
        raise InputError(f"not a number: {text!r}", path=path, line=line, field=name) from None
    if math.isnan(value) or (math.isinf(value) and not (allow_inf and value > 0)):
        allowed = "a finite number" + (" or inf" if allow_inf else "")
        raise InputError(f"{text!r} is not allowed here; expected {allowed}",
                         path=path, line=line, field=name)
    if positive and not value > 0:
        raise InputError(f"must be > 0, got {text!r}", path=path, line=line, field=name)
    return value


def read_csv(path) -> ResidualTable:
    """Read a ``residuals.csv`` written by :meth:`ResidualTable.write_csv`.

    Lines starting with ``#`` before the header are comments and are skipped.
    Raises :class:`InputError` naming the file, line (1-based) and column for a
    missing file, missing or duplicate columns, wrong field counts or bad values.

    A well-formed table is split and parsed in one pass by numpy's C reader
    (~2 s per million rows, against ~5 s row by row; lines with quoted cells are
    checked against the csv module); anything that pass does not accept as
    plainly valid is read again row by row (:func:`_read_rows`, the reference),
    which gives the same table for valid input and the error naming the first
    bad line and column otherwise.
    """
    path = str(path)
    try:
        with open(path, newline="", encoding="utf-8-sig") as handle:
            text = handle.read()
    except OSError as exc:
        raise InputError(f"cannot read residuals table: {exc.strerror}", path=path) from None
    except UnicodeDecodeError as exc:
        raise InputError(f"not UTF-8 text (byte {exc.start + 1})", path=path) from None
    # lines split as a text file with newline='' splits them (as the csv module counts)
    lines = list(io.StringIO(text, newline=""))
    header, start = _header(lines, path)
    table = (_read_columns(lines[start:], header, '"' in text) if len(lines) > start
             else None)
    return table if table is not None else _read_rows(lines, start, header, path)


def _header(lines: list[str], path: str) -> tuple[list[str], int]:
    """The header's column names and the index of the first line after it."""
    for index, line in enumerate(lines):
        if line.lstrip().startswith("#"):
            continue                      # a comment before the header
        row = next(csv.reader([line]), [])
        if any(cell.strip() for cell in row):
            header = [cell.strip() for cell in row]
            break
    else:
        raise InputError("empty residuals table: no header line", path=path, line=1)
    seen = set()
    for name in header:
        if not name:
            raise InputError("empty column name in header", path=path, line=index + 1)
        if name in seen:
            raise InputError("column named twice in header", path=path,
                             line=index + 1, field=name)
        seen.add(name)
    missing = [name for name in CORE_COLUMNS if name not in seen]
    if missing:
        raise InputError(f"missing column(s) {', '.join(missing)}; required columns: "
                         f"{', '.join(CORE_COLUMNS)}", path=path, line=index + 1,
                         field=missing[0])
    return header, index + 1


# Characters a plainly valid cell may hold (ASCII only: anything else, such as
# other scripts' digits, goes to the row-by-row reader).
_DECIMAL_CHARS = re.compile(r"[0-9.+\-]*")
_DIGIT_CHARS = re.compile(r"[0-9]*")
_FLOAT_COLUMNS = ("freq_mhz", "err_us", "residual_us", "residual_phase", "orbital_phase")


def _integers(cells: list[str]) -> np.ndarray | None:
    try:
        return np.fromiter(map(int, cells), dtype=np.int64, count=len(cells))
    except (ValueError, OverflowError):
        return None


def _split_by_numpy(rows: list[str], header: list[str], quoted: bool):
    """The lines split in one pass by numpy's C reader (np.loadtxt; quoted
    cells too when ``quoted``): number columns, the MJD as a float and the
    pulse number parsed (it takes a subset of what Python's float() and the
    row reader's integers take), the other columns as text. None if a cell
    does not parse or the lines do not give one row each."""
    kind = dict.fromkeys(_FLOAT_COLUMNS, float) | {"pulse_number": np.int64}
    types = [(f"c{j}", kind.get(name, object)) for j, name in enumerate(header)]
    try:
        cells = np.loadtxt(rows, dtype=types + [("mjd_value", float)], delimiter=",",
                           comments=None, quotechar='"' if quoted else None, ndmin=1,
                           usecols=[*range(len(header)), header.index("mjd")])
    except ValueError:
        return None
    if len(cells) != len(rows):
        return None
    text = {name: cells[f"c{j}"].tolist() for j, name in enumerate(header) if name not in kind}
    numbers = {name: cells[f"c{j}"] for j, name in enumerate(header) if name in kind}
    return text, numbers | {"mjd": cells["mjd_value"]}


def _quoted_rows_agree(rows: list[str], header: list[str], text: dict, numbers: dict) -> bool:
    """The lines holding '"', split by the csv module (as the row reader does),
    give the fields numpy's reader gave: the same number, text and values."""
    marked = [i for i, line in enumerate(rows) if '"' in line]
    parsed = list(csv.reader([rows[i] for i in marked]))
    if len(parsed) != len(marked) or any(len(row) != len(header) for row in parsed):
        return False
    if any("\n" in cell or "\r" in cell for row in parsed for cell in row):
        return False                      # a quote open at the line's end: cells over lines
    try:
        return all(text[name][i] == cell if name in text else
                   (int if name == "pulse_number" else float)(cell) == numbers[name][i]
                   for i, row in zip(marked, parsed) for name, cell in zip(header, row))
    except ValueError:
        return False


def _read_columns(body: list[str], header: list[str], quoted: bool) -> ResidualTable | None:
    """The table from the lines after the header, parsed column by column; None
    where a line or cell is anything but plainly valid (the caller then reads
    the rows one by one, to name the bad one). ``quoted``: the file holds '"'."""
    rows = [line for line in body if line.strip()]
    plain = [line for line in rows if '"' not in line] if quoted else rows
    if not rows or set(map(str.count, plain, [","] * len(plain))) - {len(header) - 1}:
        return None                       # a line without quotes has a wrong field count
    split = _split_by_numpy(rows, header, quoted)
    if split is None or (quoted and not _quoted_rows_agree(rows, header, *split)):
        return None
    text, numbers = split
    text = {name: list(map(str.strip, cells)) for name, cells in text.items()}
    if not (_DECIMAL_CHARS.fullmatch("".join(text["mjd"])) and all(text["site"])
            and _DIGIT_CHARS.fullmatch("".join(text.get("toa_line", [])))):
        return None
    toa_line = None
    if "toa_line" in text:
        toa_line = _integers([cell or "0" for cell in text["toa_line"]])
        if toa_line is None:
            return None
    freq_mhz, err_us = numbers["freq_mhz"], numbers["err_us"]
    if not (np.all(freq_mhz > 0) and np.all(np.isfinite(err_us) & (err_us > 0))
            and all(np.all(np.isfinite(numbers[name])) for name in
                    ("residual_us", "residual_phase", "orbital_phase") if name in numbers)):
        return None
    status = set(text.get("fit_status", []))
    if status - {"", NOT_CONVERGED_STATUS}:
        return None
    flag_names = [name for name in header if name not in CORE_COLUMNS + OPTIONAL_COLUMNS]
    return ResidualTable(text["mjd"], numbers["mjd"], text["site"], freq_mhz, err_us,
                         numbers["residual_us"], numbers["residual_phase"],
                         numbers["pulse_number"], {name: text[name] for name in flag_names},
                         toa_line, numbers.get("orbital_phase"), text.get("left_out"),
                         NOT_CONVERGED_STATUS not in status)


def _read_rows(lines: list[str], start: int, header: list[str], path: str) -> ResidualTable:
    """The reference reader: the rows after the header one by one with the csv
    module, checking each cell and raising :class:`InputError` at the first bad
    one (slow: ~5 s per million rows)."""
    position = {name: header.index(name) for name in header}
    flag_names = [name for name in header if name not in CORE_COLUMNS + OPTIONAL_COLUMNS]
    optional = [name for name in OPTIONAL_COLUMNS if name in position]
    rows: dict[str, list] = {name: [] for name in header}
    reader = csv.reader(lines[start:])
    for row in reader:
        line = start + reader.line_num
        if not any(cell.strip() for cell in row):
            continue
        if len(row) != len(header):
            raise InputError(f"{len(row)} fields, header has {len(header)}",
                             path=path, line=line)
        cell = {name: row[position[name]].strip() for name in header}
        if not _MJD_TEXT.match(cell["mjd"]):
            raise InputError(f"not a decimal MJD: {cell['mjd']!r}", path=path,
                             line=line, field="mjd")
        if not cell["site"]:
            raise InputError("empty site name", path=path, line=line, field="site")
        if not _INTEGER_TEXT.match(cell["pulse_number"]):
            raise InputError(f"not an integer: {cell['pulse_number']!r}", path=path,
                             line=line, field="pulse_number")
        pulse = int(cell["pulse_number"])
        if not -2**63 <= pulse < 2**63:
            raise InputError(f"pulse number out of the 64-bit range: {pulse}",
                             path=path, line=line, field="pulse_number")
        rows["mjd"].append(cell["mjd"])
        rows["site"].append(cell["site"])
        rows["freq_mhz"].append(_parse_float(cell["freq_mhz"], path, line, "freq_mhz",
                                             positive=True, allow_inf=True))
        rows["err_us"].append(_parse_float(cell["err_us"], path, line, "err_us",
                                           positive=True))
        rows["residual_us"].append(_parse_float(cell["residual_us"], path, line,
                                                "residual_us"))
        rows["residual_phase"].append(_parse_float(cell["residual_phase"], path, line,
                                                   "residual_phase"))
        rows["pulse_number"].append(pulse)
        for name in flag_names:
            rows[name].append(cell[name])
        if "toa_line" in optional:
            if cell["toa_line"] and not cell["toa_line"].isdigit():
                raise InputError(f"not a line number: {cell['toa_line']!r}", path=path,
                                 line=line, field="toa_line")
            rows["toa_line"].append(int(cell["toa_line"] or 0))
        if "orbital_phase" in optional:
            rows["orbital_phase"].append(_parse_float(cell["orbital_phase"], path, line,
                                                      "orbital_phase"))
        if "left_out" in optional:
            rows["left_out"].append(cell["left_out"])
        if "fit_status" in optional:
            if cell["fit_status"] not in ("", NOT_CONVERGED_STATUS):
                raise InputError(f"fit_status must be empty or {NOT_CONVERGED_STATUS!r}, "
                                 f"found {cell['fit_status']!r}", path=path, line=line,
                                 field="fit_status")
            rows["fit_status"].append(cell["fit_status"])

    table = ResidualTable.from_columns(
        rows["mjd"], rows["site"], np.array(rows["freq_mhz"], dtype=float),
        np.array(rows["err_us"], dtype=float), np.array(rows["residual_us"], dtype=float),
        np.array(rows["residual_phase"], dtype=float),
        np.array(rows["pulse_number"], dtype=np.int64),
        {name: rows[name] for name in flag_names})
    for name in optional:
        if name == "fit_status":
            table.converged = NOT_CONVERGED_STATUS not in rows[name]
            continue
        setattr(table, name, np.asarray(rows[name]) if name != "left_out" else
                _text_array(rows[name]))
    return table
