"""The low-eccentricity orbit's neglected third harmonic: its size against the
exact Keplerian Roemer delay, and the warning's threshold (1 ns or a tenth
of the median TOA error, whichever is larger)."""

import math

import numpy as np
from scipy.optimize import newton

from timingkit.model.timing_model import TimingModel
from timingkit.physics.binary_report import derive_binary


def test_third_harmonic_is_three_eighths_x_e_squared():
    # Roemer delay of a Keplerian orbit (Blandford & Teukolsky 1976, eq. 2.33 ff):
    # x [(cos E - e) sin w + sqrt(1 - e^2) sin E cos w], E from Kepler's equation
    # M = E - e sin E (solved here with scipy's Newton iteration).
    x, e, w = 3.5, 0.02, 0.7
    mean = np.linspace(0.0, 2 * np.pi, 4096, endpoint=False)
    ecc = newton(lambda E: E - e * np.sin(E) - mean, mean, fprime=lambda E: 1 - e * np.cos(E),
                 tol=1e-15, maxiter=50)
    delay = x * ((np.cos(ecc) - e) * np.sin(w) + math.sqrt(1 - e * e) * np.sin(ecc) * np.cos(w))
    phase = mean + w                       # orbital phase from the ascending node
    # harmonics 1 and 2 are what the first-order model (and its parameters) carries;
    # the amplitude of harmonic 3 is what it cannot absorb
    cols = [np.ones_like(phase)]
    for k in (1, 2, 3):
        cols += [np.sin(k * phase), np.cos(k * phase)]
    coef = np.linalg.lstsq(np.array(cols).T, delay, rcond=None)[0]
    third = math.hypot(coef[5], coef[6])
    assert abs(third / (0.375 * x * e * e) - 1) < 0.01


def _model(e: float, x: float = 2.0) -> TimingModel:
    return TimingModel.from_text(f"""name = "invented-circular"
spin = {{ epoch_mjd = "59100", frequency_hz = "205.5" }}
position = {{ ra = "14h03m07.5s", dec = "-33d21m10s" }}
[binary]
model = "low_eccentricity"
orbital_period_days = 1.9
projected_semi_major_axis_lt_s = {x}
e_sin_omega = {e * 0.6}
e_cos_omega = {e * 0.8}
ascending_node_epoch_mjd = "59100.2"
""")


def _cautions(model, median_error_us=None):
    return [c for c in derive_binary(model, median_error_us=median_error_us)["cautions"]
            if "third harmonic" in c]


def test_warning_threshold_is_one_ns_or_a_tenth_of_the_median_error():
    # 0.375 x e^2 with x = 2 lt-s: e = 3e-5 -> 0.68 ns, e = 5e-5 -> 1.9 ns, e = 4e-4 -> 120 ns.
    # The old rule (x e^2 > 10 ns) stayed silent for all but the last.
    assert _cautions(_model(3e-5)) == []
    warned = _cautions(_model(5e-5))
    assert len(warned) == 1 and "1.88 ns" in warned[0] and "relativistic" in warned[0]
    assert _cautions(_model(5e-5), median_error_us=0.005) != []     # a tenth: 0.5 ns -> 1 ns
    assert _cautions(_model(5e-5), median_error_us=0.1) == []       # a tenth: 10 ns
    assert _cautions(_model(4e-4), median_error_us=0.1) != []
    assert _cautions(_model(4e-4), median_error_us=2.0) == []       # 120 ns < 200 ns
