"""TOAs left out of a fit: which ones and why (exclusion lists, ``select`` and
``leave_out`` rules), and their residuals under the fitted model so that
residuals.csv and the figures still show them, marked.

The fit itself sees only the kept TOAs, barycentred on their own, so a fit with
an exclusion list is the fit of the table with those lines deleted.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.formats.exclusion_list import match_rows, read_exclusion_list
from timingkit.formats.toa_selection import (
    check_select_rules,
    keep_mask,
    parse_rule,
    rules_matching_nothing,
)
from timingkit.formats.toa_table import ToaTable
from timingkit.geometry.observations import Observations

if TYPE_CHECKING:     # imported where used: `timingkit barycentre` loads neither (start-up)
    from timingkit.fit.least_squares import ResidualSet
    from timingkit.outputs.residual_table import ResidualTable


def as_list(value) -> list[str]:
    """A string is one item (a path or a rule), never a list of characters."""
    if value is None:
        return []
    if isinstance(value, str):
        return [value]
    return [str(v) for v in value]


@dataclass
class Selection:
    """Per TOA of the table: ``kept`` (bool) and ``reasons`` ('' when kept);
    ``origins``: where each reason came from; ``warnings`` for the report."""
    kept: np.ndarray
    reasons: np.ndarray
    origins: np.ndarray
    line_numbers: np.ndarray | None
    warnings: list[str] = field(default_factory=list)
    left_obs: Observations | None = None       # the left-out TOAs, barycentred

    @property
    def count(self) -> int:
        return int(np.count_nonzero(~self.kept))

    def report_entry(self) -> dict:
        """``excluded_toas`` and ``excluded``: the left-out lines grouped by
        reason and origin (lines are the TOA table's, or positions 1, 2, ...
        for a table made in code)."""
        groups: dict[tuple[str, str], list[int]] = {}
        lines = (self.line_numbers if self.line_numbers is not None
                 else np.arange(1, len(self.kept) + 1))
        for i in np.flatnonzero(~self.kept).tolist():
            groups.setdefault((self.reasons[i], self.origins[i]), []).append(int(lines[i]))
        return {"excluded_toas": self.count,
                "excluded": [{"reason": r, "from": o, "lines": v} for (r, o), v in groups.items()]}


def selection_entry(selection: Selection | None) -> dict:
    """The report.json keys of a selection (none left out when None)."""
    if selection is None:
        return {"excluded_toas": 0, "excluded": []}
    return selection.report_entry()


def choose_toas(toas: ToaTable, exclude_paths=(), select=(), leave_out=(),
                canonical_site=None) -> Selection | None:
    """Which TOAs the fit uses (module docstring); None when nothing was asked.
    The first reason found stands: exclusion-list rows, then their rules, then
    ``leave_out``, then ``select``."""
    exclude_paths, select, leave_out = as_list(exclude_paths), as_list(select), as_list(leave_out)
    if not (exclude_paths or select or leave_out):
        return None
    n = len(toas)
    reasons = np.full(n, "", dtype=object)
    origins = np.full(n, "", dtype=object)
    warnings: list[str] = []

    def leave(mask, reason, origin):
        new = mask & (reasons == "")
        reasons[new] = reason or "left out"
        origins[new] = origin

    rules = []
    for path in exclude_paths:
        exclusions = read_exclusion_list(path)
        matched, notes = match_rows(exclusions, toas, canonical_site)
        warnings += notes
        for row, index in zip(exclusions.rows, matched):
            mask = np.zeros(n, dtype=bool)
            mask[index] = True
            leave(mask, row.reason, path)
        rules += exclusions.rules
    rules += [parse_rule(text, origin="--leave-out", option="--leave-out") for text in leave_out]
    masks = [rule.matches(toas, canonical_site) for rule in rules]
    for rule, mask in zip(rules, masks):
        leave(mask, rule.why, f"rule {rule.text} ({rule.origin})")
    warnings += rules_matching_nothing(rules, masks)
    chosen = [parse_rule(text, origin="--select", option="--select") for text in select]
    if chosen:
        check_select_rules(chosen, toas)
        leave(~keep_mask(chosen, toas, canonical_site),
              "outside the selection " + " ".join(r.text for r in chosen), "--select")
    kept = reasons == ""
    if not kept.any():
        raise InputError(f"every one of the {n} TOAs is left out (exclusion lists and "
                         "selections); nothing remains to fit", path=toas.path)
    return Selection(kept=kept, reasons=reasons, origins=origins,
                     line_numbers=toas.line_numbers, warnings=warnings)


def residuals_of_left_out(model, kept: ResidualSet, left_obs: Observations,
                          reference=None) -> ResidualSet:
    """Residuals of the left-out TOAs under ``model``, on the same footing as the
    kept TOAs' ``kept`` (the same constant phase offset removed, the same shift
    of table pulse numbers); pulses numbered from the model when the table has none."""
    ev_kept = kept.evaluation
    raw_kept = ((ev_kept.phase_int - kept.pulse_number) + ev_kept.phase_frac) \
        / ev_kept.spin_frequency_hz
    weights = 1.0 / kept.err_s ** 2
    offset_s = float(np.sum(weights * (raw_kept - kept.time_s)) / np.sum(weights))
    ev = model.evaluate(left_obs, reference)
    f_hz = ev.spin_frequency_hz
    if left_obs.toas.pulse is not None and kept.evaluation.obs.toas.pulse is not None:
        shift = np.round(np.median(kept.pulse_number - kept.evaluation.obs.toas.pulse))
        pulse = left_obs.toas.pulse.astype(float) + shift
        time_s = ((ev.phase_int - pulse) + ev.phase_frac) / f_hz - offset_s
    else:                                   # nearest pulse after the offset
        phase = ev.phase_frac - offset_s * f_hz
        turns = np.round(phase)
        pulse, time_s = ev.phase_int + turns, (phase - turns) / f_hz
    from timingkit.fit.least_squares import ResidualSet
    return ResidualSet(phase=time_s * f_hz, time_s=time_s, pulse_number=pulse,
                       err_s=left_obs.toas.err_us * 1e-6, evaluation=ev)


def ordered_positions(used: ToaTable, kept: ToaTable) -> np.ndarray:
    """Positions in ``kept`` of the rows of ``used``, an ordered subset of it (the
    glitch search may drop TOAs it cannot connect)."""
    if len(used) == len(kept):
        return np.arange(len(kept))
    def keys_of(table):
        return zip(table.mjd_day.tolist(), table.mjd_frac.tolist(), table.site.tolist(),
                   table.freq_mhz.tolist(), table.err_us.tolist())
    keys = list(keys_of(kept))
    positions, j = [], 0
    for key in keys_of(used):
        while keys[j] != key:
            j += 1
        positions.append(j)
        j += 1
    return np.array(positions, dtype=np.int64)


def full_tables(tables, used: Observations, selection: Selection | None,
                kept_obs: Observations, reference=None) -> list[ResidualTable]:
    """``tables``: (residual table of ``used``, model, its ResidualSet) triples.
    Returns each table extended to every TOA of the TOA table, in its order, the
    left-out ones marked with their reason (``left_out`` column)."""
    from timingkit.outputs.report import residual_table
    from timingkit.outputs.residual_table import ResidualTable
    if selection is None or selection.count == 0:
        return [table for table, _, _ in tables]
    kept_index = np.flatnonzero(selection.kept)[ordered_positions(used.toas, kept_obs.toas)]
    left_index = np.flatnonzero(~selection.kept)
    out = []
    for table, model, res in tables:
        parts, index = [table], [kept_index]
        if selection.left_obs is not None:
            parts.append(residual_table(selection.left_obs, residuals_of_left_out(
                model, res, selection.left_obs, reference)))
            index.append(left_index)
        merged = ResidualTable.concatenate(parts)
        order = np.argsort(np.concatenate(index), kind="stable")
        merged = merged.subset(order)
        merged.left_out = selection.reasons[np.sort(np.concatenate(index))].astype(str)
        out.append(merged)
    return out


def split_observations(toas: ToaTable, selection: Selection | None, prepare) -> Observations:
    """Barycentre the kept TOAs (``prepare(table)`` -> Observations) and, apart,
    the left-out ones (kept on ``selection.left_obs``; when they cannot be
    barycentred, e.g. an unknown site, a warning says residuals.csv omits them)."""
    if selection is None:
        return prepare(toas)
    obs = prepare(toas.select(selection.kept))
    if selection.count:
        try:
            selection.left_obs = prepare(toas.select(~selection.kept))
        except InputError as exc:
            selection.warnings.append(f"the {selection.count} left-out TOAs cannot be "
                                      f"barycentred ({exc.public_message}); residuals.csv lists only the "
                                      "fitted TOAs")
    obs.warnings.extend(selection.warnings)
    return obs
