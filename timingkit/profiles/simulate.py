"""Simulated folded profiles: what an observer's backend would record when it
folds a pulsar that follows one model with a predictor made from another.

For each observation: a folding predictor is built from the folding model at
the site and the observation's centre frequency; each sub-integration's
reference time is the predictor's phase zero nearest its middle; the true
model's pulse arrival at each channel (nearest the reference time plus the
channel's dedispersion delay) fixes the profile's shift, tau = (arrival -
delta_c - reference) x folding frequency (:mod:`timingkit.profiles.toas`
inverts exactly this); the profile is the template shifted by tau (Fourier),
scaled to the requested S/N, plus a baseline and white Gaussian noise of
sigma = 1 per bin. The shifts are stored in the file (``simulated_shift_cycles``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.formats.mjd_text import format_mjd, parse_mjd_strings
from timingkit.formats.profile_file import ProfileSet, Template
from timingkit.geometry.delays import dispersion_delay_s
from timingkit.model.timing_model import TimingModel
from timingkit.numerics.timearray import SplitTime
from timingkit.predict.build import build_predictor
from timingkit.predict.model_phase import PhaseContext, nearest_arrivals
from timingkit.profiles.phase_gradient import shift_profiles
from timingkit.profiles.templates import resample

BASELINE = 10.0               # arbitrary offset of the simulated profiles (the fit ignores it)
PREDICTOR_MARGIN_S = 120.0    # predictor coverage beyond each observation


@dataclass
class ProfileSimulation:
    """What to simulate. ``centre_freqs_mhz`` are used in turn, one per
    observation; ``snr`` is that of a whole observation (all sub-integrations
    and channels added), so each stored profile has snr / sqrt(subints x channels)."""

    site: str
    start_mjd: float
    end_mjd: float
    count: int
    centre_freqs_mhz: tuple = (1400.0,)
    channels: int = 1
    bandwidth_mhz: float = 100.0
    subints: int = 1
    duration_s: float = 600.0
    bins: int = 1024
    snr: float = 100.0
    seed: int | None = None

    def check(self) -> None:
        if self.count < 1:
            raise InputError("count must be >= 1", field="count")
        if not self.end_mjd > self.start_mjd:
            raise InputError("end MJD must be later than start MJD", field="end")
        for name in ("channels", "subints"):
            if getattr(self, name) < 1:
                raise InputError("must be >= 1", field=name)
        if self.bins < 8:
            raise InputError("need at least 8 bins", field="bins")
        if not self.snr > 0 or not self.duration_s > 0:
            raise InputError("S/N and duration must be > 0", field="snr")
        low = min(self.centre_freqs_mhz) - self.bandwidth_mhz / 2
        if not low > 0 or not self.bandwidth_mhz > 0:
            raise InputError("channel frequencies must be > 0 MHz (check the bandwidth)",
                             field="bandwidth_mhz")


def _observation_times(sim: ProfileSimulation, rng) -> np.ndarray:
    edges = np.linspace(sim.start_mjd, sim.end_mjd, sim.count + 1)
    return edges[:-1] + rng.uniform(0.2, 0.8, sim.count) * (edges[1] - edges[0])


def _text(t: SplitTime) -> np.ndarray:
    return format_mjd(t.day, t.frac)


def _references(predictor, middles: SplitTime) -> tuple[np.ndarray, np.ndarray]:
    """(MJD text, frequency) of the predictor's phase zero nearest each time."""
    t = middles
    for _ in range(2):
        _, frac = predictor.phase(t)
        frac = np.where(frac > 0.5, frac - 1.0, frac)
        t = t.add_seconds(-frac / predictor.frequency_hz(t))
    text = _text(t)
    return text, predictor.frequency_hz(SplitTime(*parse_mjd_strings(text), "utc"))


def simulate_profiles(true_model: TimingModel, folding_model: TimingModel,
                      sim: ProfileSimulation, context: PhaseContext,
                      template: Template) -> list[ProfileSet]:
    """One :class:`ProfileSet` per observation (see module docstring)."""
    sim.check()
    rng = np.random.default_rng(sim.seed)
    shape = resample(np.asarray(template.profile, dtype=float), sim.bins)
    power = float(np.sum((shape - shape.mean()) ** 2))
    amplitude = sim.snr / np.sqrt(sim.subints * sim.channels) / np.sqrt(power)
    dm_fold = float(folding_model.dispersion.dm.value)
    site = context.sites.lookup(sim.site).name
    step_s = sim.duration_s / sim.subints
    sets, refs, freqs, folds, delays, owners = [], [], [], [], [], []
    for k, mjd in enumerate(_observation_times(sim, rng)):
        centre = float(sim.centre_freqs_mhz[k % len(sim.centre_freqs_mhz)])
        day = np.floor(mjd)
        middle = SplitTime(day, mjd - day, "utc")
        lo = middle.add_seconds(-0.5 * sim.duration_s - PREDICTOR_MARGIN_S)
        hi = middle.add_seconds(0.5 * sim.duration_s + PREDICTOR_MARGIN_S)
        predictor = build_predictor(folding_model, site, _text(lo)[0], _text(hi)[0], centre,
                                    context)
        offsets = (np.arange(sim.subints) + 0.5 - 0.5 * sim.subints) * step_s
        ref_text, fold_hz = _references(
            predictor, SplitTime(np.full(sim.subints, day), np.full(sim.subints, mjd - day),
                                 "utc").add_seconds(offsets))
        channel_mhz = centre + (np.arange(sim.channels) + 0.5 - 0.5 * sim.channels) * (
            sim.bandwidth_mhz / sim.channels)
        delay = dispersion_delay_s(dm_fold, channel_mhz) - dispersion_delay_s(
            dm_fold, np.array([centre]))
        sets.append(ProfileSet(site=site, source=true_model.name, centre_freq_mhz=centre,
                               dedispersion_dm=dm_fold, channel_freq_mhz=channel_mhz,
                               reference_mjd=ref_text, folding_frequency_hz=fold_hz,
                               data=np.zeros((sim.subints, sim.channels, sim.bins)),
                               duration_s=np.full(sim.subints, step_s)))
        refs.append(np.repeat(ref_text, sim.channels))
        folds.append(np.repeat(fold_hz, sim.channels))
        freqs.append(np.tile(channel_mhz, sim.subints))
        delays.append(np.tile(delay, sim.subints))
        owners.append(np.full(sim.subints * sim.channels, k))
    ref = SplitTime(*parse_mjd_strings(np.concatenate(refs)), "utc")
    delay, fold = np.concatenate(delays), np.concatenate(folds)
    arrival = nearest_arrivals(true_model, ref.add_seconds(delay), site,
                               np.concatenate(freqs), context)
    hi, lo = arrival.seconds_since(ref.day, ref.frac)
    shift = ((hi - delay) + lo) * fold
    shift = shift - np.floor(shift + 0.5)
    owners = np.concatenate(owners)
    for k, ps in enumerate(sets):
        tau = shift[owners == k]
        clean = shift_profiles(np.broadcast_to(shape, (len(tau), sim.bins)), tau)
        noisy = BASELINE + amplitude * clean + rng.normal(0.0, 1.0, clean.shape)
        ps.data = noisy.reshape(sim.subints, sim.channels, sim.bins)
        ps.simulated_shift_cycles = tau.reshape(sim.subints, sim.channels)
    return sets
