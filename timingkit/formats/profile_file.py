"""Folded pulse profiles and profile templates, as NumPy ``.npz`` files (our own
formats, README "Folded profiles"). Read without pickle (plain arrays only).
Profiles and templates may also be FITS (:mod:`timingkit.formats.profile_fits`, the same
content); the readers here tell them apart by the file's first bytes.

Profile file (one observation at one site)::

    format "timingkit-profiles", version 1
    site                 text
    source               text (optional)
    centre_freq_mhz      the frequency the folding predictor was made for, and to
                         which the channels were dedispersed
    dedispersion_dm      pc cm^-3 used to align the channels (0: not dedispersed)
    channel_freq_mhz     (channels,) centre frequency of each channel
    reference_mjd        (subints,) text: UTC at the site when the folding
                         predictor's phase was zero (bin 0 starts at phase 0)
    folding_frequency_hz (subints,) the predictor's frequency there
    data                 (subints, channels, bins) folded intensity
    duration_s           (subints,) optional, integration time
    simulated_shift_cycles (subints, channels) optional, simulations only

Template file: format "timingkit-template", version 1; ``profile`` (bins),
noise-free, phase zero at the start of bin 0; optional ``components``
(n, 3): centre phase (cycles), full width at half maximum (cycles), amplitude
of von Mises components.
"""

from __future__ import annotations

import io
import os
import zipfile
from dataclasses import dataclass

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.formats.safe_read import check_regular_file
from timingkit.formats.model_file import atomic_write_bytes
from timingkit.formats.mjd_text import parse_mjd_strings
from timingkit.formats.textfile import is_fits_file

PROFILE_FORMAT = "timingkit-profiles"
TEMPLATE_FORMAT = "timingkit-template"
FORMAT_VERSION = 1
PROFILE_KEYS = ("format", "version", "site", "source", "centre_freq_mhz", "dedispersion_dm",
                "channel_freq_mhz", "reference_mjd", "folding_frequency_hz", "data",
                "duration_s", "simulated_shift_cycles")
TEMPLATE_KEYS = ("format", "version", "profile", "components")


@dataclass
class ProfileSet:
    """One observation's folded profiles (see module docstring for the keys)."""

    site: str
    centre_freq_mhz: float
    dedispersion_dm: float
    channel_freq_mhz: np.ndarray
    reference_mjd: np.ndarray
    folding_frequency_hz: np.ndarray
    data: np.ndarray
    source: str = ""
    duration_s: np.ndarray | None = None
    simulated_shift_cycles: np.ndarray | None = None
    path: str | None = None
    part: str = ""        # which set of a file holding several ("hdu2"), else ""

    def __post_init__(self):
        self.channel_freq_mhz = np.atleast_1d(np.asarray(self.channel_freq_mhz, dtype=float))
        self.reference_mjd = np.atleast_1d(np.asarray(self.reference_mjd, dtype=str))
        self.folding_frequency_hz = np.atleast_1d(np.asarray(self.folding_frequency_hz,
                                                             dtype=float))
        self.reference_day, self.reference_frac = parse_mjd_strings(self.reference_mjd)

    @property
    def shape(self) -> tuple[int, int, int]:
        """(sub-integrations, channels, bins)."""
        return self.data.shape


@dataclass
class Template:
    """A noise-free pulse template: ``profile`` (bins); ``components`` (n, 3)
    of (centre phase, FWHM, amplitude) when it was fitted, else None."""

    profile: np.ndarray
    components: np.ndarray | None = None
    path: str | None = None


def _text(value) -> np.ndarray:
    return np.asarray(str(value))


def _is_fits_name(path) -> bool:
    return str(path).lower().endswith((".fits", ".fit"))


def _save(path: str, arrays: dict) -> None:
    buffer = io.BytesIO()
    np.savez_compressed(buffer, **arrays)
    atomic_write_bytes(path, buffer.getvalue())


