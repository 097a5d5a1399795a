"""Glitches: sudden spin-ups of the pulsar, one ``[[glitch]]`` section each.

After the glitch epoch t_g (TDB at the pulsar, like the spin epoch) the
glitch adds, with dt = t_emit - t_g in seconds,

    phase(dt)     = phase_step + df dt + 1/2 derivative_step dt^2
                    + sum_k df_k tau_k (1 - exp(-dt / tau_k))          [cycles]
    frequency(dt) = df + derivative_step dt + sum_k df_k exp(-dt / tau_k)        [Hz]

(the standard glitch phase model of the trade, as in Lorimer & Kramer 2005,
Handbook of Pulsar Astronomy, in the chapter on timing; section cited from
memory), and nothing before it. Keys (DESIGN.md §4): ``epoch_mjd``,
``phase_step`` (cycles), ``frequency_step_hz`` (permanent step, Hz),
``frequency_derivative_step`` (Hz/s), ``decaying_frequency_step_hz`` (Hz)
and ``decay_time_days`` (days). The last two may be lists (several decaying
terms). Every parameter except the epoch can be fitted; the partial
derivatives are analytic. Glitch terms are evaluated in float64: with
|phase| < 1e7 cycles the rounding error is < 1e-9 cycles.

Parameter names: ``glitch.<i>.phase_step``, ``glitch.<i>.frequency_step_hz``,
``glitch.<i>.frequency_derivative_step``, ``glitch.<i>.decaying_frequency_step_hz``
(``...decaying_frequency_step_hz.<k>`` in the list form) and likewise
``decay_time_days``; ``<i>`` counts the ``[[glitch]]`` sections from 0.
"""

from __future__ import annotations

from decimal import Decimal

import numpy as np

from timingkit.formats.errors import FitError, InputError
from timingkit.model.base import ModelSection, Evaluation
from timingkit.model.parameters import Parameter, mjd_parts
from timingkit.formats.model_file import Key, table_list, take_section

SECONDS_PER_DAY = 86400.0
SECTION = "glitch"
DECAY_AMPLITUDE = "decaying_frequency_step_hz"
DECAY_TIME = "decay_time_days"


def _spec(section: dict) -> dict[str, Key]:
    """Key specs; the two decay keys take a number or a list of numbers."""
    def number_or_list(key, **limits):
        return Key("list_number" if isinstance(section.get(key), list) else "number", **limits)
    return {
        "epoch_mjd": Key("mjd", required=True),
        "phase_step": Key("number", default=0.0, unit="cycles", low=-1e6, high=1e6),
        "frequency_step_hz": Key("number", default=0.0, unit="Hz", low=-1.0, high=1.0),
        "frequency_derivative_step": Key("number", default=0.0, unit="Hz/s", low=-1e-6,
                                         high=1e-6),
        DECAY_AMPLITUDE: number_or_list(DECAY_AMPLITUDE, unit="Hz", low=-1.0, high=1.0),
        DECAY_TIME: number_or_list(DECAY_TIME, unit="days", above=0.0, high=1e5),
    }


def glitch_phase(dt_s, phase_step, frequency_step_hz, frequency_derivative_step,
                 decays=()) -> np.ndarray:
    """Glitch phase (cycles) ``dt_s`` seconds after the epoch, by the formula
    of the module docstring, for any dt (no cut at dt = 0); ``decays`` is a
    sequence of (amplitude_hz, time_days)."""
    dt = np.asarray(dt_s, dtype=float)
    phase = phase_step + dt * (frequency_step_hz + 0.5 * frequency_derivative_step * dt)
    for amplitude, days in decays:
        tau = days * SECONDS_PER_DAY
        phase = phase - amplitude * tau * np.expm1(-dt / tau)
    return phase


def glitch_frequency(dt_s, frequency_step_hz, frequency_derivative_step, decays=()) -> np.ndarray:
    """Frequency change (Hz) ``dt_s`` seconds after the epoch (no cut at 0)."""
    dt = np.asarray(dt_s, dtype=float)
    freq = frequency_step_hz + frequency_derivative_step * dt
    for amplitude, days in decays:
        freq = freq + amplitude * np.exp(-dt / (days * SECONDS_PER_DAY))
    return freq


