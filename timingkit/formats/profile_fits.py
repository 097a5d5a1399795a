"""Folded pulse profiles as FITS (our own layout, README "Folded profiles,
FITS"), read and written with astropy.io.fits.

A file holds one or more profile sets (observations), each a binary-table
HDU marked by the keyword ``TKFORMAT = 'timingkit-profiles'``, one row per
sub-integration:

==========  =======================================================
keyword     meaning
==========  =======================================================
TKFORMAT    'timingkit-profiles' (marks the HDU)
TKFMTVER    1 (the layout's version)
SITENAME    observing site (a site-file name)
OBJECT      source name (optional; the FITS standard keyword)
CENTFREQ    centre frequency, MHz: the folding predictor's, to which the
            channels were dedispersed
DEDISPDM    dispersion measure used to align the channels, pc cm^-3
            (0: not dedispersed)
==========  =======================================================

==========  ================  =========================================
column      per row           meaning
==========  ================  =========================================
REFMJD      text              UTC at the site when the folding
                              predictor's phase was zero (exact MJD)
FOLDFREQ    number, Hz        the predictor's frequency there
CHANFREQ    channels, MHz     centre frequency of each channel (the same
                              in every row)
PROFILE     channels x bins   folded intensity (TDIM = '(bins,channels)')
DURATION    number, s         integration time (optional)
SIMSHIFT    channels, cycles  simulated shift (simulations only)
==========  ================  =========================================

The content is the .npz profile file's (:mod:`timingkit.formats.profile_file`)
and is checked by the same rules; errors name the HDU and the keyword or
column.
"""

from __future__ import annotations

import io
import re
import warnings

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.formats.model_file import atomic_write_bytes
from timingkit.formats.profile_file import (FORMAT_VERSION, PROFILE_FORMAT, ProfileSet,
                                            check_profile_arrays, profile_arrays,
                                            profile_set_of)
from timingkit.formats.safe_read import check_regular_file

EXTNAME = "PROFILES"
KEYWORDS = {"site": "SITENAME", "source": "OBJECT", "centre_freq_mhz": "CENTFREQ",
            "dedispersion_dm": "DEDISPDM"}
COLUMNS = {"reference_mjd": "REFMJD", "folding_frequency_hz": "FOLDFREQ",
           "channel_freq_mhz": "CHANFREQ", "data": "PROFILE", "duration_s": "DURATION",
           "simulated_shift_cycles": "SIMSHIFT"}
OPTIONAL = ("OBJECT", "DURATION", "SIMSHIFT")


def _hdu_table(profiles: ProfileSet, index: int):
    from astropy.io import fits
    a = profile_arrays(profiles)
    check_profile_arrays(a, profiles.path)
    subints, channels, bins = a["data"].shape
    form = "E" if a["data"].dtype == np.float32 else "D"
    width = max(1, max(len(t) for t in a["reference_mjd"].tolist()))
    cols = [fits.Column(name="REFMJD", format=f"{width}A", array=a["reference_mjd"]),
            fits.Column(name="FOLDFREQ", format="D", unit="Hz", array=a["folding_frequency_hz"]),
            fits.Column(name="CHANFREQ", format=f"{channels}D", unit="MHz",
                        array=np.tile(a["channel_freq_mhz"], (subints, 1))),
            fits.Column(name="PROFILE", format=f"{channels * bins}{form}",
                        dim=f"({bins},{channels})", array=a["data"])]
    if "duration_s" in a:
        cols.append(fits.Column(name="DURATION", format="D", unit="s", array=a["duration_s"]))
    if "simulated_shift_cycles" in a:
        cols.append(fits.Column(name="SIMSHIFT", format=f"{channels}D",
                                array=a["simulated_shift_cycles"]))
    hdu = fits.BinTableHDU.from_columns(cols, name=EXTNAME)
    hdu.header["EXTVER"] = index + 1
    hdu.header["TKFORMAT"] = (PROFILE_FORMAT, "folded profiles, timingkit layout")
    hdu.header["TKFMTVER"] = (FORMAT_VERSION, "version of that layout")
    hdu.header["SITENAME"] = (str(a["site"]), "observing site")
    if str(a["source"]):
        hdu.header["OBJECT"] = str(a["source"])
    hdu.header["CENTFREQ"] = (float(a["centre_freq_mhz"]), "[MHz] centre frequency")
    hdu.header["DEDISPDM"] = (float(a["dedispersion_dm"]), "[pc cm-3] DM of channel alignment")
    return hdu


def write_profile_fits(sets: list[ProfileSet], path: str) -> None:
    """Write profile sets (one HDU each) to a FITS file, atomically; each set
    is checked first, so nothing is written when one could not be read."""
    from astropy.io import fits
    hdus = [fits.PrimaryHDU()] + [_hdu_table(ps, k) for k, ps in enumerate(sets)]
    buffer = io.BytesIO()
    fits.HDUList(hdus).writeto(buffer)
    atomic_write_bytes(path, buffer.getvalue())


def _label(hdul, index: int) -> str:
    name = hdul[index].name
    return f"{name} (HDU {index})" if name else f"HDU {index}"


