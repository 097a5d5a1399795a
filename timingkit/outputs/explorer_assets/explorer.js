/* timingkit residual explorer: the page's own controls around one Bokeh plot.
   The data come from <script id="timingkit-data"> (base64 typed arrays, MJD text);
   Bokeh calls start() when its document is ready, hover() on hover, selected()
   with the geometry of a box or lasso and viewChanged() after a pan or zoom.
   Above data.thin_above TOAs the plot holds, for each CELL_PX-pixel cell of the
   view (and MARGIN of a view around it, for panning), only the TOA drawn on top
   there (the last one, as a full drawing would show it): the picture is the
   same, the browser draws a fraction of the points. Selections and hover
   always test every TOA. */
(function () {
  'use strict';
  var PALETTE = ['#1f6f8b', '#d1495b', '#e8a33d', '#5a8f29', '#7d5ba6', '#2b9e9e',
                 '#b5651d', '#44546a', '#c06c84', '#8a9a2c'];
  var LEFT_IN_FIT = '#6b6457', LEFT_HERE = '#b3261e';
  var KEPT = 0, OUT_IN_FIT = 1, OUT_HERE = 2;
  var X_LABELS = {mjd: 'MJD (days)', doy: 'day of year (1 = 1 January 0h UTC)',
                  orbit: 'orbital phase (turns)', freq: 'observing frequency (MHz)',
                  err: 'TOA error (µs)'};
  var Y_LABELS = {us: 'residual (µs)', phase: 'residual (pulse turns)',
                  sigma: 'residual / error'};
  var CELL_PX = 4, MARGIN = 0.25, HOVER_PX = 5;
  var data = null, bk = null, ready = false;
  var reasons = null, origin = null, history = [];
  var full = null, drawn = null, thinTimer = null, pendingHover = null;

  function byId(id) { return document.getElementById(id); }

  function decode(b64, Type) {
    var text = atob(b64), bytes = new Uint8Array(text.length);
    for (var i = 0; i < text.length; i++) bytes[i] = text.charCodeAt(i);
    return new Type(bytes.buffer);
  }

  function coded(entry) {
    var Type = entry.wide ? Uint32Array : Uint16Array;   /* wide: over 65,536 levels */
    return {levels: entry.levels, codes: decode(entry.codes, Type)};
  }

  function dayOfYear(mjd) {
    var out = new Float64Array(mjd.length);
    for (var i = 0; i < mjd.length; i++) {
      var ms = (mjd[i] - 40587) * 86400000, year = new Date(ms).getUTCFullYear();
      out[i] = (ms - Date.UTC(year, 0, 1)) / 86400000 + 1;
    }
    return out;
  }

  function load() {
    var raw = JSON.parse(byId('timingkit-data').textContent), c = raw.columns;
    var d = {source: raw.source, n: raw.count, summary: raw.summary, epochs: raw.epochs,
             thinAbove: raw.thin_above,
             warnings: raw.warnings, frequencyHz: raw.frequency_hz,
             mjdText: c.mjd_text ? c.mjd_text.split(' ') : [],
             line: decode(c.line, Int32Array), pulse: decode(c.pulse, Float64Array),
             freq: decode(c.freq_mhz, Float32Array), err: decode(c.err_us, Float32Array),
             site: coded(c.site), flags: {}, leftOut: coded(c.left_out),
             post: {us: decode(c.post_us, Float32Array), phase: decode(c.post_phase, Float32Array)},
             pre: c.pre_us ? {us: decode(c.pre_us, Float32Array),
                              phase: decode(c.pre_phase, Float32Array)} : null,
             orbit: c.orbital_phase ? decode(c.orbital_phase, Float32Array) : null};
    Object.keys(c.flags).forEach(function (name) { d.flags[name] = coded(c.flags[name]); });
    d.mjd = new Float64Array(d.n);
    for (var i = 0; i < d.n; i++) d.mjd[i] = parseFloat(d.mjdText[i]);
    d.doy = dayOfYear(d.mjd);
    return d;
  }

  function category(name) { return name === 'site' ? data.site : data.flags[name]; }

  function view() {
    return {stage: byId('tk-stage').value, y: byId('tk-y').value, x: byId('tk-x').value,
            colour: byId('tk-colour').value, bars: byId('tk-bars').checked,
            epochs: byId('tk-epochs').checked};
  }

  function xValues(choice) {
    var src = {mjd: data.mjd, doy: data.doy, orbit: data.orbit, freq: data.freq,
               err: data.err}[choice];
    var x = new Float64Array(data.n);
    for (var i = 0; i < data.n; i++) x[i] = isFinite(src[i]) ? src[i] : NaN;
    return x;
  }

  function yValues(v) {
    var res = (v.stage === 'pre' && data.pre) ? data.pre : data.post;
    var y = new Float64Array(data.n), bar = new Float64Array(data.n);
    var turnsPerUs = (data.frequencyHz || 0) * 1e-6;
    for (var i = 0; i < data.n; i++) {
      if (v.y === 'us') { y[i] = res.us[i]; bar[i] = 2 * data.err[i]; }
      else if (v.y === 'phase') { y[i] = res.phase[i]; bar[i] = 2 * data.err[i] * turnsPerUs; }
      else { y[i] = res.us[i] / data.err[i]; bar[i] = 2; }
    }
    return {y: y, bar: bar};
  }

  function styleColumns(v) {
    var cat = category(v.colour), n = data.n;
    var fill = new Array(n), edge = new Array(n);
    var fillAlpha = new Float64Array(n), barAlpha = new Float64Array(n);
    for (var i = 0; i < n; i++) {
      var colour = PALETTE[cat.codes[i] % PALETTE.length];
      if (origin[i] === KEPT) {
        fill[i] = colour; edge[i] = colour; fillAlpha[i] = 0.8; barAlpha[i] = v.bars ? 0.35 : 0;
      } else {
        fill[i] = colour; edge[i] = origin[i] === OUT_HERE ? LEFT_HERE : LEFT_IN_FIT;
        fillAlpha[i] = 0; barAlpha[i] = v.bars ? 0.15 : 0;
      }
    }
    return {fill: fill, edge: edge, fill_alpha: fillAlpha, bar_alpha: barAlpha};
  }

  function extent(values, lo, hi) {
    if (lo !== undefined) return [lo, hi];
    var min = Infinity, max = -Infinity;
    for (var i = 0; i < values.length; i++) {
      if (values[i] < min) min = values[i];
      if (values[i] > max) max = values[i];
    }
    if (!isFinite(min)) return [0, 1];
    var pad = (max - min) * 0.04 || Math.abs(max) * 0.05 || 1;
    return [min - pad, max + pad];
  }

  function withBars(y, bar) {
    var out = new Float64Array(2 * y.length);
    for (var i = 0; i < y.length; i++) { out[2 * i] = y[i] - bar[i] / 2; out[2 * i + 1] = y[i] + bar[i] / 2; }
    return out;
  }

  function redraw(refit) {
    var v = view(), x = xValues(v.x), yb = yValues(v);
    full = styleColumns(v);
    full.x = x; full.y = yb.y;
    full.low = new Float64Array(data.n); full.high = new Float64Array(data.n);
    for (var i = 0; i < data.n; i++) {
      full.low[i] = yb.y[i] - yb.bar[i] / 2; full.high[i] = yb.y[i] + yb.bar[i] / 2;
    }
    bk.plot.below[0].axis_label = X_LABELS[v.x];
    bk.plot.left[0].axis_label = Y_LABELS[v.y];
    bk.bars.visible = v.bars;
    bk.marks.forEach(function (m) {
      var show = v.epochs && v.x === 'mjd';
      m[0].visible = show; if (m[1]) m[1].visible = show;
    });
    if (refit) {
      var xr = v.x === 'orbit' ? extent(x, 0, 1) : v.x === 'doy' ? extent(x, 1, 367) : extent(x);
      var yr = extent(v.bars ? withBars(yb.y, yb.bar) : yb.y);
      bk.plot.x_range.setv({start: xr[0], end: xr[1]});
      bk.plot.y_range.setv({start: yr[0], end: yr[1]});
    }
    publish();
    placeEpochLabels();
    drawKey(v);
  }

  /* The epoch labels: short texts in the margin just above the data area, where they
     cover no TOA (a label drawn by the plot is clipped to the data area), with the long
     form on hover and in the key. Labels of epochs outside the view are not shown. */
  function placeEpochLabels() {
    var layer = byId('tk-epoch-labels'), v = view(), f = frame();
    var host = byId('tk-plot-host').getBoundingClientRect();
    var lo = Math.min(f.x[0], f.x[1]), hi = Math.max(f.x[0], f.x[1]);
    layer.textContent = '';
    if (!(v.epochs && v.x === 'mjd')) return;
    data.epochs.forEach(function (mark) {
      if (!(mark.mjd >= lo && mark.mjd <= hi)) return;
      var label = document.createElement('span');
      label.className = 'tk-epoch-label tk-' + mark.kind;
      label.textContent = mark.short;
      label.title = mark.label + ' at MJD ' + number(mark.mjd);
      label.style.left = (f.left - host.left + (mark.mjd - f.x[0]) / (f.x[1] - f.x[0]) * f.width) + 'px';
      label.style.top = (f.top - host.top) + 'px';
      layer.appendChild(label);
    });
  }

  function plotView() {
    var found = null;
    Object.keys(Bokeh.index).forEach(function (id) {
      if (Bokeh.index[id].model === bk.plot) found = Bokeh.index[id];
    });
    return found;
  }

  /* The TOAs the plot holds: all, or the top one per cell above thinAbove. */
  function chooseDrawn() {
    var n = data.n;
    if (n <= data.thinAbove) {
      if (!drawn || drawn.length !== n) { drawn = new Int32Array(n); for (var i = 0; i < n; i++) drawn[i] = i; }
      return;
    }
    var box = plotView().frame.bbox, xr = bk.plot.x_range, yr = bk.plot.y_range;
    var wx = xr.end - xr.start, wy = yr.end - yr.start;
    var grow = 1 + 2 * MARGIN, x0 = xr.start - MARGIN * wx, y0 = yr.start - MARGIN * wy;
    var nx = Math.max(1, Math.ceil(grow * box.width / CELL_PX));
    var ny = Math.max(1, Math.ceil(grow * box.height / CELL_PX));
    var top = new Int32Array(2 * nx * ny).fill(-1);
    for (var i = 0; i < n; i++) {
      var cx = Math.floor((full.x[i] - x0) / (grow * wx) * nx);
      var cy = Math.floor((full.y[i] - y0) / (grow * wy) * ny);
      if (!(cx >= 0 && cx < nx && cy >= 0 && cy < ny)) continue;     /* also drops NaN */
      top[((origin[i] === KEPT ? 0 : 1) * ny + cy) * nx + cx] = i;
    }
    var picked = [];
    for (var k = 0; k < top.length; k++) if (top[k] >= 0) picked.push(top[k]);
    drawn = Int32Array.from(picked).sort();
  }

  function publish() {
    chooseDrawn();
    var m = drawn.length, columns = {};
    ['x', 'y', 'low', 'high', 'fill_alpha', 'bar_alpha'].forEach(function (name) {
      var out = new Float64Array(m), src = full[name];
      for (var k = 0; k < m; k++) out[k] = src[drawn[k]];
      columns[name] = out;
    });
    ['fill', 'edge'].forEach(function (name) {
      var out = new Array(m), src = full[name];
      for (var k = 0; k < m; k++) out[k] = src[drawn[k]];
      columns[name] = out;
    });
    bk.source.data = columns;
  }

  function viewChanged() {
    if (ready) placeEpochLabels();
    if (!ready || data.n <= data.thinAbove) return;
    clearTimeout(thinTimer);
    thinTimer = setTimeout(publish, 120);
  }

  function drawKey(v) {
    var cat = category(v.colour), key = byId('tk-key'), html = [];
    cat.levels.forEach(function (level, k) {
      var colour = PALETTE[k % PALETTE.length];
      html.push('<span style="--dot:' + colour + '">' + escapeHtml(level || '(empty)') + '</span>');
    });
    html.push('<span class="tk-hollow" style="--ring:' + LEFT_IN_FIT + '">left out in the fit</span>');
    html.push('<span class="tk-hollow" style="--ring:' + LEFT_HERE + '">marked here</span>');
    if (v.epochs && v.x === 'mjd') {
      data.epochs.forEach(function (mark) {
        html.push('<span class="tk-epoch tk-' + mark.kind + '">' + escapeHtml(mark.label) +
                  ' at MJD ' + number(mark.mjd) + '</span>');
      });
    }
    key.innerHTML = html.join('');
  }

  function escapeHtml(text) {
    return String(text).replace(/[&<>"']/g, function (ch) {
      return {'&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;', "'": '&#39;'}[ch];
    });
  }

  function count(value) { return Number(value).toLocaleString('en-GB'); }

  function number(value) {
    if (!isFinite(value)) return value > 0 ? 'inf' : String(value);
    return String(Number(value.toPrecision(6)));
  }

  function rows(i) {
    var list = [['MJD', data.mjdText[i]], ['line', data.line[i] || 'unknown'],
                ['site', data.site.levels[data.site.codes[i]]],
                ['frequency', number(data.freq[i]) + ' MHz'], ['error', number(data.err[i]) + ' µs'],
                ['post-fit', number(data.post.us[i]) + ' µs = ' + number(data.post.phase[i]) + ' turns'],
                ['post-fit / error', number(data.post.us[i] / data.err[i])]];
    if (data.pre) list.push(['pre-fit', number(data.pre.us[i]) + ' µs']);
    list.push(['pulse number', String(data.pulse[i])]);
    if (data.orbit) list.push(['orbital phase', number(data.orbit[i])]);
    Object.keys(data.flags).forEach(function (name) {
      var f = data.flags[name];
      list.push([name, f.levels[f.codes[i]]]);
    });
    return list;
  }

  /* The TOA nearest the pointer among all TOAs, drawn or not (thinning hides
     some under their neighbours), and how many others lie within HOVER_PX. */
  function nearest(x, y) {
    var box = plotView().frame.bbox, xr = bk.plot.x_range, yr = bk.plot.y_range;
    var kx = box.width / (xr.end - xr.start), ky = box.height / (yr.end - yr.start);
    var best = -1, bestD2 = HOVER_PX * HOVER_PX, within = 0, fx = full.x, fy = full.y;
    for (var i = 0; i < data.n; i++) {
      var dx = (fx[i] - x) * kx, dy = (fy[i] - y) * ky, d2 = dx * dx + dy * dy;
      if (d2 <= HOVER_PX * HOVER_PX) {
        within++;
        if (d2 <= bestD2) { best = i; bestD2 = d2; }   /* ties: the later one, drawn on top */
      }
    }
    return {index: best, others: Math.max(0, within - 1)};
  }

  /* Bokeh reports every pointer move; the search runs once per frame. */
  function hover(cbData) {
    if (!ready) return;
    var first = pendingHover === null;
    pendingHover = cbData.geometry;
    if (first) requestAnimationFrame(showCard);
  }

  function showCard() {
    var g = pendingHover, card = byId('tk-card');
    pendingHover = null;
    var near = isFinite(g.sx + g.sy) ? nearest(g.x, g.y) : {index: -1};
    if (near.index < 0) { card.hidden = true; return; }
    var i = near.index;
    var html = '<dl>' + rows(i).map(function (r) {
      return '<dt>' + escapeHtml(r[0]) + '</dt><dd>' + escapeHtml(r[1]) + '</dd>';
    }).join('') + '</dl>';
    if (origin[i] !== KEPT) {
      html += '<p class="tk-out">left out: ' + escapeHtml(reasons[i]) +
              (origin[i] === OUT_HERE ? ' (marked here)' : ' (in the fit)') + '</p>';
    }
    if (near.others) {
      html += '<p>' + count(near.others) + ' more TOA(s) within ' + HOVER_PX + ' pixels</p>';
    }
    card.innerHTML = html;
    card.hidden = false;
    var host = byId('tk-plot-host'), w = host.clientWidth, h = host.clientHeight;
    var left = g.sx + 16, top = g.sy + 16;
    if (left + card.offsetWidth > w) left = g.sx - card.offsetWidth - 16;
    if (top + card.offsetHeight > h) top = Math.max(0, g.sy - card.offsetHeight - 16);
    card.style.left = left + 'px';
    card.style.top = top + 'px';
  }

  /* The TOAs (every one, drawn or not) inside a box or lasso in data coordinates. */
  function inside(geometry) {
    var hits = [], x = full.x, y = full.y, i;
    if (geometry.type === 'rect') {
      var xa = Math.min(geometry.x0, geometry.x1), xb = Math.max(geometry.x0, geometry.x1);
      var ya = Math.min(geometry.y0, geometry.y1), yb = Math.max(geometry.y0, geometry.y1);
      for (i = 0; i < data.n; i++) {
        if (x[i] >= xa && x[i] <= xb && y[i] >= ya && y[i] <= yb) hits.push(i);
      }
    } else if (geometry.type === 'poly') {
      var px = geometry.x, py = geometry.y, m = px.length;
      for (i = 0; i < data.n; i++) {
        var odd = false;
        for (var a = 0, b = m - 1; a < m; b = a++) {
          if ((py[a] > y[i]) !== (py[b] > y[i]) &&
              x[i] < (px[b] - px[a]) * (y[i] - py[a]) / (py[b] - py[a]) + px[a]) odd = !odd;
        }
        if (odd) hits.push(i);
      }
    }
    return hits;
  }

  function selected(geometry, final) {
    if (!ready || !final) return;
    var indices = inside(geometry);
    bk.source.selected.indices = [];
    if (!indices.length) return;
    var leave = document.querySelector('input[name="tk-mode"]:checked').value === 'leave';
    var reason = byId('tk-reason').value.trim() || 'marked in the explorer';
    var change = {indices: Array.prototype.slice.call(indices), reasons: [], origin: []};
    change.indices.forEach(function (i) {
      change.reasons.push(reasons[i]); change.origin.push(origin[i]);
      if (leave && origin[i] === KEPT) { reasons[i] = reason; origin[i] = OUT_HERE; }
      else if (!leave) { reasons[i] = ''; origin[i] = KEPT; }
    });
    history.push(change);
    redraw(false);
    ledger();
  }

  function undo() {
    var change = history.pop();
    if (!change) return;
    change.indices.forEach(function (i, k) {
      reasons[i] = change.reasons[k]; origin[i] = change.origin[k];
    });
    redraw(false);
    ledger();
  }

  function counts() {
    var out = {inFit: 0, here: 0, byReason: {}};
    for (var i = 0; i < data.n; i++) {
      if (origin[i] === KEPT) continue;
      if (origin[i] === OUT_HERE) out.here++; else out.inFit++;
      out.byReason[reasons[i]] = (out.byReason[reasons[i]] || 0) + 1;
    }
    return out;
  }

  function ledger() {
    var c = counts(), total = c.inFit + c.here;
    byId('tk-count').textContent = count(total) + ' of ' + count(data.n) + ' TOAs left out: ' +
      count(c.inFit) + ' already in the fit, ' + count(c.here) + ' marked here';
    byId('tk-reasons').innerHTML = Object.keys(c.byReason).map(function (r) {
      return '<li>' + escapeHtml(r) + ': ' + c.byReason[r] + '</li>';
    }).join('');
    byId('tk-undo').disabled = history.length === 0;
    byId('tk-download').disabled = total === 0;
    byId('tk-hint').innerHTML = 'Fit again without them: <code>timingkit fit TOAS MODEL ' +
      '--exclude ' + escapeHtml(fileName()) + '</code> (the list names each TOA by its line ' +
      'and exact MJD; the TOA table itself is never changed).';
  }

  function fileName() { return data.source.replace(/[^A-Za-z0-9._+-]/g, '_') + '-left-out.txt'; }

  function exclusionText() {
    var table = [['line', 'mjd', 'site', 'reason']];
    for (var i = 0; i < data.n; i++) {
      if (origin[i] === KEPT) continue;
      table.push([data.line[i] ? String(data.line[i]) : '-', data.mjdText[i],
                  data.site.levels[data.site.codes[i]], reasons[i] || '-']);
    }
    var widths = [0, 1, 2].map(function (k) {
      return Math.max.apply(null, table.map(function (r) { return r[k].length; }));
    });
    var lines = ['# TOAs left out of the fit of ' + data.source + ': ' + (table.length - 1) +
                 ' of ' + data.n + ', written by the timingkit explorer on ' +
                 new Date().toISOString().slice(0, 10),
                 '# use with: timingkit fit TOAS MODEL --exclude ' + fileName()];
    table.forEach(function (r) {
      lines.push(r.slice(0, 3).map(function (cell, k) {
        return cell + ' '.repeat(widths[k] - cell.length);
      }).join('  ') + '  ' + r[3]);
    });
    return lines.join('\n') + '\n';
  }

  function download() {
    var blob = new Blob([exclusionText()], {type: 'text/plain'});
    var link = document.createElement('a');
    link.href = URL.createObjectURL(blob);
    link.download = fileName();
    document.body.appendChild(link);
    link.click();
    setTimeout(function () { URL.revokeObjectURL(link.href); link.remove(); }, 1000);
  }

  function chooseTool(button) {
    document.querySelectorAll('.tk-gestures button[data-tool]').forEach(function (b) {
      b.classList.toggle('on', b === button);
    });
    bk.plot.toolbar.active_drag = bk.tools[button.getAttribute('data-tool')];
  }

  function facts() {
    var s = data.summary || {}, parts = [count(data.n) + ' TOAs'];
    if (s.toas !== undefined && s.toas !== null && s.toas !== data.n) parts.push(count(s.toas) + ' fitted');
    if (s.rms_us !== undefined && s.rms_us !== null) parts.push('rms ' + Number(s.rms_us).toPrecision(4) + ' µs');
    if (s.reduced_chi2 !== undefined && s.reduced_chi2 !== null) {
      parts.push('reduced chi-square ' + Number(s.reduced_chi2).toFixed(3));
    }
    if (s.fitted === false) parts.push('model as given (no fit)');
    if (s.converged === false) parts.push('fit NOT CONVERGED: the residuals of its last step');
    byId('tk-facts').textContent = parts.join(' · ');
    byId('tk-foot').innerHTML = (data.warnings || []).map(function (w) {
      return '<p>warning: ' + escapeHtml(w) + '</p>';
    }).join('') + (data.n > data.thinAbove ? '<p>With ' + count(data.n) + ' TOAs the plot draws ' +
      'the TOA on top in each ' + CELL_PX + '-pixel cell of the view (what a full drawing ' +
      'would show); hover shows the TOA nearest the pointer and selections take every TOA ' +
      'inside, drawn or not.</p>' : '') +
      '<p>Values are shown to 6 significant digits; residuals.csv holds the ' +
      'exact ones. Day of year and glitch epochs are approximate to a minute (UTC and TDB).</p>';
  }

  function controls() {
    var colour = byId('tk-colour');
    ['site'].concat(Object.keys(data.flags)).forEach(function (name) {
      var option = document.createElement('option');
      option.value = name; option.textContent = name;
      colour.appendChild(option);
    });
    if (!data.pre) byId('tk-stage').querySelector('option[value=pre]').disabled = true;
    if ((data.summary || {}).fitted === false) {
      byId('tk-stage').querySelector('option[value=post]').textContent = 'unfitted model’s';
    }
    if (!data.orbit) byId('tk-x').querySelector('option[value=orbit]').disabled = true;
    if (!data.epochs.length) byId('tk-epochs-label').hidden = true;
    if (data.n > data.thinAbove) byId('tk-bars').checked = false;   /* drawing them costs most */
    ['tk-stage', 'tk-y', 'tk-x'].forEach(function (id) {
      byId(id).addEventListener('change', function () { redraw(true); });
    });
    ['tk-colour', 'tk-bars', 'tk-epochs'].forEach(function (id) {
      byId(id).addEventListener('change', function () { redraw(false); });
    });
    document.querySelectorAll('.tk-gestures button[data-tool]').forEach(function (b) {
      b.addEventListener('click', function () { chooseTool(b); });
    });
    byId('tk-fit-view').addEventListener('click', function () { redraw(true); });
    byId('tk-undo').addEventListener('click', undo);
    byId('tk-download').addEventListener('click', download);
    byId('tk-plot-host').addEventListener('mouseleave', function () { byId('tk-card').hidden = true; });
  }

  function noFocusRing() {   /* Bokeh's event layer (in its shadow DOM) outlines itself on focus */
    (function walk(root) {
      root.querySelectorAll('*').forEach(function (el) {
        if (el.classList.contains('bk-events')) el.style.outline = 'none';
        if (el.shadowRoot) walk(el.shadowRoot);
      });
    })(byId('tk-plot-host'));
  }

  function start(models) {
    bk = models;
    data = load();
    reasons = new Array(data.n);
    origin = new Uint8Array(data.n);
    for (var i = 0; i < data.n; i++) {
      reasons[i] = data.leftOut.levels[data.leftOut.codes[i]];
      origin[i] = reasons[i] ? OUT_IN_FIT : KEPT;
    }
    controls();
    facts();
    redraw(true);
    ledger();
    ready = true;
    if (window.ResizeObserver) {     /* the data area moves with the window: so do the labels */
      new ResizeObserver(function () {
        requestAnimationFrame(function () { requestAnimationFrame(placeEpochLabels); });
      }).observe(byId('tk-plot-host'));
    }
    requestAnimationFrame(noFocusRing);
    document.body.setAttribute('data-explorer', 'ready');
  }

  /* For scripts (and the browser test): the state, and the plot's frame in
     page pixels with its data ranges, to aim a selection. */
  function status() {
    var c = counts();
    return {toas: data.n, points: bk.source.data.x.length, thinned: data.n > data.thinAbove,
            leftOut: c.inFit + c.here,
            inFit: c.inFit, markedHere: c.here, exclusionList: exclusionText()};
  }

  function frame() {
    var pv = plotView(), box = pv.frame.bbox, canvas = pv.el.getBoundingClientRect();
    return {left: canvas.left + box.left, top: canvas.top + box.top, width: box.width,
            height: box.height, x: [bk.plot.x_range.start, bk.plot.x_range.end],
            y: [bk.plot.y_range.start, bk.plot.y_range.end]};
  }

  window.timingkitExplorer = {start: start, hover: hover, selected: selected, status: status,
                              viewChanged: viewChanged, frame: frame};
})();
