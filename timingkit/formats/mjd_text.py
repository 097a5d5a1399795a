"""Exact decimal MJD text <-> whole day + correctly rounded float64 fraction (vectorised).

Written by hand because no well-kept library parses decimal strings exactly into
split day + fraction form (numpy.loadtxt and friends go through float).
"""

from __future__ import annotations

import re

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.numerics import ddmath

MAX_INT_DIGITS = 7
# At most this many digits in all (before and after the point): more are absurd.
# Up to it every digit counts: the fraction is correctly rounded to float64, so
# the 21-22 digits '%.16f' prints land on the nearest two-part value.
MAX_DIGITS = 40
MAX_FRAC_DIGITS = MAX_DIGITS - 1
MAX_SIGNIFICANT_DIGITS = 20      # what format_mjd writes (the pair resolves ~21)
MAX_MJD_LEN = MAX_INT_DIGITS + 1 + MAX_FRAC_DIGITS      # the aligned width of the parse
FRONT_PAD = 8                # zero bytes before the data in the work buffer
_CHUNK = 15                   # fraction digits per exact integer chunk (10**15 < 2**53)
MJD_RE = re.compile(r"[0-9]+(\.[0-9]*)?")


def gather(buf: np.ndarray, starts: np.ndarray, lens: np.ndarray, width: int) -> np.ndarray:
    """(n, width) uint8 matrix; row i = buf[starts[i]:starts[i]+lens[i]], zero padded.

    ``buf`` must extend at least ``width`` bytes past every start.
    """
    windows = np.lib.stride_tricks.sliding_window_view(buf, width)
    out = windows[starts]
    out[np.arange(width)[None, :] >= lens[:, None]] = 0
    return out


def horner_digits(digits: np.ndarray) -> np.ndarray:
    """Integer value (int64) of each row of a digit matrix (most significant first)."""
    value = np.zeros(digits.shape[0], dtype=np.int64)
    for k in range(digits.shape[1]):
        value *= 10
        value += digits[:, k]
    return value


def fraction_to_double(high: np.ndarray, low: np.ndarray) -> np.ndarray:
    """Correctly rounded float64 of (high * 10**15 + low) / 10**30 (0 <= high, low < 10**15).

    Double-double gives the value to ~2**-104 relative; the rounding of that
    approximation is the correct rounding unless it lies within that error of
    a midpoint between doubles, which is tested with a wide margin (2**-96)
    and settled exactly with Python integers for the (practically never) rows
    that hit it.
    """
    hf = high.astype(np.float64)
    lf = low.astype(np.float64)
    zero = np.zeros_like(hf)
    h1, l1 = ddmath.dd_div_d(hf, zero, 1e15)
    h2, l2 = ddmath.dd_div_d(lf, zero, 1e15)
    h2, l2 = ddmath.dd_div_d(h2, l2, 1e15)
    hi, lo = ddmath.dd_add(h1, l1, h2, l2)
    hi = np.asarray(hi, dtype=np.float64).copy()
    lo = np.asarray(lo, dtype=np.float64)
    toward = np.where(lo >= 0, np.inf, -np.inf)
    half_gap = 0.5 * np.abs(np.nextafter(hi, toward) - hi)
    risky = (np.abs(np.abs(lo) - half_gap) <= np.abs(hi) * 2.0 ** -96) & (hi != 0)
    for i in np.flatnonzero(risky):
        # Python int / int true division is correctly rounded
        hi[i] = (int(high[i]) * 10 ** 15 + int(low[i])) / 10 ** 30
    return hi


def parse_mjd_tokens(buf: np.ndarray, starts: np.ndarray, lens: np.ndarray):
    """Vectorised exact MJD parse of the tokens ``buf[starts:starts+lens]``
    (``buf`` must extend >= MAX_MJD_LEN bytes past every start).

    Returns (day float64, frac float64, bad bool): rows flagged ``bad`` break
    a rule; their day/frac are meaningless. The rules are exactly those of
    ``mjd_problem``.
    """
    n = len(starts)
    if n == 0:
        return np.zeros(0), np.zeros(0), np.zeros(0, dtype=bool)
    too_long = lens > MAX_MJD_LEN
    lens = np.minimum(lens, MAX_MJD_LEN)
    width = max(int(lens.max()), 1)
    raw = gather(buf, starts, lens, width)
    is_dot = raw == 46
    ndot = np.count_nonzero(is_dot, axis=1)
    legal = (raw - np.uint8(48)) < 10          # digits (uint8 wraps below '0')
    legal |= is_dot
    legal |= raw == 0                          # padding after the token
    bad = too_long | ~legal.all(axis=1) | (ndot > 1)
    del legal
    dotpos = np.where(ndot == 1, np.argmax(is_dot, axis=1), lens)
    del is_dot
    nfrac = np.where(ndot == 1, lens - dotpos - 1, 0)
    bad |= (dotpos == 0) | (dotpos > MAX_INT_DIGITS) | (nfrac > MAX_FRAC_DIGITS)
    dotpos = np.where(bad, 0, dotpos)
    nfrac = np.where(bad, 0, nfrac)
    # align on the decimal point: 7 integer digits, the point, 39 fraction digits
    row = MAX_INT_DIGITS + width + MAX_FRAC_DIGITS + 1
    padded = np.zeros((n, row), dtype=np.uint8)
    padded[:, MAX_INT_DIGITS:MAX_INT_DIGITS + width] = raw
    del raw
    digits = np.lib.stride_tricks.sliding_window_view(padded.reshape(-1), MAX_MJD_LEN)[
        np.arange(n) * row + dotpos]
    del padded
    np.maximum(digits, 48, out=digits)         # the point and padding become '0'
    digits -= 48
    bad |= (dotpos + nfrac) > MAX_DIGITS
    day = horner_digits(digits[:, :MAX_INT_DIGITS]).astype(np.float64)
    fraction_start = MAX_INT_DIGITS + 1
    high = horner_digits(digits[:, fraction_start:fraction_start + _CHUNK])
    # up to 15 fraction digits: one IEEE division of exact doubles is correctly rounded
    frac = high.astype(np.float64) / 1e15
    long_rows = np.flatnonzero((nfrac > _CHUNK) & (nfrac <= 2 * _CHUNK))
    if len(long_rows):
        low = horner_digits(digits[long_rows, fraction_start + _CHUNK:
                                   fraction_start + 2 * _CHUNK])
        frac[long_rows] = fraction_to_double(high[long_rows], low)
    for i in np.flatnonzero(nfrac > 2 * _CHUNK).tolist():
        # beyond 30 fraction digits (rare): Python int / int is correctly rounded
        k = int(nfrac[i])
        text = digits[i, fraction_start:fraction_start + k].astype(np.uint8) + 48
        frac[i] = int(text.tobytes()) / 10 ** k
    carry = frac >= 1.0
    if carry.any():
        day[carry] += 1.0
        frac[carry] = 0.0
    return day, frac, bad