class Glitch(ModelSection):
    """One glitch (see module docstring)."""

    section = SECTION
    contribution = "rotation"
    array_section = True

    def __init__(self, section: dict, path: str | None, index: int):
        where = f"{SECTION}.{index}"
        s = take_section(section, where, _spec(section), path)
        unc = s.get("uncertainty", {})
        self.array_index = index
        self.epoch = s["epoch_mjd"]
        self.epoch_day, self.epoch_frac = mjd_parts(self.epoch)

        def param(key, unit, description, value):
            return Parameter(f"{where}.{key}", float(value), unit,
                             uncertainty=_finite(unc.get(key)), description=description)

        self.phase_step = param("phase_step", "cycles", "glitch phase step", s["phase_step"])
        self.frequency_step = param("frequency_step_hz", "Hz", "permanent glitch frequency step",
                                    s["frequency_step_hz"])
        self.frequency_derivative_step = param(
            "frequency_derivative_step", "Hz/s", "glitch frequency-derivative step",
            s["frequency_derivative_step"])
        amplitudes, times = s[DECAY_AMPLITUDE], s[DECAY_TIME]
        self.decay_as_list = isinstance(amplitudes, list) or isinstance(times, list)
        if amplitudes is None and times is None:
            amplitudes, times = [], []
        elif times is None:
            raise InputError(f"'{DECAY_AMPLITUDE}' needs '{DECAY_TIME}' beside it (the decay "
                             "time-scale, days)", path=path, field=f"{where}.{DECAY_TIME}")
        elif amplitudes is None:
            amplitudes = [0.0] * len(times) if isinstance(times, list) else 0.0
        amplitudes = amplitudes if isinstance(amplitudes, list) else [amplitudes]
        times = times if isinstance(times, list) else [times]
        if len(amplitudes) != len(times):
            raise InputError(f"'{DECAY_AMPLITUDE}' has {len(amplitudes)} values but "
                             f"'{DECAY_TIME}' has {len(times)}; give one time-scale per term",
                             path=path, field=f"{where}.{DECAY_TIME}")
        for k, days in enumerate(times):
            if not days > 0:
                raise InputError(f"decay time must be > 0 days, found {days}", path=path,
                                 field=f"{where}.{DECAY_TIME}" + (f".{k}" if self.decay_as_list
                                                                  else ""))
        aunc, tunc = unc.get(DECAY_AMPLITUDE), unc.get(DECAY_TIME)
        self.decay_amplitudes: list[Parameter] = []
        self.decay_times: list[Parameter] = []
        for k, (amplitude, days) in enumerate(zip(amplitudes, times)):
            suffix = f".{k}" if self.decay_as_list else ""
            self.decay_amplitudes.append(Parameter(
                f"{where}.{DECAY_AMPLITUDE}{suffix}", float(amplitude), "Hz",
                uncertainty=_pick(aunc, k, self.decay_as_list),
                description="decaying glitch frequency step"))
            self.decay_times.append(Parameter(
                f"{where}.{DECAY_TIME}{suffix}", float(days), "days",
                uncertainty=_pick(tunc, k, self.decay_as_list),
                description="glitch decay time-scale"))

    # -------------------------------------------------------------- parameters
    def parameters(self) -> list[Parameter]:
        out = [self.phase_step, self.frequency_step, self.frequency_derivative_step]
        for amplitude, days in zip(self.decay_amplitudes, self.decay_times):
            out.extend([amplitude, days])
        return out

    @property
    def decays(self) -> list[tuple[float, float]]:
        """(amplitude_hz, time_days) of each decaying term."""
        return [(a.value, t.value) for a, t in zip(self.decay_amplitudes, self.decay_times)]

    @property
    def epoch_mjd(self) -> float:
        return self.epoch_day + self.epoch_frac

    def phase_after(self, dt_s) -> np.ndarray:
        """Glitch phase (cycles) at ``dt_s`` seconds from the epoch (no cut)."""
        return glitch_phase(dt_s, self.phase_step.value, self.frequency_step.value,
                            self.frequency_derivative_step.value, self.decays)

    def frequency_after(self, dt_s) -> np.ndarray:
        return glitch_frequency(dt_s, self.frequency_step.value,
                                self.frequency_derivative_step.value, self.decays)

    # --------------------------------------------------------------- evaluation
    def dt_seconds(self, ev: Evaluation) -> np.ndarray:
        """Emission time minus the glitch epoch (s), from the exact two-part TDB
        difference plus the delays (as for the spin phase)."""
        hi, lo = ev.obs.tdb.seconds_since(self.epoch_day, self.epoch_frac)
        return (hi + ev.emit_offset_s) + lo

    def apply(self, ev: Evaluation) -> None:
        for p in self.decay_times:
            if not p.value > 0:
                raise FitError(f"{p.name} became {p.value:.4g} days (must be > 0): the data do "
                               "not constrain this decay; fix its time-scale or drop the term")
        dt = self.dt_seconds(ev)
        after = dt > 0
        ev.extra[self._key] = (dt, after)
        phase = np.where(after, self.phase_after(np.where(after, dt, 0.0)), 0.0)
        whole = np.round(phase)
        ev.phase_int = ev.phase_int + whole
        ev.phase_frac = ev.phase_frac + (phase - whole)
        ev.spin_frequency_hz = ev.spin_frequency_hz + np.where(
            after, self.frequency_after(np.where(after, dt, 0.0)), 0.0)

    @property
    def _key(self) -> str:
        return f"glitch_dt_s.{id(self)}"

    def partials(self, ev: Evaluation, names: list[str]) -> dict[str, np.ndarray]:
        """d(phase, cycles)/d(parameter): per cycle, Hz, Hz/s, Hz and day."""
        dt, after = ev.extra[self._key]
        dt = np.where(after, dt, 0.0)
        one = after.astype(float)
        out = {}
        cols = {self.phase_step.name: lambda: one,
                self.frequency_step.name: lambda: dt * one,
                self.frequency_derivative_step.name: lambda: 0.5 * dt * dt * one}
        for amplitude, days in zip(self.decay_amplitudes, self.decay_times):
            tau = days.value * SECONDS_PER_DAY
            x = dt / tau
            cols[amplitude.name] = lambda tau=tau, x=x: -tau * np.expm1(-x) * one
            # d/dtau [A tau (1 - e^-x)] = A (1 - e^-x - x e^-x), x = dt/tau; per day
            cols[days.name] = lambda a=amplitude.value, x=x: (
                a * (-np.expm1(-x) - x * np.exp(-x)) * SECONDS_PER_DAY * one)
        for name in names:
            out[name] = cols[name]()
        return out

    # ------------------------------------------------------------------ writing
    def to_section(self) -> dict:
        sec: dict = {
            "epoch_mjd": self.epoch,     # the exact decimal as read (never refitted)
            "phase_step": self.phase_step.value,
            "frequency_step_hz": self.frequency_step.value,
            "frequency_derivative_step": self.frequency_derivative_step.value,
        }
        if self.decay_amplitudes:
            amps = [p.value for p in self.decay_amplitudes]
            times = [p.value for p in self.decay_times]
            sec[DECAY_AMPLITUDE] = amps if self.decay_as_list else amps[0]
            sec[DECAY_TIME] = times if self.decay_as_list else times[0]
        return sec


