"""Central numerical differences of the pulse phase, for checking the analytic
design-matrix columns of every component against the model itself."""

import numpy as np


def phase_partial(model, obs, name: str, step: float) -> np.ndarray:
    """d(phase)/d(parameter) in cycles per unit, by a central difference."""
    plus, minus = model.copy(), model.copy()
    plus.parameter(name).add(step)
    minus.parameter(name).add(-step)
    ep, em = plus.evaluate(obs), minus.evaluate(obs)
    return ((ep.phase_int - em.phase_int) + (ep.phase_frac - em.phase_frac)) / (2 * step)
