"""Evaluating a phase predictor: pulse phase and apparent spin frequency at
times at its site (UTC MJDs), segment by segment.

Phase = integer + fraction (the segment's reference phase, exact) + a
Chebyshev series relative to it (numpy.polynomial.chebyshev, evaluated for
all times at once). The series reaches ~F x half the segment length cycles,
almost all of it in the first-order term, which is therefore evaluated in
double-double (numerics.ddmath); the rest is plain double precision.
"""

from __future__ import annotations

import numpy as np
from numpy.polynomial import chebyshev

from timingkit.formats.errors import InputError
from timingkit.formats.mjd_text import format_mjd, parse_mjd_strings
from timingkit.formats.predictor_file import PredictorData, read_predictor_file
from timingkit.numerics import ddmath
from timingkit.numerics.timearray import SplitTime

# A time may lie this far outside its segment (days, ~0.9 ns) and still count
# as inside: the float look-up cannot place times closer to an edge than that.
EDGE_TOLERANCE_DAYS = 1e-14
CHUNK = 16384                 # times evaluated together


def split_mjd(mjd) -> tuple[np.ndarray, np.ndarray]:
    """(day, fraction) arrays from MJD strings, a SplitTime or a (day, fraction)
    pair; plain floats are refused (they resolve only ~1 µs)."""
    if isinstance(mjd, SplitTime):
        return mjd.day, mjd.frac
    if isinstance(mjd, str):
        return parse_mjd_strings([mjd])
    if isinstance(mjd, tuple) and len(mjd) == 2:
        day, frac = np.broadcast_arrays(np.atleast_1d(np.asarray(mjd[0], dtype=float)),
                                        np.atleast_1d(np.asarray(mjd[1], dtype=float)))
        whole = np.floor(day)
        frac = (day - whole) + frac
        carry = np.floor(frac)
        return whole + carry, frac - carry
    arr = np.asarray(mjd)
    if arr.dtype.kind in "US":
        return parse_mjd_strings(np.atleast_1d(arr).astype(str))
    raise TypeError("give MJDs as decimal strings, a SplitTime or a (day, fraction) pair: a "
                    "single float MJD resolves only ~1 µs, too coarse for pulse phase")


def segment_x(day, frac, start_day, start_frac, two_over_length):
    """x = 2 (t - start) / length - 1 as a double-double (hi, lo); ``offset`` =
    t - start in days (double). The builder and the reader share it, so both
    see the very same x for a time."""
    hi, lo = ddmath.two_sum(frac, -start_frac)                 # exact
    hi, lo = ddmath.dd_add_d(hi, lo, day - start_day)          # whole days: exact
    offset = hi + lo
    hi, lo = ddmath.dd_mul_d(hi, lo, two_over_length)
    hi, lo = ddmath.dd_add_d(hi, lo, -1.0)
    return hi, lo, offset


