"""Read one source's inputs: the TOA table, the model and what it names (sites, clock
tables, ephemeris), checked and barycentred once (:func:`load_inputs`).
"""

from __future__ import annotations

import dataclasses
import os
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from timingkit.formats.clock_table import ClockTable, read_clock_table
from timingkit.geometry.ephemeris import Ephemeris, load_ephemeris
from timingkit.formats.errors import InputError, excerpt
from timingkit.model.timing_model import TimingModel
from timingkit.model.flag_groups import group_mask
from timingkit.geometry.observations import Observations
from timingkit.geometry.sites import SiteTable
from timingkit.formats.toa_table import ToaTable
from timingkit.formats.toa_reader import FREQ_MHZ_RANGE, read_toa_table

if TYPE_CHECKING:
    from timingkit.pipeline.left_out import Selection


@dataclass
class Inputs:
    toas: ToaTable
    model: TimingModel
    sites: SiteTable
    ephemeris: Ephemeris
    clocks: list[ClockTable]
    obs: Observations | None = None
    reference: Observations | None = None
    selection: "Selection | None" = None    # TOAs left out of the fit (pipeline.left_out)
    paths: tuple[str, ...] = ()          # every file read: no output may replace one


def _resolve(path: str, base: str) -> str:
    return path if os.path.isabs(path) else os.path.join(base, path)


def load_model(model_path: str, free=(), fix=()) -> TimingModel:
    model = TimingModel.from_file(model_path)
    model.set_free(free, True)
    model.set_free(fix, False)
    return model


def load_context(model: TimingModel, sites_paths=(), ephemeris=None, clock_paths=()):
    """Site table, ephemeris and clock tables named by the model's settings
    (relative to the model file) and by the caller (relative to the cwd)."""
    base = model.base_dir
    site_files = [_resolve(p, base) for p in model.settings["sites"]] + list(sites_paths)
    sites = SiteTable.with_files(site_files)
    eph = load_ephemeris(ephemeris) if ephemeris else load_ephemeris(model.settings["ephemeris"],
                                                                      base_dir=base)
    clock_files = [_resolve(p, base) for p in model.settings["clock"]] + list(clock_paths)
    clocks = [clock_for_sites(read_clock_table(p), sites) for p in clock_files]
    return sites, eph, clocks


def clock_for_sites(table: ClockTable, sites: SiteTable) -> ClockTable:
    """The table with its ``# site:`` names resolved to site names (other names
    allowed); a name that matches no site is an error at that line."""
    if "*" in table.sites:
        return table
    names = []
    for name in table.sites:
        try:
            names.append(sites.lookup(name).name)
        except InputError:
            raise InputError(f"this clock table is for site {excerpt(name, 30)}, which matches no "
                             f"known site ({', '.join(sites.names)}; other names are accepted)",
                             path=table.path, line=table.site_line, field="site",
                             quoted=(name,)) from None
    return dataclasses.replace(table, sites=tuple(dict.fromkeys(names)))


def input_paths(toas_path, model: TimingModel, sites_paths=(), ephemeris=None,
                clock_paths=()) -> tuple[str, ...]:
    """Every file a command reads for this source (TOA table, model, and the site,
    clock and ephemeris files it names or is given)."""
    base = model.base_dir
    named = [*model.settings["sites"], *model.settings["clock"]]
    if model.settings["ephemeris"] not in ("builtin", "de421", ""):
        named.append(model.settings["ephemeris"])
    paths = [toas_path, model.path, *sites_paths, *clock_paths, ephemeris]
    paths += [_resolve(p, base) for p in named]
    return tuple(os.fspath(p) for p in paths if p)


def check_color_by(toas: ToaTable, color_by: str) -> None:
    """Refuse a ``--color-by`` that names no column of the TOA table (before any work)."""
    legal = ["site", "freq", *toas.flags]
    if color_by not in legal:
        raise InputError(f"cannot colour by {excerpt(color_by, 30)}: the TOA table has no such "
                         f"column; choose one of {', '.join(legal)}", path=toas.path,
                         field="--color-by", quoted=(color_by,))


def reference_observations(model: TimingModel, sites, eph, clocks) -> Observations | None:
    pz = model.phase_zero
    if pz is None:
        return None
    from timingkit.model.parameters import mjd_parts
    day, frac = mjd_parts(pz["mjd"])

    def bad(message: str, key: str, quoted=()) -> InputError:
        field = f"phase_zero.{key}"
        return InputError(message, path=model.path, line=model.line_of(field), field=field,
                          quoted=quoted)

    low, high = FREQ_MHZ_RANGE
    try:
        freq = float(pz["freq_mhz"])
    except ValueError:
        raise bad("expected a frequency in MHz or 'inf'", "freq_mhz") from None
    if not (low <= freq <= high or freq == np.inf):
        raise bad(f"must lie between {low:g} and {high:g} MHz, or be 'inf'; found {freq:g}",
                  "freq_mhz")
    toas = ToaTable.from_arrays(np.array([day]), np.array([frac]), np.array([1.0]),
                            np.array([freq]), np.array([pz["site"]]))
    try:
        return model.prepare_observations(toas, sites, eph, clocks)
    except InputError as exc:
        raise bad(exc.message, "site" if exc.field == "site" else "mjd", exc.quoted) from None