def profile_arrays(profiles: ProfileSet) -> dict:
    """The arrays of a profile file (module docstring) of ``profiles``."""
    arrays = {"format": _text(PROFILE_FORMAT), "version": np.asarray(FORMAT_VERSION),
              "site": _text(profiles.site), "source": _text(profiles.source),
              "centre_freq_mhz": np.asarray(float(profiles.centre_freq_mhz)),
              "dedispersion_dm": np.asarray(float(profiles.dedispersion_dm)),
              "channel_freq_mhz": profiles.channel_freq_mhz,
              "reference_mjd": profiles.reference_mjd.astype(str),
              "folding_frequency_hz": profiles.folding_frequency_hz,
              "data": np.asarray(profiles.data, dtype=np.float32 if profiles.data.dtype ==
                                 np.float32 else float)}
    for key in ("duration_s", "simulated_shift_cycles"):
        if getattr(profiles, key) is not None:
            arrays[key] = np.asarray(getattr(profiles, key), dtype=float)
    return arrays


def write_profile_file(profiles: ProfileSet, path: str) -> None:
    """Write one observation's profiles (atomically): FITS
    (:mod:`timingkit.formats.profile_fits`) when ``path`` ends in .fits or
    .fit, else .npz."""
    if _is_fits_name(path):
        from timingkit.formats.profile_fits import write_profile_fits
        write_profile_fits([profiles], path)
        return
    arrays = profile_arrays(profiles)
    check_profile_arrays(arrays, path)
    _save(path, arrays)


def write_template_file(template: Template, path: str) -> None:
    """Write a template (atomically): FITS when ``path`` ends in .fits or .fit
    (:mod:`timingkit.formats.profile_fits`), else .npz."""
    if _is_fits_name(path):
        from timingkit.formats.profile_fits import write_template_fits
        write_template_fits(template, path)
        return
    arrays = template_arrays(template)
    check_template_arrays(arrays, path)
    _save(path, arrays)


def template_arrays(template: Template) -> dict:
    """The arrays of a template file (module docstring) of ``template``."""
    arrays = {"format": _text(TEMPLATE_FORMAT), "version": np.asarray(FORMAT_VERSION),
              "profile": np.asarray(template.profile, dtype=float)}
    if template.components is not None:
        arrays["components"] = np.asarray(template.components, dtype=float)
    return arrays


def _load(path: str, what: str, fmt: str, legal) -> dict:
    check_regular_file(path, what)       # a device or FIFO is never read
    try:
        with np.load(path, allow_pickle=False) as npz:
            arrays = {k: npz[k] for k in npz.files}
    except FileNotFoundError:
        raise InputError(f"{what} not found", path=path) from None
    except IsADirectoryError:
        raise InputError(f"is a directory, expected a {what}", path=path) from None
    except (ValueError, OSError, zipfile.BadZipFile, EOFError) as exc:
        raise InputError(f"not a {what} (.npz): {exc}", path=path) from None
    if "format" not in arrays or str(arrays["format"]) != fmt:
        raise InputError(f"not a {what} (expected format \"{fmt}\")", path=path, field="format")
    if "version" not in arrays or arrays["version"].shape != () or int(arrays["version"]) != \
            FORMAT_VERSION:
        raise InputError(f"version not supported (this timingkit reads version "
                         f"{FORMAT_VERSION})", path=path, field="version")
    unknown = [k for k in arrays if k not in legal]
    if unknown:
        raise InputError(f"unknown key; legal: {', '.join(legal)}", path=path, field=unknown[0])
    return arrays


def _need(arrays: dict, key: str, path, ndim: int | None = None, kind: str = "f"):
    if key not in arrays:
        raise InputError("missing required key", path=path, field=key)
    value = np.asarray(arrays[key])
    if ndim is not None and value.ndim != ndim:
        raise InputError(f"expected {ndim} dimension(s), found shape {value.shape}", path=path,
                         field=key)
    if kind == "f" and value.dtype.kind not in "fiu":
        raise InputError(f"expected numbers, found {value.dtype}", path=path, field=key)
    if kind == "U" and value.dtype.kind != "U":
        raise InputError(f"expected text, found {value.dtype}", path=path, field=key)
    if kind == "f" and not np.all(np.isfinite(value)):
        raise InputError("values must be finite", path=path, field=key)
    return value


