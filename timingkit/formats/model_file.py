"""The TOML timing-model file: read, validate section by section, write.

Every TOML number is parsed as an exact ``Decimal`` (``tomllib`` with
``parse_float=Decimal``), and high-precision values (MJDs, the spin
frequency) may also be given as decimal strings; neither passes through a
binary float before the model decides what precision it needs. Model sections of
the timing model declare the keys of their section with :class:`Key` specs;
:func:`take_section` checks them and names unknown or malformed keys. The
writer is hand-made (stdlib ``tomllib`` reads only) so that high-precision
values are written as exact strings in a stable, readable layout.
"""

from __future__ import annotations

import json
import math
import os
import re
import tomllib
from dataclasses import dataclass
from decimal import Decimal, InvalidOperation
from typing import Any

from timingkit.formats.atomic_file import atomic_write_bytes, atomic_write_text  # noqa: F401
from timingkit.formats.errors import InputError, excerpt
from timingkit.formats.textfile import parse_toml, read_text_file

def np_list(value) -> list:
    return value if isinstance(value, list) else [value]


KINDS = ("text", "decimal", "number", "integer", "bool", "list_decimal", "list_number",
         "list_text", "list_list_number", "mjd", "table", "bool_or_list_text")

# Decimals longer than this are refused as absurd; shorter ones are rounded
# to the precision the model keeps (two float64 parts for MJDs and the spin).
MAX_DECIMAL_DIGITS = 40


@dataclass(frozen=True)
class Key:
    """Spec of one key: its kind, whether required, its default, a unit note, and the
    physical range of its numbers (each entry of a list): ``low <= value <= high``,
    and ``value > above`` when ``above`` is given. Numbers are always finite."""
    kind: str
    required: bool = False
    default: Any = None
    unit: str = ""
    low: float | None = None
    high: float | None = None
    above: float | None = None

    def __post_init__(self):
        if self.kind not in KINDS:
            raise ValueError(f"unknown kind {self.kind}")

    def range_text(self) -> str:
        unit = f" {self.unit}" if self.unit else ""
        if self.above is not None:
            lower = f"> {self.above:g}"
            return lower + (f" and <= {self.high:g}{unit}" if self.high is not None else unit)
        if self.low is not None and self.high is not None:
            return f"between {self.low:g} and {self.high:g}{unit}"
        return f">= {self.low:g}{unit}" if self.low is not None else f"<= {self.high:g}{unit}"

    def check_range(self, value, where: str, path: str | None) -> None:
        """An InputError when the number ``value`` (or a list of them) lies outside."""
        if self.low is None and self.high is None and self.above is None:
            return
        if isinstance(value, list):
            for i, v in enumerate(value):
                self.check_range(v, f"{where}.{i}", path)
            return
        if value is None or isinstance(value, (str, bool)):
            return
        number = float(value)
        ok = ((self.low is None or number >= self.low) and (self.high is None or number <= self.high)
              and (self.above is None or number > self.above))
        if not ok:
            raise InputError(f"must be {self.range_text()}, found {number:g}", path=path,
                             field=where)


@dataclass
class ModelDocument:
    """A parsed model file: its data (nested dicts), where it came from, and its text
    (to find the line of a key, :func:`key_line`)."""
    data: dict
    path: str | None
    text: str | None = None

    @property
    def base_dir(self) -> str:
        return os.path.dirname(os.path.abspath(self.path)) if self.path else os.getcwd()


def read_model_document(path: str) -> ModelDocument:
    return parse_model_text(read_text_file(path, "TOML model file"), path)


def parse_model_text(text: str, path: str | None = None) -> ModelDocument:
    data = parse_toml(text, path, parse_float=Decimal)
    if not data:
        raise InputError("model file is empty", path=path)
    return ModelDocument(data=data, path=path, text=text)


_HEADER = re.compile(r"^\s*(\[\[?)\s*([^\]]+?)\s*\]\]?\s*(#.*)?$")
_KEY = re.compile(r"^\s*([A-Za-z0-9_.\"' -]+?)\s*=")


def _parts(dotted: str) -> tuple[str, ...]:
    return tuple(p.strip().strip("\"'") for p in dotted.split("."))


