"""The TOA table in memory: one row per arrival time (exact MJD, error, frequency, site, pulse number, flags)."""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.formats.mjd_text import MAX_INT_DIGITS, format_mjd, parse_mjd_strings
from timingkit.formats.quantities import in_unit, is_quantity, is_time, time_to_mjd_parts

REQUIRED_COLUMNS = ("mjd", "err_us", "freq_mhz", "site")
SPLIT_RE = re.compile(r"[ \t\r\n\v\f,]+")   # field separators: runs of whitespace and/or commas
PULSE_COLUMN = "pulse"
# the columns residuals.csv adds to a TOA table's (timingkit.outputs.residual_table):
# a flag named so would clash with them, so no flag may be
OUTPUT_COLUMNS = ("residual_us", "residual_phase", "pulse_number", "toa_line", "orbital_phase",
                  "left_out", "fit_status")


def check_flag_name(name: str, path=None, line: int | None = None) -> None:
    """Refuse a flag named like a column of the TOA table itself or one that timingkit
    writes beside the flags (InputError naming ``path``, ``line`` and the flag)."""
    if name in REQUIRED_COLUMNS or name == PULSE_COLUMN:
        raise InputError(f"a flag may not be named {name!r}: the TOA table has that column "
                         "itself", path=path, line=line, field=name)
    if name in OUTPUT_COLUMNS:
        raise InputError(f"a flag may not be named {name!r}: timingkit writes a column of that "
                         f"name in residuals.csv (its own columns: {', '.join(OUTPUT_COLUMNS)}); "
                         "rename the flag", path=path, line=line, field=name)


class FlagColumn:
    """One flag column stored compactly: ``codes`` (int32, one per TOA) index
    ``values``, the distinct strings. A million TOAs with a few backend names
    cost 4 MB, and one long value is stored once, not once per row.

    It behaves as a 1-d array of str where the code uses it: ``len``, iteration,
    ``column == "x"`` (a boolean mask), indexing (a str for one row, a FlagColumn
    for a mask, slice or index array) and ``np.asarray`` (an object array whose
    entries share the distinct strings).
    """

    __slots__ = ("codes", "values")
    ndim = 1

    def __init__(self, codes, values):
        self.codes = np.asarray(codes, dtype=np.int32)
        self.values = tuple(str(v) for v in values)

    @classmethod
    def of(cls, column) -> "FlagColumn":
        """A FlagColumn of any sequence of strings (a FlagColumn is returned as is)."""
        if isinstance(column, FlagColumn):
            return column
        strings = np.atleast_1d(np.asarray(column, dtype=str))
        values, codes = np.unique(strings, return_inverse=True)
        return cls(codes.reshape(-1), values.tolist())

    @property
    def shape(self) -> tuple[int]:
        return self.codes.shape

    def __len__(self) -> int:
        return len(self.codes)

    def _objects(self) -> np.ndarray:
        table = np.empty(len(self.values), dtype=object)
        table[:] = self.values
        return table

    def __array__(self, dtype=None, copy=None):
        out = self._objects()[self.codes] if self.values else np.empty(len(self), dtype=object)
        return out if dtype is None else out.astype(dtype)

    def __iter__(self):
        return (self.values[c] for c in self.codes.tolist())

    def tolist(self) -> list[str]:
        return list(self)

    def __getitem__(self, index):
        if isinstance(index, (int, np.integer)):
            return self.values[int(self.codes[index])]
        return FlagColumn(self.codes[index], self.values)

    def _code_of(self, value) -> int:
        try:
            return self.values.index(str(value))
        except ValueError:
            return -1

    def __eq__(self, other):
        if isinstance(other, str):
            return self.codes == self._code_of(other)
        return np.asarray(self) == np.asarray(other)

    def __ne__(self, other):
        return ~np.asarray(self.__eq__(other), dtype=bool)

    __hash__ = None

    def present_values(self) -> list[str]:
        """The distinct values that occur, sorted."""
        return sorted(self.values[c] for c in np.unique(self.codes).tolist())

    def max_length(self) -> int:
        return max((len(self.values[c]) for c in np.unique(self.codes).tolist()), default=0)

    def __repr__(self) -> str:
        return f"FlagColumn({len(self)} rows, {len(self.values)} distinct values)"


