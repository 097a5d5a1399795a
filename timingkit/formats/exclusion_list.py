"""The exclusion list: TOAs left out of a fit, named by their line in the TOA
table and their MJD, with a reason; optionally rules after a ``# rules`` line.

Format (plain UTF-8 text; the README shows it)::

    # TOAs left out of the fit
    line  mjd                     reason
    57    58849.000142889802083   interference
    # rules
    err_us>5                      too noisy
    backend=wide-b                firmware fault before the upgrade

``#`` starts a comment line, except the line ``# rules``, which starts the rules
block (to the end of the file; the grammar is timingkit.formats.toa_selection).
The first other line names the columns, split on blanks: ``mjd`` is required;
``line`` (the TOA's line in its table), ``site``, ``freq_mhz`` and ``reason``
are known (``-`` for a line, site or frequency not given); any other column is
kept as text. The
last column takes the rest of the line, so a final ``reason`` may hold blanks.

Matching (:func:`match_rows`): a row names the TOA on its ``line`` whose MJD is
the row's MJD (compared exactly, and site and frequency too when the row gives
them). When that line holds another TOA (the table changed), the row matches the
TOAs with its MJD (and site, frequency) anywhere, and a warning says so; rows
that match nothing are named in a warning.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from timingkit.formats.errors import InputError, excerpt
from timingkit.formats.mjd_text import mjd_problem, parse_mjd_strings
from timingkit.formats.textfile import read_text_file
from timingkit.formats.toa_selection import SelectionRule, parse_rule
from timingkit.formats.toa_table import ToaTable

KNOWN_COLUMNS = ("line", "mjd", "site", "freq_mhz", "reason")
RULES_MARKER = re.compile(r"^\s*#\s*rules\s*:?\s*$", re.IGNORECASE)
UNKNOWN_LINE = "-"
_SHOWN = 5                      # rows named in one warning before "and N more"


@dataclass(frozen=True)
class ExclusionRow:
    """One TOA to leave out. ``list_line``: the row's line in the exclusion
    list; ``toa_line``: the TOA's line in its table (None: unknown)."""
    list_line: int
    toa_line: int | None
    mjd_text: str
    site: str | None = None
    freq_mhz: float | None = None
    reason: str = ""
    other: dict = field(default_factory=dict)


@dataclass
class ExclusionList:
    path: str | None
    rows: list[ExclusionRow]
    rules: list[SelectionRule]

    @property
    def name(self) -> str:
        return self.path or "exclusion list"


def read_exclusion_list(path) -> ExclusionList:
    """Read and check an exclusion list; InputError names file, line and column."""
    path = str(path)
    text = read_text_file(path, "exclusion list")
    header: list[str] | None = None
    rows: list[ExclusionRow] = []
    rules: list[SelectionRule] = []
    in_rules = False
    for number, raw in enumerate(text.splitlines(), 1):
        stripped = raw.strip()
        if RULES_MARKER.match(raw):
            in_rules = True
            continue
        if not stripped or stripped.startswith("#"):
            continue
        if in_rules:
            rules.append(parse_rule(stripped, origin=f"{path}:{number}", path=path, line=number))
        elif header is None:
            header = _header(stripped.split(), path, number)
        else:
            rows.append(_row(stripped, header, path, number))
    return ExclusionList(path=path, rows=rows, rules=rules)


def _header(names: list[str], path: str, number: int) -> list[str]:
    if "mjd" not in names:
        raise InputError("the first line that is not a comment names the columns and must "
                         "include 'mjd' (e.g. 'line  mjd  reason'); to give only rules, start "
                         "with a line '# rules'", path=path, line=number)
    seen = set()
    for name in names:
        if name in seen:
            raise InputError("column named twice", path=path, line=number, field=name,
                             quoted=(name,))
        seen.add(name)
    return names


def _row(text: str, header: list[str], path: str, number: int) -> ExclusionRow:
    cells = text.split(None, len(header) - 1)
    values = dict(zip(header, cells))
    for name in header[len(cells):]:
        if name in ("mjd", "line"):
            raise InputError(f"{len(cells)} fields, the header has {len(header)}", path=path,
                             line=number, field=name)
    mjd = values["mjd"]
    problem = mjd_problem(mjd)
    if problem:
        raise InputError(problem, path=path, line=number, field="mjd", quoted=(mjd,))
    toa_line = None
    if values.get("line", UNKNOWN_LINE) != UNKNOWN_LINE:
        try:
            toa_line = int(values["line"])
        except ValueError:
            toa_line = 0
        if toa_line < 1:
            raise InputError(f"expected a line number (1, 2, ...) or '-', found "
                             f"{excerpt(values['line'])}", path=path, line=number, field="line",
                             quoted=(values["line"],))
    freq = None
    if values.get("freq_mhz", UNKNOWN_LINE) != UNKNOWN_LINE:
        try:
            freq = float(values["freq_mhz"])
        except ValueError:
            raise InputError(f"{excerpt(values['freq_mhz'])} is not a frequency in MHz",
                             path=path, line=number, field="freq_mhz",
                             quoted=(values["freq_mhz"],)) from None
    return ExclusionRow(list_line=number, toa_line=toa_line, mjd_text=mjd,
                        site=None if values.get("site") == UNKNOWN_LINE else values.get("site"),
                        freq_mhz=freq,
                        reason=values.get("reason", "").strip(),
                        other={k: v for k, v in values.items() if k not in KNOWN_COLUMNS})


