/* kinetics live page: draws the run's data (see kinetics/livepage/data.py) as SVG and
   keeps it current without reloading the page.  Served over HTTP it fetches live.json;
   opened as a file it re-loads live-data.js (which sets window.kineticsLiveData) through
   a new script tag with a cache-busting query.  All text from the data is set with
   textContent, never parsed as markup.  No network access beyond those two files. */
(function () {
  "use strict";

  var NS = document.getElementById("courses").namespaceURI; // the SVG namespace, from the page itself
  var page = window.kineticsLivePage = { updates: 0, lastError: null, data: null };

  function byId(id) { return document.getElementById(id); }
  function setText(id, text) { var el = byId(id); if (el) { el.textContent = text; } return el; }
  function svgEl(tag, attrs, parent) {
    var el = document.createElementNS(NS, tag);
    for (var key in attrs) { if (attrs[key] !== null && attrs[key] !== undefined) { el.setAttribute(key, attrs[key]); } }
    if (parent) { parent.appendChild(el); }
    return el;
  }
  function htmlEl(tag, className, text, parent) {
    var el = document.createElement(tag);
    if (className) { el.className = className; }
    if (text !== undefined && text !== null) { el.textContent = text; }
    if (parent) { parent.appendChild(el); }
    return el;
  }
  function finite(v) { return typeof v === "number" && isFinite(v); }

  // ------------------------------------------------------------ numbers and times
  function niceStep(span, count) {
    var raw = span / Math.max(count, 1), mag = Math.pow(10, Math.floor(Math.log10(raw))), f = raw / mag;
    return (f < 1.5 ? 1 : f < 3.5 ? 2 : f < 7.5 ? 5 : 10) * mag;
  }
  function ticks(lo, hi, count) {
    if (!(hi > lo)) { return { values: [lo], step: 1 }; }
    var step = niceStep(hi - lo, count), out = [];
    for (var v = Math.ceil(lo / step) * step; v <= hi + step * 1e-9; v += step) { out.push(Math.abs(v) < step * 1e-9 ? 0 : v); }
    return { values: out, step: step };
  }
  function tickText(v, step) {
    var decimals = Math.max(0, Math.min(8, -Math.floor(Math.log10(step) + 1e-9)));
    return v.toFixed(decimals).replace("-", "\u2212");
  }
  function sig(v, digits) {
    if (!finite(v)) { return "\u2013"; }
    var text = Number(v.toPrecision(digits || 4)).toString();
    return text.replace("-", "\u2212");
  }
  // the figures' rule (kinetics.plots): time in s below 3 min, in min below 3 h, else in h
  function timeScale(maxS) { return maxS >= 3 * 3600 ? { div: 3600, unit: "h" } : maxS >= 180 ? { div: 60, unit: "min" } : { div: 1, unit: "s" }; }
  function clock(iso) {
    if (!iso) { return null; }
    var moment = new Date(iso);
    if (isNaN(moment.getTime())) { return null; }
    var text = moment.toLocaleTimeString([], { hour: "2-digit", minute: "2-digit", hourCycle: "h23" });
    if (moment.toDateString() !== new Date().toDateString()) {
      text = moment.toLocaleDateString([], { day: "numeric", month: "short" }) + " " + text;
    }
    return text;
  }
  function duration(seconds) {
    if (!finite(seconds)) { return "\u2013"; }
    var s = Math.abs(seconds);
    if (s < 180) { return Math.round(seconds) + " s"; }
    if (s < 3 * 3600) { return (seconds / 60).toFixed(1) + " min"; }
    return (seconds / 3600).toFixed(2) + " h";
  }

  // ------------------------------------------------------------ markers (kinetics.plots styles)
  function markerPath(kind, r) {
    var a = r * 0.42;
    switch (kind) {
      case "s": return "M" + -r * 0.85 + "," + -r * 0.85 + "h" + 1.7 * r + "v" + 1.7 * r + "h" + -1.7 * r + "Z";
      case "^": return "M0," + -r + "L" + r + "," + r * 0.8 + "L" + -r + "," + r * 0.8 + "Z";
      case "v": return "M0," + r + "L" + r + "," + -r * 0.8 + "L" + -r + "," + -r * 0.8 + "Z";
      case "D": return "M0," + -r * 1.1 + "L" + r * 0.8 + ",0L0," + r * 1.1 + "L" + -r * 0.8 + ",0Z";
      case "P": return "M" + -a + "," + -r + "h" + 2 * a + "v" + (r - a) + "h" + (r - a) + "v" + 2 * a + "h" + (a - r) +
        "v" + (r - a) + "h" + -2 * a + "v" + (a - r) + "h" + (a - r) + "v" + -2 * a + "h" + (r - a) + "Z";
      case "X": return "M" + -r + "," + (a - r) + "L" + (a - r) + "," + -r + "L0," + -a + "L" + (r - a) + "," + -r + "L" + r + "," + (a - r) +
        "L" + a + ",0L" + r + "," + (r - a) + "L" + (r - a) + "," + r + "L0," + a + "L" + (a - r) + "," + r + "L" + -r + "," + (r - a) + "L" + -a + ",0Z";
      default: return "M" + -r + ",0a" + r + "," + r + " 0 1,0 " + 2 * r + ",0a" + r + "," + r + " 0 1,0 " + -2 * r + ",0Z";
    }
  }
  function marker(parent, kind, x, y, colour, r) {
    return svgEl("path", { d: markerPath(kind, r || 4), transform: "translate(" + x.toFixed(1) + "," + y.toFixed(1) + ")",
      fill: "#ffffff", stroke: colour, "stroke-width": 1.2, "class": "marker" }, parent);
  }
  function swatch(parent, style, withMarker, withLine, fill) {
    var box = svgEl("svg", { width: 34, height: 14, viewBox: "0 0 34 14", "aria-hidden": "true" }, parent);
    if (fill) { svgEl("rect", { x: 1, y: 2, width: 32, height: 10, fill: fill.colour, "fill-opacity": fill.opacity, stroke: fill.edge || "none" }, box); }
    if (withLine) { svgEl("line", { x1: 1, y1: 7, x2: 33, y2: 7, stroke: style.colour, "stroke-width": style.width || 1.6, "stroke-dasharray": style.dash || null }, box); }
    if (withMarker) { marker(box, style.marker, 17, 7, style.colour, 3.6); }
    return box;
  }

  // ------------------------------------------------------------ a zoomable plot with hover values
  function Plot(svg, options) {
    this.svg = svg; this.options = options; this.zoom = null; this.layers = []; this.domain = null;
    this.margin = { left: 66, right: 14, top: 12, bottom: 46 };
    var self = this;
    svg.addEventListener("mousedown", function (e) { self.startDrag(e); });
    svg.addEventListener("mousemove", function (e) { self.move(e); });
    svg.addEventListener("mouseup", function (e) { self.endDrag(e); });
    svg.addEventListener("mouseleave", function () { self.drag = null; self.hideHover(); if (self.selection) { self.selection.setAttribute("width", 0); } });
    svg.addEventListener("dblclick", function () { self.resetZoom(); });
    if (options.resetButton) { options.resetButton.addEventListener("click", function () { self.resetZoom(); }); }
  }
  Plot.prototype.resetZoom = function () { this.zoom = null; this.draw(); };
  Plot.prototype.view = function () {
    var d = this.domain, z = this.zoom;
    if (!z) { return d; }
    var v = { x0: z.x0, x1: z.x1, y0: z.y0, y1: z.y1 };
    if (v.y0 === null) { var auto = this.visibleY(v.x0, v.x1); v.y0 = auto[0]; v.y1 = auto[1]; }
    return v;
  };
  Plot.prototype.visibleY = function (x0, x1) {
    var lo = Infinity, hi = -Infinity;
    this.layers.forEach(function (layer) {
      if (layer.kind !== "points" && layer.kind !== "line" && layer.kind !== "band") { return; }
      var ys = layer.kind === "band" ? [layer.lo, layer.hi] : [layer.y];
      ys.forEach(function (y) {
        for (var i = 0; i < layer.x.length; i++) {
          if (layer.x[i] >= x0 && layer.x[i] <= x1 && finite(y[i])) { lo = Math.min(lo, y[i]); hi = Math.max(hi, y[i]); }
        }
      });
    });
    if (!(hi > lo)) { return [this.domain.y0, this.domain.y1]; }
    var pad = (hi - lo) * 0.08;
    return [lo - pad, hi + pad];
  };
  Plot.prototype.setData = function (layers, domain, labels) {
    this.layers = layers; this.domain = domain; this.labels = labels; this.draw();
  };
  Plot.prototype.draw = function () {
    var svg = this.svg, m = this.margin, self = this;
    while (svg.firstChild) { svg.removeChild(svg.firstChild); }
    this.hoverables = []; this.traces = [];
    if (this.options.resetButton) { this.options.resetButton.hidden = !this.zoom; }
    var width = Math.max(320, svg.parentNode.clientWidth || 640), height = this.options.height || 340;
    svg.setAttribute("width", width); svg.setAttribute("height", height);
    svg.setAttribute("viewBox", "0 0 " + width + " " + height);
    if (!this.domain) {
      svg.setAttribute("data-points", 0);
      svgEl("text", { x: width / 2, y: height / 2, "text-anchor": "middle", "class": "empty" }, svg).textContent = this.options.empty;
      return;
    }
    var v = this.view(), w = width - m.left - m.right, h = height - m.top - m.bottom, reverse = this.options.reverseX;
    var sx = function (x) { var f = (x - v.x0) / (v.x1 - v.x0); return m.left + (reverse ? 1 - f : f) * w; };
    var sy = function (y) { return m.top + (v.y1 - y) / (v.y1 - v.y0) * h; };
    this.scale = { sx: sx, sy: sy, v: v, w: w, h: h,
      ix: function (px) { var f = (px - m.left) / w; return v.x0 + (reverse ? 1 - f : f) * (v.x1 - v.x0); },
      iy: function (py) { return v.y1 - (py - m.top) / h * (v.y1 - v.y0); } };
    // axes, grid and labels
    var axes = svgEl("g", { "class": "axes" }, svg);
    var xt = ticks(Math.min(v.x0, v.x1), Math.max(v.x0, v.x1), Math.max(3, Math.round(w / 90)));
    xt.values.forEach(function (x) {
      var px = sx(x);
      svgEl("line", { x1: px, x2: px, y1: m.top, y2: m.top + h, "class": "grid" }, axes);
      svgEl("line", { x1: px, x2: px, y1: m.top + h, y2: m.top + h + 4, "class": "tick" }, axes);
      svgEl("text", { x: px, y: m.top + h + 17, "text-anchor": "middle" }, axes).textContent = tickText(x, xt.step);
    });
    var yt = ticks(v.y0, v.y1, Math.max(3, Math.round(h / 55)));
    yt.values.forEach(function (y) {
      var py = sy(y);
      svgEl("line", { x1: m.left, x2: m.left + w, y1: py, y2: py, "class": "grid" }, axes);
      svgEl("line", { x1: m.left - 4, x2: m.left, y1: py, y2: py, "class": "tick" }, axes);
      svgEl("text", { x: m.left - 7, y: py + 4, "text-anchor": "end" }, axes).textContent = tickText(y, yt.step);
    });
    svgEl("line", { x1: m.left, x2: m.left + w, y1: m.top + h, y2: m.top + h, "class": "axis" }, axes);
    svgEl("line", { x1: m.left, x2: m.left, y1: m.top, y2: m.top + h, "class": "axis" }, axes);
    svgEl("text", { x: m.left + w / 2, y: height - 8, "text-anchor": "middle", "class": "label" }, axes).textContent = this.labels.x;
    svgEl("text", { x: 14, y: m.top + h / 2, "text-anchor": "middle", "class": "label",
      transform: "rotate(-90 14 " + (m.top + h / 2) + ")" }, axes).textContent = this.labels.y;
    // data, clipped to the plotting area
    var clipId = svg.id + "-clip";
    svgEl("rect", { x: m.left, y: m.top, width: w, height: h }, svgEl("clipPath", { id: clipId }, svgEl("defs", {}, svg)));
    var data = svgEl("g", { "clip-path": "url(#" + clipId + ")", "class": "data" }, svg);
    var nPoints = 0;
    this.layers.forEach(function (layer) { nPoints += self.drawLayer(data, layer, sx, sy, m, h); });
    svg.setAttribute("data-points", nPoints);
    this.hoverMark = svgEl("circle", { r: 6, "class": "hover-mark", visibility: "hidden" }, svg);
    this.selection = svgEl("rect", { x: 0, y: 0, width: 0, height: 0, "class": "selection" }, svg);
  };
  function pathOf(xs, ys, sx, sy) {
    var d = "", pen = false;
    for (var i = 0; i < xs.length; i++) {
      if (!finite(xs[i]) || !finite(ys[i])) { pen = false; continue; }
      d += (pen ? "L" : "M") + sx(xs[i]).toFixed(1) + "," + sy(ys[i]).toFixed(1);
      pen = true;
    }
    return d;
  }
  Plot.prototype.drawLayer = function (g, layer, sx, sy, m, h) {
    var self = this;
    if (layer.kind === "span") {
      var a = sx(layer.x0), b = sx(layer.x1);
      svgEl("rect", { x: Math.min(a, b), y: m.top, width: Math.abs(b - a), height: h, fill: layer.fill,
        "fill-opacity": layer.opacity, stroke: layer.edge || "none", "stroke-opacity": layer.opacity, "class": layer.cls || null }, g);
      if (layer.label) {
        svgEl("text", { x: (a + b) / 2, y: m.top + 11 + 11 * (layer.row || 0), "text-anchor": "middle", "class": "span-label" }, g).textContent = layer.label;
      }
      return 0;
    }
    if (layer.kind === "band") {
      var top = pathOf(layer.x, layer.hi, sx, sy), okLo = [], okX = [];
      for (var i = layer.x.length - 1; i >= 0; i--) { okX.push(layer.x[i]); okLo.push(layer.lo[i]); }
      var bottom = pathOf(okX, okLo, sx, sy);
      if (top && bottom && top.indexOf("M", 1) < 0 && bottom.indexOf("M", 1) < 0) {
        svgEl("path", { d: top + "L" + bottom.slice(1) + "Z", fill: layer.colour, "fill-opacity": 0.22, stroke: "none", "class": "band" }, g);
      }
      return 0;
    }
    if (layer.kind === "line") {
      svgEl("path", { d: pathOf(layer.x, layer.y, sx, sy), fill: "none", stroke: layer.colour, "stroke-width": layer.width || 1.6,
        "stroke-dasharray": layer.dash || null, "stroke-opacity": layer.opacity || 1, "class": layer.cls || "curve" }, g);
      if (layer.hover) { this.traces.push(layer); }
      return 0;
    }
    if (layer.kind === "vline") {
      var px = sx(layer.x);
      svgEl("line", { x1: px, x2: px, y1: m.top, y2: m.top + h, stroke: layer.colour, "stroke-width": 1.2, "stroke-dasharray": "4 3", "class": "vline" }, g);
      if (layer.label) { svgEl("text", { x: px - 4, y: m.top + 11, "text-anchor": "end", "class": "span-label" }, g).textContent = layer.label; }
      return 0;
    }
    // points with error bars
    var count = 0, errors = svgEl("g", { "class": "errors", stroke: layer.colour, "stroke-width": 0.8 }, g);
    var points = svgEl("g", { "class": "points", "data-series": layer.name }, g);
    for (var j = 0; j < layer.x.length; j++) {
      var x = layer.x[j], y = layer.y[j];
      if (!finite(x) || !finite(y)) { continue; }
      var s = layer.sigma ? layer.sigma[j] : null;
      if (finite(s) && s > 0) { svgEl("line", { x1: sx(x), x2: sx(x), y1: sy(y - s), y2: sy(y + s) }, errors); }
      marker(points, layer.marker, sx(x), sy(y), layer.colour);
      self.hoverables.push({ x: x, y: y, layer: layer, index: j });
      count++;
    }
    return count;
  };
  Plot.prototype.local = function (e) {
    var box = this.svg.getBoundingClientRect();
    return { x: e.clientX - box.left, y: e.clientY - box.top };
  };
  Plot.prototype.inside = function (p) {
    var m = this.margin, s = this.scale;
    return s && p.x >= m.left && p.x <= m.left + s.w && p.y >= m.top && p.y <= m.top + s.h;
  };
  Plot.prototype.startDrag = function (e) {
    var p = this.local(e);
    if (e.button !== 0 || !this.inside(p)) { return; }
    e.preventDefault();
    this.drag = p;
  };
  Plot.prototype.move = function (e) {
    var p = this.local(e);
    if (this.drag) {
      var x = Math.min(p.x, this.drag.x), y = Math.min(p.y, this.drag.y);
      this.selection.setAttribute("x", x); this.selection.setAttribute("y", y);
      this.selection.setAttribute("width", Math.abs(p.x - this.drag.x)); this.selection.setAttribute("height", Math.abs(p.y - this.drag.y));
      this.hideHover();
      return;
    }
    this.hover(p, e);
  };
  Plot.prototype.endDrag = function (e) {
    var start = this.drag;
    this.drag = null;
    if (!start || !this.scale) { return; }
    var p = this.local(e), s = this.scale;
    if (Math.abs(p.x - start.x) < 6) { this.selection.setAttribute("width", 0); return; }
    var xa = s.ix(start.x), xb = s.ix(p.x);
    var zoom = { x0: Math.min(xa, xb), x1: Math.max(xa, xb), y0: null, y1: null };
    if (Math.abs(p.y - start.y) >= 6) { var ya = s.iy(start.y), yb = s.iy(p.y); zoom.y0 = Math.min(ya, yb); zoom.y1 = Math.max(ya, yb); }
    this.zoom = zoom;
    this.draw();
  };
  Plot.prototype.hideHover = function () {
    tooltip.hidden = true;
    if (this.hoverMark) { this.hoverMark.setAttribute("visibility", "hidden"); }
  };
  Plot.prototype.hover = function (p, e) {
    if (!this.scale || !this.inside(p)) { this.hideHover(); return; }
    var s = this.scale, best = null, bestD = 14 * 14;
    this.hoverables.forEach(function (item) {
      var dx = s.sx(item.x) - p.x, dy = s.sy(item.y) - p.y, d = dx * dx + dy * dy;
      if (d < bestD) { bestD = d; best = item; }
    });
    var lines = null, at = null;
    if (best) {
      lines = this.options.pointText(best.layer, best.index);
      at = { x: s.sx(best.x), y: s.sy(best.y) };
    } else if (this.traces.length) {
      var trace = this.traces[this.traces.length - 1], x = s.ix(p.x), i = nearestIndex(trace.x, x);
      if (i >= 0) { lines = this.options.traceText(trace, i); at = { x: s.sx(trace.x[i]), y: s.sy(trace.y[i]) }; }
    }
    if (!lines) { this.hideHover(); return; }
    this.hoverMark.setAttribute("cx", at.x); this.hoverMark.setAttribute("cy", at.y);
    this.hoverMark.setAttribute("visibility", "visible");
    showTooltip(lines, e.clientX, e.clientY);
  };
  function nearestIndex(xs, x) {
    var best = -1, bestD = Infinity;
    for (var i = 0; i < xs.length; i++) { var d = Math.abs(xs[i] - x); if (d < bestD) { bestD = d; best = i; } }
    return best;
  }

  var tooltip = byId("tooltip");
  function showTooltip(lines, cx, cy) {
    while (tooltip.firstChild) { tooltip.removeChild(tooltip.firstChild); }
    lines.forEach(function (line, i) { htmlEl("div", i === 0 ? "tip-head" : null, line, tooltip); });
    tooltip.hidden = false;
    var left = cx + 14, top = cy + 14, box = tooltip.getBoundingClientRect();
    if (left + box.width > window.innerWidth - 4) { left = cx - box.width - 14; }
    if (top + box.height > window.innerHeight - 4) { top = cy - box.height - 14; }
    tooltip.style.left = (left + window.scrollX) + "px";
    tooltip.style.top = (top + window.scrollY) + "px";
  }

  // ------------------------------------------------------------ the two plots
  var unitState = { time: timeScale(0) };
  var courses = new Plot(byId("courses"), {
    empty: "waiting for the first spectrum", resetButton: byId("courses-reset"),
    pointText: function (layer, i) {
      var t = layer.x[i], c = layer.y[i], s = layer.sigma ? layer.sigma[i] : null;
      return [layer.name, "time = " + sig(t, 4) + " " + unitState.time.unit,
        "c = " + sig(c, 4) + (finite(s) ? " \u00b1 " + sig(s, 2) : "") + " " + (page.data.concentration_unit || ""),
        layer.files && layer.files[i] ? layer.files[i] : ""].filter(Boolean);
    },
    traceText: function () { return null; }
  });
  var spectra = new Plot(byId("spectra"), {
    reverseX: true, empty: "no spectrum kept in memory yet", resetButton: byId("spectra-reset"),
    pointText: function () { return null; },
    traceText: function (trace, i) {
      return [trace.name, "\u03b4 = " + trace.x[i].toFixed(3) + " ppm", "intensity = " + sig(trace.y[i], 3) + " (scaled)"];
    }
  });

  function scaled(values, div) { return (values || []).map(function (v) { return finite(v) ? v / div : NaN; }); }
  function num(values) { return (values || []).map(function (v) { return v === null ? NaN : v; }); }

  function drawCourses(doc) {
    var legend = byId("courses-legend");
    while (legend.firstChild) { legend.removeChild(legend.firstChild); }
    var series = doc.series || [];
    if (!series.length) { courses.setData([], null, {}); return; }
    var forecast = doc.forecast, last = doc.last_time_s || 0;
    var showForecast = forecast && finite(forecast.time_s) && forecast.time_s <= 3 * Math.max(last, 1e-9);
    var maxT = Math.max(last, showForecast ? forecast.time_s : 0);
    var unit = unitState.time = timeScale(maxT), div = unit.div;
    var layers = [], lo = Infinity, hi = -Infinity;
    if (showForecast) {
      var ci = forecast.ci95_s || [];
      if (finite(ci[0]) && finite(ci[1])) {
        layers.push({ kind: "span", x0: ci[0] / div, x1: Math.min(ci[1], 3 * last) / div, fill: "#9a9a9a", opacity: 0.16 });
      }
      layers.push({ kind: "vline", x: forecast.time_s / div, colour: "#555555",
        label: Math.round(forecast.target_conversion * 100) + " % at " + (clock(forecast.clock_utc) || forecast.duration_text) });
    }
    series.forEach(function (item, n) {
      var style = doc.styles[n % doc.styles.length], fit = item.fit;
      if (fit) {
        var fx = scaled(fit.time_s, div);
        if (fit.low && fit.high) {
          layers.push({ kind: "band", x: fx, lo: num(fit.low), hi: num(fit.high), colour: style.colour });
          num(fit.low).concat(num(fit.high)).forEach(function (v) { if (finite(v)) { lo = Math.min(lo, v); hi = Math.max(hi, v); } });
        }
        layers.push({ kind: "line", x: fx, y: num(fit.value), colour: style.colour, dash: style.dash, width: 1.6 });
      }
      var ys = num(item.values), sg = item.sigma ? num(item.sigma) : null;
      ys.forEach(function (v, i) {
        if (!finite(v)) { return; }
        var s = sg && finite(sg[i]) ? sg[i] : 0;
        lo = Math.min(lo, v - s); hi = Math.max(hi, v + s);
      });
      layers.push({ kind: "points", name: item.name, x: scaled(item.time_s, div), y: ys, sigma: sg,
        colour: style.colour, marker: style.marker, files: item.files });
      var entry = htmlEl("li", null, null, legend);
      swatch(entry, style, true, !!fit);
      htmlEl("span", null, item.name + (fit ? " (measured, fit)" : " (measured)"), entry);
    });
    if (series.some(function (s) { return s.fit && s.fit.low; })) {
      var bandEntry = htmlEl("li", null, null, legend);
      swatch(bandEntry, doc.styles[0], false, false, { colour: doc.styles[0].colour, opacity: 0.22 });
      htmlEl("span", null, "95 % band of the fit", bandEntry);
    }
    if (showForecast) {
      var fEntry = htmlEl("li", null, null, legend);
      swatch(fEntry, { colour: "#555555", dash: "4 3", width: 1.2 }, false, true, { colour: "#9a9a9a", opacity: 0.16 });
      htmlEl("span", null, "forecast of " + Math.round(forecast.target_conversion * 100) + " % conversion, 95 % interval", fEntry);
    }
    if (!(hi > lo)) { hi = lo + 1; }
    var pad = (hi - lo) * 0.06;
    courses.setData(layers, { x0: 0, x1: maxT / div * 1.03 || 1, y0: Math.min(0, lo - pad), y1: hi + pad },
      { x: "time t / " + unit.unit, y: "concentration c / " + (doc.concentration_unit || "") });
  }

  function drawSpectra(doc) {
    var legend = byId("spectra-legend");
    while (legend.firstChild) { legend.removeChild(legend.firstChild); }
    var traces = doc.spectra || [], colours = doc.colours || {};
    if (!traces.length) { spectra.setData([], null, {}); return; }
    var layers = [], latest = traces[traces.length - 1], lo = Infinity, hi = -Infinity;
    var windows = (doc.windows || []).slice().sort(function (a, b) { return b.high_ppm - a.high_ppm; });
    windows.forEach(function (win, i) { // labels on three rows, so neighbouring windows' names do not overlap
      layers.push({ kind: "span", x0: win.low_ppm, x1: win.high_ppm, fill: colours.window_fill, edge: colours.window_edge,
        opacity: colours.window_alpha, label: win.name, row: i % 3, cls: "window" });
    });
    var span = null;
    traces.forEach(function (trace, i) {
      var isLatest = i === traces.length - 1, times = trace.time_s, t = timeScale(doc.last_time_s || 0);
      var name = (isLatest ? "latest, " : "") + (finite(times) ? "t = " + sig(times / t.div, 4) + " " + t.unit : "time unknown");
      var xs = num(trace.ppm), ys = num(trace.intensity);
      layers.push({ kind: "line", x: xs, y: ys, colour: colours.traces[i], width: isLatest ? 1.4 : 0.9,
        opacity: isLatest ? 1 : 0.85, hover: isLatest, name: name + " (" + trace.file + ")", cls: isLatest ? "trace latest" : "trace" });
      xs.forEach(function (x) { if (finite(x)) { span = span ? [Math.min(span[0], x), Math.max(span[1], x)] : [x, x]; } });
      var entry = htmlEl("li", null, null, legend);
      swatch(entry, { colour: colours.traces[i], width: isLatest ? 2 : 1.2 }, false, true);
      var label = htmlEl("span", null, name, entry);
      htmlEl("small", null, trace.file, label);
      ys.forEach(function (y) { if (finite(y)) { lo = Math.min(lo, y); } });
    });
    if ((doc.windows || []).length) {
      var wEntry = htmlEl("li", null, null, legend);
      swatch(wEntry, {}, false, false, { colour: colours.window_fill, opacity: colours.window_alpha, edge: colours.window_edge });
      htmlEl("span", null, "signal windows", wEntry);
    }
    hi = 1.1; // scaled: the tallest signal inside the windows is 1; taller lines (solvent) are clipped
    lo = Math.max(Math.min(lo, 0) - 0.05, -0.5);
    spectra.setData(layers, { x0: span[0], x1: span[1], y0: lo, y1: hi },
      { x: "chemical shift \u03b4 / ppm", y: "intensity / arb. units" });
  }

  // ------------------------------------------------------------ the text parts
  function drawText(doc) {
    setText("run-name", doc.run);
    document.title = "kinetics \u2014 " + doc.run + " \u2014 " + doc.state;
    var badge = setText("run-state", doc.state);
    badge.className = "state state-" + doc.state;
    setText("run-reason", doc.reason ? doc.reason : "");
    var counts = doc.counts || {};
    ["taken", "quarantined", "pending", "duplicate", "replaced"].forEach(function (key) {
      setText("count-" + key, String(counts[key] || 0));
    });
    setText("k-text", doc.k_name + " = " + doc.k_text);
    var forecast = doc.forecast, text = "";
    if (forecast) {
      var pct = Math.round(forecast.target_conversion * 100) + " % conversion ";
      var at = clock(forecast.clock_utc), ci = forecast.clock_ci95_utc || [];
      if (at) {
        text = pct + "expected at " + at + (clock(ci[0]) && clock(ci[1]) ? " (95 %: " + clock(ci[0]) + " \u2013 " + clock(ci[1]) + ")" : "") +
          ", " + forecast.duration_text + " after the start";
      } else {
        var cs = forecast.ci95_s || [];
        text = pct + "expected " + forecast.duration_text + " after the start" +
          (finite(cs[0]) && finite(cs[1]) ? " (95 %: " + duration(cs[0]) + " \u2013 " + duration(cs[1]) + ")" : "");
      }
      if (forecast.note) { text += ". " + forecast.note.charAt(0).toUpperCase() + forecast.note.slice(1); }
    } else if (doc.fit_message) {
      text = doc.fit_message;
    }
    setText("forecast", text);
    setText("updated", doc.updated_utc || "");
    var table = byId("status-table");
    while (table.firstChild) { table.removeChild(table.firstChild); }
    (doc.status_lines || []).forEach(function (pair) {
      var row = htmlEl("tr", null, null, table);
      htmlEl("th", null, pair[0], row);
      htmlEl("td", null, pair[1], row);
    });
  }

  function render(doc) {
    if (!doc || typeof doc !== "object") { return; }
    page.data = doc;
    drawText(doc);
    drawCourses(doc);
    drawSpectra(doc);
    page.updates += 1;
    document.body.setAttribute("data-updated", doc.updated_utc || "");
    document.body.setAttribute("data-state", doc.state || "");
  }

  // ------------------------------------------------------------ keeping current
  var lastUpdated = null;
  function receive(doc) {
    if (!doc) { return; }
    setText("checked", new Date().toLocaleTimeString());
    if (doc.updated_utc === lastUpdated) { return; }
    lastUpdated = doc.updated_utc;
    render(doc);
  }
  function loadScript(done) {
    var tag = document.createElement("script");
    tag.src = "live-data.js?v=" + Date.now();
    tag.onload = function () { tag.parentNode.removeChild(tag); receive(window.kineticsLiveData); done(); };
    tag.onerror = function () { tag.parentNode.removeChild(tag); page.lastError = "live-data.js could not be read"; done(); };
    document.head.appendChild(tag);
  }
  function poll() {
    var next = function () { schedule(); };
    if (location.protocol === "http:" && window.fetch) {
      fetch("live.json?v=" + Date.now(), { cache: "no-store" })
        .then(function (response) { if (!response.ok) { throw new Error("HTTP " + response.status); } return response.json(); })
        .then(function (doc) { receive(doc); next(); })
        .catch(function (error) { page.lastError = String(error); next(); });
    } else {
      loadScript(next);
    }
  }
  function schedule() {
    var seconds = page.data && finite(page.data.refresh_s) ? page.data.refresh_s : 5;
    window.setTimeout(poll, Math.max(1, seconds) * 1000);
  }
  page.poll = poll;
  page.render = render;

  var initial = byId("kinetics-initial");
  try {
    receive(JSON.parse(initial.textContent));
  } catch (error) {
    page.lastError = String(error);
  }
  var resizeTimer = null;
  window.addEventListener("resize", function () {
    window.clearTimeout(resizeTimer);
    resizeTimer = window.setTimeout(function () { courses.draw(); spectra.draw(); }, 150);
  });
  schedule();
})();