@dataclass(eq=False)
class ToaTable:
    """A table of times of arrival.

    ``mjd_text``: the MJD strings as read (UTC at the site, or TT for site
    'geocentre', TDB for 'ssb'); ``mjd_day``: integer-valued float64 MJD day;
    ``mjd_frac``: float64 fraction of day in [0, 1), correctly rounded from
    the text; ``err_us``: 1-sigma uncertainty in microseconds; ``freq_mhz``:
    observing frequency in MHz (``inf`` = infinite frequency, no dispersion);
    ``site``: site names (resolved against the site table elsewhere);
    ``pulse``: int64 pulse numbers or None; ``flags``: column name ->
    :class:`FlagColumn` (compact: codes + distinct values); ``line_numbers``: 1-based line of each TOA in its file (None for
    tables made in code); ``path``: source file or None.
    """

    mjd_text: np.ndarray
    mjd_day: np.ndarray
    mjd_frac: np.ndarray
    err_us: np.ndarray
    freq_mhz: np.ndarray
    site: np.ndarray
    pulse: np.ndarray | None = None
    flags: dict = field(default_factory=dict)
    line_numbers: np.ndarray | None = None
    path: str | None = None

    def __post_init__(self):
        self.mjd_text = np.atleast_1d(np.asarray(self.mjd_text, dtype=str))
        self.mjd_day = np.atleast_1d(np.asarray(self.mjd_day, dtype=np.float64))
        self.mjd_frac = np.atleast_1d(np.asarray(self.mjd_frac, dtype=np.float64))
        self.err_us = np.atleast_1d(np.asarray(self.err_us, dtype=np.float64))
        self.freq_mhz = np.atleast_1d(np.asarray(self.freq_mhz, dtype=np.float64))
        self.site = np.atleast_1d(np.asarray(self.site, dtype=str))
        if self.pulse is not None:
            self.pulse = np.atleast_1d(np.asarray(self.pulse, dtype=np.int64))
        self.flags = {str(k): FlagColumn.of(v) for k, v in (self.flags or {}).items()}
        if self.line_numbers is not None:
            self.line_numbers = np.atleast_1d(np.asarray(self.line_numbers, dtype=np.int64))
        if self.path is not None:
            self.path = os.fspath(self.path)
        n = len(self.mjd_text)
        arrays = {"mjd_day": self.mjd_day, "mjd_frac": self.mjd_frac,
                  "err_us": self.err_us, "freq_mhz": self.freq_mhz, "site": self.site,
                  "pulse": self.pulse, "line_numbers": self.line_numbers}
        arrays.update({f"flags[{k!r}]": v for k, v in self.flags.items()})
        for name, arr in arrays.items():
            if arr is not None and (arr.ndim != 1 or len(arr) != n):
                raise ValueError(f"ToaTable.{name} has shape {arr.shape}, expected ({n},) "
                                 f"like mjd_text")
        for name in self.flags:
            check_flag_name(name, self.path)

    def __len__(self) -> int:
        return len(self.mjd_text)

    def column_names(self) -> list[str]:
        """Column names in the order ``write_toa_table`` writes them."""
        names = list(REQUIRED_COLUMNS)
        if self.pulse is not None:
            names.append(PULSE_COLUMN)
        names.extend(self.flags)
        return names

    def select(self, mask_or_index) -> "ToaTable":
        """A new table with the rows picked by a boolean mask, index array,
        slice or single index (always returns a table, never a row)."""
        idx = mask_or_index
        if not isinstance(idx, slice):
            idx = np.asarray(idx)
            if idx.ndim == 0:
                idx = idx.reshape(1)
            if idx.dtype == bool and len(idx) != len(self):
                raise IndexError(f"boolean mask has {len(idx)} entries for {len(self)} TOAs")
        pick = (lambda a: None if a is None else a[idx])
        return ToaTable(mjd_text=self.mjd_text[idx], mjd_day=self.mjd_day[idx],
                    mjd_frac=self.mjd_frac[idx], err_us=self.err_us[idx],
                    freq_mhz=self.freq_mhz[idx], site=self.site[idx],
                    pulse=pick(self.pulse),
                    flags={k: v[idx] for k, v in self.flags.items()},
                    line_numbers=pick(self.line_numbers), path=self.path)

    def times(self):
        """The arrival times as a ``SplitTime`` labelled 'utc'; the true scale
        per site (TT for geocentre, TDB for ssb) is applied by the time-scale
        code, not here."""
        # imported here: the format layer should not pull in the time layer at import
        from timingkit.numerics.timearray import SplitTime
        return SplitTime(self.mjd_day.copy(), self.mjd_frac.copy(), scale="utc")

    @classmethod
    def from_arrays(cls, mjd_day, mjd_frac=None, err_us=None, freq_mhz=None, site=None,
                    flags=None, pulse=None, mjd_text=None) -> "ToaTable":
        """A table made in code (simulations, selections written back).

        The times are whole MJD days ``mjd_day`` plus fractions ``mjd_frac``, or
        an astropy ``Time`` as ``mjd_day`` (``mjd_frac`` omitted), converted to
        each row's scale (UTC at a ground site, TT at the geocentre, TDB at the
        barycentre) without loss. ``err_us`` and ``freq_mhz`` are numbers in µs
        and MHz, or astropy quantities, converted (a quantity of another kind
        is refused).
        ``mjd_day``/``mjd_frac`` are renormalised so the fraction is in [0, 1).
        Without ``mjd_text`` the text is made with 20 significant digits (15
        decimals for 5-digit MJDs, at most 16), and the parts are then set
        from that text, so text and parts agree exactly (the fraction moves
        by at most 5e-16 day = 43 ps). With ``mjd_text`` the text must parse
        to exactly the given parts. ``err_us``, ``freq_mhz``, ``site`` and
        flag values may be scalars (repeated for every TOA).
        """
        missing = [name for name, v in (("err_us", err_us), ("freq_mhz", freq_mhz),
                                        ("site", site)) if v is None]
        if missing:
            raise InputError(f"give {', '.join(missing)} for the TOAs", field=missing[0])
        err_us = in_unit(err_us, "us", "err_us")
        freq_mhz = in_unit(freq_mhz, "MHz", "freq_mhz")
        if is_time(mjd_day):
            if mjd_frac is not None:
                raise InputError("with an astropy Time give no separate MJD fraction",
                                 field="mjd_frac")
            sites_in = np.atleast_1d(np.asarray(site, dtype=str))
            n_rows = max(len(mjd_day) if not mjd_day.isscalar else 1, len(sites_in))
            mjd_day, mjd_frac = time_to_mjd_parts(
                mjd_day, np.broadcast_to(sites_in, (n_rows,)))
        elif is_quantity(mjd_day) or is_quantity(mjd_frac):
            raise InputError("an MJD given as a quantity is ambiguous (which time scale?): "
                             "give whole days and fractions as numbers, or an astropy Time",
                             field="mjd")
        day = np.atleast_1d(np.asarray(mjd_day, dtype=np.float64))
        frac = np.atleast_1d(np.asarray(0.0 if mjd_frac is None else mjd_frac,
                                        dtype=np.float64))
        day, frac = np.broadcast_arrays(day, frac)
        n = len(day)
        if not (np.all(np.isfinite(day)) and np.all(np.isfinite(frac))):
            raise InputError("MJD day and fraction must be finite", field="mjd")
        if np.any(day != np.round(day)):
            i = int(np.flatnonzero(day != np.round(day))[0])
            raise InputError(f"mjd_day must be whole days (row {i}: {float(day[i])!r}); give the "
                             "fraction of the day separately, or an astropy Time (one "
                             "float64 MJD holds the time only to ~1 µs)", field="mjd")
        shift = np.floor(frac)
        day = day + shift
        frac = frac - shift
        carry = frac >= 1.0
        day = np.where(carry, day + 1.0, day)
        frac = np.where(carry, 0.0, frac)
        if np.any(day < 0):
            i = int(np.flatnonzero(day < 0)[0])
            raise InputError(f"negative MJD (row {i})", field="mjd")
        if np.any(day >= 10.0 ** MAX_INT_DIGITS):
            i = int(np.flatnonzero(day >= 10.0 ** MAX_INT_DIGITS)[0])
            raise InputError(f"MJD too large (row {i}: day {day[i]:.0f})", field="mjd")
        err = np.broadcast_to(np.asarray(err_us, dtype=np.float64), (n,)).copy()
        freq = np.broadcast_to(np.asarray(freq_mhz, dtype=np.float64), (n,)).copy()
        sites = np.broadcast_to(np.asarray(site, dtype=str), (n,)).copy()
        bad = ~(np.isfinite(err) & (err > 0))
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(f"must be finite and > 0 (row {i}: {float(err[i])!r})", field="err_us")
        bad = np.isnan(freq) | ~(freq > 0)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(f"must be > 0 or inf (row {i}: {float(freq[i])!r})", field="freq_mhz")
        flag_arrays = {k: np.broadcast_to(np.asarray(v, dtype=str), (n,)).copy()
                       for k, v in (flags or {}).items()}
        pulses = None
        if pulse is not None:
            pulses = np.broadcast_to(np.asarray(pulse), (n,))
            if not np.issubdtype(pulses.dtype, np.integer):
                as_float = pulses.astype(np.float64)
                if np.any(as_float != np.round(as_float)) or not np.all(np.isfinite(as_float)):
                    raise InputError("pulse numbers must be integers", field=PULSE_COLUMN)
            pulses = pulses.astype(np.int64)
        if mjd_text is None:
            text = format_mjd(day, frac)
            day, frac = parse_mjd_strings(text)
        else:
            text = np.atleast_1d(np.asarray(mjd_text, dtype=str))
            if len(text) != n:
                raise ValueError(f"mjd_text has {len(text)} entries for {n} TOAs")
            tday, tfrac = parse_mjd_strings(text)
            differ = (tday != day) | (tfrac != frac)
            if differ.any():
                i = int(np.flatnonzero(differ)[0])
                raise ValueError(f"mjd_text[{i}] = {text[i]!r} does not equal mjd_day + "
                                 f"mjd_frac = {day[i]!r} + {frac[i]!r} exactly")
        return cls(mjd_text=text, mjd_day=day, mjd_frac=frac, err_us=err, freq_mhz=freq,
                   site=sites, pulse=pulses, flags=flag_arrays, line_numbers=None, path=None)