def key_line(text: str, field: str) -> int | None:
    """The 1-based line of the model-file key ``field`` (a dotted name such as
    ``spin.frequency_hz``, ``glitch.0.decay_time_days`` for the first [[glitch]],
    ``spin.frequency_derivatives.1``): the line of the longest part of it that is
    written as a key or a table header; None when not found. Written by hand
    because tomllib keeps no positions."""
    wanted = _parts(field)
    best, best_length = None, 0
    table: tuple[str, ...] = ()
    arrays: dict[tuple[str, ...], int] = {}
    for number, line in enumerate(text.splitlines(), 1):
        header = _HEADER.match(line)
        if header:
            table = _parts(header.group(2))
            if header.group(1) == "[[":
                arrays[table] = arrays.get(table, -1) + 1
                table = table + (str(arrays[table]),)
            path = table
        else:
            key = _KEY.match(line)
            if not key:
                continue
            path = table + _parts(key.group(1))
        length = len(path)
        if length > best_length and wanted[:length] == path:
            best, best_length = number, length
    return best



def _as_decimal(value, bad, expected: str, expected_text: str) -> Decimal:
    """A TOML number or decimal string as a Decimal; ``bad(what)`` makes the error
    (``expected`` for the wrong type, ``expected_text`` for unreadable text)."""
    if isinstance(value, bool) or not isinstance(value, (int, Decimal, str)):
        raise bad(expected)
    if isinstance(value, str):
        try:
            return Decimal(value.strip())
        except InvalidOperation:
            raise bad(expected_text) from None
    return Decimal(value)

def _convert(kind: str, value: Any, where: str, path: str | None):
    def bad(expect: str):
        shown = excerpt(value) if isinstance(value, str) else excerpt(repr(value))
        return InputError(f"expected {expect}, found {shown}", path=path, field=where,
                          quoted=(str(value),))

    if kind == "text":
        if not isinstance(value, str):
            raise bad("a string")
        return value
    if isinstance(value, (int, Decimal, str)) and not isinstance(value, bool) \
            and kind in ("decimal", "mjd", "number"):
        _check_digit_count(value, where, path)
    if kind in ("decimal", "mjd"):
        dec = _as_decimal(value, bad, "a number or decimal string", "a decimal number as a string")
        if kind == "mjd" and (not dec.is_finite() or dec < 0 or dec > 200000):
            raise bad("an MJD (0-200000)")
        if kind == "decimal" and not dec.is_finite():
            raise bad("a finite number")
        if kind == "decimal" and abs(dec.adjusted()) > 300:
            raise bad("a number of magnitude 1e-300 to 1e300")
        return dec
    if kind == "number":
        out = float(_as_decimal(value, bad, "a number", "a number"))
        if not math.isfinite(out):
            raise bad("a finite number")
        return out
    if kind == "integer":
        if isinstance(value, bool) or not isinstance(value, int):
            raise bad("an integer")
        return value
    if kind == "bool":
        if not isinstance(value, bool):
            raise bad("true or false")
        return value
    if kind == "bool_or_list_text":
        return value if isinstance(value, bool) else _convert("list_text", value, where, path)
    if kind.startswith("list_"):
        if not isinstance(value, list):
            raise bad("a list")
        inner = kind[5:]
        return [_convert(inner, v, f"{where}.{i}", path) for i, v in enumerate(value)]
    if kind == "table":
        if not isinstance(value, dict):
            raise bad("a table")
        return value
    raise ValueError(kind)


def _check_digit_count(value, where: str, path: str | None) -> None:
    """Refuse numbers written with more than MAX_DECIMAL_DIGITS digits."""
    text = str(value).strip().lower().lstrip("+-")
    mantissa = text.split("e")[0]
    digits = sum(ch.isdigit() for ch in mantissa.lstrip("0."))
    if digits > MAX_DECIMAL_DIGITS:
        raise InputError(f"{digits} significant digits: at most {MAX_DECIMAL_DIGITS} are read "
                         "(values are rounded to the precision the model keeps, ~32 digits for "
                         "the spin frequency and ~21 for MJDs)", path=path, field=where)


_UNCERTAINTY = Key("number", low=0.0)


