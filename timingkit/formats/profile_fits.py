"""Folded pulse profiles and templates as FITS (our own layout, README "Folded profiles,
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

A template file holds an image HDU (named TEMPLATE) of the template's bins,
marked ``TKFORMAT = 'timingkit-template'`` and ``TKFMTVER = 1``, and, for a
fitted template, a binary table COMPONENTS with the columns CENTRE and FWHM
(cycles) and AMPLITUDE, one row per von Mises component.

The content is the .npz files' (:mod:`timingkit.formats.profile_file`) and is
checked by the same rules; errors name the HDU and the keyword or column.
"""

from __future__ import annotations

import io
import re
import warnings
from contextlib import contextmanager

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.formats.model_file import atomic_write_bytes
from timingkit.formats.profile_file import (FORMAT_VERSION, PROFILE_FORMAT, TEMPLATE_FORMAT,
                                            ProfileSet, Template, check_profile_arrays,
                                            check_template_arrays, profile_arrays,
                                            profile_set_of, template_arrays)
from timingkit.formats.safe_read import check_regular_file

EXTNAME = "PROFILES"
KEYWORDS = {"site": "SITENAME", "source": "OBJECT", "centre_freq_mhz": "CENTFREQ",
            "dedispersion_dm": "DEDISPDM"}
COLUMNS = {"reference_mjd": "REFMJD", "folding_frequency_hz": "FOLDFREQ",
           "channel_freq_mhz": "CHANFREQ", "data": "PROFILE", "duration_s": "DURATION",
           "simulated_shift_cycles": "SIMSHIFT"}
OPTIONAL = ("OBJECT", "DURATION", "SIMSHIFT")
TEMPLATE_EXTNAME = "TEMPLATE"
COMPONENTS_EXTNAME = "COMPONENTS"
COMPONENT_COLUMNS = ("CENTRE", "FWHM", "AMPLITUDE")


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
    with _fits_file(path, "profile file") as hdul:
        marked = _marked(hdul, PROFILE_FORMAT, "profile set", "binary-table", path)
        return [_profile_set(hdul, i, path, len(marked) > 1) for i in marked]


@contextmanager
def _fits_file(path, what: str):
    """The open HDU list of a regular file, read-only; astropy's warnings on a
    damaged file are silenced (the errors raised say what is wrong)."""
    from astropy.io import fits
    check_regular_file(path, what)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            hdul = fits.open(path, memmap=False, mode="readonly")
            len(hdul)                    # reads every header: a damaged file fails here
        except (OSError, ValueError) as exc:
            raise InputError(f"not a readable FITS file ({exc})", path=path) from None
        with hdul:
            yield hdul


def _marked(hdul, fmt: str, what: str, kind: str, path) -> list[int]:
    """The HDUs marked TKFORMAT = ``fmt``; InputError when there is none."""
    marked = [i for i, h in enumerate(hdul) if h.header.get("TKFORMAT") == fmt]
    if not marked:
        raise InputError(f"no {what} in this FITS file: expected a {kind} HDU with TKFORMAT = "
                         f"'{fmt}'", path=path, field="TKFORMAT")
    return marked


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


def write_template_fits(template: Template, path: str) -> None:
    """Write a template as FITS (module docstring), atomically, checked first."""
    from astropy.io import fits
    a = template_arrays(template)
    check_template_arrays(a, path)
    image = fits.ImageHDU(a["profile"], name=TEMPLATE_EXTNAME)
    image.header["TKFORMAT"] = (TEMPLATE_FORMAT, "pulse template, timingkit layout")
    image.header["TKFMTVER"] = (FORMAT_VERSION, "version of that layout")
    hdus = [fits.PrimaryHDU(), image]
    if "components" in a:
        comps = a["components"]
        hdus.append(fits.BinTableHDU.from_columns(
            [fits.Column(name=name, format="D", unit="cycles" if k < 2 else None,
                         array=comps[:, k]) for k, name in enumerate(COMPONENT_COLUMNS)],
            name=COMPONENTS_EXTNAME))
    buffer = io.BytesIO()
    fits.HDUList(hdus).writeto(buffer)
    atomic_write_bytes(path, buffer.getvalue())


def read_template_fits(path: str) -> Template:
    """The template of a FITS file: the image HDU marked TKFORMAT =
    'timingkit-template' and, when present, the COMPONENTS table."""
    from astropy.io import fits
    with _fits_file(path, "template file") as hdul:
        i = _marked(hdul, TEMPLATE_FORMAT, "template", "one-dimensional image", path)[0]
        label = _label(hdul, i)
        if hdul[i].header.get("TKFMTVER") != FORMAT_VERSION:
            raise InputError(f"TKFMTVER {hdul[i].header.get('TKFMTVER')!r} in {label} is not "
                             f"supported (this timingkit reads version {FORMAT_VERSION})",
                             path=path, field="TKFMTVER")
        profile = hdul[i].data if isinstance(hdul[i], (fits.ImageHDU, fits.PrimaryHDU)) else None
        if profile is None or profile.ndim != 1:
            raise InputError(f"{label}: expected a one-dimensional image of the template's bins",
                             path=path, field="TKFORMAT")
        a = {"profile": np.asarray(profile, dtype=float)}
        names = {"profile": f"{label} data"}
        if COMPONENTS_EXTNAME in hdul:
            table = hdul[COMPONENTS_EXTNAME]
            names["components"] = _label(hdul, hdul.index_of(COMPONENTS_EXTNAME))
            missing = [c for c in COMPONENT_COLUMNS if c not in table.columns.names]
            if missing:
                raise InputError(f"column {missing[0]} missing in {names['components']}",
                                 path=path, field=missing[0])
            a["components"] = np.column_stack([np.asarray(table.data[c], dtype=float)
                                               for c in COMPONENT_COLUMNS])
        try:
            check_template_arrays(a, path)
        except InputError as exc:
            raise InputError(f"{names.get(exc.field, exc.field)}: {exc.message}", path=path,
                             field=TEMPLATE_EXTNAME if exc.field == "profile" else
                             COMPONENTS_EXTNAME) from None
        return Template(profile=a["profile"], components=a.get("components"), path=path)


__all__ = ["read_profile_fits", "write_profile_fits", "read_template_fits",
           "write_template_fits", "KEYWORDS", "COLUMNS"]
