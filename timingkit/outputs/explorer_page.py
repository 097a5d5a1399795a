"""explorer.html: one self-contained page to explore a fit's residuals in a
browser and mark TOAs to leave out, written from a fit's output folder.

The plot is a Bokeh document (WebGL scatter; box and lasso selection, hover
and pan/zoom come from Bokeh); the controls, the hover card, the left-out
ledger and the download of the exclusion list are this project's own script
and style (``explorer_assets/``). Bokeh's JavaScript, the script, the style
and the data are all inline: the page fetches nothing. Bokeh rather than
plotly because its inline bundle (core + WebGL, ~1.5 MB) is a third of
plotly.js, and its document carries the Python side's typed arrays.

Data travel as base64 typed arrays (float32 for residuals, errors and
frequencies, shown to 6 significant digits; the exact values are in
residuals.csv) and the MJD text exactly as read, so a downloaded exclusion
list names each TOA by its line and exact MJD.
"""

from __future__ import annotations

import base64
import html
import json
import os
import tomllib
from importlib import resources

import numpy as np

from timingkit.formats.errors import InputError
from timingkit.outputs.folder_lock import lock_output
from timingkit.outputs.residual_table import ResidualTable, atomic_output

EXPLORER_FILE = "explorer.html"
GLITCH_FILE = "glitches.json"          # written by `timingkit glitches`
BOKEH_COMPONENTS = ("bokeh", "bokeh-gl")
THIN_ABOVE = 10_000      # TOAs; above this the plot holds the top TOA of each 4-pixel cell


def _b64(array, dtype) -> str:
    return base64.b64encode(np.ascontiguousarray(array, dtype=dtype).tobytes()).decode("ascii")


def _coded(values) -> dict:
    """Category levels (sorted) and one code per TOA: uint16, or uint32
    (``"wide": true``) for more than 65,536 levels, such as a flag naming each
    observation. A dict rather than np.unique: sorting a million strings costs
    ten times more than looking them up."""
    texts = np.asarray(values).tolist()
    levels = sorted(set(texts))
    index = {level: k for k, level in enumerate(levels)}
    wide = len(levels) > 2**16
    codes = np.fromiter(map(index.__getitem__, texts), dtype="<u4" if wide else "<u2",
                        count=len(texts))
    return {"levels": levels, "codes": _b64(codes, codes.dtype), **({"wide": True} if wide else {})}


def _read_json(path: str) -> dict | None:
    if not os.path.exists(path):
        return None
    try:
        with open(path, encoding="utf-8") as fh:
            return json.load(fh)
    except (OSError, ValueError) as exc:
        raise InputError(f"cannot read ({exc})", path=path) from None


def _model_glitch_epochs(outdir: str) -> list[float]:
    """Glitch epochs (MJD) of the fitted model (``fitted.toml``) when there is one."""
    path = os.path.join(outdir, "fitted.toml")
    if not os.path.exists(path):
        return []
    try:
        with open(path, "rb") as fh:
            sections = tomllib.load(fh).get("glitch", [])
        return [float(g["epoch_mjd"]) for g in sections]
    except (OSError, ValueError, KeyError, TypeError, tomllib.TOMLDecodeError) as exc:
        raise InputError(f"cannot read the glitch epochs ({exc})", path=path) from None


def _epochs(outdir: str, glitches: dict | None) -> list[dict]:
    """The model's glitch epochs and the glitch search's candidates (MJD); a
    candidate that became a glitch of the fitted model shares its mark. ``short``:
    the text above the plot, ``label``: the long form, in the key below it."""
    marks = [{"kind": "model", "mjd": mjd, "short": f"glitch {k}", "label": f"glitch {k} (model)"}
             for k, mjd in enumerate(_model_glitch_epochs(outdir), 1)]
    trials = ((glitches or {}).get("settings") or {}).get("null_trials")
    for k, c in enumerate((glitches or {}).get("candidates", []), 1):
        fap = c.get("false_alarm_probability")
        shown = ("" if fap is None else f", FAP < 1/{trials}" if fap == 0 and trials
                 else f", FAP < {fap:.2g}" if c.get("false_alarm_probability_upper_limit")
                 else f", FAP {fap:.2g}")
        bracket = {"low": c.get("epoch_min_mjd"), "high": c.get("epoch_max_mjd")}
        index = c.get("model_glitch_index")
        if isinstance(index, int) and 0 <= index < len(marks):
            marks[index].update(bracket, label=f"glitch {index + 1} (model; search candidate "
                                               f"{k}{shown})")
        else:
            marks.append({"kind": "candidate", "mjd": float(c["epoch_mjd"]), **bracket,
                          "short": f"candidate {k}", "label": f"search candidate {k}{shown}"})
    return marks


