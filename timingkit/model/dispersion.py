"""Dispersion measure: its Taylor series about a DM epoch plus piecewise-
constant offsets over user-given MJD ranges; the cold-plasma delay at the
barycentric observing frequency (DESIGN.md §3).

Model-file keys of ``[dispersion]``:

- ``dm`` (pc cm^-3), ``epoch_mjd``, ``derivatives`` (pc cm^-3 per yr^k);
- ``dm_offset_ranges_mjd = [[start, end], ...]``: MJD ranges (of the TOAs
  as given, start <= mjd < end, not overlapping), and ``dm_offsets`` (pc
  cm^-3, one per range; zeros when omitted). Each offset is the parameter
  ``dispersion.dm_offsets.<k>`` and adds to the DM of every TOA in its range.

DM terms are measurable only with TOAs at two or more frequencies; the fitter
is told (``unconstrained``) which free DM terms lack them.
"""

from __future__ import annotations

from math import factorial

import numpy as np

from timingkit.geometry import delays
from timingkit.formats.errors import InputError
from timingkit.model.base import ModelSection, Evaluation
from timingkit.model.parameters import Parameter, derivative_unit, mjd_decimal, mjd_parts
from timingkit.formats.model_file import Key, take_section

DISPERSION_KEYS = {
    "dm": Key("number", default=0.0, unit="pc cm^-3", low=0.0, high=1e5),
    "epoch_mjd": Key("mjd"),
    "derivatives": Key("list_number", default=list, unit="pc cm^-3 / yr^k", low=-1e3, high=1e3),
    "dm_offset_ranges_mjd": Key("list_list_number", default=list, unit="MJD", low=0.0,
                                high=200000.0),
    "dm_offsets": Key("list_number", default=list, unit="pc cm^-3", low=-1e3, high=1e3),
}

# Two observing frequencies closer than this (relative) count as one.
DISTINCT_FREQUENCY_RATIO = 1e-3


