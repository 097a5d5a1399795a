"""Rewrite a model in the other sky frame (equatorial <-> ecliptic) or another binary form.

Values are transformed exactly (at the position or orbit epoch); the
covariance of every parameter with an uncertainty (built from the
uncertainties and the model's ``[correlation]`` section) is carried through
the Jacobian J of the transformation, C' = J C J^T, and written back as
uncertainties and correlations, so a round trip returns the input. Free flags
follow the parameters they come from: a new parameter is free when the old
parameter(s) it stands for were free (longitude <-> right ascension, e sin w
and e cos w <-> e and w, ascending node <-> periastron epoch, rates <-> rates).
"""

from __future__ import annotations

import math

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.model.astrometry import ICRS_TO_ECLIPTIC, rotate_position
from timingkit.model.binary import Binary, keplerian_section, low_eccentricity_section
from timingkit.model.binary_orbits import DEG_PER_YR_TO_RAD_PER_S
from timingkit.model.correlations import covariance_of, set_covariance

DEG = math.pi / 180.0
# orbital elements the two binary forms trade, in corresponding order
ECCENTRIC_ELEMENTS = ("eccentricity", "periastron_longitude_deg", "orbital_period_days",
                      "periastron_epoch_mjd", "eccentricity_derivative_per_s",
                      "periastron_advance_deg_per_yr")
LOW_E_ELEMENTS = ("e_sin_omega", "e_cos_omega", "orbital_period_days",
                  "ascending_node_epoch_mjd", "e_sin_omega_derivative_per_s",
                  "e_cos_omega_derivative_per_s")
# which old elements a new one stands for (its free flag), either direction
_STANDS_FOR = {0: (0, 1), 1: (0, 1), 2: (2,), 3: (3,), 4: (4, 5), 5: (4, 5)}


def eccentric_to_low_e_jacobian(e, w_deg, pb_days, e_rate=0.0, w_rate_deg_per_yr=0.0):
    """d(LOW_E_ELEMENTS)/d(ECCENTRIC_ELEMENTS) in the parameters' units (days,
    degrees, deg/yr, 1/s), from the relations of
    :func:`timingkit.model.binary.low_eccentricity_section`."""
    w = w_deg * DEG
    w_rate = w_rate_deg_per_yr * DEG_PER_YR_TO_RAD_PER_S
    s, c = math.sin(w), math.cos(w)
    jac = np.zeros((6, 6))
    jac[0, :2] = [s, e * c * DEG]
    jac[1, :2] = [c, -e * s * DEG]
    jac[2, 2] = 1.0
    jac[3, 1:4] = [-pb_days / (2 * math.pi) * DEG, -w / (2 * math.pi), 1.0]
    jac[4] = [w_rate * c, (e_rate * c - e * w_rate * s) * DEG, 0.0, 0.0, s,
              e * c * DEG_PER_YR_TO_RAD_PER_S]
    jac[5] = [-w_rate * s, (-e_rate * s - e * w_rate * c) * DEG, 0.0, 0.0, c,
              -e * s * DEG_PER_YR_TO_RAD_PER_S]
    return jac


def _propagated(model, old_names, new_names, jac_block):
    """(names, covariance) of every parameter of ``model`` with an uncertainty
    (and ``old_names``) carried through J, the identity except the ``old_names``
    -> ``new_names`` block; the names are the new ones."""
    names = [p.name for p in model.parameters() if p.uncertainty]
    names += [n for n in old_names if n not in names]
    cov = covariance_of(model, names)
    rows = [names.index(n) for n in old_names]
    jac = np.eye(len(names))
    jac[np.ix_(rows, rows)] = jac_block
    rename = dict(zip(old_names, new_names))
    return [rename.get(n, n) for n in names], jac @ cov @ jac.T


def _store(model, names, cov) -> None:
    """Uncertainties and correlations of ``model`` from (names, cov), for the
    names it has."""
    keep = [i for i, n in enumerate(names) if n in model.parameter_names()]
    model.correlations = {}
    set_covariance(model, [names[i] for i in keep], cov[np.ix_(keep, keep)])


