"""The sources of a batch: a directory of source folders or a TOML manifest, read into
:class:`Source` records (paths resolved, free/fix and settings merged with the defaults).
"""

from __future__ import annotations

import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

from timingkit.formats.errors import InputError
from timingkit.formats.textfile import read_toml_file, top_level_table


# A source folder holds exactly one TOA table: a file named ``toas.txt`` or ending ``.toas``.
TOP_LEVEL_OUTPUTS = ("summary.csv", "summary.json", "ppdot.png", "overview.html", "thumbnails")
TOA_TABLE_SUFFIX = ".toas"


TOA_TABLE_NAME = "toas.txt"


MANIFEST_DEFAULT_KEYS = ("ephemeris", "sites", "clock", "free", "fix", "make_plots", "exclude")


MANIFEST_SOURCE_KEYS = ("name", "toas", "model") + MANIFEST_DEFAULT_KEYS


_SAFE_NAME = re.compile(r"^[A-Za-z0-9_+][A-Za-z0-9._+-]*$")


DEFAULT_FIT_FUNCTION = "timingkit.pipeline.fit_run.fit_files"


@dataclass(frozen=True)
class Source:
    """One source to fit. Paths are absolute; ``problem`` marks a source that
    cannot be run at all (e.g. a folder with two TOA tables): it is reported as
    failed without being fitted."""
    name: str
    toas_path: str
    model_path: str
    free: tuple[str, ...] = ()
    fix: tuple[str, ...] = ()
    sites_paths: tuple[str, ...] = ()
    ephemeris: str | None = None
    clock_paths: tuple[str, ...] = ()
    make_plots: bool = True
    problem: str | None = None
    exclude_paths: tuple[str, ...] = ()


def discover_sources(path, outdir=None) -> list[Source]:
    """Sources from a manifest file or from a directory of source folders.

    Directory: every non-hidden subfolder holding one TOA table (``toas.txt`` or
    ``*.toas``) and one model (``*.toml`` that is not a site file, i.e. not a
    file whose only top-level table is ``[site]``) is a source named after the
    folder, sorted by name. A folder with no TOA table and no TOML file is
    ignored; one with a missing or ambiguous file becomes a failed source.
    ``outdir`` (if inside ``path``) is skipped. Manifest: see :func:`read_manifest`.
    """
    path = Path(path).expanduser()
    if path.is_file():
        return read_manifest(path)
    if not path.is_dir():
        raise InputError("no such manifest file or source directory", path=str(path))
    skip = Path(outdir).expanduser().resolve() if outdir is not None else None
    sources = []
    for folder in sorted(p for p in path.iterdir() if p.is_dir()):
        if folder.name.startswith(".") or folder.resolve() == skip:
            continue
        source = _source_from_folder(folder)
        if source is None:
            continue
        if folder.name in TOP_LEVEL_OUTPUTS:
            raise InputError(f"a source folder may not be named {folder.name!r}, the name of a "
                             "batch output file; rename the folder", path=str(folder))
        if skip is not None and skip.is_relative_to(folder.resolve()):
            raise InputError(f"the output folder lies inside the input folder of source "
                             f"'{folder.name}'; choose an output folder outside it",
                             path=str(skip), field="outdir")
        sources.append(source)
    if skip is not None and skip in {f.resolve() for f in path.iterdir() if f.is_dir()
                                     and not f.name.startswith(".")} and (
            _source_from_folder(skip) is not None):
        raise InputError("the output folder is one of the source folders; choose an output "
                         "folder outside them", path=str(skip), field="outdir")
    if not sources:
        raise InputError(f"no source folders found (each needs one TOA table, '{TOA_TABLE_NAME}' "
                         f"or '*{TOA_TABLE_SUFFIX}', and one '*.toml' model)", path=str(path))
    return sources


def _is_site_file(path: Path) -> bool:
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return False  # let the fit report an unreadable model
    return set(data) == {"site"}


def _source_from_folder(folder: Path) -> Source | None:
    files = sorted(p for p in folder.iterdir() if p.is_file() and not p.name.startswith("."))
    toas = [p for p in files if p.name == TOA_TABLE_NAME or p.suffix == TOA_TABLE_SUFFIX]
    tomls = [p for p in files if p.suffix == ".toml"]
    if not toas and not tomls:
        return None
    models = [p for p in tomls if not _is_site_file(p)]
    problem = None
    if len(toas) != 1:
        problem = (f"found {len(toas)} TOA tables in {folder} "
                   f"({', '.join(p.name for p in toas) or 'none'}); expected exactly one, "
                   f"named '{TOA_TABLE_NAME}' or ending in '{TOA_TABLE_SUFFIX}'")
    elif len(models) != 1:
        problem = (f"found {len(models)} model files in {folder} "
                   f"({', '.join(p.name for p in models) or 'none'}); expected exactly one "
                   "'*.toml' model besides site files")
    return Source(name=folder.name,
                  toas_path=str(toas[0].resolve()) if len(toas) == 1 else "",
                  model_path=str(models[0].resolve()) if len(models) == 1 else "",
                  problem=problem)


