"""The HTML overview of a batch: sortable table (human headers with units), P–Pdot
diagram and every figure of each source (residuals, day of year, observing frequency,
orbital phase, glitch search, power spectrum).

For a small batch the images are embedded as base64 ``data:`` URIs: the page is one
self-contained file that opens offline in any browser and can be mailed. For a large
batch (more than :data:`EMBED_UP_TO_SOURCES` sources) each figure is a small thumbnail
file (``thumbnails/``) linking to the full figure in the source's folder, so a page of
1,000 sources stays small; it is then opened from the batch folder. The sorting script
and style are inline; nothing is fetched from the network. Written by hand (a few lines
of HTML and JavaScript) because no well-kept library we depend on produces it.
"""

from __future__ import annotations

import base64
import html
import math
from pathlib import Path
from typing import Any, Mapping, Sequence

from timingkit.outputs.residual_table import atomic_output

EMBED_UP_TO_SOURCES = 20      # larger batches get linked thumbnails instead of embedded figures
THUMBNAIL_WIDTH_PX = 240

# Significant digits shown in the table (the full value is kept for sorting and
# is in summary.csv); the spin frequency is shown with every digit.
DISPLAY_DIGITS = {"frequency_hz": None, "frequency_derivative": 10}
DEFAULT_DISPLAY_DIGITS = 6
WRAPPED_COLUMNS = ("message",)
TEXT_COLUMNS = ("source", "status", "message")

_STYLE = """
body { font-family: system-ui, sans-serif; margin: 1.5em; color: #222; }
h1 { font-size: 1.4em; } h2 { font-size: 1.15em; margin-top: 1.6em; }
table { border-collapse: collapse; font-size: 0.85em; }
th, td { border: 1px solid #ccc; padding: 0.25em 0.5em; text-align: right; white-space: nowrap; }
td.text { text-align: left; }
td.wrap { white-space: normal; min-width: 24em; max-width: 48em; }
.scroll { overflow-x: auto; }
th button { font: inherit; font-weight: bold; border: none; background: none; cursor: pointer;
            padding: 0; }
th[aria-sort="ascending"] button::after { content: " \\25B2"; }
th[aria-sort="descending"] button::after { content: " \\25BC"; }
tr.failed td { background: #fde8e8; }
.note, .caution { font-size: 0.85em; color: #555; max-width: 60em; }
.caution { color: #7a4b00; }
figure { margin: 1em 0; } figure img { max-width: 100%; height: auto; border: 1px solid #ddd; }
.figures { display: flex; flex-wrap: wrap; gap: 0.6em; }
.figures figure { margin: 0.3em 0; } .figures figcaption { font-size: 0.8em; color: #555; }
.thumbs figure img { width: 240px; }
section.source { border-top: 1px solid #ddd; }
"""

# Click (or Enter on) a column header to sort by it; click again to reverse.
# Numbers sort numerically, text alphabetically, empty cells always last.
_SORT_SCRIPT = """
(function () {
  function key(cell) {
    var raw = cell.getAttribute('data-value');
    if (raw === null) raw = cell.textContent;
    raw = raw.trim();
    if (raw === '') return null;
    var number = Number(raw);
    return isNaN(number) ? raw.toLowerCase() : number;
  }
  function compare(a, b) {
    if (typeof a === typeof b) return a < b ? -1 : a > b ? 1 : 0;
    return typeof a === 'number' ? -1 : 1;
  }
  document.querySelectorAll('table.sortable').forEach(function (table) {
    var headers = table.tHead.rows[0].cells;
    Array.prototype.forEach.call(headers, function (th, column) {
      th.querySelector('button').addEventListener('click', function () {
        var descending = th.getAttribute('aria-sort') === 'ascending';
        var body = table.tBodies[0];
        var rows = Array.prototype.slice.call(body.rows);
        rows.sort(function (r1, r2) {
          var a = key(r1.cells[column]), b = key(r2.cells[column]);
          if (a === null || b === null) return (a === null) - (b === null);
          return descending ? compare(b, a) : compare(a, b);
        });
        rows.forEach(function (row) { body.appendChild(row); });
        Array.prototype.forEach.call(headers, function (h) { h.removeAttribute('aria-sort'); });
        th.setAttribute('aria-sort', descending ? 'descending' : 'ascending');
      });
    });
  });
})();
"""


def png_data_uri(path) -> str | None:
    """``data:image/png;base64,...`` of a PNG file, or None if it is missing."""
    try:
        data = Path(path).read_bytes()
    except OSError:
        return None
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii")


