"""FITS event lists (OGIP timing conventions) read with astropy.io.fits, and the
FITS tables we write: ``phases.fits`` (the input's rows plus new columns) and
simulated event lists.

Reading: the events table is the HDU named ``EVENTS`` (any case), else the
first binary table with a ``TIME`` column that is not a GTI. Its timing
keywords are read by ``timingkit.formats.ogip_time``. The good time intervals
come from the first HDU named ``GTI`` or ``STDGTI`` (columns ``START`` and
``STOP``, on that HDU's own timing keywords, falling back to the events
table's); they select on the TIME values as written, while the events are
timed at the centres of their time bins (``TIMEDEL``, ``TIMEPIXR``).
``OBSGEO-X/Y/Z`` (geocentric ITRS metres; Rots et al. 2015, A&A 574, A36, the
FITS time standard) give a ground observer's position when present; the names
in ``OBSERVAT`` and ``TELESCOP`` are kept for matching it to a site. The file
is opened read-only and memory-mapped: it is never changed and the TIME column
is read without copying the other columns.

Writing copies the input rows byte for byte (so every input column keeps its
format, scaling and unit keywords) and appends the new columns; headers and
data are written by hand after astropy builds the header cards, because
astropy's table constructor converts every row (seconds for 10^7 events).
"""

from __future__ import annotations

import re

import numpy as np

from timingkit.formats.errors import InputError, excerpt
from timingkit.formats.event_list import EventList, pick_energy_column
from timingkit.formats.ogip_time import SECONDS_PER_DAY, read_time_keywords
from timingkit.numerics.ddmath import two_prod

GTI_NAMES = ("GTI", "STDGTI")
STRUCTURAL = {"XTENSION", "BITPIX", "NAXIS", "NAXIS1", "NAXIS2", "PCOUNT", "GCOUNT", "TFIELDS",
              "CHECKSUM", "DATASUM", "THEAP", "EXTEND", "SIMPLE"}
COLUMN_KEYWORD = re.compile(r"^(TTYPE|TFORM|TUNIT|TNULL|TSCAL|TZERO|TDISP|TBCOL|TDIM|TCTYP|"
                            r"TCUNI|TCRPX|TCRVL|TCDLT|TRPOS|TLMIN|TLMAX|TDMIN|TDMAX)(\d+)$")
FITS_BLOCK = 2880


def _open(path):
    from astropy.io import fits
    try:
        return fits.open(path, memmap=True, mode="readonly")
    except (OSError, ValueError) as exc:
        raise InputError(f"not a readable FITS file ({exc})", path=path) from None


def _hdu_label(hdul, index: int) -> str:
    name = hdul[index].name
    return f"{name} (HDU {index})" if name else f"HDU {index}"


def _events_index(hdul, path) -> int:
    from astropy.io import fits
    tables = [i for i, h in enumerate(hdul) if isinstance(h, fits.BinTableHDU)]
    for i in tables:
        if hdul[i].name.upper() == "EVENTS":
            return i
    for i in tables:
        names = [n.upper() for n in hdul[i].columns.names]
        if "TIME" in names and hdul[i].name.upper() not in GTI_NAMES:
            return i
    raise InputError("no events table: expected a binary-table HDU named EVENTS or one with a "
                     "TIME column", path=path, field="EVENTS")


def _column_name(hdu, wanted: str) -> str | None:
    for name in hdu.columns.names:
        if name.upper() == wanted:
            return name
    return None