def _arrays_of(hdu, label: str, path) -> dict:
    """The HDU's content under the .npz keys, after the FITS-level checks."""
    header = hdu.header
    version = header.get("TKFMTVER")
    if version != FORMAT_VERSION:
        raise InputError(f"TKFMTVER {version!r} in {label} is not supported (this timingkit "
                         f"reads version {FORMAT_VERSION})", path=path, field="TKFMTVER")
    a = {"format": np.asarray(PROFILE_FORMAT), "version": np.asarray(FORMAT_VERSION)}
    for key, word in KEYWORDS.items():
        if word not in header:
            if word in OPTIONAL:
                continue
            raise InputError(f"keyword {word} missing in {label}", path=path, field=word)
        value = header[word]
        if key in ("site", "source"):
            if not isinstance(value, str) or not value.strip():
                raise InputError(f"keyword {word} in {label}: expected text, found {value!r}",
                                 path=path, field=word)
            a[key] = np.asarray(value.strip())
        else:
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise InputError(f"keyword {word} in {label}: expected a number, found "
                                 f"{value!r}", path=path, field=word)
            a[key] = np.asarray(float(value))
    names = {n.upper(): n for n in hdu.columns.names}
    unknown = [n for n in names if n not in COLUMNS.values()]
    if unknown:
        raise InputError(f"unknown column {unknown[0]} in {label}; legal: "
                         f"{', '.join(COLUMNS.values())}", path=path, field=unknown[0])
    for key, column in COLUMNS.items():
        if column not in names:
            if column in OPTIONAL:
                continue
            raise InputError(f"column {column} missing in {label}", path=path, field=column)
        a[key] = np.asarray(hdu.data[names[column]])
    if a["reference_mjd"].dtype.kind not in "SU":
        # a float MJD resolves only ~1 us: the exact text is required
        raise InputError(f"column REFMJD in {label}: expected the MJDs as text (format A), "
                         f"found {a['reference_mjd'].dtype}", path=path, field="REFMJD")
    a["reference_mjd"] = np.char.strip(a["reference_mjd"].astype(str))
    rows = len(a["reference_mjd"])
    chan = a["channel_freq_mhz"].reshape(rows, -1)
    data = a["data"]
    if data.ndim == 2:                     # no TDIM: (rows, channels x bins)
        width = max(chan.shape[1], 1)
        data = data.reshape(rows, width, -1) if data.shape[1] % width == 0 else data[:, None]
    a["data"] = data
    if len(chan) and not np.all(chan == chan[:1]):
        row = int(np.flatnonzero(np.any(chan != chan[:1], axis=1))[0])
        raise InputError(f"column CHANFREQ in {label} differs in row {row + 1} from row 1: "
                         "the channels must be the same in every sub-integration", path=path,
                         field="CHANFREQ")
    a["channel_freq_mhz"] = chan[0] if len(chan) else chan.reshape(-1)
    if "simulated_shift_cycles" in a:
        a["simulated_shift_cycles"] = a["simulated_shift_cycles"].reshape(len(data), -1)
    return a


def _checked(a: dict, label: str, path) -> dict:
    """The .npz rules (profile_file), their errors renamed to this layout."""
    names = {**KEYWORDS, **COLUMNS}
    try:
        check_profile_arrays(a, path)
    except InputError as exc:
        word = names.get(exc.field, exc.field)
        kind = "keyword" if exc.field in KEYWORDS else "column"
        message = re.sub(r"^entry (\d+): ", lambda m: f"row {int(m.group(1)) + 1}: ",
                         exc.message)
        raise InputError(f"{kind} {word} in {label}: {message}", path=path, field=word,
                         quoted=exc.quoted) from None
    return a


def read_profile_fits(path: str) -> list[ProfileSet]:
    """Every profile set (HDU with TKFORMAT = 'timingkit-profiles') of a FITS
    file, in HDU order; errors name the file, the HDU and the keyword or column."""
    from astropy.io import fits
    check_regular_file(path, "profile file")
    with warnings.catch_warnings():              # astropy's own notes on a damaged file
        warnings.simplefilter("ignore")
        try:
            hdul = fits.open(path, memmap=False, mode="readonly")
            marked = [i for i, h in enumerate(hdul)
                      if h.header.get("TKFORMAT") == PROFILE_FORMAT]
        except (OSError, ValueError) as exc:
            raise InputError(f"not a readable FITS file ({exc})", path=path) from None
        with hdul:
            if not marked:
                raise InputError(f"no profile set in this FITS file: expected a binary-table "
                                 f"HDU with TKFORMAT = '{PROFILE_FORMAT}'", path=path,
                                 field="TKFORMAT")
            return [_profile_set(hdul, i, path, len(marked) > 1) for i in marked]


def _profile_set(hdul, i: int, path, several: bool) -> ProfileSet:
    from astropy.io import fits
    label = _label(hdul, i)
    if not isinstance(hdul[i], fits.BinTableHDU):
        raise InputError(f"{label} is marked TKFORMAT = '{PROFILE_FORMAT}' but is not a binary "
                         "table", path=path, field="TKFORMAT")
    try:
        a = _arrays_of(hdul[i], label, path)
    except (OSError, ValueError, TypeError) as exc:
        raise InputError(f"unreadable table in {label} ({exc})", path=path) from None
    ps = profile_set_of(_checked(a, label, path), path)
    ps.part = f"hdu{i}" if several else ""
    return ps


__all__ = ["read_profile_fits", "write_profile_fits", "KEYWORDS", "COLUMNS"]
