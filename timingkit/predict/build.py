"""Building a phase predictor from a timing model.

For each segment the full model (:mod:`timingkit.predict.model_phase`) is
evaluated at the Chebyshev points of the first kind; the phases relative to
the middle node's phase (integer + fraction, exact) are interpolated by a
Chebyshev series (numpy.polynomial.chebyshev.chebvander and a linear solve),
and the result is checked, through the very code that evaluates predictor
files, against the model at the points between the nodes and next to both
edges. A segment passes when that check is within half the requested
accuracy and the series' rounding bound (4 x 2^-53 x sum |c_k| cycles over
the terms evaluated in double, all but the first-order one) is within the
other half.

Automatic choices: without ``degree`` each segment gets the lowest degree
(of at most 16) that passes; without ``segment_minutes`` the segments start a
UTC day long and failing ones are halved until they pass (not below 10 s).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from numpy.polynomial import chebyshev

from timingkit import __version__
from timingkit.formats.errors import InputError
from timingkit.formats.mjd_text import parse_mjd_strings
from timingkit.formats.predictor_file import PredictorData
from timingkit.formats.window_file import check_windows
from timingkit.model.timing_model import TimingModel
from timingkit.numerics.timearray import SECONDS_PER_DAY, SplitTime
from timingkit.predict.model_phase import PhaseContext, evaluate_at
from timingkit.predict.predictor import PhasePredictor, segment_x
from timingkit.predict.segments import (Segments, cut_points, plan_segments,
                                        seconds_per_day_of)
from timingkit.predict.time_offsets import (check_observation_flags, flag_cautions,
                                            time_offsets_applied)

DEFAULT_ACCURACY_CYCLES = 1e-9
OTHER_TIME_SCALES = {"geocentre": "TT (the TOA-table convention for site geocentre)",
                     "ssb": "TDB (the TOA-table convention for site ssb)"}
AUTO_FIT_DEGREE = 16            # degree fitted when the degree is chosen automatically
MAX_DEGREE = 30
MIN_SEGMENT_S = 10.0
MAX_AUTO_SEGMENT_DAYS = 1.0
UNIT_ROUNDOFF = 2.0 ** -53
ROUNDING_FACTOR = 4.0           # rounding bound of the series: factor x u x sum |c_k|
NEAR_EDGE = 1e-6                # check points at x = +-(1 - NEAR_EDGE)


class _SegmentFits:
    """Per-segment results of one round of fitting."""

    def __init__(self, segments, phase_integer, phase_fraction, coefficients, degrees,
                 measured, rounding):
        self.segments = segments
        self.phase_integer = phase_integer
        self.phase_fraction = phase_fraction
        self.coefficients = coefficients
        self.degrees = degrees
        self.measured = measured
        self.rounding = rounding

    def select(self, keep) -> "_SegmentFits":
        return _SegmentFits(self.segments.select(keep), self.phase_integer[keep],
                            self.phase_fraction[keep], self.coefficients[keep],
                            self.degrees[keep], self.measured[keep], self.rounding[keep])


def _data(segments: Segments, phase_integer, phase_fraction, coefficients, degrees,
          seconds_per_day=None, **header) -> PredictorData:
    if seconds_per_day is None:
        seconds_per_day = seconds_per_day_of(segments)
    return PredictorData(source=header.pop("source", ""), site=header.pop("site", ""),
                         freq_mhz=header.pop("freq_mhz", float("inf")),
                         start_text=segments.start_text, end_text=segments.end_text,
                         seconds_per_day=seconds_per_day, phase_integer=phase_integer,
                         phase_fraction=phase_fraction, coefficients=coefficients,
                         degrees=degrees, **header)


def _fit_round(model, site, freq_mhz, segments: Segments, context, fit_degree: int,
               auto_degree: bool, accuracy: float, warnings: list[str]) -> _SegmentFits:
    """Fit every segment at ``fit_degree`` and check it (module docstring)."""
    k = fit_degree
    nodes = chebyshev.chebpts1(k + 1)
    check = np.r_[-1.0 + NEAR_EDGE, chebyshev.chebpts2(k + 2)[1:-1], 1.0 - NEAR_EDGE]
    times = segments.times_at(np.r_[nodes, check])
    ev = evaluate_at(model, times, site, freq_mhz, context)
    warnings.extend(w for w in ev.obs.warnings if w not in warnings)
    shape = (len(segments), k + 1 + len(check))
    n_int, n_frac = ev.phase_int.reshape(shape), ev.phase_frac.reshape(shape)
    # x as the reader computes it from the (rounded) times, not the nominal nodes
    x = segment_x(times.day.reshape(shape), times.frac.reshape(shape),
                  segments.start_day[:, None], segments.start_frac[:, None],
                  2.0 / segments.length_days[:, None])[0]
    mid = k // 2
    ref_int, ref_frac = n_int[:, mid].copy(), n_frac[:, mid].copy()
    carry = np.floor(ref_frac)
    ref_int, ref_frac = ref_int + carry, ref_frac - carry
    relative = (n_int - ref_int[:, None]) + (n_frac - ref_frac[:, None])
    vander = chebyshev.chebvander(x[:, :k + 1], k)
    coeffs = np.linalg.solve(vander, relative[:, :k + 1, None])[..., 0]
    # |model - series cut after degree m| <= |model - full series| + sum_{j>m} |c_j|
    full = chebyshev.chebvander(x[:, k + 1:], k) @ coeffs[:, :, None]
    tails = np.cumsum(np.abs(coeffs[:, ::-1]), axis=1)[:, ::-1]        # sum_{j>=m} |c_j|
    tails = np.concatenate([tails[:, 1:], np.zeros((len(coeffs), 1))], axis=1)
    bound = np.max(np.abs(full[..., 0] - relative[:, k + 1:]), axis=1)[:, None] + tails
    degrees = np.full(len(segments), k, dtype=np.int64)
    if auto_degree:
        good = bound <= 0.5 * accuracy
        good[:, 0] = False
        degrees = np.where(good.any(axis=1), np.argmax(good, axis=1), k)
        coeffs = np.where(np.arange(k + 1)[None, :] <= degrees[:, None], coeffs, 0.0)
    bound = bound[np.arange(len(segments)), degrees]
    # the first-order term is evaluated error-free (predictor.PhasePredictor.phase)
    rounding = ROUNDING_FACTOR * UNIT_ROUNDOFF * (np.sum(np.abs(coeffs), axis=1)
                                                  - np.abs(coeffs[:, 1]))
    # the check, through the reader's own evaluation
    trial = PhasePredictor(_data(segments, ref_int.astype(np.int64), ref_frac, coeffs, degrees,
                                 seconds_per_day=np.full(len(segments), SECONDS_PER_DAY)))
    check_times = SplitTime(times.day.reshape(shape)[:, k + 1:].ravel(),
                            times.frac.reshape(shape)[:, k + 1:].ravel(), "utc")
    p_int, p_frac = trial.phase(check_times)
    diff = ((p_int - n_int[:, k + 1:].ravel()) + (p_frac - n_frac[:, k + 1:].ravel()))
    measured = np.maximum(np.max(np.abs(diff.reshape(len(segments), -1)), axis=1), bound)
    return _SegmentFits(segments, ref_int.astype(np.int64), ref_frac, coeffs, degrees,
                        measured, rounding)


def _concatenate(fits: list[_SegmentFits]) -> _SegmentFits:
    segments = Segments(np.concatenate([f.segments.start_text for f in fits]),
                        np.concatenate([f.segments.end_text for f in fits]))
    width = max(f.coefficients.shape[1] for f in fits)
    coeffs = np.concatenate([np.pad(f.coefficients, ((0, 0), (0, width - f.coefficients.shape[1])))
                             for f in fits])
    out = _SegmentFits(segments, *(np.concatenate([getattr(f, name) for f in fits]) for name in
                                   ("phase_integer", "phase_fraction")), coeffs,
                       *(np.concatenate([getattr(f, name) for f in fits]) for name in
                         ("degrees", "measured", "rounding")))
    return out.select(np.lexsort((segments.start_frac, segments.start_day)))


def _check_options(freq_mhz, segment_minutes, degree, accuracy) -> None:
    if not (freq_mhz > 0):
        raise InputError("observing frequency must be > 0 MHz (or inf)", field="freq_mhz")
    if segment_minutes is not None and not segment_minutes > 0:
        raise InputError("segment length must be > 0 minutes", field="segment_minutes")
    if degree is not None and not 1 <= degree <= MAX_DEGREE:
        raise InputError(f"degree must be 1 to {MAX_DEGREE}", field="degree")
    if not accuracy > 0:
        raise InputError("accuracy must be > 0 cycles", field="accuracy_cycles")


def build_predictor(model: TimingModel, site: str, start_mjd: str, end_mjd: str,
                    freq_mhz: float, context: PhaseContext, *,
                    segment_minutes: float | None = None, degree: int | None = None,
                    accuracy_cycles: float = DEFAULT_ACCURACY_CYCLES,
                    flags: dict | None = None) -> PhasePredictor:
    """A predictor of ``model``'s phase at ``site`` and ``freq_mhz`` from
    ``start_mjd`` to ``end_mjd`` (MJD strings, UTC at the site). Its data's
    ``estimated_max_error_cycles`` is the largest check error plus rounding
    bound; above ``accuracy_cycles`` only when a given segment length or
    degree, or the 10-s floor, did not allow better (the CLI then warns).

    ``flags``: the flag values of the observation (TOA-table column ->
    value, e.g. {"backend": "wide-b"}); the model's ``[[time_offset]]`` groups
    that select them (and those of the site) are applied, and the predictor
    records both (``data.flags``, ``data.time_offsets_applied``)."""
    start_text, end_text = str(start_mjd).strip(), str(end_mjd).strip()
    day, frac = parse_mjd_strings([start_text, end_text])
    if not (day[1] - day[0]) + (frac[1] - frac[0]) > 0:
        raise InputError(f"end MJD {end_text} must be later than start MJD {start_text}",
                         field="end")
    return _build(model, site, [(start_text, end_text)], freq_mhz, context, segment_minutes,
                  degree, accuracy_cycles, flags)


def build_window_predictor(model: TimingModel, site: str, windows, freq_mhz: float,
                           context: PhaseContext, *, segment_minutes: float | None = None,
                           degree: int | None = None,
                           accuracy_cycles: float = DEFAULT_ACCURACY_CYCLES,
                           flags: dict | None = None) -> PhasePredictor:
    """As :func:`build_predictor`, for observing ``windows`` only: (start, end)
    MJD-string pairs (UTC at the site, any order, touching but not
    overlapping; :func:`timingkit.formats.window_file.read_window_file` reads
    them from a file). The segments cover the windows and nothing between
    them; the predictor refuses a time outside every window, naming the
    nearest."""
    return _build(model, site, check_windows(windows), freq_mhz, context, segment_minutes,
                  degree, accuracy_cycles, flags)


def _plan(model, site_name, freq_mhz, windows, context, segment_minutes) -> tuple[Segments, bool]:
    """The first segments of every window, cut where the model requires."""
    if segment_minutes is not None:
        length_days, fixed = segment_minutes / 1440.0, True
    else:
        length_days, fixed = MAX_AUTO_SEGMENT_DAYS, False
    plans = []
    for start_text, end_text in windows:
        day, frac = parse_mjd_strings([start_text, end_text])
        start, end = SplitTime(day[0], frac[0], "utc"), SplitTime(day[1], frac[1], "utc")
        cuts = cut_points(model, site_name, freq_mhz, start, end, context)
        plans.append(plan_segments(start_text, end_text, cuts, length_days, fixed))
    return (Segments(np.concatenate([p.start_text for p in plans]),
                     np.concatenate([p.end_text for p in plans])), fixed)


def _build(model, site, windows, freq_mhz, context, segment_minutes, degree, accuracy_cycles,
           flags) -> PhasePredictor:
    _check_options(freq_mhz, segment_minutes, degree, accuracy_cycles)
    context = replace(context, flags={**context.flags, **check_observation_flags(flags)})
    site_record = context.sites.lookup(site)
    site_name = site_record.name
    warnings: list[str] = flag_cautions(model, context.flags)
    pending, fixed = _plan(model, site_name, freq_mhz, windows, context, segment_minutes)
    done: list[_SegmentFits] = []
    while len(pending):
        fits = _fit_round(model, site_name, freq_mhz, pending, context,
                          degree if degree is not None else AUTO_FIT_DEGREE, degree is None,
                          accuracy_cycles, warnings)
        passed = (fits.measured <= 0.5 * accuracy_cycles) & (fits.rounding <= 0.5 * accuracy_cycles)
        can_split = (not fixed) & (pending.length_days * SECONDS_PER_DAY >= 2 * MIN_SEGMENT_S)
        finished = passed | ~can_split
        done.append(fits.select(finished))
        pending = pending.select(~finished).bisected()
    fits = _concatenate(done)
    error = float(np.max(fits.measured + fits.rounding))
    # times at the geocentre are TT and at the barycentre TDB: no leap seconds
    uniform = site_record.kind in ("geocentre", "ssb")
    first = evaluate_at(model, fits.segments.times_at(np.array([-1.0]))[:1], site_name,
                        freq_mhz, context)
    data = _data(fits.segments, fits.phase_integer, fits.phase_fraction,
                 fits.coefficients[:, :int(fits.degrees.max()) + 1], fits.degrees,
                 seconds_per_day=np.full(len(fits.segments), SECONDS_PER_DAY) if uniform else None,
                 source=model.name, site=site_name, freq_mhz=float(freq_mhz),
                 accuracy_cycles=float(accuracy_cycles), estimated_max_error_cycles=error,
                 created_by=f"timingkit {__version__}", model_file=str(model.path or ""),
                 warnings=warnings, flags=dict(context.flags),
                 time_offsets_applied=time_offsets_applied(model, first),
                 **({"time_scale": OTHER_TIME_SCALES[site_record.kind]} if uniform else {}))
    return PhasePredictor(data)
