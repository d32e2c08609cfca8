// The review page's script. It runs only what the page holds: no request
// leaves it (the page's Content-Security-Policy allows this script by its
// hash and nothing else). Two parts: the ROI picker, which shows one ROI's
// figures at a time, and the slice browser, which draws the reference dose,
// isodoses, ROI outlines, Γ and the dose difference on three orthogonal
// views from the volumes embedded in the page (see viewer.go for their
// encoding).
(function () {
  "use strict";

  // ---- ROI picker -------------------------------------------------------
  var picker = document.getElementById("roi-picker");
  var select = document.getElementById("roi-select");
  var panels = document.querySelectorAll("[data-roi-panel]");
  function showPanel(want) {
    if (!select) { return; }
    if (want) { select.value = want; }
    var v = select.value;
    Array.prototype.forEach.call(panels, function (p) {
      p.hidden = p.getAttribute("data-roi-panel") !== v;
    });
  }
  if (picker && select) {
    select.addEventListener("change", function () { showPanel(); });
    picker.hidden = false;
    showPanel();
  }

  // ---- Slice browser ----------------------------------------------------
  var root = document.getElementById("viewer");
  var metaEl = document.getElementById("vg-meta");
  var status = document.getElementById("viewer-status");
  if (!root || !metaEl) { return; }
  var M = JSON.parse(metaEl.textContent);
  var t0 = performance.now();

  var fixedSlices = document.getElementById("static-slices");
  function fail(why) {
    if (fixedSlices) { fixedSlices.hidden = false; }
    root.hidden = true;
    if (status) {
      status.textContent = "The slice browser cannot run here (" + why + "); the fixed slices below show the same data at one point.";
      status.hidden = false;
    }
  }
  if (typeof DecompressionStream !== "function" || typeof Blob !== "function") {
    fail("this browser cannot decompress the embedded volumes");
    return;
  }
  // The browser will run: it takes the fixed slices' place at once (they
  // come back if decoding fails).
  if (fixedSlices) { fixedSlices.hidden = true; }

  function inflate(id) {
    var text = document.getElementById(id).textContent.trim();
    var bin = atob(text);
    var bytes = new Uint8Array(bin.length);
    for (var i = 0; i < bin.length; i++) { bytes[i] = bin.charCodeAt(i); }
    var stream = new Blob([bytes]).stream().pipeThrough(new DecompressionStream("deflate"));
    return new Response(stream).arrayBuffer().then(function (b) { return new Uint8Array(b); });
  }

  // Colour scales. ColorBrewer (Harrower and Brewer, The Cartographic
  // Journal 40 (2003) 27): YlOrRd (its 7 darkest of 9 classes) for Γ > 1,
  // RdBu (11 classes) for the dose difference, GnBu (9 classes) for the
  // dose colour wash; interpolated linearly between classes.
  var GAMMA = ["#fed976", "#feb24c", "#fd8d3c", "#fc4e2a", "#e31a1c", "#bd0026", "#800026"];
  var DIFF = ["#053061", "#2166ac", "#4393c3", "#92c5de", "#d1e5f0", "#f7f7f7", "#fddbc7", "#f4a582", "#d6604d", "#b2182b", "#67001f"];
  var WASH = ["#f7fcf0", "#e0f3db", "#ccebc5", "#a8ddb5", "#7bccc4", "#4eb3d3", "#2b8cbe", "#0868ac", "#084081"];
  function rgb(h) { return [parseInt(h.substr(1, 2), 16), parseInt(h.substr(3, 2), 16), parseInt(h.substr(5, 2), 16)]; }
  function table(classes) {
    var c = classes.map(rgb), out = new Uint8Array(256 * 3);
    for (var i = 0; i < 256; i++) {
      var f = i / 255 * (c.length - 1), k = Math.min(Math.floor(f), c.length - 2), t = f - k;
      for (var j = 0; j < 3; j++) { out[3 * i + j] = Math.round(c[k][j] + t * (c[k + 1][j] - c[k][j])); }
    }
    return out;
  }
  var gammaLUT = table(GAMMA), diffLUT = table(DIFF), washLUT = table(WASH);

  var N = M.dims, NX = N[0], NY = N[1];
  var C = [M.x, M.y, M.z];
  var STRIDE = [1, NX, NX * NY];
  function edges(c) {
    var n = c.length, e = new Array(n + 1);
    if (n === 1) { e[0] = c[0] - 0.5; e[1] = c[0] + 0.5; return e; }
    for (var i = 1; i < n; i++) { e[i] = (c[i - 1] + c[i]) / 2; }
    e[0] = c[0] - (c[1] - c[0]) / 2;
    e[n] = c[n - 1] + (c[n - 1] - c[n - 2]) / 2;
    return e;
  }
  var E = [edges(C[0]), edges(C[1]), edges(C[2])];
  function extent(a) { return E[a][E[a].length - 1] - E[a][0]; }
  // mmAt maps a fractional voxel index along axis a to mm.
  function mmAt(a, f) {
    var c = C[a], i = Math.floor(f);
    if (i < 0) { return c[0]; }
    if (i >= c.length - 1) { return c[c.length - 1]; }
    return c[i] + (f - i) * (c[i + 1] - c[i]);
  }
  function nearest(a, mm) {
    var c = C[a], best = 0;
    for (var i = 1; i < c.length; i++) { if (Math.abs(c[i] - mm) < Math.abs(c[best] - mm)) { best = i; } }
    return best;
  }

  var VIEWS = [
    { name: "axial", fixed: 2, across: 0, down: 1, downInc: true, letters: ["R", "L", "A", "P"], axis: "z" },
    { name: "coronal", fixed: 1, across: 0, down: 2, downInc: false, letters: ["R", "L", "S", "I"], axis: "y" },
    { name: "sagittal", fixed: 0, across: 1, down: 2, downInc: false, letters: ["A", "P", "S", "I"], axis: "x" }
  ];
  var state = {
    point: [0, 0, 0],
    dose: "grey", iso: true, roi: true, gamma: true, diff: false, diffRange: 2 * M.dosePercent
  };
  var codes, gamma, diff, masks;

  function byId(id) { return document.getElementById(id); }
  function clamp(v, lo, hi) { return v < lo ? lo : (v > hi ? hi : v); }

  // ---- Drawing -----------------------------------------------------------
  function setupView(v) {
    v.canvas = byId("vw-" + v.name);
    v.slider = byId("vw-slider-" + v.name);
    v.pos = byId("vw-pos-" + v.name);
    v.off = document.createElement("canvas");
    var ra = M.raster[v.across], rd = M.raster[v.down].slice();
    if (!v.downInc) { rd.reverse(); }
    v.cols = ra; v.rows = rd;
    v.off.width = ra.length; v.off.height = rd.length;
    v.img = v.off.getContext("2d").createImageData(ra.length, rd.length);
    v.slider.min = 0; v.slider.max = N[v.fixed] - 1; v.slider.step = 1;
    v.slider.addEventListener("input", function () { state.point[v.fixed] = +v.slider.value; drawAll(); });
    attachMouse(v);
    attachKeys(v);
  }

  function fit(v) {
    var w = v.canvas.clientWidth || 360, h = v.canvas.clientHeight || 360;
    return Math.min(w / extent(v.across), h / extent(v.down));
  }
  function resetView(v) {
    v.zoom = fit(v);
    v.cx = (E[v.across][0] + E[v.across][E[v.across].length - 1]) / 2;
    v.cy = (E[v.down][0] + E[v.down][E[v.down].length - 1]) / 2;
  }
  function toScreen(v, a, d) {
    var w = v.cw, h = v.ch;
    var sx = w / 2 + (a - v.cx) * v.zoom;
    var sy = v.downInc ? h / 2 + (d - v.cy) * v.zoom : h / 2 - (d - v.cy) * v.zoom;
    return [sx, sy];
  }
  function fromScreen(v, sx, sy) {
    var a = v.cx + (sx - v.cw / 2) / v.zoom;
    var d = v.downInc ? v.cy + (sy - v.ch / 2) / v.zoom : v.cy - (sy - v.ch / 2) / v.zoom;
    return [a, d];
  }

  function renderRaster(v) {
    var s = state.point[v.fixed];
    var px = v.img.data, W = v.cols.length, H = v.rows.length;
    var sa = STRIDE[v.across], sd = STRIDE[v.down], base = s * STRIDE[v.fixed];
    var doseMode = state.dose, showG = state.gamma, showD = state.diff;
    var doseToByte = M.doseScale / (M.refMax > 0 ? M.refMax : 1) * 255;
    var diffScale = M.diffStep / (state.diffRange / 100 * M.normDose) * 127.5;
    for (var y = 0; y < H; y++) {
      var rowBase = base + v.rows[y] * sd;
      for (var x = 0; x < W; x++) {
        var at = rowBase + v.cols[x] * sa, o = 4 * (y * W + x);
        var r = 0, g = 0, b = 0;
        var level = clamp(codes[at] * doseToByte, 0, 255) | 0;
        if (doseMode === "grey") { r = g = b = level; } else if (doseMode === "wash") {
          r = washLUT[3 * level]; g = washLUT[3 * level + 1]; b = washLUT[3 * level + 2];
        }
        if (showD && diff[at] !== -128) {
          var k = clamp(Math.round(127.5 + diff[at] * diffScale), 0, 255);
          r = 0.15 * r + 0.85 * diffLUT[3 * k]; g = 0.15 * g + 0.85 * diffLUT[3 * k + 1]; b = 0.15 * b + 0.85 * diffLUT[3 * k + 2];
        }
        var gc = gamma[at];
        if (showG && gc >= 2) {
          var t = gc === 255 ? 255 : clamp(Math.round((gc - 2) / 252 * 255), 0, 255);
          r = gammaLUT[3 * t]; g = gammaLUT[3 * t + 1]; b = gammaLUT[3 * t + 2];
        }
        px[o] = r; px[o + 1] = g; px[o + 2] = b; px[o + 3] = 255;
      }
    }
    v.off.getContext("2d").putImageData(v.img, 0, 0);
  }

  // sliceDose returns the slice's doses on the voxel lattice (across
  // fastest), for the isodose lines.
  function sliceDose(v) {
    var s = state.point[v.fixed], na = N[v.across], nd = N[v.down];
    var out = new Float32Array(na * nd);
    for (var d = 0; d < nd; d++) {
      for (var a = 0; a < na; a++) {
        out[d * na + a] = codes[a * STRIDE[v.across] + d * STRIDE[v.down] + s * STRIDE[v.fixed]] * M.doseScale;
      }
    }
    return out;
  }

  // isolines: marching squares on the voxel lattice, segments in
  // fractional voxel indices (saddles resolved by the cell mean).
  function isolines(val, na, nd, level, emit) {
    function cross(p, q) { return q === p ? 0.5 : clamp((level - p) / (q - p), 0, 1); }
    for (var d = 0; d + 1 < nd; d++) {
      for (var a = 0; a + 1 < na; a++) {
        var p00 = val[d * na + a], p10 = val[d * na + a + 1], p11 = val[(d + 1) * na + a + 1], p01 = val[(d + 1) * na + a];
        var code = (p00 >= level ? 8 : 0) | (p10 >= level ? 4 : 0) | (p11 >= level ? 2 : 0) | (p01 >= level ? 1 : 0);
        if (code === 0 || code === 15) { continue; }
        var T = [a + cross(p00, p10), d], B = [a + cross(p01, p11), d + 1];
        var L = [a, d + cross(p00, p01)], R = [a + 1, d + cross(p10, p11)];
        switch (code) {
          case 1: case 14: emit(L, B); break;
          case 2: case 13: emit(B, R); break;
          case 3: case 12: emit(L, R); break;
          case 4: case 11: emit(T, R); break;
          case 6: case 9: emit(T, B); break;
          case 7: case 8: emit(L, T); break;
          case 5: case 10:
            var centre = (p00 + p10 + p11 + p01) / 4;
            if ((code === 10) === (centre >= level)) { emit(T, R); emit(L, B); } else { emit(L, T); emit(B, R); }
            break;
        }
      }
    }
  }

  function inROI(r, x, y, z) {
    var b = r.box;
    if (x < b[0] || x >= b[1] || y < b[2] || y >= b[3] || z < b[4] || z >= b[5]) { return false; }
    var k = (x - b[0]) + (b[1] - b[0]) * ((y - b[2]) + (b[3] - b[2]) * (z - b[4]));
    return (masks[r.offset + (k >> 3)] >> (k & 7)) & 1;
  }

  function drawOutlines(v, ctx) {
    var s = state.point[v.fixed];
    M.rois.forEach(function (r) {
      var b = r.box, f = v.fixed;
      if (s < b[2 * f] || s >= b[2 * f + 1]) { return; }
      var a0 = b[2 * v.across], a1 = b[2 * v.across + 1], d0 = b[2 * v.down], d1 = b[2 * v.down + 1];
      var ijk = [0, 0, 0];
      ijk[f] = s;
      function at(a, d) {
        if (a < a0 || a >= a1 || d < d0 || d >= d1) { return false; }
        ijk[v.across] = a; ijk[v.down] = d;
        return inROI(r, ijk[0], ijk[1], ijk[2]);
      }
      var segs = [];
      for (var d = d0; d <= d1; d++) {
        for (var a = a0; a <= a1; a++) {
          var here = at(a, d);
          if (here !== at(a - 1, d)) { segs.push([E[v.across][a], E[v.down][d], E[v.across][a], E[v.down][d + 1]]); }
          if (here !== at(a, d - 1)) { segs.push([E[v.across][a], E[v.down][d], E[v.across][a + 1], E[v.down][d]]); }
        }
      }
      if (!segs.length) { return; }
      ctx.beginPath();
      segs.forEach(function (g) {
        var p = toScreen(v, g[0], g[1]), q = toScreen(v, g[2], g[3]);
        ctx.moveTo(p[0], p[1]); ctx.lineTo(q[0], q[1]);
      });
      ctx.setLineDash([]);
      ctx.strokeStyle = "rgba(255,255,255,0.7)"; ctx.lineWidth = 3; ctx.stroke();
      ctx.strokeStyle = r.color; ctx.lineWidth = 1.5; ctx.stroke();
    });
  }

  function draw(v) {
    var ctx = v.canvas.getContext("2d");
    var dpr = window.devicePixelRatio || 1;
    v.cw = v.canvas.clientWidth; v.ch = v.canvas.clientHeight;
    if (v.canvas.width !== Math.round(v.cw * dpr) || v.canvas.height !== Math.round(v.ch * dpr)) {
      v.canvas.width = Math.round(v.cw * dpr); v.canvas.height = Math.round(v.ch * dpr);
    }
    ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
    ctx.fillStyle = "#000"; ctx.fillRect(0, 0, v.cw, v.ch);
    renderRaster(v);
    var ea = E[v.across], ed = E[v.down];
    var tl = toScreen(v, ea[0], v.downInc ? ed[0] : ed[ed.length - 1]);
    ctx.imageSmoothingEnabled = false;
    ctx.drawImage(v.off, tl[0], tl[1], extent(v.across) * v.zoom, extent(v.down) * v.zoom);
    if (state.iso && state.dose !== "off") {
      var val = sliceDose(v), na = N[v.across], nd = N[v.down];
      ctx.lineWidth = 1.2; ctx.setLineDash([4, 3]);
      M.isodoses.forEach(function (iso) {
        ctx.beginPath();
        isolines(val, na, nd, iso.percent / 100 * M.normDose, function (p, q) {
          var s1 = toScreen(v, mmAt(v.across, p[0]), mmAt(v.down, p[1]));
          var s2 = toScreen(v, mmAt(v.across, q[0]), mmAt(v.down, q[1]));
          ctx.moveTo(s1[0], s1[1]); ctx.lineTo(s2[0], s2[1]);
        });
        ctx.strokeStyle = iso.color; ctx.stroke();
      });
      ctx.setLineDash([]);
    }
    if (state.roi) { drawOutlines(v, ctx); }
    // Crosshair through the point the three views share.
    var p = toScreen(v, C[v.across][state.point[v.across]], C[v.down][state.point[v.down]]);
    ctx.setLineDash([2, 4]); ctx.lineWidth = 1; ctx.strokeStyle = "rgba(0,255,255,0.8)";
    ctx.beginPath(); ctx.moveTo(p[0], 0); ctx.lineTo(p[0], v.ch); ctx.moveTo(0, p[1]); ctx.lineTo(v.cw, p[1]); ctx.stroke();
    ctx.setLineDash([]);
    ctx.font = "bold 12px 'Liberation Sans', Arial, sans-serif"; ctx.textAlign = "center"; ctx.textBaseline = "middle";
    var L = v.letters;
    [[L[0], 10, v.ch / 2], [L[1], v.cw - 10, v.ch / 2], [L[2], v.cw / 2, 10], [L[3], v.cw / 2, v.ch - 10]].forEach(function (t) {
      ctx.fillStyle = "rgba(255,255,255,0.85)"; ctx.fillRect(t[1] - 8, t[2] - 8, 16, 16);
      ctx.fillStyle = "#000"; ctx.fillText(t[0], t[1], t[2]);
    });
    var s = state.point[v.fixed];
    v.slider.value = s;
    v.canvas.setAttribute("data-slice", String(s));
    v.canvas.setAttribute("data-zoom", v.zoom.toFixed(4));
    v.canvas.setAttribute("data-centre", v.cx.toFixed(2) + "," + v.cy.toFixed(2));
    v.pos.textContent = v.axis + " = " + C[v.fixed][s].toFixed(1) + " mm (slice " + (s + 1) + " of " + N[v.fixed] + ")";
  }

  function drawAll() {
    VIEWS.forEach(draw);
    var P = state.point;
    root.setAttribute("data-point", P.join(","));
    root.setAttribute("data-point-mm", [C[0][P[0]], C[1][P[1]], C[2][P[2]]].map(function (x) { return x.toFixed(1); }).join(","));
  }

  // ---- Interaction -------------------------------------------------------
  function readout(v, sx, sy) {
    var mm = fromScreen(v, sx, sy), P = state.point.slice();
    P[v.across] = nearest(v.across, mm[0]); P[v.down] = nearest(v.down, mm[1]);
    var at = P[0] + NX * (P[1] + NY * P[2]);
    var d = codes[at] * M.doseScale;
    var parts = ["(" + C[0][P[0]].toFixed(1) + ", " + C[1][P[1]].toFixed(1) + ", " + C[2][P[2]].toFixed(1) + ") mm",
      "dose " + d.toFixed(2) + " Gy (" + (100 * d / M.normDose).toFixed(1) + " %)"];
    var g = gamma[at];
    parts.push(g === 0 ? "Γ not evaluated" : g === 1 ? "Γ ≤ 1" : g === 255 ? "Γ at the search cap (" + M.gammaCap.toFixed(2) + ")" :
      "Γ ≈ " + (1 + (g - 1) * M.gammaStep).toFixed(2));
    var df = diff[at];
    if (df !== -128) {
      var gy = df * M.diffStep, sat = Math.abs(df) === 127 ? (df > 0 ? "≥ " : "≤ ") : "";
      parts.push("difference " + sat + (gy >= 0 ? "+" : "") + gy.toFixed(2) + " Gy (" + sat + (gy >= 0 ? "+" : "") + (100 * gy / M.normDose).toFixed(1) + " %)");
    }
    byId("vw-readout").textContent = parts.join("; ");
  }

  function attachMouse(v) {
    var drag = null;
    v.canvas.addEventListener("mousedown", function (e) {
      drag = { x: e.offsetX, y: e.offsetY, cx: v.cx, cy: v.cy, moved: false };
      v.canvas.focus();
      e.preventDefault();
    });
    v.canvas.addEventListener("mousemove", function (e) {
      if (drag && (e.buttons & 1)) {
        var dx = e.offsetX - drag.x, dy = e.offsetY - drag.y;
        if (Math.abs(dx) + Math.abs(dy) > 3) { drag.moved = true; }
        if (drag.moved) {
          v.cx = drag.cx - dx / v.zoom;
          v.cy = v.downInc ? drag.cy - dy / v.zoom : drag.cy + dy / v.zoom;
          draw(v);
        }
      }
      readout(v, e.offsetX, e.offsetY);
    });
    v.canvas.addEventListener("mouseup", function (e) {
      if (drag && !drag.moved) {
        var mm = fromScreen(v, e.offsetX, e.offsetY);
        state.point[v.across] = nearest(v.across, mm[0]);
        state.point[v.down] = nearest(v.down, mm[1]);
        drawAll();
      }
      drag = null;
    });
    v.canvas.addEventListener("wheel", function (e) {
      e.preventDefault();
      zoomAt(v, Math.pow(1.2, -e.deltaY / 100), e.offsetX, e.offsetY);
    }, { passive: false });
  }

  function zoomAt(v, factor, sx, sy) {
    var f0 = fit(v);
    var z = clamp(v.zoom * factor, f0 * 0.5, f0 * 40);
    var before = fromScreen(v, sx, sy);
    v.zoom = z;
    var after = fromScreen(v, sx, sy);
    v.cx += before[0] - after[0];
    v.cy += before[1] - after[1];
    draw(v);
  }

  function attachKeys(v) {
    v.canvas.addEventListener("keydown", function (e) {
      var n = N[v.fixed], s = state.point[v.fixed], handled = true;
      switch (e.key) {
        case "ArrowUp": case "ArrowRight": s += 1; break;
        case "ArrowDown": case "ArrowLeft": s -= 1; break;
        case "PageUp": s += 10; break;
        case "PageDown": s -= 10; break;
        case "Home": s = 0; break;
        case "End": s = n - 1; break;
        case "+": case "=": zoomAt(v, 1.5, v.cw / 2, v.ch / 2); return e.preventDefault();
        case "-": zoomAt(v, 1 / 1.5, v.cw / 2, v.ch / 2); return e.preventDefault();
        case "0": resetView(v); draw(v); return e.preventDefault();
        default: handled = false;
      }
      if (handled) {
        e.preventDefault();
        state.point[v.fixed] = clamp(s, 0, n - 1);
        drawAll();
      }
    });
  }

  // goto centres every view on a patient point (mm) and zooms so that a
  // region ext mm across fills about half of each view.
  function gotoPoint(mm, ext) {
    for (var a = 0; a < 3; a++) { state.point[a] = nearest(a, mm[a]); }
    VIEWS.forEach(function (v) {
      var f0 = fit(v);
      v.zoom = ext > 0 ? clamp(0.5 * Math.min(v.cw || 360, v.ch || 360) / ext, f0, f0 * 20) : f0;
      v.cx = C[v.across][state.point[v.across]];
      v.cy = C[v.down][state.point[v.down]];
    });
    drawAll();
  }

  function bindControls() {
    function on(id, ev, fn) { var el = byId(id); if (el) { el.addEventListener(ev, fn); fn.call(el); } }
    on("vw-dose", "change", function () { state.dose = this.value; });
    on("vw-iso", "change", function () { state.iso = this.checked; });
    on("vw-roi", "change", function () { state.roi = this.checked; });
    on("vw-gamma", "change", function () { state.gamma = this.checked; });
    on("vw-diff", "change", function () { state.diff = this.checked; });
    on("vw-diff-range", "change", function () { state.diffRange = +this.value; legends(); });
    ["vw-dose", "vw-iso", "vw-roi", "vw-gamma", "vw-diff", "vw-diff-range"].forEach(function (id) {
      var el = byId(id);
      if (el) { el.addEventListener("change", drawAll); }
    });
    var reset = byId("vw-reset");
    if (reset) { reset.addEventListener("click", function () { VIEWS.forEach(resetView); drawAll(); }); }
    document.addEventListener("click", function (e) {
      var el = e.target.closest ? e.target.closest("[data-goto]") : null;
      if (!el) { return; }
      var p = el.getAttribute("data-goto").split(",").map(Number);
      gotoPoint(p, +el.getAttribute("data-extent") || 0);
      var panel = el.getAttribute("data-panel");
      if (panel) { showPanel(panel); }
      root.scrollIntoView({ block: "start" });
    });
    Array.prototype.forEach.call(document.querySelectorAll("button.goto"), function (b) { b.hidden = false; });
    var pending = 0;
    window.addEventListener("resize", function () {
      // Redraw once the window has settled (the views keep their zoom).
      clearTimeout(pending);
      pending = setTimeout(drawAll, 100);
    });
  }

  function bar(id, lut, labels) {
    var c = byId(id);
    if (!c) { return; }
    var ctx = c.getContext("2d"), w = c.width, h = c.height;
    for (var x = 0; x < w; x++) {
      var k = Math.round(x / (w - 1) * 255);
      ctx.fillStyle = "rgb(" + lut[3 * k] + "," + lut[3 * k + 1] + "," + lut[3 * k + 2] + ")";
      ctx.fillRect(x, 0, 1, h);
    }
    var lab = byId(id + "-labels");
    if (lab && labels) { lab.textContent = labels; }
  }
  function legends() {
    bar("vw-legend-gamma", gammaLUT, "Γ from 1 (left) to " + M.gammaCap.toFixed(2) + ", the search cap (right); Γ ≤ 1 transparent");
    var r = state.diffRange, gy = r / 100 * M.normDose;
    bar("vw-legend-diff", diffLUT, "evaluated − reference from −" + r.toFixed(1) + " % (−" + gy.toFixed(2) + " Gy, left) to +" +
      r.toFixed(1) + " % (+" + gy.toFixed(2) + " Gy, right) of " + M.normDose.toFixed(2) + " Gy; " + M.diffShown);
    bar("vw-legend-wash", washLUT, "reference dose from 0 (left) to " + M.refMax.toFixed(2) + " Gy (right); grey: black to white over the same range");
  }

  Promise.all([inflate("vg-dose"), inflate("vg-gamma"), inflate("vg-diff"), inflate("vg-masks")]).then(function (b) {
    var total = N[0] * N[1] * N[2];
    if (b[0].length !== 2 * total || b[1].length !== total || b[2].length !== total) {
      throw new Error("the embedded volumes do not have the stated size");
    }
    // Each x-run holds differences from the previous value (mod 2^16):
    // add them up in place (the data are little endian, as every browser's
    // typed arrays are on the machines that run them; checked below).
    var probe = new Uint8Array(new Uint16Array([1]).buffer);
    if (probe[0] !== 1) { throw new Error("this machine is big-endian"); }
    codes = new Uint16Array(b[0].buffer, b[0].byteOffset, total);
    for (var row = 0, i = 0; row < N[1] * N[2]; row++) {
      var prev = 0;
      for (var x = 0; x < NX; x++, i++) {
        prev = (prev + codes[i]) & 0xffff;
        codes[i] = prev;
      }
    }
    gamma = b[1];
    diff = new Int8Array(b[2].buffer, b[2].byteOffset, b[2].byteLength);
    masks = b[3];
    root.hidden = false;
    VIEWS.forEach(setupView);
    bindControls();
    legends();
    VIEWS.forEach(resetView);
    gotoPoint(M.start, M.startExtent || 0);
    root.setAttribute("data-load-ms", String(Math.round(performance.now())));
    root.setAttribute("data-decode-ms", String(Math.round(performance.now() - t0)));
    root.setAttribute("data-ready", "1");
  }).catch(function (err) {
    fail(String(err && err.message || err));
  });
})();
