"""Event TOAs: the unbinned maximum-likelihood shift with N(0, 1) pulls, and a
fit of TOAs from simulated events that recovers the injected spin parameters."""

import numpy as np
import pytest

from events_support import MODEL, write_inputs, write_orbit
from timingkit.events.photon_toas import fit_shift, fit_weight
from timingkit.events.template import PulseTemplate
from timingkit.pipeline.event_run import event_toa_files, simulate_event_file
from timingkit.pipeline.fit_run import fit_files


def test_shift_pulls_are_standard_normal():
    # 400 chunks of 400 events, 30% from a two-component template and a random true
    # shift each: (fitted - true) / error must be N(0, 1).
    rng = np.random.default_rng(3)
    template = PulseTemplate.from_gaussians([(0.2, 0.06, 1.0), (0.6, 0.15, 0.5)])
    model = template.mixed(0.3)
    pulls = []
    for _ in range(400):
        true = rng.uniform(-0.5, 0.5)
        n = 400
        pulsed = rng.random(n) < 0.3
        phases = rng.uniform(0, 1, n)
        phases[pulsed] = (template.sample(int(pulsed.sum()), rng) + true) % 1
        result = fit_shift(phases, model)
        pulls.append(((result.shift - true + 0.5) % 1 - 0.5) / result.error)
    pulls = np.array(pulls)
    assert abs(pulls.mean()) < 0.15 and 0.9 < pulls.std() < 1.1
    assert np.mean(np.abs(pulls) > 3) < 0.01


@pytest.mark.parametrize("events, fraction", [(100, 0.15), (200, 0.12)])
def test_weak_chunks_are_refused_and_the_rest_keep_normal_pulls(events, fraction):
    # chunks with barely a pulse: the Fisher error would be wrong (pull sd ~ 5-10);
    # those whose likelihood is not concentrated are refused, the others keep
    # pulls near N(0, 1)
    rng = np.random.default_rng(events)
    template = PulseTemplate.from_gaussians([(0.2, 0.06, 1.0), (0.6, 0.15, 0.5)])
    model = template.mixed(fraction)
    kept, refused = [], 0
    for _ in range(400):
        true = rng.uniform(-0.5, 0.5)
        pulsed = rng.random(events) < fraction
        phases = rng.uniform(0, 1, events)
        phases[pulsed] = (template.sample(int(pulsed.sum()), rng) + true) % 1
        result = fit_shift(phases, model)
        if result.concentration < 0.99:
            refused += 1
            continue
        kept.append(((result.shift - true + 0.5) % 1 - 0.5) / result.error)
    kept = np.array(kept)
    assert refused > 100 and len(kept) > 40
    assert 0.85 < kept.std() < 1.25 and np.mean(np.abs(kept) > 3) < 0.05


def test_template_weight_is_fitted():
    rng = np.random.default_rng(4)
    template = PulseTemplate.from_gaussians([(0.5, 0.05, 1.0)])
    phases = np.concatenate([rng.uniform(0, 1, 70_000), (template.sample(30_000, rng) + 0.1) % 1])
    weight, shift = fit_weight(phases, template)
    assert weight == pytest.approx(0.3, abs=0.03)
    assert shift == pytest.approx(0.1, abs=1e-3)


def test_event_toas_fit_back_to_the_injected_spin(tmp_path):
    # Simulated spacecraft events of the invented model; TOAs made with a model
    # whose frequency is off by 2e-9 Hz (0.35 cycles over the 2 days) and with
    # the injected profile as template; the fit must recover the injected values
    # within 3 sigma, with a reduced chi^2 that says the TOA errors are right.
    model_path, _ = write_inputs(tmp_path)
    orbit = write_orbit(tmp_path / "orbit.txt", 57999.95, 58002.05, 30.0)
    events = tmp_path / "events.fits"
    simulate_event_file(model_path, events, start_mjd=58000.0, end_mjd=58002.0,
                        rate_per_s=0.5, pulsed_fraction=0.4, profile=["gauss:0.0:0.08"],
                        orbit=orbit, seed=5)
    template = tmp_path / "template.npz"
    PulseTemplate.from_gaussians([(0.0, 0.08, 1.0)]).write(template)
    start_text = MODEL.replace('"29.7123456789"', '"29.7123456809"') + \
        '[fit]\nfree = ["spin.frequency_hz", "spin.frequency_derivatives.0"]\n'
    start_path = tmp_path / "start.toml"
    start_path.write_text(start_text + '[settings]\nsites = "sites.toml"\n')
    toas = tmp_path / "events.toas"
    facts = event_toa_files(events, start_path, toas, template=str(template), span_days=0.1,
                            orbit=orbit)
    assert facts["toas"] == 20
    report = fit_files(toas, start_path, tmp_path / "fit", make_plots=False)
    f0 = report["parameters"]["spin.frequency_hz"]
    f1 = report["parameters"]["spin.frequency_derivatives.0"]
    assert abs(float(f0["value"]) - 29.7123456789) < 3 * f0["uncertainty"]
    assert abs(float(f1["value"]) + 3.1e-10) < 3 * f1["uncertainty"]
    assert 0.3 < report["reduced_chi2"] < 2.0


def test_template_file_round_trip(tmp_path):
    shape = PulseTemplate.from_gaussians([(0.3, 0.08, 1.0), (0.7, 0.2, 0.4)], background=0.2)
    shape.write(tmp_path / "t.npz")
    back = PulseTemplate.from_file(tmp_path / "t.npz")
    grid = np.arange(300) / 300
    # 512 bin means, re-interpolated: the bin-averaging error of a 0.08 FWHM pulse
    assert np.max(np.abs(back(grid) - shape(grid))) < 0.01 * shape(grid).max()


def test_auto_template_is_a_positive_smoothing_of_the_profile():
    rng = np.random.default_rng(6)
    truth = PulseTemplate.from_gaussians([(0.3, 0.1, 1.0)], background=0.5)
    phases = truth.sample(50_000, rng)
    auto = PulseTemplate.from_events(phases)
    grid = np.arange(512) / 512
    assert np.all(auto(grid) > 0)
    # close to the truth: a kernel narrower than the pulse, little noise
    assert np.max(np.abs(auto(grid) - truth(grid))) < 0.1 * truth(grid).max()
    assert "kernel sd" in auto.source