def format_exclusion_list(rows, rules=(), comment: str = "TOAs left out of the fit") -> str:
    """Text of an exclusion list (aligned columns ``line mjd site freq_mhz reason``;
    site and freq_mhz only when every row has them) followed by the rules."""
    rows = list(rows)
    columns = ["line", "mjd"]
    if rows and all(r.site for r in rows):
        columns.append("site")
    if rows and all(r.freq_mhz is not None for r in rows):
        columns.append("freq_mhz")
    table = [columns + ["reason"]]
    for r in rows:
        cells = {"line": UNKNOWN_LINE if r.toa_line is None else str(r.toa_line),
                 "mjd": r.mjd_text, "site": r.site or "",
                 "freq_mhz": "" if r.freq_mhz is None else repr(float(r.freq_mhz))}
        table.append([cells[c] for c in columns] + [r.reason or "-"])
    widths = [max(len(row[k]) for row in table) for k in range(len(columns))]
    lines = [f"# {line}" for line in comment.splitlines()]
    lines += ["  ".join(c.ljust(w) for c, w in zip(row, widths)) + "  " + row[-1]
              for row in table]
    if rules:
        lines.append("# rules")
        lines += [f"{rule.text}  {rule.reason}".rstrip() for rule in rules]
    return "\n".join(lines) + "\n"


def match_rows(exclusions: ExclusionList, toas: ToaTable, canonical_site=None
               ) -> tuple[list[np.ndarray], list[str]]:
    """For each row, the indices of the TOAs it names (module docstring), and
    the warnings (rows matched by MJD only; rows matching nothing)."""
    canon = canonical_site or (lambda name: name)
    rows = exclusions.rows
    if not rows:
        return [], []
    day, frac = parse_mjd_strings([r.mjd_text for r in rows])
    by_time: dict[tuple[float, float], list[int]] = {}
    for i, key in enumerate(zip(toas.mjd_day.tolist(), toas.mjd_frac.tolist())):
        by_time.setdefault(key, []).append(i)
    by_line = {}
    if toas.line_numbers is not None:
        by_line = {int(n): i for i, n in enumerate(toas.line_numbers.tolist())}
    site_of = {}
    matches, moved, unmatched = [], [], []
    for row, d, f in zip(rows, day.tolist(), frac.tolist()):
        def fits(i, row=row):
            if row.site is not None:
                if toas.site[i] not in site_of:
                    site_of[toas.site[i]] = canon(str(toas.site[i]))
                if site_of[toas.site[i]] != canon(row.site):
                    return False
            return row.freq_mhz is None or toas.freq_mhz[i] == row.freq_mhz
        candidates = [i for i in by_time.get((d, f), []) if fits(i)]
        at_line = by_line.get(row.toa_line) if row.toa_line is not None else None
        if at_line is not None and at_line in candidates:
            matches.append(np.array([at_line]))
            continue
        matches.append(np.array(candidates, dtype=np.int64))
        if not candidates:
            unmatched.append(row)
        elif toas.line_numbers is not None and row.toa_line is not None:
            moved.append((row, candidates))
    return matches, _match_warnings(exclusions.name, toas, moved, unmatched)


def _match_warnings(name: str, toas: ToaTable, moved, unmatched) -> list[str]:
    warnings = []
    if moved:
        shown = "; ".join(f"list line {row.list_line} (line {row.toa_line}, mjd {row.mjd_text}) "
                          f"-> table line{'s' if len(c) > 1 else ''} "
                          f"{', '.join(str(toas.line_numbers[i]) for i in c)}"
                          for row, c in moved[:_SHOWN])
        warnings.append(f"{name}: {len(moved)} row(s) no longer match the TOA on their line; "
                        f"matched by MJD instead (the TOA table changed?): {shown}"
                        + _more(len(moved)))
    if unmatched:
        shown = "; ".join(f"list line {row.list_line} (line "
                          f"{UNKNOWN_LINE if row.toa_line is None else row.toa_line}, "
                          f"mjd {row.mjd_text})" for row in unmatched[:_SHOWN])
        warnings.append(f"{name}: {len(unmatched)} row(s) match no TOA of {toas.path or 'the table'}"
                        f": {shown}" + _more(len(unmatched)))
    return warnings


def _more(count: int) -> str:
    return f" and {count - _SHOWN} more" if count > _SHOWN else ""
