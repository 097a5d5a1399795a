"""A single self-contained HTML page summarising a batch: sortable table, P–Pdot
diagram and each source's residual plot.

Images are embedded as base64 ``data:`` URIs and the sorting script and style
are inline, so the page opens offline in any browser and can be mailed as one
file. Nothing is fetched from the network. Written by hand (a few lines of
HTML and JavaScript) because no well-kept library we depend on produces it.
"""

from __future__ import annotations

import base64
import html
import math
from pathlib import Path
from typing import Any, Mapping, Sequence

from timingkit.outputs.residual_table import atomic_output

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


def _table(rows: Sequence[Mapping[str, Any]], columns: Sequence[str]) -> str:
    head = "".join(f'<th scope="col"><button type="button">{html.escape(c)}</button></th>'
                   for c in columns)
    body = []
    for index, row in enumerate(rows):
        cells = []
        for column in columns:
            shown, sort_value, numeric = _display(row.get(column), column)
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


def render_overview_html(rows: Sequence[Mapping[str, Any]], columns: Sequence[str], *,
                         ppdot_png=None, residual_plots: Mapping[str, Any] | None = None,
                         warnings: Mapping[str, Sequence[str]] | None = None,
                         source_cautions: Mapping[str, Sequence[str]] | None = None,
                         cautions: Sequence[str] = (), note: str = "",
                         title: str = "timingkit batch overview") -> str:
    """The page as a string. ``rows`` are dicts keyed by ``columns`` (one per
    source, ``source`` and ``status`` among them); ``residual_plots`` maps a
    source name to its PNG path; ``warnings`` and ``source_cautions`` map a
    source to its report's warnings and cautions (shown in its section);
    ``cautions`` apply to every source and are shown under the table."""
    residual_plots = residual_plots or {}
    warnings = warnings or {}
    source_cautions = source_cautions or {}
    parts = [
        "<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{html.escape(title)}</title>", f"<style>{_STYLE}</style>", "</head>", "<body>",
        f"<h1>{html.escape(title)}</h1>",
    ]
    if note:
        parts.append(f'<p class="note">{html.escape(note)}</p>')
    parts.append('<p class="note">Click a column header to sort; click again to reverse.</p>')
    parts.append(_table(rows, columns))
    parts += [f'<p class="caution">Caution: {html.escape(c)}</p>' for c in cautions]
    parts.append("<h2>P&ndash;Pdot diagram</h2>")
    ppdot = png_data_uri(ppdot_png) if ppdot_png is not None else None
    if ppdot:
        parts.append(f'<figure><img id="ppdot" alt="P-Pdot diagram of the fitted sources" '
                     f'src="{ppdot}"></figure>')
    else:
        parts.append('<p class="note">No P&ndash;Pdot diagram was made.</p>')
    parts.append("<h2>ResidualSet</h2>")
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
        uri = png_data_uri(residual_plots[name]) if residual_plots.get(name) else None
        if uri:
            parts.append(f'<figure><img class="residuals" '
                         f'alt="timing residuals of {anchor}" src="{uri}"></figure>')
        elif row.get("status") == "ok":
            parts.append('<p class="note">No residual plot.</p>')
        parts.append("</section>")
    parts += [f"<script>{_SORT_SCRIPT}</script>", "</body>", "</html>", ""]
    return "\n".join(parts)


def write_overview_html(path, rows, columns, **options) -> Path:
    """Render (see :func:`render_overview_html`) and write atomically; returns the path."""
    with atomic_output(path) as handle:
        handle.write(render_overview_html(rows, columns, **options))
    return Path(path)