def _number(value: Any) -> float | None:
    if isinstance(value, bool):
        return None
    try:
        return float(value)
    except (TypeError, ValueError):
        return None


def _display(value: Any, column: str) -> tuple[str, str, bool]:
    """(shown text, sort value, is numeric) of a cell. Numbers, and decimal strings
    such as the high-precision frequency, are shown rounded (see DISPLAY_DIGITS)."""
    if value is None:
        return "", "", False
    number = _number(value)
    if number is None or column in TEXT_COLUMNS:
        return str(value), str(value), False
    if not math.isfinite(number):
        return "", "", True
    digits = DISPLAY_DIGITS.get(column, DEFAULT_DISPLAY_DIGITS)
    if isinstance(value, int) or digits is None:
        shown = str(value)
    else:
        shown = f"{number:.{digits}g}"
    return shown, str(value) if isinstance(value, str) else repr(value), True


def _with_uncertainty(shown: str, value: Any, sigma: Any) -> str:
    """``value ± sigma`` with the value rounded to the digits the uncertainty supports
    (two significant digits of sigma; decimal strings are rounded exactly; tiny and
    huge numbers with an exponent, as the terminal summary prints them); the value
    alone when there is no uncertainty."""
    from decimal import Decimal, InvalidOperation
    from timingkit.outputs.numbers import format_value
    error = _number(sigma)
    if _number(value) is None or error is None or not (math.isfinite(error) and error > 0):
        return shown
    try:
        Decimal(str(value))
    except InvalidOperation:
        return shown
    return format_value(value if isinstance(value, str) else float(value), error)


def _table(rows: Sequence[Mapping[str, Any]], columns: Sequence[str],
           headers: Mapping[str, str] | None = None,
           uncertainties: Mapping[str, str] | None = None) -> str:
    headers = headers or {}
    uncertainties = uncertainties or {}
    head = "".join(f'<th scope="col" data-column="{html.escape(c)}"><button type="button">'
                   f'{html.escape(headers.get(c, c))}</button></th>' for c in columns)
    body = []
    for index, row in enumerate(rows):
        cells = []
        for column in columns:
            shown, sort_value, numeric = _display(row.get(column), column)
            if column in uncertainties and numeric:
                shown = _with_uncertainty(shown, row.get(column), row.get(uncertainties[column]))
            css = ' class="text wrap"' if column in WRAPPED_COLUMNS else (
                "" if numeric else ' class="text"')
            cell = html.escape(shown)
            if column == "source":
                cell = f'<a href="#source-{index}">{cell}</a>'
            cells.append(f'<td{css} data-value="{html.escape(sort_value)}">{cell}</td>')
        status = html.escape(str(row.get("status", "")))
        body.append(f'<tr class="{status}">' + "".join(cells) + "</tr>")
    return ('<div class="scroll"><table class="sortable" id="summary">\n<thead><tr>' + head
            + "</tr></thead>\n<tbody>\n" + "\n".join(body) + "\n</tbody>\n</table></div>")


def _figure_html(label: str, path, name: str, linked: bool, thumbnail_of) -> str | None:
    """One figure: embedded (``data:`` URI), or a thumbnail linking to the full file."""
    alt = html.escape(f"{label} of {name}")
    if not linked:
        uri = png_data_uri(path)
        if uri is None:
            return None
        return (f'<figure><img class="{html.escape(label.split()[0])}" alt="{alt}" '
                f'src="{uri}"><figcaption>{html.escape(label)}</figcaption></figure>')
    if not Path(path).exists():
        return None
    full, thumb = thumbnail_of(path)
    return (f'<figure><a href="{html.escape(full)}"><img alt="{alt}" loading="lazy" '
            f'src="{html.escape(thumb)}"></a><figcaption>{html.escape(label)}</figcaption>'
            "</figure>")