def build_glitches(value, path: str | None, model=None) -> list[Glitch]:
    """Builder for ``OPTIONAL_SECTIONS['glitch']``: one section object per ``[[glitch]]``."""
    if isinstance(value, dict):   # stricter than table_list: one glitch is still [[glitch]]
        raise InputError("write glitches as an array of tables, '[[glitch]]' (double "
                         "brackets), one per glitch", path=path, field=SECTION)
    return [Glitch(item, path, i) for i, item in enumerate(table_list(value, SECTION, path))]


def glitch_section(epoch_mjd: Decimal | str | float, phase_step: float = 0.0,
                   frequency_step_hz: float = 0.0, frequency_derivative_step: float = 0.0,
                   decays=()) -> dict:
    """A ``[[glitch]]`` table (as read from TOML) for building a :class:`Glitch`;
    ``decays`` is a sequence of (amplitude_hz, time_days); written in list form
    when there is more than one term."""
    epoch = epoch_mjd if isinstance(epoch_mjd, Decimal) else Decimal(str(epoch_mjd))
    sec = {"epoch_mjd": epoch, "phase_step": Decimal(repr(float(phase_step))),
           "frequency_step_hz": Decimal(repr(float(frequency_step_hz))),
           "frequency_derivative_step": Decimal(repr(float(frequency_derivative_step)))}
    decays = list(decays)
    if len(decays) == 1:
        sec[DECAY_AMPLITUDE] = Decimal(repr(float(decays[0][0])))
        sec[DECAY_TIME] = Decimal(repr(float(decays[0][1])))
    elif decays:
        sec[DECAY_AMPLITUDE] = [Decimal(repr(float(a))) for a, _ in decays]
        sec[DECAY_TIME] = [Decimal(repr(float(t))) for _, t in decays]
    return sec


def model_glitches(model) -> list[Glitch]:
    """The glitch sections of a timing model, in file order."""
    return [c for c in model.extra if isinstance(c, Glitch)]


def set_glitches(model, sections: list[dict], free: list[str] | tuple = ()) -> None:
    """Replace the model's glitches by ``sections`` (``glitch_section`` tables),
    sorted by epoch and numbered from 0; ``free`` lists parameter names, or
    key names (e.g. 'frequency_step_hz') to free that key in every glitch."""
    others = [c for c in model.extra if not isinstance(c, Glitch)]
    ordered = sorted(sections, key=lambda s: Decimal(str(s["epoch_mjd"])))
    glitches = [Glitch(sec, model.path, i) for i, sec in enumerate(ordered)]
    for g in glitches:
        for p in g.parameters():
            if p.name in free or p.key in free:
                p.free = True
    model.extra = others + glitches
    model._by_name = {p.name: p for p in model.parameters()}
    # glitches renumbered: correlations of the old ones no longer apply
    model.correlations = {k: v for k, v in getattr(model, "correlations", {}).items()
                          if not (k[0].startswith("glitch.") or k[1].startswith("glitch."))}


def _finite(x):
    if x is None or isinstance(x, list):
        return None
    x = float(x)
    return x if np.isfinite(x) else None


def _pick(unc, k: int, as_list: bool):
    if unc is None:
        return None
    if isinstance(unc, list):
        return _finite(unc[k]) if k < len(unc) else None
    return _finite(unc) if (k == 0 and not as_list) else None
