"""Write a TOA table as text (atomically; MJDs exact)."""

from __future__ import annotations

import os
import tempfile

import numpy as np

from timingkit.formats.errors import InputError, excerpt
from timingkit.formats.toa_table import PULSE_COLUMN, SPLIT_RE, ToaTable, check_flag_name


def _check_text_values(values: np.ndarray, name: str) -> None:
    """Text values must survive a write/read: non-empty, no separators, no leading '#'."""
    if len(values) == 0:
        return
    bad = np.strings.str_len(values) == 0
    for ch in " \t\r\n\v\f,":
        bad |= np.strings.find(values, ch) >= 0
    if name != "mjd":
        bad |= np.strings.startswith(values, "#")
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(f"value {excerpt(str(values[i]))} (row {i}) cannot be written: text "
                         "values must be non-empty, without spaces or commas, and must not "
                         "start with '#'", field=name, quoted=(str(values[i]),))


def _current_umask() -> int:
    """The process umask, read without changing it where the OS allows."""
    try:
        with open("/proc/self/status", encoding="ascii") as status:
            for row in status:
                if row.startswith("Umask:"):
                    return int(row.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)   # fallback: brief change, restored at once
    os.umask(mask)
    return mask


def _float_text(values: np.ndarray) -> np.ndarray:
    """Shortest text that reads back to exactly the same float64."""
    return np.array([repr(v) for v in values.tolist()], dtype=str)


def write_toa_table(toas: ToaTable, path, extra_columns: dict | None = None) -> None:
    """Write a TOA table atomically (temp file + os.replace).

    ``mjd_text`` is written unchanged and floats in shortest round-trip form,
    so ``read_toa_table(write_toa_table(t))`` gives back the same table. Columns: the
    required ones, then ``pulse``, then flags, then ``extra_columns`` (name ->
    values, one per TOA; written as text, floats in round-trip form).
    """
    path = os.fspath(path)
    n = len(toas)
    if n == 0:
        raise InputError("no TOAs to write (a TOA table needs at least one row)", path=path)
    columns: dict[str, np.ndarray] = {
        "mjd": toas.mjd_text,
        "err_us": _float_text(toas.err_us),
        "freq_mhz": _float_text(toas.freq_mhz),
        "site": toas.site,
    }
    if toas.pulse is not None:
        columns[PULSE_COLUMN] = toas.pulse.astype(str)
    for name, column in toas.flags.items():     # FlagColumn: distinct values + codes
        values = np.asarray(column.values if column.values else [""], dtype=str)
        columns[name] = values[column.codes]
    for name, values in (extra_columns or {}).items():
        if name in columns:
            raise InputError(f"extra column {excerpt(name)} clashes with an existing column",
                             path=path, field=name, quoted=(name,))
        check_flag_name(name, path)          # read back, it is a flag
        arr = np.asarray(values)
        if arr.shape != (n,):
            raise InputError(f"extra column has shape {arr.shape}, expected ({n},)",
                             path=path, field=name)
        columns[name] = _float_text(arr) if arr.dtype.kind == "f" else arr.astype(str)
    for name, values in columns.items():
        if not name or SPLIT_RE.search(name) or name.startswith("#"):
            raise InputError(f"column name {excerpt(name)} cannot be written", path=path,
                             quoted=(name,))
        _check_text_values(values, name)
    names = list(columns)
    widths = [max(len(name), int(np.strings.str_len(v).max())) for name, v in columns.items()]
    directory = os.path.dirname(os.path.abspath(path))
    fd, tmp = tempfile.mkstemp(dir=directory, prefix="." + os.path.basename(path) + ".",
                               suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as out:
            out.write(f"# TOA table written by timingkit: {n} TOAs; mjd is UTC at the site "
                      f"(TT for geocentre, TDB for ssb)\n")
            out.write("  ".join(nm.ljust(w) for nm, w in zip(names[:-1], widths[:-1]))
                      + ("  " if len(names) > 1 else "") + names[-1] + "\n")
            step = 100_000
            for lo in range(0, n, step):
                line = None
                for j, name in enumerate(names):
                    part = columns[name][lo:lo + step]
                    if j < len(names) - 1:
                        part = np.strings.add(np.strings.ljust(part, widths[j]), "  ")
                    line = part if line is None else np.strings.add(line, part)
                out.write("\n".join(line.tolist()))
                out.write("\n")
        os.chmod(tmp, 0o666 & ~_current_umask())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