def convert_frame(model, frame: str):
    """A copy of ``model`` with its position in ``frame``, the covariance of the
    angles and proper motions rotated (correlations with every other parameter
    kept)."""
    new = model.copy()
    astro = new.astrometry
    if frame == astro.frame:
        return new
    old_params = astro._angle_parameters()
    old_names = [p.name for p in old_params]
    lon, lat = astro.frame_angles_rad()
    matrix = ICRS_TO_ECLIPTIC if frame == "ecliptic" else ICRS_TO_ECLIPTIC.T
    rotated = rotate_position(lon, lat, astro.pm_longitude.value, astro.pm_latitude.value, matrix)
    old_unit = astro.angle_unit_rad
    new_unit = 1.0 if frame == "equatorial" else DEG
    scale_in = np.array([old_unit, old_unit, 1.0, 1.0])
    scale_out = np.array([new_unit, new_unit, 1.0, 1.0])
    jac = rotated["jacobian"] * scale_in[None, :] / scale_out[:, None]

    new_names = ["position.ra", "position.dec", "position.pm_ra_cosdec_mas_per_yr",
                 "position.pm_dec_mas_per_yr"] if frame == "equatorial" else [
        "position.ecliptic_longitude_deg", "position.ecliptic_latitude_deg",
        "position.pm_longitude_coslat_mas_per_yr", "position.pm_latitude_mas_per_yr"]
    names, cov = _propagated(new, old_names, new_names, jac)
    astro.convert(frame)
    new._by_name = {p.name: p for p in new.parameters()}
    _store(new, names, cov)
    return new


def _binary_of(model) -> Binary | None:
    return next((c for c in model.extra if isinstance(c, Binary)), None)


def convert_binary(model, binary_model: str):
    """A copy of ``model`` with its orbit in ``binary_model`` form: values at the
    epoch, covariance through the Jacobian, free flags by element."""
    from timingkit.formats.model_file import format_model_document, parse_model_text
    from timingkit.model.timing_model import TimingModel
    binary = _binary_of(model)
    if binary is None:
        raise InputError("the model has no [binary] section to convert", path=model.path,
                         field="binary")
    to_low_e = binary_model == "low_eccentricity" and binary.model != "low_eccentricity"
    to_eccentric = binary_model != "low_eccentricity" and binary.model == "low_eccentricity"
    doc = model.to_document()
    sec = {k: v for k, v in doc["binary"].items() if k != "uncertainty"}
    if to_low_e:
        new_sec = low_eccentricity_section(sec)
    elif to_eccentric:
        new_sec = keplerian_section(sec, binary_model)
    else:
        new_sec = dict(sec, model=binary_model)
        if binary_model == "keplerian":
            for key in ("shapiro_range_s", "shapiro_shape", "companion_mass_msun",
                        "sin_inclination"):
                new_sec.pop(key, None)
    old_free = set(model.free_names)
    doc["binary"] = new_sec
    doc["fit"]["free"] = [n for n in doc["fit"]["free"]
                          if not n.startswith("binary.") or n[7:] in new_sec]
    doc.pop("correlation", None)          # carried below, by the Jacobian
    new = TimingModel(parse_model_text(format_model_document(doc), model.path))
    if to_low_e or to_eccentric:
        old_keys, new_keys = ((ECCENTRIC_ELEMENTS, LOW_E_ELEMENTS) if to_low_e else
                              (LOW_E_ELEMENTS, ECCENTRIC_ELEMENTS))
        eccentric = binary if to_low_e else _binary_of(new)
        jac = eccentric_to_low_e_jacobian(*(_element(eccentric, k) for k in ECCENTRIC_ELEMENTS[:3]),
                                          _element(eccentric, ECCENTRIC_ELEMENTS[4]),
                                          _element(eccentric, ECCENTRIC_ELEMENTS[5]))
        jac = jac if to_low_e else np.linalg.inv(jac)
        old_names = [f"binary.{k}" for k in old_keys]
        new_names = [f"binary.{k}" for k in new_keys]
        for i, name in enumerate(new_names):
            new.parameter(name).free = any(old_names[j] in old_free for j in _STANDS_FOR[i])
    else:
        old_names = new_names = []
        jac = np.zeros((0, 0))
    names, cov = _propagated(model, old_names, new_names, jac)
    _store(new, names, cov)
    return new


def _element(binary: Binary, key: str) -> float:
    p = binary.params.get(key)
    return 0.0 if p is None else float(p.value + p.value_lo)


def convert_model(model, frame: str | None = None, binary_model: str | None = None):
    """A converted copy of ``model`` (a TimingModel): position frame and/or binary
    form (module docstring)."""
    out = convert_frame(model, frame) if frame else model.copy()
    if binary_model:
        out = convert_binary(out, binary_model)
    return out


__all__ = ["convert_model", "convert_frame", "convert_binary", "eccentric_to_low_e_jacobian"]
