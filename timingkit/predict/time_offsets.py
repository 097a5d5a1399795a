"""The model's ``[[time_offset]]`` groups for a predictor's observation.

A predictor has no TOAs, so the groups that select TOAs by a flag column
(``flag = "backend"``, ...) apply only when the caller states the flag values
of the observation the predictor is for; groups by site apply by the site.
This module checks those flag values, lists the groups that applied (for the
predictor file) and words the cautions: a group whose flag was not given, and
a flag that no group uses (a likely misspelling).
"""

from __future__ import annotations

from timingkit.formats.errors import InputError, excerpt
from timingkit.formats.toa_reader import MAX_FIELD_CHARS
from timingkit.formats.toa_table import check_flag_name
from timingkit.model.base import Evaluation
from timingkit.model.flag_groups import SITE_FLAG
from timingkit.model.group_offsets import SECTION, GroupOffset
from timingkit.model.timing_model import TimingModel


def check_observation_flags(flags, field: str = "flags") -> dict[str, str]:
    """``flags`` (a mapping name -> value, or None) as a dict of str; names
    follow the TOA table's rules (not 'site', 'mjd', ...), values are non-empty
    without spaces, as a TOA-table field would be."""
    out: dict[str, str] = {}
    for name, value in dict(flags or {}).items():
        name, value = str(name).strip(), str(value).strip()
        if not name:
            raise InputError("a flag needs a name (NAME=VALUE)", field=field)
        try:
            check_flag_name(name)
        except InputError as exc:
            raise InputError(exc.message, field=field) from None
        if not value or any(c.isspace() for c in value):
            raise InputError(f"flag {excerpt(name)} needs a value without spaces (NAME=VALUE), "
                             f"found {excerpt(value)}", field=field, quoted=(name, value))
        longest = max((name, value), key=lambda text: len(text.encode("utf-8")))
        if len(longest.encode("utf-8")) > MAX_FIELD_CHARS:    # a TOA table could not hold it
            raise InputError(f"flag {excerpt(longest)} is longer than the {MAX_FIELD_CHARS} "
                             "bytes a TOA-table field may hold", field=field, quoted=(longest,))
        out[name] = value
    return out


def group_offsets(model: TimingModel) -> list[GroupOffset]:
    return [s for s in model.sections if getattr(s, "section", None) == SECTION]


def time_offsets_applied(model: TimingModel, ev: Evaluation) -> list[dict]:
    """The groups that took the observation evaluated in ``ev`` (every time of
    a predictor has the same site and flags, so its first time decides):
    one {"flag", "value", "offset_s"} per group."""
    return [{"flag": g.flag, "value": g.value, "offset_s": float(g.offset.value)}
            for g in group_offsets(model) if bool(g.mask(ev.obs)[0])]


def flag_cautions(model: TimingModel, flags: dict[str, str]) -> list[str]:
    """Cautions for the predictor file: groups left out for want of their flag,
    and given flags that no group selects on."""
    groups = group_offsets(model)
    missing = [g for g in groups if g.flag != SITE_FLAG and g.flag not in flags]
    out = []
    if missing:
        names = sorted({g.flag for g in missing})
        listed = "; ".join(f"{g.flag} = {g.value} ({g.offset.value:.6g} s)" for g in missing)
        out.append(f"time-offset group(s) not applied, since no value of their flag "
                   f"({', '.join(names)}) was given for this observation: {listed}. If the "
                   "observation has that flag, state it (timingkit predict --flag "
                   f"{names[0]}=VALUE; flags= from Python), or the predicted phases are off by "
                   "those offsets times the spin frequency")
    used = {g.flag for g in groups}
    for name in flags:
        if name not in used:
            known = ", ".join(sorted(used - {SITE_FLAG})) or "none"
            out.append(f"flag {name!r} is not used by any time-offset group of the model "
                       f"(flags the groups use: {known})")
    return out


__all__ = ["check_observation_flags", "time_offsets_applied", "flag_cautions"]