class Dispersion(ModelSection):
    section = "dispersion"
    contribution = "propagation"

    def __init__(self, section: dict | None, path: str | None, default_epoch,
                 constant_s_mhz2: float = delays.DISPERSION_CONSTANT_S_MHZ2):
        self.constant_s_mhz2 = constant_s_mhz2
        s = take_section(section, "dispersion", DISPERSION_KEYS, path)
        unc = s.get("uncertainty", {})
        if s["dm"] < 0:
            raise InputError("dispersion measure must be >= 0", path=path, field="dispersion.dm")
        epoch = s["epoch_mjd"] if s["epoch_mjd"] is not None else default_epoch
        self.epoch_day, self.epoch_frac = mjd_parts(epoch)
        self.dm = Parameter("dispersion.dm", s["dm"], "pc cm^-3", uncertainty=unc.get("dm"),
                            description="dispersion measure")
        dunc = unc.get("derivatives") or []
        self.derivatives = [
            Parameter(f"dispersion.derivatives.{k}", v, derivative_unit("pc cm^-3", k + 1, "yr"),
                      uncertainty=_entry(dunc, k))
            for k, v in enumerate(s["derivatives"])]
        self.offset_ranges = _check_ranges(s["dm_offset_ranges_mjd"], path)
        values = s["dm_offsets"] or [0.0] * len(self.offset_ranges)
        if len(values) != len(self.offset_ranges):
            raise InputError(f"dm_offsets has {len(values)} values for "
                             f"{len(self.offset_ranges)} ranges in dm_offset_ranges_mjd",
                             path=path, field="dispersion.dm_offsets")
        ounc = unc.get("dm_offsets") or []
        self.offsets = [
            Parameter(f"dispersion.dm_offsets.{k}", v, "pc cm^-3", uncertainty=_entry(ounc, k),
                      description=f"DM offset over MJD {a:g}-{b:g}")
            for k, (v, (a, b)) in enumerate(zip(values, self.offset_ranges))]

    def parameters(self):
        return [self.dm, *self.derivatives, *self.offsets]

    def _years(self, ev: Evaluation) -> np.ndarray:
        hi, lo = ev.obs.tdb.seconds_since(self.epoch_day, self.epoch_frac)
        return (hi + lo) / delays.JULIAN_YEAR_S

    def dm_at(self, years: np.ndarray) -> np.ndarray:
        """DM of the Taylor series (without range offsets) at ``years`` from the epoch."""
        dm = np.full_like(years, self.dm.value)
        for k, p in enumerate(self.derivatives, start=1):
            dm = dm + p.value * years ** k / factorial(k)
        return dm

    def range_masks(self, obs) -> list[np.ndarray]:
        """Boolean mask of the TOAs inside each offset range (MJD as given)."""
        mjd = obs.toas.mjd_day + obs.toas.mjd_frac
        return [(mjd >= a) & (mjd < b) for a, b in self.offset_ranges]

    def apply(self, ev: Evaluation) -> None:
        years = self._years(ev)
        ev.extra["dispersion_years"] = years
        dm = self.dm_at(years)
        if self.offsets:
            masks = self.range_masks(ev.obs)
            ev.extra["dispersion_masks"] = masks
            for p, mask in zip(self.offsets, masks):
                dm = dm + np.where(mask, p.value, 0.0)
        ev.dispersion_s = delays.dispersion_delay_s(dm, ev.freq_bary_mhz, self.constant_s_mhz2)

    def partials(self, ev: Evaluation, names: list[str]) -> dict[str, np.ndarray]:
        unit = -delays.dispersion_delay_s(1.0, ev.freq_bary_mhz, self.constant_s_mhz2)  # dt_emit/dDM
        years = ev.extra["dispersion_years"]
        out = {}
        if self.dm.name in names:
            out[self.dm.name] = unit
        for k, p in enumerate(self.derivatives, start=1):
            if p.name in names:
                out[p.name] = unit * years ** k / factorial(k)
        if self.offsets:
            masks = ev.extra["dispersion_masks"]
            for p, mask in zip(self.offsets, masks):
                if p.name in names:
                    out[p.name] = np.where(mask, unit, 0.0)
        return out

    def unconstrained(self, obs, names: list[str]) -> list[str]:
        """Free DM terms whose TOAs do not span two or more frequencies."""
        problems = []
        series = [p.name for p in [self.dm, *self.derivatives] if p.name in names]
        if series:
            freqs = _distinct_frequencies(obs.toas.freq_mhz)
            if len(freqs) < 2:
                problems.append(f"{', '.join(series)} need TOAs at two or more observing "
                                f"frequencies (these have {len(freqs)}); fix them or add "
                                "multi-frequency TOAs")
        if any(p.name in names for p in self.offsets):
            for p, mask, (a, b) in zip(self.offsets, self.range_masks(obs), self.offset_ranges):
                if p.name not in names:
                    continue
                freqs = _distinct_frequencies(obs.toas.freq_mhz[mask])
                if len(freqs) < 2:
                    have = ("no TOAs" if not mask.any() else
                            f"{int(mask.sum())} TOAs at {len(freqs)} frequency"
                            f"{'' if len(freqs) == 1 else 'ies'}")
                    problems.append(f"{p.name} (MJD {a:g} to {b:g}) needs TOAs at two or more "
                                    f"frequencies inside its range (it has {have}); fix it, "
                                    "widen the range or add multi-frequency TOAs")
        return problems

    def to_section(self) -> dict:
        sec = {"dm": self.dm.value, "epoch_mjd": mjd_decimal(self.epoch_day, self.epoch_frac),
               "derivatives": [p.value for p in self.derivatives]}
        if self.offsets:
            sec["dm_offset_ranges_mjd"] = [[a, b] for a, b in self.offset_ranges]
            sec["dm_offsets"] = [p.value for p in self.offsets]
        return sec


def _distinct_frequencies(freq_mhz: np.ndarray) -> np.ndarray:
    """Finite observing frequencies, merging those within DISTINCT_FREQUENCY_RATIO."""
    f = np.sort(freq_mhz[np.isfinite(freq_mhz)])
    if f.size == 0:
        return f
    keep = np.concatenate([[True], np.diff(f) > DISTINCT_FREQUENCY_RATIO * f[1:]])
    return f[keep]


def _check_ranges(ranges, path) -> list[tuple[float, float]]:
    out = []
    for k, r in enumerate(ranges):
        where = f"dispersion.dm_offset_ranges_mjd.{k}"
        if len(r) != 2:
            raise InputError("each DM offset range is [start_mjd, end_mjd]", path=path, field=where)
        a, b = float(r[0]), float(r[1])
        if not (np.isfinite(a) and np.isfinite(b)) or not b > a:
            raise InputError(f"DM offset range [{a:g}, {b:g}] must have end > start", path=path,
                             field=where)
        out.append((a, b))
    order = sorted(range(len(out)), key=lambda k: out[k][0])
    for i, j in zip(order, order[1:]):
        if out[j][0] < out[i][1]:
            raise InputError(f"DM offset ranges {i} and {j} overlap ([{out[i][0]:g}, "
                             f"{out[i][1]:g}] and [{out[j][0]:g}, {out[j][1]:g}])", path=path,
                             field=f"dispersion.dm_offset_ranges_mjd.{j}")
    return out


def _entry(values, k):
    if k < len(values) and values[k] is not None and np.isfinite(values[k]):
        return float(values[k])
    return None
