"""Content hashes for ``--resume``: a source is kept when the sha256 of its input files,
settings, fit function and software versions is unchanged (paths are not hashed).
"""

from __future__ import annotations

import hashlib
import json
import os
import tomllib
from functools import lru_cache
from pathlib import Path
from typing import Callable
from timingkit.batch.sources import DEFAULT_FIT_FUNCTION, Source, resolve_path



HASH_FILE = "inputs.sha256"


def software_fingerprint() -> dict[str, str]:
    """Versions whose change may change results (bundled ephemeris, IERS tables, leap seconds)."""
    from importlib import metadata

    import timingkit

    versions = {"timingkit": timingkit.__version__}
    for package in ("astropy", "astropy-iers-data", "pyerfa", "jplephem", "skyfield-data"):
        try:
            versions[package] = metadata.version(package)
        except metadata.PackageNotFoundError:
            versions[package] = "absent"
    return versions


def _file_digest(path: str) -> str:
    """sha256 of a file's contents (a marker if unreadable: the fit will say why)."""
    try:
        status = os.stat(path)
    except OSError as exc:
        return f"unreadable:{type(exc).__name__}"
    return _digest_of(path, status.st_size, status.st_mtime_ns)


@lru_cache(maxsize=4096)
def _digest_of(path: str, size: int, mtime_ns: int) -> str:
    # cached by (path, size, mtime): a shared ephemeris or site file is read once,
    # not once per source
    digest = hashlib.sha256()
    try:
        with open(path, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                digest.update(block)
    except OSError as exc:
        return f"unreadable:{type(exc).__name__}"
    return digest.hexdigest()


def _model_referenced_files(model_path: str) -> list[str]:
    """Site, clock and ephemeris files named in the model's ``[settings]`` (relative to it)."""
    try:
        data = tomllib.loads(Path(model_path).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return []
    settings = data.get("settings")
    if not isinstance(settings, dict):
        return []
    base = Path(model_path).parent
    found = []
    for key in ("sites", "clock", "ephemeris"):
        value = settings.get(key)
        values = [value] if isinstance(value, str) else value if isinstance(value, list) else []
        found += [resolve_path(base, v) for v in values if isinstance(v, str) and v != "builtin"]
    return found


def function_name(function: Callable | None) -> str:
    """Dotted name of a per-source function (None: the default fit)."""
    if function is None:
        return DEFAULT_FIT_FUNCTION
    return f"{getattr(function, '__module__', '?')}.{getattr(function, '__qualname__', '?')}"


def inputs_sha256(source: Source, software: dict[str, str] | None = None,
                  fit_function: str = DEFAULT_FIT_FUNCTION) -> str:
    """sha256 over the contents of every input file of ``source`` (TOA table, model,
    site/clock/ephemeris files given to the batch or named in the model, exclusion
    lists), the
    settings (free, fix, make_plots), the per-source function (by name) and the
    software versions. Paths are not hashed, so moving a data tree does not
    force a refit."""
    files = [("toas", source.toas_path), ("model", source.model_path)]
    files += [("sites", p) for p in source.sites_paths]
    files += [("clock", p) for p in source.clock_paths]
    files += [("exclude", p) for p in source.exclude_paths]
    if source.ephemeris:
        files.append(("ephemeris", source.ephemeris))
    files += [("model-settings", p) for p in _model_referenced_files(source.model_path)]
    record = {
        "name": source.name,
        "files": [[role, _file_digest(p)] for role, p in files],
        "free": list(source.free), "fix": list(source.fix), "make_plots": source.make_plots,
        "function": fit_function,
        "software": software if software is not None else software_fingerprint(),
    }
    return hashlib.sha256(json.dumps(record, sort_keys=True).encode()).hexdigest()