def _residuals_path(outdir: str) -> str:
    """``outdir/residuals.csv``, which must be there (an InputError otherwise)."""
    post_path = os.path.join(outdir, "residuals.csv")
    if not os.path.exists(post_path):
        raise InputError("no residuals.csv here: give a folder written by 'timingkit fit', "
                         "'residuals' or 'glitches'", path=outdir)
    return post_path


def explorer_data(outdir: str) -> dict:
    """The page's data from a fit's output folder (residuals.csv required;
    prefit_residuals.csv, report.json and glitches.json when present)."""
    post = ResidualTable.read_csv(_residuals_path(outdir))
    pre_path = os.path.join(outdir, "prefit_residuals.csv")
    pre = ResidualTable.read_csv(pre_path) if os.path.exists(pre_path) else None
    if pre is not None and list(pre.mjd_text) != list(post.mjd_text):
        pre = None                      # not the same TOAs: show the post-fit residuals only
    report = _read_json(os.path.join(outdir, "report.json"))
    glitches = _read_json(os.path.join(outdir, GLITCH_FILE))
    n = len(post)
    columns = {
        "mjd_text": " ".join(post.mjd_text.tolist()),
        "line": _b64(post.toa_line if post.toa_line is not None else np.zeros(n), "<i4"),
        "pulse": _b64(post.pulse_number, "<f8"),
        "freq_mhz": _b64(post.freq_mhz, "<f4"), "err_us": _b64(post.err_us, "<f4"),
        "post_us": _b64(post.residual_us, "<f4"), "post_phase": _b64(post.residual_phase, "<f4"),
        "site": _coded(post.site),
        "flags": {name: _coded(values) for name, values in post.flags.items()},
        "left_out": _coded(post.left_out if post.left_out is not None else np.full(n, "")),
    }
    if pre is not None:
        columns["pre_us"] = _b64(pre.residual_us, "<f4")
        columns["pre_phase"] = _b64(pre.residual_phase, "<f4")
    if post.orbital_phase is not None:
        columns["orbital_phase"] = _b64(post.orbital_phase, "<f4")
    nonzero = post.residual_us != 0
    ratio = post.residual_phase[nonzero] / (post.residual_us[nonzero] * 1e-6)
    summary = {}
    if report:
        summary = {key: report.get(key) for key in ("toas", "reduced_chi2", "rms_us",
                                                    "weighted_rms_us", "excluded_toas",
                                                    "fitted", "converged")}
    return {"source": (report or {}).get("source") or os.path.basename(os.path.abspath(outdir)),
            "count": n, "columns": columns, "summary": summary, "thin_above": THIN_ABOVE,
            "frequency_hz": float(np.median(ratio)) if ratio.size else None,
            "epochs": _epochs(outdir, glitches),
            "warnings": list((report or {}).get("warnings", []))}


