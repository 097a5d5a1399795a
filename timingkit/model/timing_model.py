"""The timing model: its sections, parameters by dotted name, free flags,
evaluation of pulse phase at each TOA and the analytic design matrix."""

from __future__ import annotations

import copy
import os
from decimal import Decimal

import numpy as np

from timingkit.numerics import ddmath
from timingkit.formats.errors import InputError, excerpt
from timingkit.model.astrometry import Astrometry
from timingkit.model.base import ModelSection, Evaluation, notable_delay_s
from timingkit.model.dispersion import Dispersion
from timingkit.model.binary import build_binary
from timingkit.model.correlations import correlation_section, read_correlations
from timingkit.model.glitch import build_glitches
from timingkit.model.group_offsets import build_group_offsets
from timingkit.model.parameters import Parameter, mjd_decimal, mjd_parts
from timingkit.model.solar_wind import build_solar_wind, unmodelled_solar_wind_warning
from timingkit.model.spin import Spin
from timingkit.formats.model_file import (Key, ModelDocument, key_line, read_model_document,
                                          take_section, write_model_document)
from timingkit.geometry.delays import DISPERSION_CONSTANTS_S_MHZ2
from timingkit.geometry.observations import Observations, prepare_observations
from timingkit.geometry.solar_approach import solar_approach_warnings

TOP_KEYS = {"name": Key("text", default="unnamed")}
MAX_NAME_CHARS = 200
FIT_KEYS = {"free": Key("list_text", default=list)}
SETTINGS_KEYS = {
    "ephemeris": Key("text", default="builtin"),
    "sites": Key("list_text", default=list),
    "clock": Key("list_text", default=list),
    # true: every planet the ephemeris holds; false: none; or a list of planet names
    "shapiro_delay_planets": Key("bool_or_list_text", default=True),
    "dispersion_constant": Key("text", default="catalogue"),
}
# settings written to a model file only when they differ from these defaults
QUIET_DEFAULTS = {"shapiro_delay_planets": True, "dispersion_constant": "catalogue"}
PHASE_ZERO_KEYS = {
    "mjd": Key("mjd", required=True),
    "site": Key("text", default="ssb"),
    "freq_mhz": Key("text", default="inf"),
}

# Optional sections contributed by other modules: section name ->
# builder(section_value, path, model) -> list[ModelSection]. Modules that add a
# section register it here (see timingkit.model.__init__).
OPTIONAL_SECTIONS: dict[str, object] = {"glitch": build_glitches, "binary": build_binary,
                                      "time_offset": build_group_offsets,
                                      "solar_wind": build_solar_wind}

CORE_SECTIONS = ("name", "position", "spin", "dispersion", "phase_zero", "fit", "settings",
                 "correlation")


