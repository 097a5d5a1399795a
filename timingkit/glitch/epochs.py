"""Times in the glitch search: TDB seconds at the pulsar since the spin epoch, converted to
emission MJDs and exact epoch decimals, and the spin frequency and its derivative there.
"""

from __future__ import annotations

from decimal import Decimal

import numpy as np

from timingkit.glitch.tracking import SECONDS_PER_DAY
from timingkit.model.glitch import Glitch, model_glitches
from timingkit.model.timing_model import TimingModel


def emission_mjd(model: TimingModel, t_s):
    return model.spin.epoch_day + model.spin.epoch_frac + np.asarray(t_s) / SECONDS_PER_DAY


def epoch_decimal(model: TimingModel, t_s: float) -> Decimal:
    """Spin epoch + t_s as an exact-enough decimal MJD (1e-12 day = 86 ns)."""
    value = (Decimal(int(model.spin.epoch_day)) + Decimal(repr(model.spin.epoch_frac))
             + Decimal(repr(float(t_s))) / Decimal(86400))
    return value.quantize(Decimal("1e-12"))


def glitch_time_s(model: TimingModel, g: Glitch) -> float:
    return ((g.epoch_day - model.spin.epoch_day) * SECONDS_PER_DAY
            + (g.epoch_frac - model.spin.epoch_frac) * SECONDS_PER_DAY)


def spin_frequency_at(model: TimingModel, t_s):
    """Spin frequency (Hz) of the model's Taylor series t_s seconds from its epoch."""
    f = model.spin.frequency.value
    term = 1.0
    for k, p in enumerate(model.spin.derivatives, start=1):
        term = term * t_s / k
        f = f + p.value * term
    return f


def spin_frequency_derivative_at(model: TimingModel, t_s):
    out = 0.0
    term = 1.0
    for k, p in enumerate(model.spin.derivatives):
        if k > 0:
            term = term * t_s / k
        out = out + p.value * term
    return out


def glitch_at(model: TimingModel, epoch: Decimal) -> Glitch:
    return next(g for g in model_glitches(model) if g.epoch == epoch)