def read_manifest(path) -> list[Source]:
    """Sources from a TOML manifest; paths are relative to the manifest's folder.

    ``[defaults]`` may set ``ephemeris`` (path or ``"builtin"``), ``sites`` and
    ``clock`` (a path or a list of paths, used besides those the model names),
    ``free``/``fix`` (parameter names to free or hold fixed besides the model's
    own ``[fit]`` list), ``make_plots`` (bool) and ``exclude`` (exclusion lists: a
    path or a list). Each ``[[source]]`` needs ``name``,
    ``toas`` and ``model`` and may override any default (the value replaces it).
    Raises InputError naming the file and field for anything malformed.
    """
    path = Path(path).expanduser()
    where = str(path)
    data = read_toml_file(where, "batch manifest")
    defaults = top_level_table(data, "defaults", ("defaults", "source"), where,
                               "[defaults], [[source]]", default={})
    if not isinstance(defaults, dict):
        raise InputError("must be a table", path=where, field="defaults")
    _check_keys(defaults, MANIFEST_DEFAULT_KEYS, where, "defaults")
    entries = data.get("source")
    if not isinstance(entries, list) or not entries or not all(isinstance(e, dict) for e in entries):
        raise InputError("the manifest lists no sources; add [[source]] tables with name, toas "
                         "and model", path=where, field="source")
    base = path.resolve().parent
    sources, seen = [], set()
    for index, entry in enumerate(entries, 1):
        label = f"source[{index}]"
        _check_keys(entry, MANIFEST_SOURCE_KEYS, where, label)
        for key in ("name", "toas", "model"):
            if not isinstance(entry.get(key), str) or not entry[key].strip():
                raise InputError("missing or not a non-empty string", path=where,
                                 field=f"{label}.{key}")
        name = entry["name"]
        if not _SAFE_NAME.match(name) or name in TOP_LEVEL_OUTPUTS:
            raise InputError(f"source name '{name}' cannot be a folder name: use letters, digits "
                             "and . _ + - (not first: . or -), and none of "
                             f"{', '.join(TOP_LEVEL_OUTPUTS)}", path=where, field=f"{label}.name")
        if name in seen:
            raise InputError(f"source name '{name}' appears twice", path=where,
                             field=f"{label}.name")
        seen.add(name)
        merged = {**defaults, **entry}
        ephemeris = _manifest_text(merged, "ephemeris", where, label)
        sources.append(Source(
            name=name,
            toas_path=resolve_path(base, entry["toas"]),
            model_path=resolve_path(base, entry["model"]),
            free=tuple(_manifest_list(merged, "free", where, label)),
            fix=tuple(_manifest_list(merged, "fix", where, label)),
            sites_paths=tuple(resolve_path(base, p) for p in _manifest_list(merged, "sites", where, label)),
            ephemeris=None if ephemeris in (None, "builtin") else resolve_path(base, ephemeris),
            clock_paths=tuple(resolve_path(base, p) for p in _manifest_list(merged, "clock", where, label)),
            make_plots=_manifest_bool(merged, "make_plots", where, label),
            exclude_paths=tuple(resolve_path(base, p)
                                for p in _manifest_list(merged, "exclude", where, label)),
        ))
    return sources


def _check_keys(table: dict, legal: Sequence[str], where: str, label: str) -> None:
    for key in table:
        if key not in legal:
            raise InputError(f"unknown key; legal keys: {', '.join(legal)}", path=where,
                             field=f"{label}.{key}")


def _manifest_text(merged: dict, key: str, where: str, label: str) -> str | None:
    value = merged.get(key)
    if value is not None and (not isinstance(value, str) or not value.strip()):
        raise InputError("must be a non-empty string", path=where, field=f"{label}.{key}")
    return value


def _manifest_list(merged: dict, key: str, where: str, label: str) -> list[str]:
    value = merged.get(key, [])
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, list) or not all(isinstance(v, str) and v.strip() for v in value):
        raise InputError("must be a string or a list of strings", path=where,
                         field=f"{label}.{key}")
    return value


def _manifest_bool(merged: dict, key: str, where: str, label: str) -> bool:
    value = merged.get(key, True)
    if not isinstance(value, bool):
        raise InputError("must be true or false", path=where, field=f"{label}.{key}")
    return value


def resolve_path(base: Path, relative: str) -> str:
    return str((base / Path(relative).expanduser()).resolve())