class TimingModel:
    """A pulsar timing model built from a model document (TOML)."""

    def __init__(self, document: ModelDocument):
        try:
            self._build(document)
        except InputError as exc:
            own = None if document.path is None else os.fspath(document.path)
            if exc.line is not None or not exc.field or not document.text or (
                    exc.path and exc.path != own):
                raise
            raise exc.located(line=key_line(document.text, exc.field)) from None

    def line_of(self, field: str) -> int | None:
        """Line of the key ``field`` in the model file (None when unknown)."""
        return key_line(self.text, field) if self.text else None

    def _build(self, document: ModelDocument) -> None:
        self.text = document.text
        data = dict(document.data)
        path = document.path
        self.path = path
        self.base_dir = document.base_dir
        if "settings" in data and not isinstance(data["settings"], dict):
            raise InputError("expected a [settings] table", path=path, field="settings")
        if isinstance(data.get("settings", {}).get("sites"), str):
            data["settings"] = dict(data["settings"])
            data["settings"]["sites"] = [data["settings"]["sites"]]
        legal = set(CORE_SECTIONS) | set(OPTIONAL_SECTIONS)
        unknown = [k for k in data if k not in legal]
        if unknown:
            raise InputError(f"unknown section or key {', '.join(map(excerpt, unknown))}; legal: "
                             f"{', '.join(sorted(legal))}", path=path, field=unknown[0],
                             quoted=unknown)
        top = take_section({k: v for k, v in data.items() if k == "name"}, "", TOP_KEYS, path,
                           allow_uncertainty=False)
        self.name = top["name"]
        if not self.name.isprintable() or not 0 < len(self.name) <= MAX_NAME_CHARS:
            raise InputError(f"the source name must be one printable line of 1 to "
                             f"{MAX_NAME_CHARS} characters, found {excerpt(self.name)}",
                             path=path, field="name", quoted=(self.name,))
        self.settings = take_section(data.get("settings"), "settings", SETTINGS_KEYS, path,
                                     allow_uncertainty=False)
        self.dispersion_constant_s_mhz2 = _dispersion_constant(self.settings, path)
        self.spin = Spin(data.get("spin"), path)
        self.astrometry = Astrometry(data.get("position"), path, self.spin.epoch,
                                     shapiro_delay_planets=self.settings["shapiro_delay_planets"])
        self.dispersion = Dispersion(data.get("dispersion"), path, self.spin.epoch,
                                     constant_s_mhz2=self.dispersion_constant_s_mhz2)
        self.phase_zero = None
        if "phase_zero" in data:
            self.phase_zero = take_section(data["phase_zero"], "phase_zero", PHASE_ZERO_KEYS,
                                           path, allow_uncertainty=False)
        self.extra: list[ModelSection] = []
        for section, builder in OPTIONAL_SECTIONS.items():
            if section in data:
                self.extra.extend(builder(data[section], path, self))
        fit = take_section(data.get("fit"), "fit", FIT_KEYS, path, allow_uncertainty=False)
        self._by_name = {p.name: p for p in self.parameters()}
        for name in fit["free"]:
            self.parameter(name, path=path, field="fit.free").free = True
        self.correlations: dict[tuple[str, str], float] = {}   # timingkit.model.correlations
        if "correlation" in data:
            self.correlations = read_correlations(data["correlation"], self, path)

    # ------------------------------------------------------------ construction
    @classmethod
    def from_file(cls, path: str) -> "TimingModel":
        return cls(read_model_document(path))

    @classmethod
    def from_text(cls, text: str, path: str | None = None) -> "TimingModel":
        from timingkit.formats.model_file import parse_model_text
        return cls(parse_model_text(text, path))

    def copy(self) -> "TimingModel":
        new = copy.deepcopy(self)
        new._by_name = {p.name: p for p in new.parameters()}
        return new

    # ------------------------------------------------------------- parameters
    @property
    def sections(self) -> list[ModelSection]:
        return [self.astrometry, self.dispersion, *self.propagation_sections(), *self.orbit_sections(),
                self.spin, *self.rotation_sections()]

    def propagation_sections(self):
        return [c for c in self.extra if c.contribution == "propagation"]

    def orbit_sections(self):
        return [c for c in self.extra if c.contribution == "orbit"]

    def rotation_sections(self):
        return [c for c in self.extra if c.contribution == "rotation"]

    def noise_sections(self):
        """Sections contributing "noise" (white-noise scaling, red noise): they hold
        parameters but add no delay or phase; the fitter reads them."""
        return [c for c in self.extra if c.contribution == "noise"]

    def parameters(self) -> list[Parameter]:
        out = []
        for comp in [*self.sections, *self.noise_sections()]:
            out.extend(comp.parameters())
        return out

    def parameter_names(self) -> list[str]:
        return [p.name for p in self.parameters()]

    def parameter(self, name: str, path: str | None = None, field: str | None = None) -> Parameter:
        self._by_name = {p.name: p for p in self.parameters()}
        try:
            return self._by_name[name]
        except KeyError:
            raise InputError(f"unknown parameter {excerpt(name)}; this model has: "
                             f"{', '.join(self._by_name)}", path=path, field=field,
                             quoted=(name,)) from None

    @property
    def free_names(self) -> list[str]:
        return [p.name for p in self.parameters() if p.free]

    def set_free(self, names, free: bool = True) -> None:
        """Free (or fix) the parameters ``names``: a list of names, or one name."""
        if isinstance(names, str):
            names = [names]
        for name in names:
            self.parameter(name, field="free" if free else "fix").free = free

    def unconstrained(self, obs: Observations, names: list[str]) -> list[str]:
        """Reasons, naming parameters, why some free parameters cannot be
        measured from these TOAs at all (asked of each section)."""
        out = []
        for comp in self.sections:
            out.extend(comp.unconstrained(obs, names))
        return out

    def owner(self, name: str) -> ModelSection:
        for comp in [*self.sections, *self.noise_sections()]:
            if any(p.name == name for p in comp.parameters()):
                return comp
        raise KeyError(name)

    # ------------------------------------------------------------- data
    def prepare_observations(self, toas, sites, ephemeris, clocks=(),
                             exact: bool = False) -> Observations:
        """Time scales and geometry of ``toas`` with this model's settings
        (the planets of its Shapiro delay); ``exact`` as for
        :func:`timingkit.geometry.observations.prepare_observations`."""
        return prepare_observations(toas, sites, ephemeris, clocks,
                                    planets=self.settings["shapiro_delay_planets"],
                                    exact=exact, model_path=self.path)

    def data_warnings(self, obs: Observations) -> list[str]:
        """Warnings about these TOAs seen along this model's line of sight: the
        Sun within a few solar radii (InputError for the solar disc, naming
        the lines), the solar wind when the model lacks it and it would
        matter (more than 1 ns or a tenth of the median TOA error)."""
        out = solar_approach_warnings(obs, self.astrometry.line_of_sight(obs))
        if not any(c.section == "solar_wind" for c in self.extra):
            ev = Evaluation(obs)
            self.astrometry.apply(ev)
            threshold_s = notable_delay_s(float(np.median(obs.toas.err_us)))
            warning = unmodelled_solar_wind_warning(ev, threshold_s)
            if warning:
                out.append(warning)
        return out

    # ------------------------------------------------------------- evaluation
    def evaluate(self, obs: Observations, reference: Observations | None = None) -> Evaluation:
        """Pulse phase (integer + fraction) at every TOA, with all delays."""
        ev = Evaluation(obs)
        self.astrometry.apply(ev)
        ev.dispersion_s = ev.zeros()
        ev.other_delay_s = ev.zeros()
        ev.binary_s = ev.zeros()
        self.dispersion.apply(ev)
        for comp in self.propagation_sections():
            comp.apply(ev)
        offset = ev.roemer_s - ev.shapiro_s - ev.dispersion_s - ev.other_delay_s
        ev.t_bary = obs.tdb.add_seconds(offset)
        for comp in self.orbit_sections():
            comp.apply(ev)           # sets/extends ev.binary_s from ev.t_bary
        ev.emit_offset_s = offset - ev.binary_s
        ev.t_emit = obs.tdb.add_seconds(ev.emit_offset_s)
        self.spin.apply(ev)
        for comp in self.rotation_sections():
            comp.apply(ev)           # adds to ev.phase_frac / spin_frequency_hz
        if reference is not None:
            ref = self.evaluate(reference)
            hi, lo = ddmath.dd_add(ev.phase_int, ev.phase_frac,
                                   -ref.phase_int[0], -ref.phase_frac[0])
            ev.phase_int, ev.phase_frac = ddmath.dd_frac_round(hi, lo)
        else:
            n, f = ddmath.dd_frac_round(ev.phase_int, ev.phase_frac)
            ev.phase_int, ev.phase_frac = n, f
        return ev

    def design_matrix(self, ev: Evaluation, names: list[str]) -> np.ndarray:
        """Columns d(phase)/d(parameter), cycles per parameter unit, (N, k)."""
        out = np.zeros((len(ev.obs), len(names)))
        by_comp: dict[int, list[str]] = {}
        comps = self.sections
        for name in names:
            comp = self.owner(name)
            by_comp.setdefault(id(comp), []).append(name)
        for comp in comps:
            wanted = by_comp.get(id(comp))
            if not wanted:
                continue
            cols = comp.partials(ev, wanted)
            for name in wanted:
                col = cols[name]
                if comp.contribution in ("sky_path", "propagation") and "emit_per_bary" in ev.extra:
                    col = col * ev.extra["emit_per_bary"]   # through the orbit's time warp
                if comp.contribution != "rotation":
                    col = col * ev.spin_frequency_hz
                out[:, names.index(name)] = col
        return out

    # ---------------------------------------------------------------- writing
    def to_document(self, include_uncertainty: bool = True) -> dict:
        doc: dict = {"name": self.name}
        for comp in [self.astrometry, self.spin, self.dispersion]:
            doc[comp.section] = comp.to_section()
        for comp in self.extra:
            sec = comp.to_section()
            if getattr(comp, "array_section", False):
                doc.setdefault(comp.section, []).append(sec)
            else:
                doc.setdefault(comp.section, {}).update(sec)
        if include_uncertainty:
            self._add_uncertainties(doc)
        if self.phase_zero is not None:
            pz = dict(self.phase_zero)
            doc["phase_zero"] = pz
        doc["fit"] = {"free": self.free_names}
        settings = {k: v for k, v in self.settings.items() if _setting_written(k, v)}
        if settings:
            doc["settings"] = settings
        correlation = correlation_section(self) if include_uncertainty else None
        if correlation:
            doc["correlation"] = correlation
        return doc

    def _add_uncertainties(self, doc: dict) -> None:
        for comp in [*self.sections, *self.noise_sections()]:
            params = [p for p in comp.parameters() if p.uncertainty is not None]
            if not params:
                continue
            sec = doc[comp.section]
            if isinstance(sec, list):
                sec = sec[getattr(comp, "array_index", len(sec) - 1)]
            unc = sec.setdefault("uncertainty", {})
            for p in params:
                value = float(p.uncertainty) * p.file_scale
                if p.index is None:
                    unc[p.key] = value
                else:
                    lst = unc.setdefault(p.key, [])
                    while len(lst) <= p.index:
                        lst.append(float("nan"))
                    lst[p.index] = value

    def write(self, path: str, comment: str | None = None) -> None:
        """Write the model; file paths in [settings] (sites, clock tables, a
        .bsp ephemeris) are rewritten relative to the new file's folder, so the
        written model finds the same files wherever it is saved."""
        doc = self.to_document()
        if "settings" in doc:
            doc["settings"] = self._settings_relative_to(os.path.dirname(os.path.abspath(path)))
        write_model_document(doc, path, comment)

    def files_outside_own_folder(self) -> list[dict]:
        """Files named in [settings] that are absolute paths or climb out of the
        model's folder (allowed, but listed in report.json for a reviewer):
        ``{"setting", "path", "resolved"}`` per file."""
        out = []
        given = [("sites", p) for p in self.settings["sites"]]
        given += [("clock", p) for p in self.settings["clock"]]
        if self.settings["ephemeris"] not in ("builtin", "de421", ""):
            given.append(("ephemeris", self.settings["ephemeris"]))
        own = os.path.realpath(self.base_dir)
        for key, given_path in given:
            resolved = os.path.realpath(os.path.join(self.base_dir, given_path))
            if os.path.isabs(given_path) or os.path.commonpath([own, resolved]) != own:
                out.append({"setting": f"settings.{key}", "path": given_path,
                            "resolved": resolved})
        return out

    def _settings_relative_to(self, folder: str) -> dict:
        def move(p: str) -> str:
            absolute = p if os.path.isabs(p) else os.path.normpath(os.path.join(self.base_dir, p))
            try:
                return os.path.relpath(absolute, folder)
            except ValueError:      # another drive (Windows): keep it absolute
                return absolute
        out = {}
        for key, value in self.settings.items():
            if not _setting_written(key, value):
                continue
            if key in ("sites", "clock"):
                value = [move(v) for v in value]
            elif key == "ephemeris" and value not in ("builtin", "de421", ""):
                value = move(value)
            out[key] = value
        return out


def _setting_written(key: str, value) -> bool:
    if key in QUIET_DEFAULTS:
        return value != QUIET_DEFAULTS[key]
    return value not in (None, [], False)


def _dispersion_constant(settings: dict, path: str | None) -> float:
    name = settings["dispersion_constant"]
    if name not in DISPERSION_CONSTANTS_S_MHZ2:
        raise InputError(f"unknown dispersion constant {excerpt(name)}; legal: "
                         f"{', '.join(DISPERSION_CONSTANTS_S_MHZ2)}", path=path,
                         field="settings.dispersion_constant", quoted=(name,))
    return DISPERSION_CONSTANTS_S_MHZ2[name]


__all__ = ["TimingModel", "OPTIONAL_SECTIONS", "Decimal", "mjd_decimal", "mjd_parts"]