def read_fits_events(path: str) -> EventList:
    """An OGIP event list (see the module docstring)."""
    hdul = _open(path)
    index = _events_index(hdul, path)
    hdu = hdul[index]
    label = _hdu_label(hdul, index)
    primary = hdul[0].header
    keys = read_time_keywords(hdu.header, label, path, primary=primary)
    time_name = _column_name(hdu, "TIME")
    if time_name is None:
        raise InputError(f"no TIME column in {label}", path=path, field="TIME")
    if hdu.data is None or len(hdu.data) == 0:
        raise InputError(f"the events table {label} has no rows", path=path, field="TIME")
    column = hdu.columns[time_name]
    if column.format.upper().lstrip("0123456789") not in ("D", "E", "J", "K", "I"):
        raise InputError(f"TIME column of {label} has format {excerpt(column.format)}; "
                         "expected a number (D)", path=path, field="TIME",
                         quoted=(str(column.format),))
    raw = hdu.data.view(np.ndarray)
    if column.bscale not in (None, 1) or column.bzero not in (None, 0):
        seconds = np.asarray(hdu.data.field(time_name), dtype=np.float64)
    else:
        seconds = raw[time_name].astype(np.float64)
    seconds_lo = None
    if keys.unit_s != 1.0:                    # days: the product kept exactly in two parts
        seconds, seconds_lo = two_prod(seconds, keys.unit_s)
    if not np.all(np.isfinite(seconds)):
        bad = int(np.flatnonzero(~np.isfinite(seconds))[0])
        raise InputError(f"TIME of row {bad + 1} in {label} is not finite", path=path,
                         field="TIME")
    names = list(hdu.columns.names)
    energy = pick_energy_column([n for n in names if n != time_name], None, path)
    notes = [f"keyword defaulted by the OGIP memo: {d}" for d in keys.defaulted]
    if keys.time_bin is None and "TIMEPIXR" in keys.keywords:
        notes.append(f"TIMEPIXR = {keys.time_pixel_reference} is given without TIMEDEL: the "
                     "bin width is unknown, so TIME is taken as the event's instant")
    events = EventList(
        path=path, kind="fits", reference_day=keys.reference_day,
        reference_frac=keys.reference_frac, seconds=seconds, scale=keys.scale,
        timeref=keys.timeref, seconds_lo=seconds_lo,
        mjdref=(keys.reference_day, keys.mjdref_frac),
        bary_shift_s=keys.timezero_s, table=raw, header=hdu.header, primary_header=primary,
        hdu_name=hdu.name or "EVENTS", site=None, clock_applied=keys.clock_applied,
        energy_column=energy,
        energy_unit=(hdu.columns[energy].unit or "") if energy else "",
        notes=notes, keywords=dict(keys.keywords),
        reader=lambda name: np.asarray(hdu.data.field(name)),
        bin_centre_shift_s=keys.bin_centre_shift_s, time_bin_s=keys.time_bin_s,
        time_pixel_reference=keys.time_pixel_reference, utc_elapsed_seconds=True)
    events.observer_itrf_m = _observer_position(hdu.header, primary, label, path)
    events.observatory_names = [(keyword, str(header[keyword]).strip())
                                for header in (hdu.header, primary)
                                for keyword in ("OBSERVAT", "TELESCOP")
                                if str(header.get(keyword, "")).strip()]
    observatory = hdu.header.get("OBSERVAT", hdu.header.get("TELESCOP"))
    if observatory is not None:
        events.keywords["OBSERVAT"] = str(observatory)
    events.gti_s, events.gti_hdu = _read_gti(hdul, hdu.header, keys, path)
    return events


def _observer_position(header, primary, label: str, path):
    found = [header.get(k, primary.get(k)) for k in ("OBSGEO-X", "OBSGEO-Y", "OBSGEO-Z")]
    if all(v is None for v in found):
        return None
    if any(v is None for v in found):
        missing = [k for k, v in zip(("OBSGEO-X", "OBSGEO-Y", "OBSGEO-Z"), found) if v is None]
        raise InputError(f"keyword {missing[0]} missing in {label} (OBSGEO-X/Y/Z come as a "
                         "set)", path=path, field=missing[0])
    try:
        xyz = np.array([float(v) for v in found])
    except (TypeError, ValueError):
        raise InputError(f"keywords OBSGEO-X/Y/Z in {label} must be numbers (metres)",
                         path=path, field="OBSGEO-X") from None
    radius = float(np.linalg.norm(xyz))
    if not 6.2e6 < radius < 6.5e6:
        raise InputError(f"OBSGEO-X/Y/Z in {label} put the observer {radius / 1e3:.0f} km from "
                         "the geocentre: not a place on the Earth (give metres; for a "
                         "spacecraft give --orbit)", path=path, field="OBSGEO-X")
    return xyz