def check_profile_arrays(a: dict, path) -> None:
    """The rules of a profile file's arrays (InputError naming the key)."""
    data = _need(a, "data", path, 3)
    subints, channels, bins = data.shape
    if subints < 1 or channels < 1 or bins < 8:
        raise InputError(f"shape {data.shape}: need at least one sub-integration, one channel "
                         "and 8 bins", path=path, field="data")
    _need(a, "site", path, 0, "U")
    for key in ("centre_freq_mhz", "dedispersion_dm"):
        _need(a, key, path, 0)
    if not float(a["centre_freq_mhz"]) > 0:
        raise InputError("must be > 0 MHz", path=path, field="centre_freq_mhz")
    if not float(a["dedispersion_dm"]) >= 0:
        raise InputError("must be >= 0 (0: channels not dedispersed)", path=path,
                         field="dedispersion_dm")
    for key, n, kind in (("channel_freq_mhz", channels, "f"), ("reference_mjd", subints, "U"),
                         ("folding_frequency_hz", subints, "f"), ("duration_s", subints, "f")):
        if key == "duration_s" and key not in a:
            continue
        value = _need(a, key, path, 1, kind)
        if len(value) != n:
            raise InputError(f"has {len(value)} entries; data has {n} "
                             f"{'channels' if key == 'channel_freq_mhz' else 'sub-integrations'}",
                             path=path, field=key)
        if kind == "f" and not np.all(value > 0):
            raise InputError("values must be > 0", path=path, field=key)
    try:
        parse_mjd_strings(a["reference_mjd"])
    except InputError as exc:
        raise InputError(exc.message, path=path, field="reference_mjd",
                         quoted=exc.quoted) from None
    if "simulated_shift_cycles" in a:
        shifts = _need(a, "simulated_shift_cycles", path, 2)
        if shifts.shape != (subints, channels):
            raise InputError(f"shape {shifts.shape}, expected ({subints}, {channels})",
                             path=path, field="simulated_shift_cycles")


def check_template_arrays(a: dict, path) -> None:
    """The rules of a template file's arrays (InputError naming the key)."""
    profile = _need(a, "profile", path, 1)
    if len(profile) < 8 or not np.ptp(profile) > 0:
        raise InputError("a template needs at least 8 bins and a pulse (not a flat line)",
                         path=path, field="profile")
    if "components" in a:
        comps = _need(a, "components", path, 2)
        if comps.shape[1] != 3:
            raise InputError("expected rows of (centre phase, FWHM, amplitude)", path=path,
                             field="components")


def read_profile_file(path: str) -> ProfileSet:
    """Read and check one observation's profiles (.npz, or a FITS file of one
    profile set); errors name the file and key."""
    sets = read_profile_sets(path)
    if len(sets) > 1:
        raise InputError(f"holds {len(sets)} profile sets where one was expected",
                         path=path, field="TKFORMAT")
    return sets[0]


def read_profile_sets(path: str) -> list[ProfileSet]:
    """Every profile set of a file: the one of a .npz, or each of a FITS file's
    (:mod:`timingkit.formats.profile_fits`)."""
    path = os.fspath(path)
    if is_fits_file(path, "profile file"):
        from timingkit.formats.profile_fits import read_profile_fits
        return read_profile_fits(path)
    a = _load(path, "profile file", PROFILE_FORMAT, PROFILE_KEYS)
    check_profile_arrays(a, path)
    return [profile_set_of(a, path)]


def profile_set_of(a: dict, path) -> ProfileSet:
    """A ProfileSet of checked profile-file arrays."""
    return ProfileSet(
        site=str(a["site"]), source=str(a.get("source", "")),
        centre_freq_mhz=float(a["centre_freq_mhz"]), dedispersion_dm=float(a["dedispersion_dm"]),
        channel_freq_mhz=a["channel_freq_mhz"], reference_mjd=a["reference_mjd"],
        folding_frequency_hz=a["folding_frequency_hz"], data=np.asarray(a["data"], dtype=float),
        duration_s=a.get("duration_s"), simulated_shift_cycles=a.get("simulated_shift_cycles"),
        path=path)


def read_template_file(path: str) -> Template:
    """Read and check a template (.npz, or FITS: :mod:`timingkit.formats.profile_fits`)."""
    path = os.fspath(path)
    if is_fits_file(path, "template file"):
        from timingkit.formats.profile_fits import read_template_fits
        return read_template_fits(path)
    a = _load(path, "template file", TEMPLATE_FORMAT, TEMPLATE_KEYS)
    check_template_arrays(a, path)
    return Template(profile=np.asarray(a["profile"], dtype=float),
                    components=a.get("components"), path=path)


__all__ = ["ProfileSet", "Template", "read_profile_file", "read_profile_sets",
           "write_profile_file", "profile_arrays", "check_profile_arrays", "profile_set_of",
           "check_template_arrays", "template_arrays",
           "read_template_file", "write_template_file"]