def load_inputs(toas_path: str, model_path: str, *, free=(), fix=(), sites_paths=(),
                ephemeris=None, clock_paths=(), exclude_paths=(), select=(),
                leave_out=()) -> Inputs:
    """Read and check every input, then compute time scales and geometry.
    ``exclude_paths`` (exclusion lists), ``select`` and ``leave_out`` (rules,
    timingkit.formats.toa_selection) choose the TOAs the fit uses; ``obs``
    holds those, ``selection`` the others and why they were left out."""
    from timingkit.pipeline.left_out import choose_toas, split_observations
    model = load_model(model_path, free, fix)
    sites, eph, clocks = load_context(model, sites_paths, ephemeris, clock_paths)
    toas = read_toa_table(toas_path)
    inputs = Inputs(toas=toas, model=model, sites=sites, ephemeris=eph, clocks=clocks,
                    paths=input_paths(toas_path, model, sites_paths, ephemeris, clock_paths)
                    + tuple(os.fspath(p) for p in exclude_paths))
    inputs.selection = choose_toas(
        toas, exclude_paths, select, leave_out,
        canonical_site=lambda name: sites.lookup(name).name if name in sites else name)
    inputs.obs = split_observations(
        toas, inputs.selection, lambda table: model.prepare_observations(table, sites, eph, clocks))
    inputs.obs.warnings.extend(model.data_warnings(inputs.obs))   # the TOAs the fit uses
    inputs.reference = reference_observations(model, sites, eph, clocks)
    inputs.obs.warnings.extend(duplicate_toa_warnings(toas) + unmatched_group_warnings(model,
                                                                                        inputs.obs))
    return inputs


def duplicate_toa_warnings(toas: ToaTable) -> list[str]:
    """A warning when TOAs repeat (same MJD, site and frequency): every copy is
    counted, so the fit's uncertainties shrink as if the data were independent."""
    if len(toas) < 2:
        return []
    # Copies share the float MJD: sort on it alone (one argsort) and compare every
    # column only among the few TOAs whose float MJD equals a neighbour's.
    mjd = toas.mjd_day + toas.mjd_frac
    by_mjd = np.argsort(mjd, kind="stable")
    tied = np.flatnonzero(mjd[by_mjd][1:] == mjd[by_mjd][:-1])
    if len(tied) == 0:
        return []
    candidates = np.unique(np.concatenate([by_mjd[tied], by_mjd[tied + 1]]))
    _, site_code = np.unique(toas.site[candidates], return_inverse=True)
    site_code = site_code.reshape(-1)
    columns = (toas.mjd_day[candidates], toas.mjd_frac[candidates],
               toas.freq_mhz[candidates], site_code)
    order_c = np.lexsort(columns[::-1])
    order = candidates[order_c]
    same = np.ones(len(order) - 1, dtype=bool)
    for column in columns:
        ordered = column[order_c]
        same &= ordered[1:] == ordered[:-1]
    if not same.any():
        return []
    first = int(np.flatnonzero(same)[0])
    rows = sorted(int(order[first + k]) for k in (0, 1))
    where = (f"lines {toas.line_numbers[rows[0]]} and {toas.line_numbers[rows[1]]}"
             if toas.line_numbers is not None else f"rows {rows[0]} and {rows[1]}")
    return [f"{int(same.sum())} TOA(s) repeat an earlier one (same MJD, site and frequency; "
            f"first: {where} of {toas.path or 'the TOA table'}): each copy counts, so the "
            "uncertainties shrink as if they were independent; remove the copies"]


def unmatched_group_warnings(model: TimingModel, obs: Observations) -> list[str]:
    """Warnings for [[time_offset]] and [[white_noise]] groups that select no TOA."""
    out = []
    for section in model.extra:
        flag, value = getattr(section, "flag", None), getattr(section, "value", None)
        if section.section not in ("time_offset", "white_noise") or flag is None:
            continue
        hit = group_mask(obs, flag, value)
        if hit is None or not np.any(hit):
            out.append(f"[[{section.section}]] number {section.array_index + 1} ({flag} = "
                       f"{value}) matches no TOA of {obs.toas.path or 'the table'}; it has "
                       "no effect")
    return out
