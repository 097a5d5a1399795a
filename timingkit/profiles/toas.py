"""TOAs from folded profiles.

Each profile file holds one observation: sub-integrations x channels x bins,
every sub-integration folded with a predictor whose phase was zero at its
reference time. A profile shifted by tau cycles against the template
(:mod:`timingkit.profiles.phase_gradient`) gives the arrival time

    TOA = reference time + tau / folding frequency + delta_c,

delta_c = D DM_d (1/f_c^2 - 1/f_0^2) adding back the dispersion delay that
dedispersion to the centre frequency f_0 took out of channel c (D = 1/2.41e-4 s
MHz^2, DM_d the file's ``dedispersion_dm``); a TOA of channels added together
is at f_0. Its uncertainty is sigma_tau / folding frequency. Added
sub-integrations give one TOA at the reference time nearest their middle.
Folding phase is taken as linear over tau / f (< half a period), which is good
to ~1e-8 cycles.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.formats.profile_file import ProfileSet
from timingkit.formats.toa_table import ToaTable
from timingkit.geometry.delays import dispersion_delay_s
from timingkit.numerics.timearray import SplitTime
from timingkit.predict.time_offsets import check_observation_flags
from timingkit.profiles.phase_gradient import ShiftFit, fit_shifts

DEFAULT_MIN_SNR = 8.0


@dataclass
class TimedProfiles:
    """The profiles to time (one row each) and what turns a shift into a TOA."""

    profiles: np.ndarray              # (M, bins)
    reference: SplitTime              # reference time of each (UTC at the site)
    folding_frequency_hz: np.ndarray
    freq_mhz: np.ndarray              # frequency of the TOA
    added_delay_s: np.ndarray         # delta_c (module docstring)
    site: np.ndarray
    label: np.ndarray
    simulated_shift_cycles: np.ndarray | None = None


@dataclass
class ProfileToas:
    toas: ToaTable
    fit: ShiftFit
    timed: TimedProfiles
    skipped: list[str] = field(default_factory=list)


def _one_observation(ps: ProfileSet, per_channel: bool, per_subint: bool) -> dict:
    subints, channels, _ = ps.shape
    name = os.path.basename(ps.path) if ps.path else (ps.source or "profiles")
    name += f":{ps.part}" if ps.part else ""
    if channels > 1 and not per_channel and ps.dedispersion_dm == 0:
        raise InputError("the channels are not dedispersed (dedispersion_dm = 0), so they "
                         "cannot be added: give --per-channel", path=ps.path,
                         field="dedispersion_dm")
    data = ps.data if per_channel else ps.data.sum(axis=1, keepdims=True)
    if per_subint:
        rows_sub = np.arange(subints)
    else:
        mjd = ps.reference_day + ps.reference_frac
        middle = int(np.argmin(np.abs(mjd - np.mean(mjd))))
        data = data.sum(axis=0, keepdims=True)
        rows_sub = np.array([middle])
    freqs = ps.channel_freq_mhz if per_channel else np.array([ps.centre_freq_mhz])
    delay = (dispersion_delay_s(ps.dedispersion_dm, freqs)
             - dispersion_delay_s(ps.dedispersion_dm, np.array([ps.centre_freq_mhz])))
    n_sub, n_chan = data.shape[:2]
    sub = np.repeat(rows_sub, n_chan)
    chan = np.tile(np.arange(n_chan), n_sub)
    labels = [name + (f":sub{j}" if per_subint else "") + (f":chan{c}" if per_channel else "")
              for j, c in zip(sub, chan)]
    truth = None
    if (ps.simulated_shift_cycles is not None and (per_channel or channels == 1)
            and (per_subint or subints == 1)):
        truth = ps.simulated_shift_cycles.reshape(-1)
    return dict(profiles=data.reshape(n_sub * n_chan, -1), day=ps.reference_day[sub],
                frac=ps.reference_frac[sub], fold=ps.folding_frequency_hz[sub],
                freq=freqs[chan], delay=delay[chan], site=np.full(len(sub), ps.site),
                label=np.array(labels), truth=truth)


def gather_profiles(sets: list[ProfileSet], per_channel: bool = False,
                    per_subint: bool = False) -> TimedProfiles:
    """The profiles to time from every observation; all must have one bin count."""
    parts = [_one_observation(ps, per_channel, per_subint) for ps in sets]
    bins = {p["profiles"].shape[1] for p in parts}
    if len(bins) > 1:
        raise InputError(f"the profile files have different numbers of bins ({sorted(bins)}); "
                         "time them separately", path=sets[0].path, field="data")

    def cat(key):
        return np.concatenate([p[key] for p in parts])
    truth = None if any(p["truth"] is None for p in parts) else cat("truth")
    return TimedProfiles(profiles=cat("profiles"),
                         reference=SplitTime(cat("day"), cat("frac"), "utc"),
                         folding_frequency_hz=cat("fold"), freq_mhz=cat("freq"),
                         added_delay_s=cat("delay"), site=cat("site"), label=cat("label"),
                         simulated_shift_cycles=truth)


OWN_FLAGS = ("profile", "snr")       # flags every profile TOA carries


def time_profiles(timed: TimedProfiles, template: np.ndarray,
                  min_snr: float = DEFAULT_MIN_SNR, flags: dict | None = None) -> ProfileToas:
    """One TOA per profile whose S/N reaches ``min_snr`` (flags ``profile`` and
    ``snr``, plus ``flags``, name -> value, on every TOA: the observation's
    backend, say, so the model's [[time_offset]] groups take them), in time order."""
    flags = check_observation_flags(flags, field="flags")
    clash = sorted(set(flags) & set(OWN_FLAGS))
    if clash:
        raise InputError(f"flag '{clash[0]}' is set by profile-toas itself; choose another "
                         "name", field="flags")
    fit = fit_shifts(timed.profiles, template)
    keep = (fit.snr >= min_snr) & np.isfinite(fit.shift_err_cycles)
    skipped = [f"{label}: S/N {snr:.1f} below {min_snr:g}, no TOA"
               for label, snr in zip(timed.label[~keep], fit.snr[~keep])]
    if not np.any(keep):
        raise InputError(f"no profile reaches S/N {min_snr:g} (best {np.max(fit.snr):.1f}): "
                         "no TOAs", field="--min-snr")
    offset_s = fit.shift_cycles / timed.folding_frequency_hz + timed.added_delay_s
    t = timed.reference.add_seconds(offset_s)
    err_us = fit.shift_err_cycles / timed.folding_frequency_hz * 1e6
    rows = np.flatnonzero(keep)
    rows = rows[np.lexsort((t.frac[rows], t.day[rows]))]
    toas = ToaTable.from_arrays(t.day[rows], t.frac[rows], err_us[rows], timed.freq_mhz[rows],
                                timed.site[rows], flags={
                                    "profile": timed.label[rows],
                                    "snr": np.array([f"{s:.1f}" for s in fit.snr[rows]]),
                                    **{name: np.full(len(rows), value)
                                       for name, value in flags.items()}})
    return ProfileToas(toas=toas, fit=fit, timed=timed, skipped=skipped)