def render_overview_html(rows: Sequence[Mapping[str, Any]], columns: Sequence[str], *,
                         ppdot_png=None, residual_plots: Mapping[str, Any] | None = None,
                         figures: Mapping[str, Sequence[tuple[str, Any]]] | None = None,
                         headers: Mapping[str, str] | None = None,
                         uncertainties: Mapping[str, str] | None = None,
                         thumbnail_of=None,
                         warnings: Mapping[str, Sequence[str]] | None = None,
                         source_cautions: Mapping[str, Sequence[str]] | None = None,
                         cautions: Sequence[str] = (), note: str = "",
                         title: str = "timingkit batch overview") -> str:
    """The page as a string. ``rows`` are dicts keyed by ``columns`` (one per
    source, ``source`` and ``status`` among them), shown under ``headers``
    (column -> text, e.g. "RMS residual (µs)"); ``uncertainties`` maps a column to
    the column of its 1σ uncertainty, shown as "value ± σ". ``figures`` maps a
    source to its (label, PNG path) figures (``residual_plots``: source -> the
    residual plot alone). With ``thumbnail_of`` (path -> (link to the full figure,
    thumbnail), both relative to the page) figures are linked thumbnails, else
    embedded. ``warnings`` and ``source_cautions`` map a source to its report's
    warnings and cautions (shown in its section); ``cautions`` apply to every
    source and are shown under the table."""
    figures = dict(figures or {})
    for name, path in (residual_plots or {}).items():
        figures.setdefault(name, [("residuals", path)] if path else [])
    warnings = warnings or {}
    source_cautions = source_cautions or {}
    linked = thumbnail_of is not None
    parts = [
        "<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{html.escape(title)}</title>", f"<style>{_STYLE}</style>", "</head>", "<body>",
        f"<h1>{html.escape(title)}</h1>",
    ]
    if note:
        parts.append(f'<p class="note">{html.escape(note)}</p>')
    parts.append('<p class="note">Click a column header to sort; click again to reverse.'
                 + (" Click a thumbnail for the full figure." if linked else "") + "</p>")
    parts.append(_table(rows, columns, headers, uncertainties))
    parts += [f'<p class="caution">Caution: {html.escape(c)}</p>' for c in cautions]
    parts.append("<h2>P&ndash;Pdot diagram</h2>")
    ppdot = _figure_html("P-Pdot diagram", ppdot_png, "the fitted sources", linked,
                         thumbnail_of) if ppdot_png is not None else None
    if ppdot:
        parts.append(ppdot.replace("<img ", '<img id="ppdot" ', 1))
    else:
        parts.append('<p class="note">No P&ndash;Pdot diagram was made.</p>')
    parts.append("<h2>Sources</h2>")
    for index, row in enumerate(rows):
        name = str(row.get("source", ""))
        anchor = html.escape(name)
        parts.append(f'<section class="source" id="source-{index}">'
                     f"<h3>{anchor} &mdash; {html.escape(str(row.get('status', '')))}</h3>")
        if row.get("status") != "ok":
            parts.append(f'<p class="caution">{html.escape(str(row.get("message") or ""))}</p>')
        for warning in warnings.get(name, ()):
            parts.append(f'<p class="caution">Warning: {html.escape(str(warning))}</p>')
        for caution in source_cautions.get(name, ()):
            parts.append(f'<p class="caution">Caution: {html.escape(str(caution))}</p>')
        shown = [f for f in (_figure_html(label, path, name, linked, thumbnail_of)
                             for label, path in figures.get(name, ())) if f]
        if shown:
            parts.append(f'<div class="figures{" thumbs" if linked else ""}">' + "".join(shown)
                         + "</div>")
        elif row.get("status") == "ok":
            parts.append('<p class="note">No residual plot.</p>')
        parts.append("</section>")
    parts += [f"<script>{_SORT_SCRIPT}</script>", "</body>", "</html>", ""]
    return "\n".join(parts)


def make_thumbnail(path, thumbnail_path, width_px: int = THUMBNAIL_WIDTH_PX) -> Path:
    """A PNG ``width_px`` wide of the PNG at ``path`` (block-averaged; matplotlib reads
    and writes it), written atomically."""
    import numpy as np
    from matplotlib import image as mpimg
    pixels = mpimg.imread(str(path))
    step = max(1, int(math.ceil(pixels.shape[1] / width_px)))
    h, w = (pixels.shape[0] // step) * step, (pixels.shape[1] // step) * step
    small = pixels[:h, :w].reshape(h // step, step, w // step, step, -1).mean(axis=(1, 3))
    thumbnail_path = Path(thumbnail_path)
    thumbnail_path.parent.mkdir(parents=True, exist_ok=True)
    with atomic_output(thumbnail_path, binary=True) as handle:
        mpimg.imsave(handle, np.clip(small, 0.0, 1.0), format="png")
    return thumbnail_path


def write_overview_html(path, rows, columns, **options) -> Path:
    """Render (see :func:`render_overview_html`) and write atomically; returns the path."""
    with atomic_output(path) as handle:
        handle.write(render_overview_html(rows, columns, **options))
    return Path(path)
