"""``timingkit demo``: fit the three invented sample sources end to end, then show
the loop predictor -> folded profiles -> TOAs -> fit on invented data, and the
same for photon events (simulated events -> fold and test -> event TOAs -> fit).
Each of the five folders of OUTDIR is written as one set (timingkit.outputs.output_set):
complete or not there, replaced by a rerun, never written over a user's own folder."""

from __future__ import annotations

import os

import numpy as np

from timingkit.formats.errors import InputError

SAMPLE_SOURCES = ("demo-msp", "demo-young", "demo-slow")


def sample_data_dir() -> str:
    return os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "sample_data")


def run_demo(outdir: str) -> int:
    from tqdm import tqdm

    from timingkit.outputs.output_set import check_before_writing
    from timingkit.pipeline.fit_run import fit_files
    from timingkit.outputs.report import summary_text

    data = sample_data_dir()
    missing = [s for s in SAMPLE_SOURCES if not os.path.exists(os.path.join(data, f"{s}.toas"))]
    if missing:
        raise InputError(f"sample data missing for {', '.join(missing)} "
                         "(regenerate with scripts/make_sample_data.py)", path=data)
    loops = {"profile-loop": profile_loop, "event-loop": event_loop}
    for name in SAMPLE_SOURCES + tuple(loops):     # refused before minutes of work, not after
        check_before_writing(os.path.join(outdir, name))
    print("timingkit demo: fitting three invented pulsars observed at invented sites\n")
    reports = []
    for name in tqdm(SAMPLE_SOURCES, desc="fitting", unit="source", disable=None, leave=False):
        out = os.path.join(outdir, name)
        reports.append(fit_files(os.path.join(data, f"{name}.toas"),
                                 os.path.join(data, f"{name}.toml"), out))
    for name, rep in zip(SAMPLE_SOURCES, reports):
        print(summary_text(rep))
        print(f"  -> {os.path.join(outdir, name)}/ (fitted.toml, residuals.csv, residuals.png, "
              "report.json)\n")
    for name, loop in loops.items():
        write_loop(loop, data, os.path.join(outdir, name))
    print(f"demo done: reports and plots are in {os.path.abspath(outdir)}")
    return 0


def write_loop(loop, data: str, final: str) -> None:
    """Run ``loop`` (:func:`profile_loop`, :func:`event_loop`) into the work folder of an
    output set that becomes ``final`` once the loop has finished (timingkit.outputs.output_set)."""
    from timingkit.outputs.output_set import output_set
    with output_set(final, purpose=f"timingkit demo: {os.path.basename(final)}") as work:
        loop(data, str(work), shown=final)


LOOP_SOURCE = "demo-msp"
LOOP_SITE = "desert-dish"
LOOP_FREE = ("spin.frequency_hz", "dispersion.dm")


def profile_loop(data: str, outdir: str, shown: str | None = None) -> None:
    """Both ends of an observation on invented data: a predictor from a slightly
    wrong model folds simulated observations of the sample MSP; their profiles
    give TOAs (auto template); a fit from the wrong model recovers the true one.
    Writes into ``outdir``; ``shown``: the folder named in the printed lines
    (the final one, when ``outdir`` is the work folder of an output set)."""
    from timingkit.fit.least_squares import fit
    from timingkit.formats.profile_file import write_profile_file, write_template_file
    from timingkit.formats.toa_writer import write_toa_table
    from timingkit.pipeline.inputs import load_context, load_model
    from timingkit.predict.model_phase import PhaseContext
    from timingkit.profiles.simulate import ProfileSimulation, simulate_profiles
    from timingkit.profiles.templates import auto_template, builtin_template
    from timingkit.profiles.toas import gather_profiles, time_profiles

    true = load_model(os.path.join(data, f"{LOOP_SOURCE}.toml"))
    folding = true.copy()
    folding.parameter("spin.frequency_hz").add(2e-9)
    folding.parameter("dispersion.dm").add(0.02)
    sites, eph, clocks = load_context(true)
    site = LOOP_SITE
    sim = ProfileSimulation(site=site, start_mjd=60000, end_mjd=60060, count=24,
                            centre_freqs_mhz=(820.0, 1400.0, 2300.0), bins=512, snr=80.0,
                            seed=5)
    sets = simulate_profiles(true, folding, sim, PhaseContext(sites, eph, clocks),
                             builtin_template(sim.bins))
    os.makedirs(outdir, exist_ok=True)
    for k, ps in enumerate(sets, start=1):
        ps.path = os.path.join(outdir, f"obs-{k:02d}.npz")
        write_profile_file(ps, ps.path)
    timed = gather_profiles(sets)
    template = auto_template(list(timed.profiles), sim.bins)
    result = time_profiles(timed, template.profile)
    write_template_file(template, os.path.join(outdir, "template.npz"))
    write_toa_table(result.toas, os.path.join(outdir, "profile.toas"))
    fitted = fit(folding, folding.prepare_observations(result.toas, sites, eph, clocks),
                 free=list(LOOP_FREE))
    print(f"profile loop ({LOOP_SOURCE}, invented): {len(sets)} observations at {site} folded "
          "with a predictor from a model off by 2e-9 Hz and 0.02 pc cm^-3 -> "
          f"{len(result.toas)} TOAs (median error {float(np.median(result.toas.err_us)):.2f} µs, "
          f"auto template of {len(template.components)} components) -> fit:")
    for name in LOOP_FREE:
        p, q, w = fitted.model.parameter(name), true.parameter(name), folding.parameter(name)
        off = ((p.value - q.value) + (p.value_lo - q.value_lo)) / p.uncertainty
        start = ((w.value - q.value) + (w.value_lo - q.value_lo)) / p.uncertainty
        print(f"  {name}: {start:+.0f} sigma from the truth before, {off:+.1f} sigma after")
    print(f"  -> {shown or outdir}/ (obs-*.npz, template.npz, profile.toas)\n")


