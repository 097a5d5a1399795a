"""Per-group time offsets: a constant delay for every TOA whose flag matches.

Model file: any number of tables ::

    [[time_offset]]
    flag = "backend"        # a TOA-table flag column, or "site"
    value = "wide-b"        # TOAs whose flag equals this (for "site": any name of the site)
    offset_s = 0.0          # seconds; positive = those TOAs arrive late

Each offset is the parameter ``time_offset.<k>.offset_s`` (k counts the
tables from 0). It enters as a plain delay (``ev.other_delay_s``), so
t_emit = ... - offset for the matching TOAs. An offset for every TOA is the
same as the global phase offset and the fitter reports the degeneracy; one
that matches no TOA is reported as unconstrained.
"""

from __future__ import annotations

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.model.base import ModelSection, Evaluation
from timingkit.model.flag_groups import group_mask
from timingkit.model.parameters import Parameter
from timingkit.formats.model_file import Key, reject_repeated_groups, table_list, take_section

SECTION = "time_offset"
OFFSET_KEYS = {
    "flag": Key("text", required=True),
    "value": Key("text", required=True),
    "offset_s": Key("number", default=0.0, unit="s", low=-1e5, high=1e5),
}


class GroupOffset(ModelSection):
    section = SECTION
    contribution = "propagation"
    array_section = True

    def __init__(self, table: dict, index: int, path: str | None):
        where = f"{SECTION}.{index}"
        s = take_section(table, where, OFFSET_KEYS, path)
        if not s["flag"].strip():
            raise InputError("flag must name a TOA column (e.g. 'backend') or 'site'",
                             path=path, field=f"{where}.flag")
        self.array_index = index
        self.flag = s["flag"]
        self.value = s["value"]
        self.label = f"{self.flag} = {self.value}"
        unc = s.get("uncertainty", {})
        self.offset = Parameter(f"{where}.offset_s", s["offset_s"], "s",
                                uncertainty=unc.get("offset_s"), key="offset_s",
                                description=f"time offset of TOAs with {self.flag} = {self.value}")

    def parameters(self):
        return [self.offset]

    def mask(self, obs) -> np.ndarray:
        """TOAs of this group: flag column equal to ``value`` ('site' matches
        any name of the site, timingkit.model.flag_groups)."""
        mask = group_mask(obs, self.flag, self.value)
        return np.zeros(len(obs), dtype=bool) if mask is None else mask

    def apply(self, ev: Evaluation) -> None:
        mask = self.mask(ev.obs)
        ev.extra[("time_offset", self.array_index)] = mask
        ev.other_delay_s = ev.other_delay_s + np.where(mask, self.offset.value, 0.0)

    def partials(self, ev: Evaluation, names: list[str]) -> dict[str, np.ndarray]:
        mask = ev.extra[("time_offset", self.array_index)]
        return {self.offset.name: np.where(mask, -1.0, 0.0)} if self.offset.name in names else {}

    def unconstrained(self, obs, names: list[str]) -> list[str]:
        if self.offset.name not in names:
            return []
        mask = self.mask(obs)
        if not mask.any():
            known = sorted(obs.toas.flags) + ["site"]
            if self.flag != "site" and self.flag not in obs.toas.flags:
                why = f"the TOAs have no '{self.flag}' column (columns: {', '.join(known)})"
            else:
                why = f"no TOA has {self.flag} = {self.value}"
            return [f"{self.offset.name}: {why}"]
        if mask.all():
            return [f"{self.offset.name}: every TOA has {self.flag} = {self.value}, so this "
                    "offset is the same as the overall phase offset; fix it at 0"]
        return []

    def to_section(self) -> dict:
        return {"flag": self.flag, "value": self.value, "offset_s": self.offset.value}


def build_group_offsets(value, path, model) -> list[ModelSection]:
    """OPTIONAL_SECTIONS builder for ``[[time_offset]]``."""
    comps = [GroupOffset(table, k, path)
             for k, table in enumerate(table_list(value, SECTION, path))]
    reject_repeated_groups(comps, SECTION, "tables", path)
    return comps


__all__ = ["GroupOffset", "build_group_offsets", "SECTION"]