def mjd_problem(text: str) -> str | None:
    """Why ``text`` is not a legal mjd value, or None if it is."""
    if text.startswith("-"):
        return f"negative MJD {text!r}: MJDs must be >= 0"
    if "e" in text.lower() and re.fullmatch(r"[0-9.]+[eE][+-]?[0-9]+", text):
        return (f"scientific notation is not allowed in mjd ({text!r}); write every digit, "
                f"e.g. 58849.000142889802083")
    if not MJD_RE.fullmatch(text):
        return (f"{text!r} is not a decimal number (expected digits with an optional "
                f"decimal point, e.g. 58849.000142889802083)")
    whole, _, frac = text.partition(".")
    if len(whole) > MAX_INT_DIGITS:
        return (f"too many digits before the decimal point in {text!r} "
                f"({len(whole)}; at most {MAX_INT_DIGITS})")
    if len(whole) + len(frac) > MAX_DIGITS:
        return (f"{text!r} has {len(whole) + len(frac)} digits; at most {MAX_DIGITS} are read "
                f"(more than the two-part time holds are rounded, so ~22 are plenty)")
    return None


def token_buffer(texts) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[bytes]]:
    encoded = [t.encode("utf-8") for t in texts]
    lens = np.fromiter((len(b) for b in encoded), dtype=np.int64, count=len(encoded))
    starts = np.zeros(len(encoded), dtype=np.int64)
    if len(encoded):
        starts[1:] = np.cumsum(lens + 1)[:-1]
    body = np.frombuffer(b" ".join(encoded), dtype=np.uint8)
    pad_back = MAX_MJD_LEN + int(lens.max(initial=0)) + 8
    buf = np.concatenate([np.zeros(FRONT_PAD, np.uint8), body, np.zeros(pad_back, np.uint8)])
    return buf, starts + FRONT_PAD, lens, encoded


def parse_mjd_strings(texts) -> tuple[np.ndarray, np.ndarray]:
    """Exact (day, frac) of decimal MJD strings: day integer-valued float64,
    frac the correctly rounded float64 of the fraction, in [0, 1).

    Raises InputError(field='mjd') naming the first bad entry.
    """
    texts = [str(t) for t in np.atleast_1d(np.asarray(texts, dtype=str)).tolist()]
    buf, starts, lens, _ = token_buffer(texts)
    day, frac, bad = parse_mjd_tokens(buf, starts, lens)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        problem = mjd_problem(texts[i]) or f"{texts[i]!r} is not a legal MJD"
        raise InputError(f"entry {i}: {problem}", field="mjd", quoted=(texts[i],))
    return day, frac


def format_mjd(day: np.ndarray, frac: np.ndarray) -> np.ndarray:
    """MJD text with 20 significant digits (at most 16 decimals), the fraction
    rounded to nearest (ties may go either way; callers re-parse the text)."""
    ndig = np.array([len(str(int(d))) for d in day.tolist()], dtype=np.int64)
    decimals = np.minimum(MAX_SIGNIFICANT_DIGITS - np.where(day == 0, 0, ndig), 16)
    scale = 10.0 ** decimals                              # exact for <= 16
    p_hi, p_lo = ddmath.two_prod(frac, scale)             # exact product
    n = np.round(p_hi)
    r_hi, r_lo = ddmath.two_sum(p_hi, -n)
    r = r_hi + (r_lo + p_lo)
    units = n.astype(np.int64) + (r > 0.5).astype(np.int64) - (r < -0.5).astype(np.int64)
    full = (10 ** decimals.astype(np.int64))
    carry = units >= full
    days = day.astype(np.int64) + carry
    units = np.where(carry, units - full, units)
    return np.array([f"{d}.{u:0{k}d}" for d, u, k in
                     zip(days.tolist(), units.tolist(), decimals.tolist())], dtype=str)


def parse_mjd_column(texts, path, lines) -> tuple[np.ndarray, np.ndarray]:
    """``parse_mjd_strings`` for a column read from a file: a bad value is
    reported at its line (``lines[i]`` is the 1-based line of ``texts[i]``)."""
    try:
        return parse_mjd_strings(texts)
    except InputError:
        for text, line in zip(texts, lines):
            problem = mjd_problem(str(text))
            if problem:
                raise InputError(problem, path=path, line=line, field="mjd",
                                 quoted=(str(text),)) from None
        raise