def take_section(data: dict | None, section: str, spec: dict[str, Key],
                 path: str | None, allow_uncertainty: bool = True) -> dict:
    """Validate one section against ``spec``: converts values, fills defaults,
    names unknown keys (listing the legal ones) and missing required keys."""
    data = {} if data is None else data
    if not isinstance(data, dict):
        raise InputError("expected a table", path=path, field=section)
    out: dict[str, Any] = {}
    legal = set(spec) | ({"uncertainty"} if allow_uncertainty else set())
    unknown = [k for k in data if k not in legal]
    if unknown:
        raise InputError(
            f"unknown key{'s' if len(unknown) > 1 else ''} {', '.join(map(excerpt, unknown))} in "
            f"[{section}]; legal keys: {', '.join(sorted(legal))}",
            path=path, field=f"{section}.{unknown[0]}" if section else unknown[0], quoted=unknown)
    for key, ks in spec.items():
        where = f"{section}.{key}" if section else key
        if key in data:
            out[key] = _convert(ks.kind, data[key], where, path)
            ks.check_range(out[key], where, path)
        elif ks.required:
            raise InputError(f"missing required key '{key}' in [{section or 'top level'}]",
                             path=path, field=where)
        else:
            out[key] = ks.default() if callable(ks.default) else ks.default
    if allow_uncertainty and "uncertainty" in data:
        unc = data["uncertainty"]
        if not isinstance(unc, dict):
            raise InputError("expected a table", path=path, field=f"{section}.uncertainty")
        out["uncertainty"] = {}
        for key, value in unc.items():
            if key not in spec:
                raise InputError(f"uncertainty given for unknown key {excerpt(key)}", path=path,
                                 field=f"{section}.uncertainty.{key}", quoted=(key,))
            where = f"{section}.uncertainty.{key}"
            if isinstance(value, list):  # nan marks an entry that was not fitted
                out["uncertainty"][key] = [
                    float("nan") if isinstance(v, Decimal) and v.is_nan()
                    else _convert("number", v, f"{where}.{i}", path) for i, v in enumerate(value)]
            else:
                out["uncertainty"][key] = _convert("number", value, where, path)
            _UNCERTAINTY.check_range([u for u in np_list(out["uncertainty"][key])
                                      if not math.isnan(u)], where, path)
    return out


def table_list(value, section: str, path: str | None) -> list[dict]:
    """An array-of-tables section (``[[section]]``) as a list of tables; a
    single ``[section]`` table is taken as a list of one."""
    items = [value] if isinstance(value, dict) else value
    if not isinstance(items, list) or not all(isinstance(v, dict) for v in items):
        raise InputError(f"expected one or more [[{section}]] tables", path=path, field=section)
    return items


def reject_repeated_groups(items, section: str, noun: str, path: str | None) -> None:
    """Each (flag, value) group may appear once among the ``[[section]]``
    items (objects with ``flag``, ``value``, ``array_index`` and ``label``)."""
    seen: dict = {}
    for item in items:
        key = (item.flag, item.value)
        if key in seen:
            raise InputError(f"two [[{section}]] {noun} for {item.label} (numbers {seen[key]} "
                             f"and {item.array_index}): give each group once", path=path,
                             field=f"{section}.{item.array_index}", quoted=(item.value,))
        seen[key] = item.array_index


# ---------------------------------------------------------------- writing

def _format_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, Decimal):
        return f'"{value}"'
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):   # JSON's escapes are TOML's too (control characters as \\uXXXX)
        return json.dumps(value, ensure_ascii=False).replace("\x7f", "\\u007f")
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_format_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {type(value).__name__} to TOML")


def _write_table(lines: list[str], header: str | None, table: dict, array: bool = False):
    scalars = {k: v for k, v in table.items()
               if not isinstance(v, dict) and not (isinstance(v, list) and v and isinstance(v[0], dict))}
    subtables = {k: v for k, v in table.items() if isinstance(v, dict)}
    arrays = {k: v for k, v in table.items() if isinstance(v, list) and v and isinstance(v[0], dict)}
    if header is not None:
        lines.append("")
        lines.append(f"[[{header}]]" if array else f"[{header}]")
    for key, value in scalars.items():
        if value is None:
            continue
        if isinstance(value, list) and len(value) > 1 and all(isinstance(v, list) for v in value):
            # a matrix (correlations, MJD ranges): one row per line
            lines.append(f"{key} = [")
            lines.extend(f"  {_format_value(row)}," for row in value)
            lines.append("]")
            continue
        lines.append(f"{key} = {_format_value(value)}")
    for key, value in subtables.items():
        _write_table(lines, f"{header}.{key}" if header else key, value)
    for key, items in arrays.items():
        for item in items:
            _write_table(lines, f"{header}.{key}" if header else key, item, array=True)


def format_model_document(data: dict, comment: str | None = None) -> str:
    """TOML text of a nested dict (Decimal -> exact string, floats by repr)."""
    lines: list[str] = []
    if comment:
        lines.extend(f"# {c}" for c in comment.splitlines())
    _write_table(lines, None, data)
    return "\n".join(lines).lstrip("\n") + "\n"


def write_model_document(data: dict, path: str, comment: str | None = None) -> None:
    """Write atomically (temporary file in the same folder, then rename)."""
    text = format_model_document(data, comment)
    tomllib.loads(text)  # never write a file we could not read back
    atomic_write_text(path, text)