EVENT_SOURCE = "demo-young"


def event_loop(data: str, outdir: str, shown: str | None = None) -> None:
    """Photon events on invented data: two days of events of the sample young
    pulsar seen from an invented spacecraft in a 550 km orbit, folded and
    tested (``timingkit events``), timed in 0.1-day chunks with a model off by
    5e-8 Hz (``event-toas``) and fitted back. ``outdir``, ``shown``: as for
    :func:`profile_loop`."""
    from timingkit.events.simulate import circular_orbit
    from timingkit.formats.orbit_table import write_orbit_text
    from timingkit.pipeline.event_run import event_toa_files, fold_event_files, simulate_event_file
    from timingkit.pipeline.fit_run import fit_files
    from timingkit.pipeline.inputs import load_model

    os.makedirs(outdir, exist_ok=True)
    true_path = os.path.join(data, f"{EVENT_SOURCE}.true.toml")
    orbit = os.path.join(outdir, "orbit.txt")
    write_orbit_text(orbit, *circular_orbit(59099.95, 59102.05, 30.0))
    events = os.path.join(outdir, "events.fits")
    simulate_event_file(true_path, events, start_mjd=59100.0, end_mjd=59102.0, rate_per_s=0.5,
                        pulsed_fraction=0.3, profile=["gauss:0.0:0.08"], orbit=orbit, seed=3)
    report = fold_event_files(events, true_path, os.path.join(outdir, "folded"), orbit=orbit,
                              harmonics=4)
    wrong = load_model(true_path)
    wrong.parameter("spin.frequency_hz").add(5e-8)
    wrong_path = os.path.join(outdir, "start.toml")
    wrong.write(wrong_path, comment="the sample model with its frequency off by 5e-8 Hz")
    toas = os.path.join(outdir, "events.toas")
    facts = event_toa_files(events, wrong_path, toas, template="auto", span_days=0.1,
                            orbit=orbit)
    fitted = fit_files(toas, wrong_path, os.path.join(outdir, "fit"), free=["spin.frequency_hz"],
                       fix=["spin.frequency_derivatives.0", "spin.frequency_derivatives.1",
                            "dispersion.dm"], make_plots=False)
    entry = fitted["parameters"]["spin.frequency_hz"]
    truth = load_model(true_path).parameter("spin.frequency_hz")
    off = (float(entry["value"]) - (truth.value + truth.value_lo)) / entry["uncertainty"]
    pf = report["pulsed_fraction"]
    print(f"event loop ({EVENT_SOURCE}, invented): {report['events']:,} events from an invented "
          f"spacecraft (injected pulsed fraction 0.3) -> H = {report['h_test']['value']:.0f}, "
          f"pulsed fraction {pf['value']:.3f} ± {pf['uncertainty']:.3f} -> {facts['toas']} event "
          f"TOAs from a model off by 5e-8 Hz (median error {facts['median_err_us']:.0f} µs) -> "
          f"fit: spin.frequency_hz {off:+.1f} sigma from the truth")
    if shown is not None:
        _name_final_folder(os.path.join(outdir, "folded"), outdir, shown)
    print(f"  -> {shown or outdir}/ (events.fits, orbit.txt, folded/, events.toas, fit/)\n")


FITS_CARD_TEXT = 72       # characters of text per HISTORY card (FITS standard 4.0, 4.4.2.4)


def _name_final_folder(folded: str, work: str, final: str) -> None:
    """The fold read its inputs in the work folder ``work`` of the output set and recorded
    their paths (``events_report.json``; the HISTORY of ``phases.fits``, which astropy
    splits into cards of FITS_CARD_TEXT characters): name ``final``, where they will be
    once the set is in place, instead."""
    import json

    from astropy.io import fits

    from timingkit.outputs.report import write_json
    report_path = os.path.join(folded, "events_report.json")
    with open(report_path, encoding="utf-8") as fh:
        text = fh.read()
    write_json(report_path, json.loads(text.replace(json.dumps(work)[1:-1],
                                                    json.dumps(final)[1:-1])))
    with fits.open(os.path.join(folded, "phases.fits"), mode="update") as hdus:
        for hdu in hdus:
            entries, current = [], ""
            for piece in hdu.header.get("HISTORY", []):
                current += str(piece)
                if len(str(piece)) < FITS_CARD_TEXT:       # the last card of an entry
                    entries, current = entries + [current], ""
            entries += [current] if current else []
            if any(work in entry for entry in entries):
                hdu.header.remove("HISTORY", remove_all=True)
                for entry in entries:
                    hdu.header.add_history(entry.replace(work, final))


def add_parsers(sub) -> None:
    p = sub.add_parser("demo", help="fit the built-in sample sources")
    p.add_argument("-o", "--outdir", default="timingkit-demo",
                   help="output folder (default timingkit-demo)")
    p.set_defaults(func=cmd_demo)


def cmd_demo(args) -> int:
    return run_demo(args.outdir)
