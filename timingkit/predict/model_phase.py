"""The full timing model's pulse phase at times at a site: what the fitter
computes for a TOA there, with every delay (geometry, dispersion, binary,
glitches), evaluated exactly (no interpolated Earth-orientation or TDB
series, so a time's phase does not depend on the other times asked with it).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from timingkit.formats.clock_table import ClockTable
from timingkit.formats.toa_table import FlagColumn, ToaTable
from timingkit.geometry.ephemeris import Ephemeris
from timingkit.geometry.observations import Observations
from timingkit.geometry.sites import SiteTable
from timingkit.model.base import Evaluation
from timingkit.model.timing_model import TimingModel
from timingkit.numerics.timearray import SplitTime


@dataclass
class PhaseContext:
    """What a model needs besides itself to give phases at a site: the site
    table, ephemeris, clock tables, the model's phase-zero arrival
    (``reference``, from its [phase_zero] section, or None), and the flag
    values of the observation (``flags``: TOA-table column -> value, what the
    model's flag groups such as ``[[time_offset]]`` select on)."""

    sites: SiteTable
    ephemeris: Ephemeris
    clocks: list[ClockTable] = field(default_factory=list)
    reference: Observations | None = None
    flags: dict = field(default_factory=dict)


def evaluate_at(model: TimingModel, times: SplitTime, site, freq_mhz,
                context: PhaseContext) -> Evaluation:
    """The model evaluated at ``times`` (UTC at the site, the TOA-table
    convention) at ``site`` and ``freq_mhz`` (a value or one per time), every
    time carrying the flags of ``context.flags``."""
    n = len(times)
    flags = {name: FlagColumn(np.zeros(n, dtype=np.int32), [str(value)])
             for name, value in context.flags.items()}
    toas = ToaTable(mjd_text=np.full(n, "", dtype="<U1"), mjd_day=times.day,
                    mjd_frac=times.frac, err_us=np.ones(n),
                    freq_mhz=np.broadcast_to(np.asarray(freq_mhz, dtype=float), (n,)).copy(),
                    site=np.broadcast_to(np.asarray(site, dtype=str), (n,)).copy(), flags=flags)
    obs = model.prepare_observations(toas, context.sites, context.ephemeris, context.clocks,
                                     exact=True)
    return model.evaluate(obs, context.reference)


def model_phase_at(model: TimingModel, times: SplitTime, site, freq_mhz,
                context: PhaseContext) -> tuple[np.ndarray, np.ndarray]:
    """(integer, fraction in [-0.5, 0.5]) pulse phase of the model at each time."""
    ev = evaluate_at(model, times, site, freq_mhz, context)
    return ev.phase_int, ev.phase_frac


def nearest_arrivals(model: TimingModel, times: SplitTime, site, freq_mhz,
                     context: PhaseContext, steps: int = 4) -> SplitTime:
    """The pulse arrivals (times of integer model phase) nearest ``times``, by
    Newton steps with the spin frequency (which differs from the apparent one
    by the Doppler factor, < 1e-3): four steps leave < 1e-12 cycles."""
    for _ in range(steps):
        ev = evaluate_at(model, times, site, freq_mhz, context)
        times = times.add_seconds(-ev.phase_frac / ev.spin_frequency_hz)
    return times