class PhasePredictor:
    """Pulse phase and apparent frequency at one site and observing frequency.

    ``phase(mjd)`` -> (integer cycles int64, fraction in [0, 1)); ``frequency_hz(mjd)``
    -> apparent spin frequency (Hz) as seen at the site. ``mjd``: MJD strings,
    a SplitTime or a (day, fraction) pair, UTC at the site. Times outside the
    segments raise InputError naming the first such time.

    Evaluation: x in double-double; the first-order term c_1 x, which carries
    almost all of the phase in a segment, by an error-free product; the other
    terms by numpy's chebval in double, relative to the segment's exact
    reference phase. Rounding stays below ~1e-16 of the higher terms.
    """

    def __init__(self, data: PredictorData):
        self.data = data
        self.site = data.site
        self.freq_mhz = data.freq_mhz
        self.source = data.source
        self.length_days = (data.end_day - data.start_day) + (data.end_frac - data.start_frac)
        self.two_over_length = 2.0 / self.length_days
        self._start_mjd = data.start_day + data.start_frac   # look-up only
        coeffs = data.coefficients
        if coeffs.shape[1] < 2:
            coeffs = np.pad(coeffs, ((0, 0), (0, 2 - coeffs.shape[1])))
        self._linear = coeffs[:, 1].copy()
        self._others = coeffs.copy()
        self._others[:, 1] = 0.0
        self._derivative = np.zeros_like(coeffs)
        self._derivative[:, :-1] = chebyshev.chebder(coeffs, axis=1)
        # d(phase)/d(seconds) = d(series)/dx * dx/dt
        self._per_second = self.two_over_length / data.seconds_per_day

    def __len__(self) -> int:
        return len(self.data)

    @property
    def path(self) -> str | None:
        return self.data.path

    @property
    def start_text(self) -> str:
        return str(self.data.start_text[0])

    @property
    def end_text(self) -> str:
        return str(self.data.end_text[-1])

    def locate(self, mjd):
        """(segment index, x hi, x lo) of each time; InputError outside."""
        day, frac = split_mjd(mjd)
        idx, x_hi, x_lo, outside = self._locate_parts(day, frac)
        if np.any(outside):
            self._outside_error(day, frac, outside, mjd)
        return idx, x_hi, x_lo

    def _locate_parts(self, day, frac):
        d = self.data
        idx = np.searchsorted(self._start_mjd, day + frac, side="right") - 1
        np.clip(idx, 0, len(d) - 1, out=idx)
        x_hi, x_lo, offset = segment_x(day, frac, d.start_day[idx], d.start_frac[idx],
                                       self.two_over_length[idx])
        outside = ((offset < -EDGE_TOLERANCE_DAYS)
                   | (offset > self.length_days[idx] + EDGE_TOLERANCE_DAYS))
        return idx, x_hi, x_lo, outside

    def _outside_error(self, day, frac, outside, given) -> None:
        i = int(np.flatnonzero(outside)[0])
        if isinstance(given, str):
            text = given
        elif isinstance(given, (list, np.ndarray)) and np.asarray(given).dtype.kind in "US":
            text = str(np.atleast_1d(np.asarray(given))[i])
        else:
            text = str(format_mjd(day[i:i + 1], frac[i:i + 1])[0])
        more = int(outside.sum()) - 1
        more = f" ({more} more time(s) outside)" if more else ""
        windows = self.windows()
        if len(windows) == 1:
            raise InputError(f"MJD {text} is outside this predictor's segments, which cover "
                             f"MJD {self.start_text} to {self.end_text} at site {self.site}"
                             + more, path=self.path, field="mjd")
        near = self._nearest_window(day[i], frac[i], windows)
        raise InputError(f"MJD {text} is outside every observing window of this predictor "
                         f"(site {self.site}); the nearest window is MJD {near[0]} to "
                         f"{near[1]} ({len(windows)} windows from MJD {self.start_text} to "
                         f"{self.end_text})" + more, path=self.path, field="mjd")

    def windows(self) -> list[tuple[str, str]]:
        """(start, end) MJD strings of the spans the segments cover without a
        gap: the observing windows the predictor was built for (touching
        windows show as one)."""
        d = self.data
        gap = np.flatnonzero((d.start_day[1:] != d.end_day[:-1])
                             | (d.start_frac[1:] != d.end_frac[:-1]))
        first = np.r_[0, gap + 1]
        last = np.r_[gap, len(d) - 1]
        return [(str(d.start_text[a]), str(d.end_text[b])) for a, b in zip(first, last)]

    def _nearest_window(self, day, frac, windows) -> tuple[str, str]:
        starts_day, starts_frac = parse_mjd_strings([w[0] for w in windows])
        ends_day, ends_frac = parse_mjd_strings([w[1] for w in windows])
        before = (starts_day - day) + (starts_frac - frac)       # > 0: window is later
        after = (day - ends_day) + (frac - ends_frac)            # > 0: window is earlier
        return windows[int(np.argmin(np.maximum(before, after)))]

    def _by_segment(self, idx: np.ndarray, x: np.ndarray, coefficients: np.ndarray) -> np.ndarray:
        """Chebyshev series of each time's own segment, one numpy chebval per
        segment present (times sorted by segment first when they are not)."""
        order = None if np.all(idx[1:] >= idx[:-1]) else np.argsort(idx, kind="stable")
        seg = idx if order is None else idx[order]
        xs = x if order is None else x[order]
        edges = np.r_[0, np.flatnonzero(seg[1:] != seg[:-1]) + 1, len(seg)]
        out = np.empty(len(xs))
        for a, b in zip(edges[:-1], edges[1:]):
            out[a:b] = chebyshev.chebval(xs[a:b], coefficients[seg[a]])
        if order is not None:
            out[order] = out.copy()
        return out

    def _chunks(self, mjd):
        """(slice, segment index, x hi, x lo) per block of CHUNK times: small
        blocks keep numpy's temporaries in cache (several times faster)."""
        day, frac = split_mjd(mjd)
        for start in range(0, len(day), CHUNK):
            part = slice(start, start + CHUNK)
            idx, x_hi, x_lo, outside = self._locate_parts(day[part], frac[part])
            if np.any(outside):
                full = np.zeros(len(day), dtype=bool)
                full[part] = outside
                self._outside_error(day, frac, full, mjd)
            yield part, idx, x_hi, x_lo

    def phase(self, mjd) -> tuple[np.ndarray, np.ndarray]:
        """Pulse phase at each time: (integer cycles, int64; fraction in [0, 1))."""
        whole_out, fraction_out = [], []
        for _, idx, x_hi, x_lo in self._chunks(mjd):
            hi, lo = ddmath.dd_mul_d(x_hi, x_lo, self._linear[idx])
            hi, lo = ddmath.dd_add_d(hi, lo, self.data.phase_fraction[idx])
            hi, lo = ddmath.dd_add_d(hi, lo, self._by_segment(idx, x_hi, self._others))
            whole = np.floor(hi)
            fraction = (hi - whole) + lo              # hi - whole is exact
            carry = np.floor(fraction)
            whole_out.append(self.data.phase_integer[idx] + (whole + carry).astype(np.int64))
            fraction_out.append(fraction - carry)
        return np.concatenate(whole_out), np.concatenate(fraction_out)

    def frequency_hz(self, mjd) -> np.ndarray:
        """Apparent spin frequency (Hz) at each time: the phase rate at the site."""
        return np.concatenate([self._by_segment(idx, x_hi, self._derivative) * self._per_second[idx]
                               for _, idx, x_hi, _ in self._chunks(mjd)])

    def segment_table(self) -> list[dict]:
        """One row per segment: edges, minutes, degree, apparent frequency and
        period at the start, phase at the start."""
        d = self.data
        start = SplitTime(d.start_day, d.start_frac, "utc")
        n, f = self.phase(start)
        freq = self.frequency_hz(start)
        return [{"segment": i, "start_mjd": str(d.start_text[i]), "end_mjd": str(d.end_text[i]),
                 "minutes": float(self.length_days[i] * d.seconds_per_day[i] / 60.0),
                 "degree": int(d.degrees[i]), "frequency_hz": float(freq[i]),
                 "period_s": float(1.0 / freq[i]), "phase_integer": int(n[i]),
                 "phase_fraction": float(f[i])} for i in range(len(d))]


def read_predictor(path: str) -> PhasePredictor:
    """Read a predictor file (JSON, README "Phase predictor") for evaluation."""
    return PhasePredictor(read_predictor_file(path))
