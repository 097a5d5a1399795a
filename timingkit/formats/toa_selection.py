"""Choosing TOAs by rule: one grammar for the ``# rules`` block of an exclusion
list and for the command line's ``--select`` and ``--leave-out`` options.

A rule is ``FIELD OP VALUE`` (blanks around OP are allowed):

- ``FIELD``: ``mjd``, ``err_us``, ``freq_mhz``, ``line`` (the TOA's line in its
  table), ``site``, or the name of any flag column of the TOA table.
- ``=`` takes a comma list; for the numeric fields (mjd, err_us, freq_mhz,
  line) an item may also be an inclusive range ``A..B`` with either end open
  (``A..``, ``..B``). ``>``, ``>=``, ``<``, ``<=`` take one number (numeric
  fields only).

MJDs are compared exactly, as decimal text (the TOA table's own rule), the
other numbers as float64. With a ``canonical_site`` function site names match
any of a site's names.

How rules combine: a TOA is left out when it matches any leave-out rule; with
``select`` rules a TOA is kept only when, for every field they name, it
matches at least one of them (``site=a --select site=b`` keeps both sites;
``mjd=..58000 --select site=a`` keeps site a before MJD 58000).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from timingkit.formats.errors import InputError, excerpt
from timingkit.formats.mjd_text import mjd_problem, parse_mjd_strings
from timingkit.formats.toa_table import ToaTable

NUMERIC_FIELDS = ("mjd", "err_us", "freq_mhz", "line")
_RULE_RE = re.compile(r"^\s*([A-Za-z_][A-Za-z0-9_.+-]*?)\s*(>=|<=|=|>|<)\s*(\S+)(?:\s+(.*?))?\s*$")
_OPERATORS = {">": (False, None), ">=": (True, None), "<": (None, False), "<=": (None, True)}


@dataclass(frozen=True)
class _Interval:
    """low/high: None (open), a float, or an exact MJD (day, frac); *_closed: inclusive."""
    low: object = None
    low_closed: bool = True
    high: object = None
    high_closed: bool = True


@dataclass(frozen=True)
class SelectionRule:
    """One parsed rule. ``reason``: why the TOAs it matches are left out (the
    rule's own text when none is given); ``origin``: where it was written
    (``--select``, ``bad.txt:12``), for messages."""
    field: str
    operator: str
    value_text: str
    reason: str = ""
    origin: str = ""
    _values: tuple = field(default=(), compare=False, repr=False)

    @property
    def text(self) -> str:
        return f"{self.field}{self.operator}{self.value_text}"

    @property
    def why(self) -> str:
        return self.reason or self.text

    def applies_to(self, toas: ToaTable) -> bool:
        """True when the table has the rule's field (a flag rule on a table
        without that flag matches nothing)."""
        if self.field == "line":
            return toas.line_numbers is not None
        return self.field in NUMERIC_FIELDS or self.field == "site" or self.field in toas.flags

    def matches(self, toas: ToaTable, canonical_site: Callable[[str], str] | None = None
                ) -> np.ndarray:
        """Boolean mask of the TOAs this rule matches."""
        if not self.applies_to(toas):
            return np.zeros(len(toas), dtype=bool)
        if self.field in NUMERIC_FIELDS:
            return _numeric_mask(self, toas)
        column = toas.site if self.field == "site" else toas.flags[self.field]
        wanted = set(self._values)
        if self.field == "site" and canonical_site is not None:
            names = np.unique(column)
            wanted = {canonical_site(v) for v in wanted}
            hits = [n for n in names.tolist() if canonical_site(n) in wanted]
            return np.isin(column, hits)
        return np.isin(column, list(wanted))


def parse_rule(text: str, *, reason: str | None = None, origin: str = "", path=None,
               line=None, option: str | None = None) -> SelectionRule:
    """Parse ``FIELD OP VALUE [reason ...]``; ``reason`` is used when the text
    gives none. Errors name ``path``/``line``, or the command-line ``option``."""
    # every message quotes pieces of the rule: quoted, so shared outputs leave them out
    where = {"path": path, "line": line, "field": option, "quoted": (text.strip(),)}
    match = _RULE_RE.match(text)
    if not match:
        raise InputError(f"{excerpt(text.strip())} is not a rule; write FIELD=VALUES, "
                         "FIELD>NUMBER or FIELD<NUMBER, e.g. mjd=58000..58500, "
                         "site=desert-dish, err_us>5", **where)
    name, operator, value, tail = match.groups()
    where["quoted"] += (value,) if name in (*NUMERIC_FIELDS, "site") else (name, value)
    values = _parse_values(name, operator, value, where)
    return SelectionRule(field=name, operator=operator, value_text=value,
                         reason=tail or reason or "", origin=origin,
                         _values=values)


def _parse_values(name: str, operator: str, value: str, where: dict) -> tuple:
    numeric = name in NUMERIC_FIELDS
    if operator != "=":
        if not numeric:
            raise InputError(f"'{name}' is text: use {name}=VALUE[,VALUE...] (the comparisons "
                             f"> and < are for {', '.join(NUMERIC_FIELDS)})", **where)
        low_closed, high_closed = _OPERATORS[operator]
        number = _number(name, value, where)
        if low_closed is not None:
            return (_Interval(low=number, low_closed=low_closed),)
        return (_Interval(high=number, high_closed=high_closed),)
    items = value.split(",")
    if any(not item for item in items):
        raise InputError(f"empty item in {excerpt(value)}", **where)
    if not numeric:
        return tuple(items)
    intervals = []
    for item in items:
        if ".." in item:
            low, _, high = item.partition("..")
            if not low and not high:
                raise InputError(f"'..' needs at least one end, e.g. {name}=58000..", **where)
            intervals.append(_Interval(low=_number(name, low, where) if low else None,
                                       high=_number(name, high, where) if high else None))
        else:
            number = _number(name, item, where)
            intervals.append(_Interval(low=number, high=number))
    return tuple(intervals)


def _number(name: str, text: str, where: dict):
    where = {**where, "quoted": (*where.get("quoted", ()), text)}
    if name == "mjd":
        problem = mjd_problem(text)
        if problem:
            raise InputError(problem, **where)
        day, frac = parse_mjd_strings([text])
        return float(day[0]), float(frac[0])
    try:
        number = float(text)
    except ValueError:
        raise InputError(f"{excerpt(text)} is not a number ({name})", **where) from None
    if np.isnan(number):
        raise InputError(f"{excerpt(text)} is not a number ({name})", **where)
    return number


def _at_least(values, bound, closed: bool) -> np.ndarray:
    if isinstance(bound, tuple):                       # exact MJD: day, then fraction
        day, frac = values
        later = (frac >= bound[1]) if closed else (frac > bound[1])
        return (day > bound[0]) | ((day == bound[0]) & later)
    return values >= bound if closed else values > bound


def _at_most(values, bound, closed: bool) -> np.ndarray:
    if isinstance(bound, tuple):
        day, frac = values
        earlier = (frac <= bound[1]) if closed else (frac < bound[1])
        return (day < bound[0]) | ((day == bound[0]) & earlier)
    return values <= bound if closed else values < bound


def _numeric_mask(rule: SelectionRule, toas: ToaTable) -> np.ndarray:
    values = {"mjd": (toas.mjd_day, toas.mjd_frac), "err_us": toas.err_us,
              "freq_mhz": toas.freq_mhz, "line": toas.line_numbers}[rule.field]
    mask = np.zeros(len(toas), dtype=bool)
    for interval in rule._values:
        inside = np.ones(len(toas), dtype=bool)
        if interval.low is not None:
            inside &= _at_least(values, interval.low, interval.low_closed)
        if interval.high is not None:
            inside &= _at_most(values, interval.high, interval.high_closed)
        mask |= inside
    return mask


def check_select_rules(rules, toas: ToaTable) -> None:
    """A ``select`` rule naming a column the table lacks is an error (it would
    keep nothing); leave-out rules only warn (see :func:`rules_matching_nothing`)."""
    for rule in rules:
        if not rule.applies_to(toas):
            columns = ", ".join(["mjd", "err_us", "freq_mhz", "site", *toas.flags]
                                + (["line"] if toas.line_numbers is not None else []))
            raise InputError(f"rule {excerpt(rule.text)}: the TOA table has no column "
                             f"'{rule.field}' (its columns: {columns})", path=toas.path,
                             field=rule.origin, quoted=(rule.text, rule.field))


def keep_mask(rules, toas: ToaTable, canonical_site=None) -> np.ndarray:
    """TOAs kept by ``select`` rules: for each field named, any rule on it matches."""
    keep = np.ones(len(toas), dtype=bool)
    by_field: dict[str, np.ndarray] = {}
    for rule in rules:
        hit = rule.matches(toas, canonical_site)
        by_field[rule.field] = by_field.get(rule.field, np.zeros(len(toas), dtype=bool)) | hit
    for hit in by_field.values():
        keep &= hit
    return keep


def rules_matching_nothing(rules, masks) -> list[str]:
    """Warnings for leave-out rules that match no TOA."""
    return [f"rule {rule.text!r} ({rule.origin}) matches no TOA" for rule, mask in zip(rules, masks)
            if not mask.any()]
