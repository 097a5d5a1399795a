"""Dispersion measure and its Taylor series about a DM epoch; the cold-plasma
delay at the barycentric observing frequency (DESIGN.md §3)."""

from __future__ import annotations

from math import factorial

import numpy as np

from timingkit import delays
from timingkit.errors import InputError
from timingkit.model.base import Component, Evaluation
from timingkit.model.parameters import Parameter, mjd_decimal, mjd_parts
from timingkit.modelfile import Key, take_section

DISPERSION_KEYS = {
    "dm": Key("number", default=0.0, unit="pc cm^-3"),
    "epoch_mjd": Key("mjd"),
    "derivatives": Key("list_number", default=list, unit="pc cm^-3 / yr^k"),
}


class Dispersion(Component):
    section = "dispersion"
    kind = "delay"

    def __init__(self, section: dict | None, path: str | None, default_epoch):
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
            Parameter(f"dispersion.derivatives.{k}", v, f"pc cm^-3/yr^{k + 1}",
                      uncertainty=dunc[k] if k < len(dunc) and np.isfinite(dunc[k]) else None)
            for k, v in enumerate(s["derivatives"])]

    def parameters(self):
        return [self.dm, *self.derivatives]

    def _years(self, ev: Evaluation) -> np.ndarray:
        hi, lo = ev.obs.tdb.seconds_since(self.epoch_day, self.epoch_frac)
        return (hi + lo) / delays.JULIAN_YEAR_S

    def dm_at(self, years: np.ndarray) -> np.ndarray:
        dm = np.full_like(years, self.dm.value)
        for k, p in enumerate(self.derivatives, start=1):
            dm = dm + p.value * years ** k / factorial(k)
        return dm

    def apply(self, ev: Evaluation) -> None:
        years = self._years(ev)
        ev.extra["dispersion_years"] = years
        ev.dispersion_s = delays.dispersion_delay_s(self.dm_at(years), ev.freq_bary_mhz)

    def partials(self, ev: Evaluation, names: list[str]) -> dict[str, np.ndarray]:
        unit = -delays.dispersion_delay_s(1.0, ev.freq_bary_mhz)  # d(t_emit)/d(dm)
        years = ev.extra["dispersion_years"]
        out = {}
        if self.dm.name in names:
            out[self.dm.name] = unit
        for k, p in enumerate(self.derivatives, start=1):
            if p.name in names:
                out[p.name] = unit * years ** k / factorial(k)
        return out

    def unconstrained(self, obs, names: list[str]) -> list[str]:
        mine = [p.name for p in self.parameters() if p.name in names]
        if not mine:
            return []
        freqs = np.unique(obs.toas.freq_mhz[np.isfinite(obs.toas.freq_mhz)])
        if len(freqs) < 2:
            return [f"{', '.join(mine)} need TOAs at two or more observing frequencies "
                    f"(these have {len(freqs)}); fix them or add multi-frequency TOAs"]
        return []

    def to_section(self) -> dict:
        return {"dm": self.dm.value, "epoch_mjd": mjd_decimal(self.epoch_day, self.epoch_frac),
                "derivatives": [p.value for p in self.derivatives]}
