#!/usr/bin/env python
"""Glitch-search benchmark (issue 5): a 10-year, 2,000-TOA data set.

``bench_glitches()`` simulates an invented young pulsar ("demo-young-bench",
18.5 Hz, the demo's) observed from the invented site ``desert-dish`` (sample site file)
at two frequencies, with two glitches (fractional sizes 3e-9 and 2e-6, the
second with a 100-day decaying part), and prints:

- the time of ``search_glitches`` on it (target < 10 s), split into its
  stages (phase tracking and scans with null simulations, fits);
- the same for the glitch-free version of the data set;
- the ratio of the search time to one ordinary fit of the same TOAs
  (reference measured in the same run);
- whether both glitches were found (bracket contains the epoch, step within
  3 sigma).

Time scales and geometry (``prepare_observations``) are computed once per
data set before the search and timed separately. Run:
``python scripts/bench_glitches.py``; ``scripts/bench.py glitches`` calls it.
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
SITE_FILE = ROOT / "timingkit" / "sample_data" / "sites.toml"

sys.path.insert(0, str(ROOT / "scripts"))
from sample_models import YOUNG_FREE, YOUNG_POSITION, YOUNG_TRUE, model_text  # noqa: E402

# the demo's invented young pulsar, with its epochs at the start of the span
MODEL = model_text("demo-young-bench", YOUNG_POSITION, **YOUNG_TRUE, free=YOUNG_FREE,
                   epoch_mjd="58000", sites=None)

GLITCHES = [  # epoch, fractional size, frequency-derivative step (Hz/s), decaying part
    ("59300.25", 3e-9, -1.2e-14, None),
    ("60800.6", 2e-6, -1.8e-13, (1e-7, 100.0)),
]


def _glitch_text(frequency_hz: float) -> str:
    out = ""
    for epoch, size, derivative_step, decay in GLITCHES:
        out += (f'\n[[glitch]]\nepoch_mjd = "{epoch}"\n'
                f"frequency_step_hz = {size * frequency_hz!r}\n"
                f"frequency_derivative_step = {derivative_step!r}\n")
        if decay:
            out += f"decaying_frequency_step_hz = {decay[0]!r}\ndecay_time_days = {decay[1]!r}\n"
    return out


def _timed_search(model, obs):
    """Run the search with its tracking/scan and fitting stages timed: each
    stage function is wrapped in every glitch module that calls it."""
    from timingkit.glitch import candidates, refine, search
    modules = (search, refine, candidates)
    stages = {"tracking+scan": 0.0, "fits": 0.0}
    originals = []

    def wrap(name, stage):
        for module in modules:
            func = getattr(module, name, None)
            if func is None:
                continue
            originals.append((module, name, func))

            def timed(*args, _func=func, **kwargs):
                started = time.perf_counter()
                try:
                    return _func(*args, **kwargs)
                finally:
                    stages[stage] += time.perf_counter() - started
            setattr(module, name, timed)

    wrap("track_phases", "tracking+scan")
    wrap("scan_pass", "tracking+scan")
    wrap("fit_pinned", "fits")
    try:
        started = time.perf_counter()
        result = search.search_glitches(model, obs)
        total = time.perf_counter() - started
    finally:
        for module, name, func in originals:
            setattr(module, name, func)
    return result, total, stages


def bench_glitches(n_toas: int = 2000, years: float = 10.0) -> dict:
    os.environ.setdefault("MPLBACKEND", "Agg")
    from timingkit.geometry.ephemeris import load_ephemeris
    from timingkit.fit.least_squares import fit
    from timingkit.model import TimingModel
    from timingkit.geometry.observations import prepare_observations
    from timingkit.model.simulate import simulate_toas
    from timingkit.geometry.sites import SiteTable

    eph = load_ephemeris()
    sites = SiteTable.with_files([str(SITE_FILE)])
    start_model = TimingModel.from_text(MODEL)
    frequency_hz = start_model.spin.frequency.value
    truth = TimingModel.from_text(MODEL + _glitch_text(frequency_hz))
    out = {}
    print(f"glitch search: {n_toas} TOAs over {years:g} years, site desert-dish, "
          f"{frequency_hz:.4f} Hz young pulsar")
    for label, source in (("two glitches", truth), ("glitch-free", start_model)):
        started = time.perf_counter()
        toas = simulate_toas(source, 58000.0, 58000.0 + 365.25 * years, n_toas, 100.0, sites,
                             eph, site_names=["desert-dish"], freqs_mhz=[820.0, 1400.0], seed=5)
        t_sim = time.perf_counter() - started
        started = time.perf_counter()
        obs = prepare_observations(toas, sites, eph)
        t_prep = time.perf_counter() - started
        started = time.perf_counter()
        fit(truth if label == "two glitches" else start_model, obs)
        t_fit = time.perf_counter() - started
        result, t_search, stages = _timed_search(start_model, obs)
        mjd = [c.epoch_mjd for c in result.candidates]
        print(f"  {label:13s}: search {t_search:6.2f} s (target < 10 s; tracking+scan "
              f"{stages['tracking+scan']:.2f} s, fits {stages['fits']:.2f} s), "
              f"{t_search / t_fit:5.1f} x one plain fit ({t_fit:.3f} s); "
              f"simulation {t_sim:.2f} s, time scales+geometry {t_prep:.2f} s; "
              f"{len(result.candidates)} candidate(s) at MJD "
              + (", ".join(f"{float(e):.2f}" for e in mjd) or "-"))
        if label == "two glitches":
            hits = 0
            for epoch, size, _, _ in GLITCHES:
                e, step = float(epoch), size * frequency_hz
                hits += any(c.epoch_min_mjd <= e <= c.epoch_max_mjd
                            and abs(c.frequency_step_hz - step)
                            <= 3 * c.frequency_step_uncertainty_hz for c in result.candidates)
            print(f"  injected glitches found (bracketed, step within 3 sigma): "
                  f"{hits}/{len(GLITCHES)}")
            out["found"] = hits
        out[label] = {"search_s": t_search, "plain_fit_s": t_fit, "prepare_s": t_prep,
                      "candidates": len(result.candidates), **stages}
    return out


if __name__ == "__main__":
    bench_glitches()
