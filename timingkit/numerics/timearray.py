"""One two-part representation of times: whole MJD day + fraction of day.

``day`` holds integer-valued float64 MJDs, ``frac`` the fraction of the day
(float64, normally in [0, 1)). The pair resolves 1e-16 day (~10 ps) over any
span; differences are formed in double-double so nothing is lost. The
``scale`` names the time scale: 'utc', 'tt', 'tdb'.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from timingkit.numerics import ddmath

SECONDS_PER_DAY = 86400.0
MJD_TO_JD = 2400000.5


@dataclass(frozen=True)
class SplitTime:
    day: np.ndarray
    frac: np.ndarray
    scale: str

    def __post_init__(self):
        object.__setattr__(self, "day", np.atleast_1d(np.asarray(self.day, dtype=float)))
        object.__setattr__(self, "frac", np.atleast_1d(np.asarray(self.frac, dtype=float)))

    def __len__(self) -> int:
        return len(self.day)

    def __getitem__(self, index) -> "SplitTime":
        return SplitTime(self.day[index], self.frac[index], self.scale)

    @classmethod
    def from_mjd_dd(cls, hi, lo, scale: str) -> "SplitTime":
        """From a double-double MJD."""
        day = np.floor(hi)
        fhi, flo = ddmath.dd_add_d(hi, lo, -day)
        return cls(day, fhi + flo, scale).normalized()

    def normalized(self) -> "SplitTime":
        """Bring ``frac`` into [0, 1) by moving whole days into ``day``."""
        shift = np.floor(self.frac)
        return SplitTime(self.day + shift, self.frac - shift, self.scale)

    def add_seconds(self, seconds) -> "SplitTime":
        """This time plus ``seconds`` (float64 array), renormalised; the
        fraction is re-rounded once (error < 1e-17 day)."""
        return SplitTime(self.day, self.frac + np.asarray(seconds) / SECONDS_PER_DAY,
                         self.scale).normalized()

    def add_seconds_dd(self, sec_hi, sec_lo) -> "SplitTime":
        fhi, flo = ddmath.dd_add(self.frac, 0.0 * self.frac,
                                 *ddmath.dd_div_d(sec_hi, sec_lo, SECONDS_PER_DAY))
        return SplitTime(self.day, fhi + flo, self.scale).normalized()

    def with_scale(self, scale: str) -> "SplitTime":
        return SplitTime(self.day, self.frac, scale)

    def seconds_since(self, epoch_day: float, epoch_frac: float):
        """(hi, lo) double-double seconds from the epoch (same scale) to these times."""
        whole = (self.day - epoch_day) * SECONDS_PER_DAY          # exact
        part_hi, part_lo = ddmath.two_sum(self.frac, -epoch_frac)  # exact
        part_hi, part_lo = ddmath.dd_mul_d(part_hi, part_lo, SECONDS_PER_DAY)
        return ddmath.dd_add_d(part_hi, part_lo, whole)

    @property
    def jd1(self) -> np.ndarray:
        """Whole part of the Julian date (exact)."""
        return self.day + MJD_TO_JD

    @property
    def jd2(self) -> np.ndarray:
        return self.frac

    @property
    def mjd(self) -> np.ndarray:
        """Plain float MJD (~1 µs resolution): for plots and look-ups only."""
        return self.day + self.frac

    def mjd_strings(self, decimals: int = 15) -> list[str]:
        """Decimal MJD text, each fraction rounded to ``decimals`` places (<= 15:
        the float64 fraction resolves ~1e-16 day)."""
        if not 0 < decimals <= 15:
            raise ValueError("decimals must be 1..15")
        scale = 10 ** decimals
        units = np.round(self.frac * scale).astype(np.int64)
        day = self.day.astype(np.int64)
        carry = units // scale          # handles fractions rounding to 1 or below 0
        units = units - carry * scale
        day = day + carry
        return [f"{d}.{u:0{decimals}d}" for d, u in zip(day.tolist(), units.tolist())]