def _read_gti(hdul, events_header, event_keys, path):
    from astropy.io import fits
    for i, h in enumerate(hdul):
        if not isinstance(h, fits.BinTableHDU) or h.name.upper() not in GTI_NAMES:
            continue
        label = _hdu_label(hdul, i)
        start, stop = _column_name(h, "START"), _column_name(h, "STOP")
        if start is None or stop is None:
            raise InputError(f"{label} needs START and STOP columns", path=path,
                             field="START" if start is None else "STOP")
        keys = read_time_keywords(h.header, label, path, primary=events_header)
        if keys.scale != event_keys.scale:
            raise InputError(f"{label} has TIMESYS {keys.scale.upper()} but the events are in "
                             f"{event_keys.scale.upper()}", path=path, field="TIMESYS")
        rows = len(h.data) if h.data is not None else 0
        gti = np.zeros((rows, 2))
        if rows:
            gti[:, 0] = np.asarray(h.data.field(start), dtype=float) * keys.unit_s
            gti[:, 1] = np.asarray(h.data.field(stop), dtype=float) * keys.unit_s
        # onto the events' reference (zero when both tables share their keywords)
        ref_e, ref_g = event_keys.reference_frac, keys.reference_frac
        shift_s = ((keys.reference_day - event_keys.reference_day)
                   + (ref_g[0] - ref_e[0]) + (ref_g[1] - ref_e[1])) * SECONDS_PER_DAY
        if not np.all(np.isfinite(gti)):
            raise InputError(f"{label} has non-finite START or STOP values", path=path,
                             field="START")
        return gti + shift_s, h
    return None, None


# ----------------------------------------------------------------------------- writing

def _table_header(columns, rows: int, extname: str, row_bytes: int, extra_cards=(),
                  template=None):
    """Header of a binary table: ``template``'s cards (input column keywords
    kept, structural ones dropped), then the ``columns`` (name, format, unit)
    that are new, numbered after the template's."""
    from astropy.io import fits
    header = fits.Header()
    header["XTENSION"] = "BINTABLE"
    header["BITPIX"] = 8
    header["NAXIS"] = 2
    header["NAXIS1"] = row_bytes
    header["NAXIS2"] = rows
    header["PCOUNT"] = 0
    header["GCOUNT"] = 1
    first = 1
    if template is not None:
        first = int(template.get("TFIELDS", 0)) + 1
    header["TFIELDS"] = first - 1 + len(columns)
    if template is not None:
        for card in template.cards:
            if card.keyword in STRUCTURAL or card.keyword == "EXTNAME" or not card.keyword:
                continue
            header.append(card, end=True)
    for k, (name, form, unit) in enumerate(columns, start=first):
        header[f"TTYPE{k}"] = name
        header[f"TFORM{k}"] = form
        if unit:
            header[f"TUNIT{k}"] = unit
    header["EXTNAME"] = extname
    for keyword, value, comment in extra_cards:
        if keyword in ("HISTORY", "COMMENT"):
            header.add_history(value) if keyword == "HISTORY" else header.add_comment(value)
        else:
            header[keyword] = (value, comment)
    return header


def _write_hdu(handle, header, rows: np.ndarray | None) -> None:
    handle.write(header.tostring().encode("ascii"))
    if rows is not None and rows.nbytes:
        handle.write(np.ascontiguousarray(rows).data)
        handle.write(b"\0" * ((-rows.nbytes) % FITS_BLOCK))


def _primary(template=None):
    from astropy.io import fits
    header = fits.Header()
    header["SIMPLE"] = True
    header["BITPIX"] = 8
    header["NAXIS"] = 0
    header["EXTEND"] = True
    if template is not None:
        for card in template.cards:
            if card.keyword in STRUCTURAL or COLUMN_KEYWORD.match(card.keyword or "") \
                    or not card.keyword:
                continue
            header.append(card, end=True)
    return header


def _rows(fields: list[tuple[str, np.ndarray]]) -> np.ndarray:
    """A big-endian structured array from (name, array) pairs (FITS byte order)."""
    fields = [(name, values.astype(f"S{max(values.dtype.itemsize // 4, 1)}")
               if values.dtype.kind == "U" else values) for name, values in fields]
    dtype = np.dtype([(name, values.dtype.newbyteorder(">") if values.dtype.kind in "biuf"
                       else values.dtype) for name, values in fields])
    out = np.empty(len(fields[0][1]), dtype=dtype)
    for name, values in fields:
        out[name] = values
    return out


FITS_FORMATS = {"f8": "D", "f4": "E", "i4": "J", "i8": "K", "i2": "I", "u1": "B"}


def _fits_format(values: np.ndarray) -> str:
    if values.dtype.kind in "SU":
        return f"{max(values.dtype.itemsize // (4 if values.dtype.kind == 'U' else 1), 1)}A"
    return FITS_FORMATS[values.dtype.str[1:]]