def _plot_document(data: dict):
    """The Bokeh plot (empty data source; the page's script fills it) and the
    script and div that embed it."""
    from bokeh.embed import components
    from bokeh.events import DocumentReady, RangesUpdate, SelectionGeometry
    from bokeh.models import (BoxAnnotation, BoxSelectTool, BoxZoomTool, ColumnDataSource,
                              CustomJS, HoverTool, LassoSelectTool, PanTool, Range1d,
                              Span, WheelZoomTool)
    from bokeh.plotting import figure

    empty = {k: [] for k in ("x", "y", "low", "high", "fill", "edge", "fill_alpha", "bar_alpha")}
    source = ColumnDataSource(data=empty, name="toas")
    plot = figure(output_backend="webgl", sizing_mode="stretch_both", toolbar_location=None,
                  x_range=Range1d(0, 1), y_range=Range1d(-1, 1), name="residual_plot",
                  background_fill_color="#fbfaf6", border_fill_color="#fbfaf6",
                  outline_line_color="#c9c2b2", min_border_left=70, min_border_bottom=50,
                  min_border_top=22 if data["epochs"] else 10)
    plot.grid.grid_line_color = "#e6e0d4"
    for axis in (plot.xaxis[0], plot.yaxis[0]):
        axis.axis_line_color = axis.major_tick_line_color = "#8a8272"
        axis.minor_tick_line_color = None
        axis.major_label_text_color = axis.axis_label_text_color = "#3b362c"
        axis.axis_label_text_font_style = "normal"
    plot.xaxis[0].formatter.use_scientific = False
    plot.yaxis[0].formatter.power_limit_low = -5      # 0.002 turns, not 2.000e-3
    bars = plot.segment("x", "low", "x", "high", source=source, line_color="edge", line_width=1.2,
                        line_alpha="bar_alpha", name="error_bars")
    points = plot.scatter("x", "y", source=source, size=6, fill_color="fill", line_color="edge",
                          fill_alpha="fill_alpha", line_width=1.2, name="toa_points")
    points.nonselection_glyph = None
    points.selection_glyph = None
    zero = Span(location=0, dimension="width", line_color="#8a8272", line_width=1)
    plot.add_layout(zero)
    marks = []
    for mark in data["epochs"]:
        colour = "#8c2d04" if mark["kind"] == "model" else "#3f007d"
        line = Span(location=mark["mjd"], dimension="height", line_color=colour, line_width=2,
                    line_dash="solid" if mark["kind"] == "model" else "dashed")
        band = None
        if mark.get("low") is not None and mark.get("high") is not None:
            band = BoxAnnotation(left=mark["low"], right=mark["high"], fill_color=colour,
                                 fill_alpha=0.08, line_color=None)
            plot.add_layout(band)
        plot.add_layout(line)
        marks.append([line, band])       # the labels are the page's, above the plot (explorer.js)
    tools = {"pan": PanTool(), "zoom": BoxZoomTool(), "box": BoxSelectTool(renderers=[points]),
             "lasso": LassoSelectTool(renderers=[points]), "wheel": WheelZoomTool()}
    hover = HoverTool(renderers=[points], tooltips=None,
                      callback=CustomJS(code="window.timingkitExplorer.hover(cb_data);"))
    plot.add_tools(*tools.values(), hover)
    plot.toolbar.active_drag = tools["box"]
    plot.toolbar.active_scroll = tools["wheel"]
    plot.js_on_event(SelectionGeometry, CustomJS(
        code="window.timingkitExplorer.selected(cb_obj.geometry, cb_obj.final);"))
    plot.js_on_event(RangesUpdate, CustomJS(code="window.timingkitExplorer.viewChanged();"))
    from bokeh.document import Document
    document = Document()
    document.add_root(plot)
    document.js_on_event(DocumentReady, CustomJS(
        args=dict(source=source, plot=plot, tools=tools, marks=marks, bars=bars),
        code="window.timingkitExplorer.start({source, plot, tools, marks, bars});"))
    return components(plot)


def _asset(name: str) -> str:
    return resources.files("timingkit.outputs").joinpath("explorer_assets", name).read_text(
        encoding="utf-8")


def render_explorer_html(data: dict) -> str:
    """The whole page as text."""
    from bokeh.resources import Resources
    script, div = _plot_document(data)
    bokeh_js = Resources(mode="inline", components=list(BOKEH_COMPONENTS)).render_js()
    # no '<' inside the script element: the JSON holds text such as flags and reasons
    payload = json.dumps(data, separators=(",", ":")).replace("<", "\\u003c")
    body = _asset("explorer_body.html").replace("{{PLOT}}", div)
    body = body.replace("{{SOURCE}}", html.escape(data["source"]))
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f"<title>{html.escape(data['source'])}: residual explorer</title>\n"
            f"<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
            f"<style>\n{_asset('explorer.css')}</style>\n{bokeh_js}\n"
            f"<script type=\"application/json\" id=\"timingkit-data\">{payload}</script>\n"
            f"<script>\n{_asset('explorer.js')}</script>\n</head>\n<body>\n{body}\n"
            f"{script}\n</body>\n</html>\n")


def write_explorer(outdir: str, path: str | None = None) -> str:
    """Write explorer.html (default ``outdir/explorer.html``) atomically, holding the lock
    of ``outdir`` (outputs.folder_lock); returns its path."""
    path = path or os.path.join(outdir, EXPLORER_FILE)
    _residuals_path(outdir)       # a folder that is not a fit's: refused before locking it
    with lock_output(outdir):     # no run replaces the folder while it is read and written
        text = render_explorer_html(explorer_data(outdir))
        with atomic_output(path) as handle:
            handle.write(text)
    return path