def _rows_in_chunks(raw: np.ndarray, index, new_columns, chunk: int = 1 << 20):
    """Output rows (input bytes, then the new big-endian fields), a chunk at a time."""
    width = raw.dtype.itemsize
    names = ["input"] + [name for name, _, _ in new_columns]
    formats = [f"V{width}"] + [np.asarray(v).dtype.newbyteorder(">") for _, v, _ in new_columns]
    offsets = [0]
    for fmt in formats[:-1]:
        offsets.append(offsets[-1] + np.dtype(fmt).itemsize)
    dtype = np.dtype({"names": names, "formats": formats, "offsets": offsets,
                      "itemsize": offsets[-1] + np.dtype(formats[-1]).itemsize})
    every = index is None or len(index) == len(raw)
    n = len(raw) if every else len(index)
    buffer = np.empty(min(chunk, max(n, 1)), dtype=dtype)
    for start in range(0, n, chunk):
        part = slice(start, min(start + chunk, n))
        rows = buffer[:part.stop - start]
        source = raw[part] if every else raw[index[part]]
        rows.view(np.uint8).reshape(len(rows), -1)[:, :width] = \
            source.view(np.uint8).reshape(len(rows), width)
        for name, values, _ in new_columns:
            rows[name] = values[part]
        yield rows


def write_event_table(handle, events: EventList, index, new_columns, extra_cards=()) -> None:
    """Write to the open binary ``handle`` a FITS file with the rows ``index``
    (sorted; all rows when it holds every row) of ``events`` and
    ``new_columns`` [(name, array, unit)] after the input's columns; the GTI
    table follows unchanged. The primary header and the events header keep the
    input's cards. FITS rows are assembled and written a chunk at a time."""
    n = len(index)
    if events.kind == "fits":
        raw = events.table
        row_bytes = raw.dtype.itemsize + sum(np.asarray(v).dtype.itemsize
                                             for _, v, _ in new_columns)
        header = _table_header([(name, _fits_format(np.asarray(values)), unit)
                                for name, values, unit in new_columns], n, events.hdu_name,
                               row_bytes, extra_cards, template=events.header)
        _write_hdu(handle, _primary(events.primary_header), None)
        handle.write(header.tostring().encode("ascii"))
        for rows in _rows_in_chunks(raw, index, new_columns):
            handle.write(rows.data)
        handle.write(b"\0" * ((-n * row_bytes) % FITS_BLOCK))
    else:
        fields = [(name, np.asarray(values)[index]) for name, values in events.columns.items()]
        fields += [(name, np.asarray(values)) for name, values, _ in new_columns]
        rows = _rows(fields)
        units = {name: unit for name, _, unit in new_columns}
        header = _table_header([(name, _fits_format(values), units.get(name, ""))
                                for name, values in fields], n, "EVENTS", rows.dtype.itemsize,
                               extra_cards)
        _write_hdu(handle, _primary(), None)
        _write_hdu(handle, header, rows)
    if events.gti_hdu is not None:
        gti = events.gti_hdu
        data = gti.data.view(np.ndarray) if gti.data is not None else None
        gti_header = _table_header([], 0 if data is None else len(data), gti.name,
                                   0 if data is None else data.dtype.itemsize,
                                   template=gti.header)
        _write_hdu(handle, gti_header, data)


def write_simulated_events(handle, seconds: np.ndarray, columns, time_cards, gti_s,
                           extra_cards=()) -> None:
    """A new OGIP event list: TIME (s) then ``columns`` [(name, array, unit)],
    ``time_cards`` from ``ogip_time.time_keyword_cards`` (in both tables), and a
    GTI table of ``gti_s`` (K, 2)."""
    fields = [("TIME", np.asarray(seconds, dtype=np.float64))]
    fields += [(name, np.asarray(values)) for name, values, _ in columns]
    units = {"TIME": "s", **{name: unit for name, _, unit in columns}}
    rows = _rows(fields)
    cards = list(time_cards) + list(extra_cards)
    _write_hdu(handle, _primary(), None)
    _write_hdu(handle, _table_header([(name, _fits_format(v), units[name]) for name, v in fields],
                                     len(rows), "EVENTS", rows.dtype.itemsize, cards), rows)
    gti = _rows([("START", np.asarray(gti_s, dtype=float)[:, 0]),
                 ("STOP", np.asarray(gti_s, dtype=float)[:, 1])])
    _write_hdu(handle, _table_header([("START", "D", "s"), ("STOP", "D", "s")], len(gti), "GTI",
                                     gti.dtype.itemsize, list(time_cards)), gti)
