/* mapdrift explorer: one offline page over a run's classes, values, jumps and clusters.
 *
 * The map is drawn from a label raster (unit index per pixel): a period change recolours the
 * pixels as palette[class[label]], the unit under the pointer is label[pixel]. Every text from
 * the data is set with textContent, never parsed as HTML. Plain JS, no libraries.
 */
(function () {
  'use strict';

  performance.mark('md-script');
  var $ = function (id) { return document.getElementById(id); };
  var D = JSON.parse($('md-data').textContent);
  performance.mark('md-parsed');
  var N = D.nUnits, P = D.nPeriods, W = D.raster.width, H = D.raster.height;
  var A = {};                       // typed arrays, unpacked
  var S = {
    period: P - 1, scheme: 'run', k: D.run.k, hover: -1, pinned: -1,
    selected: [], brush: null, filter: 'all', playing: false, timer: 0, zoom: 1,
    view: 'classes', markPx: 10
  };
  var cache = {};                   // classes per scheme/k (Int8Array, period-major)
  var changedAll = {};              // unit-periods whose class differs from the run's, per scheme/k
  var FLAG_ND = 1, FLAG_ND_FADED = 2; // pixel flags (alpha 0): no-data hatching
  var NO_VALUE = '\u2013';

  // ---------------------------------------------------------------- data
  function b64bytes(s) {
    if (typeof Uint8Array.fromBase64 === 'function') return Uint8Array.fromBase64(s);
    var bin = atob(s), n = bin.length, out = new Uint8Array(n);
    for (var i = 0; i < n; i++) out[i] = bin.charCodeAt(i);
    return out;
  }
  var CTORS = { int8: Int8Array, uint8: Uint8Array, int16: Int16Array, int32: Int32Array,
    uint32: Uint32Array, float32: Float32Array, float64: Float64Array };

  function unpack(p) {
    var stream = new Blob([b64bytes(p.b64)]).stream().pipeThrough(new DecompressionStream('deflate'));
    return new Response(stream).arrayBuffer().then(function (buf) {
      var Ctor = CTORS[p.dtype], size = Ctor.BYTES_PER_ELEMENT, n = p.n;
      var src = new Uint8Array(buf), bytes;
      if (size === 1 || !p.shuffle) { bytes = src; } else {
        bytes = new Uint8Array(n * size);
        for (var b = 0; b < size; b++) {
          var off = b * n;
          for (var i = 0; i < n; i++) bytes[i * size + b] = src[off + i];
        }
      }
      return new Ctor(bytes.buffer, bytes.byteOffset, n);
    });
  }

  // ---------------------------------------------------------------- colours and classes
  function hexRgb(hex) {
    var h = hex.replace('#', '');
    return [parseInt(h.slice(0, 2), 16), parseInt(h.slice(2, 4), 16), parseInt(h.slice(4, 6), 16)];
  }
  // pixels are handled as Int32 (little-endian RGBA): opaque colours are negative, so the
  // flags below (small positive numbers) and 'outside' (0) never collide with a colour
  function pack32(rgb) { return (255 << 24) | (rgb[2] << 16) | (rgb[1] << 8) | rgb[0]; }
  function fade(rgb) { return rgb.map(function (c) { return Math.round(c + (255 - c) * 0.72); }); }
  var ND_RGB = hexRgb(D.nodata), HATCH_RGB = hexRgb(D.hatch);
  var ND32 = pack32(ND_RGB), HATCH32 = pack32(HATCH_RGB);
  var ND_F32 = pack32(fade(ND_RGB)), HATCH_F32 = pack32(fade(HATCH_RGB));
  // the cluster look comes from Python (mapdrift.palettes): fills, marks and words per label
  var CL = D.clusterLook || [];
  var CL32 = CL.map(function (l) { return pack32(hexRgb(l.fill)); });
  var CL_F32 = CL.map(function (l) { return pack32(fade(hexRgb(l.fill))); });
  function rgbCss(rgb) { return 'rgb(' + rgb.join(',') + ')'; }
  function clusterView() { return S.view === 'clusters' && !!A.clusters; }

  function schemeInfo() {
    if (S.scheme === 'run') {
      return { edges: D.run.edges, labels: D.run.labels, colours: D.run.colours,
        describe: D.run.describe, perPeriod: D.run.perPeriod, basis: null };
    }
    var c = D.compare[S.scheme][String(S.k)];
    var kk = Math.max.apply(null, c.edges.map(function (e) { return e.length; }));
    return { edges: c.edges, labels: c.labels, colours: D.palettes[String(Math.max(kk, 2))].slice(0, kk),
      describe: c.describe, perPeriod: c.edges.length > 1, basis: c.basis };
  }
  function edgesAt(info, j) { return info.edges[info.edges.length > 1 ? j : 0]; }
  function labelsAt(info, j) { return info.labels[info.labels.length > 1 ? j : 0]; }

  // right-closed classes: class i holds edges[i-1] < x <= edges[i]; beyond the ends: end classes
  function classOf(v, e) {
    if (v !== v) return -1;
    var lo = 0, hi = e.length;
    while (lo < hi) { var mid = (lo + hi) >> 1; if (e[mid] < v) lo = mid + 1; else hi = mid; }
    return lo < e.length ? lo : e.length - 1;
  }
  function classesNow() {
    if (S.scheme === 'run') return A.classes;
    var key = S.scheme + ':' + S.k;
    if (!cache[key]) {
      var info = schemeInfo(), out = new Int8Array(N * P), v = A.values;
      for (var j = 0; j < P; j++) {
        var e = edgesAt(info, j), off = j * N;
        for (var u = 0; u < N; u++) out[off + u] = classOf(v[off + u], e);
      }
      cache[key] = out;
    }
    return cache[key];
  }

  // ---------------------------------------------------------------- formatting
  function fmt(v) {
    if (v === null || v === undefined || v !== v) return NO_VALUE;
    var a = Math.abs(v), d = a >= 1000 || a === 0 ? 0 : a >= 100 ? 1 : a >= 1 ? 2 : 3;
    return v.toLocaleString('en-US', { minimumFractionDigits: d, maximumFractionDigits: d });
  }
  function el(tag, text, cls) {
    var e = document.createElement(tag);
    if (text !== undefined && text !== null) e.textContent = String(text);
    if (cls) e.className = cls;
    return e;
  }
  function clear(node) { while (node.firstChild) node.removeChild(node.firstChild); }

  // ---------------------------------------------------------------- per-unit facts
  function valueAt(u, j) { return A.values[j * N + u]; }
  function jumpAt(u, j) { return A.jumps ? A.jumps[j * N + u] : 0; }
  function clusterAt(u, j) { return A.clusters ? A.clusters[j * N + u] : -1; }
  function enteredHH(u, j) {
    return !!A.clusters && j > 0 && A.clusters[j * N + u] === 0 &&
      A.clusters[(j - 1) * N + u] >= 0 && A.clusters[(j - 1) * N + u] !== 0;
  }
  function jumpText(u, j) {
    var s = jumpAt(u, j);
    if (!A.jumps) return null;
    if (!s) return 'no jump into ' + D.periods[j];
    var t = (s > 0 ? 'up ' : 'down ') + Math.abs(s) + ' classes since the previous period';
    if (A.credible) {
      var cr = A.credible[j * N + u];
      t += cr === 2 ? ' (credible)' : cr === 1 ? ' (not credible: within noise)' : ' (not tested)';
    }
    return t;
  }
  function clusterText(u, j) {
    if (!A.clusters) return null;
    var c = clusterAt(u, j);
    var l = CL[c];
    var t = c < 0 ? 'no data' : l ? l.words + (l.term ? ' (' + l.term + ')' : '') : (D.clusterLabels[c] || String(c));
    if (enteredHH(u, j)) t += ' (entered this period)';
    return t;
  }
  function facts(u, j) {
    var cls = classesNow()[j * N + u], info = schemeInfo();
    var rows = [['ID', D.units[u]], ['Name', D.names[u]], ['Period', D.periods[j]],
      ['Value', fmt(valueAt(u, j)) + (D.unitLabel ? ' ' + D.unitLabel : '')]];
    if (A.raw) rows.push(['Raw rate', fmt(A.raw[j * N + u])]);
    rows.push(['Class', cls < 0 ? 'no data' : (cls + 1) + ' (' + labelsAt(info, j)[cls] + ')']);
    if (A.base) rows.push(['Base', fmt(A.base[j * N + u]) + ' ' + D.baseLabel]);
    var jt = jumpText(u, j); if (jt) rows.push(['Jump', jt]);
    var ct = clusterText(u, j); if (ct) rows.push(['Cluster', ct]);
    return rows;
  }

  // ---------------------------------------------------------------- emphasis (brush x filter)
  function filterTest(name) {
    var j = S.period;
    if (name === 'all') return null;
    if (name === 'jump') return function (u) { return jumpAt(u, j) !== 0; };
    if (name === 'credible') return function (u) { return jumpAt(u, j) !== 0 && A.credible[j * N + u] === 2; };
    if (name === 'entered') return function (u) { return enteredHH(u, j); };
    if (name.indexOf('class:') === 0) {
      var c = +name.slice(6), cls = classesNow(), off = j * N;
      return function (u) { return cls[off + u] === c; };
    }
    if (name === 'nodata') return function (u) { return valueAt(u, j) !== valueAt(u, j); };
    if (name.indexOf('cluster:') === 0) {
      var k = +name.slice(8);
      return function (u) { return clusterAt(u, j) === k; };
    }
    return null;
  }
  function emphasis() {
    var f = filterTest(S.filter), b = S.brush;
    if (!f && !b) return null;
    var out = new Uint8Array(N), off = S.period * N, v = A.values;
    for (var u = 0; u < N; u++) {
      var ok = true;
      if (b) { var x = v[off + u]; ok = x >= b[0] && x <= b[1]; }
      if (ok && f) ok = f(u);
      out[u] = ok ? 1 : 0;
    }
    return out;
  }

  // ---------------------------------------------------------------- map drawing
  var mapCtx, mapImg, mapPx, lut, emph = null;
  function hatchAt(flag, x, y) {
    var stripe = ((x + y) & 7) < 2;
    return flag === FLAG_ND ? (stripe ? HATCH32 : ND32) : (stripe ? HATCH_F32 : ND_F32);
  }
  function redraw() {
    var t0 = performance.now();
    var cv = clusterView(), info = schemeInfo(), off = S.period * N;
    var cls = cv ? A.clusters : classesNow();
    var pal = info.colours.map(hexRgb), p32 = cv ? CL32 : pal.map(pack32);
    var f32 = cv ? CL_F32 : pal.map(function (c) { return pack32(fade(c)); });
    emph = emphasis();
    lut[0] = 0;
    var nd = [];
    for (var u = 0; u < N; u++) {
      var c = cls[off + u], on = !emph || emph[u] === 1;
      if (c < 0) { lut[u + 1] = on ? FLAG_ND : FLAG_ND_FADED; nd.push(u); }
      else lut[u + 1] = on ? p32[c] : f32[c];
    }
    // one flat pass: a pixel is the colour of its unit; then hatch the no-data units, within
    // their bounding boxes once those are known (a full pass before that, at the first paint)
    var lab = A.label, px = mapPx, n = W * H, i, x, y, col;
    for (i = 0; i < n; i++) px[i] = lut[lab[i] + 1];
    if (nd.length && !bx1) {
      for (y = 0, i = 0; y < H; y++) {
        for (x = 0; x < W; x++, i++) { col = px[i]; if (col > 0) px[i] = hatchAt(col, x, y); }
      }
    } else {
      for (var q = 0; q < nd.length; q++) {
        var v = nd[q];
        if (bx1[v] < 0) continue;
        for (y = by0[v]; y <= by1[v]; y++) {
          for (x = bx0[v], i = y * W + x; x <= bx1[v]; x++, i++) {
            if (lab[i] === v) px[i] = hatchAt(px[i], x, y);
          }
        }
      }
    }
    mapCtx.putImageData(mapImg, 0, 0);
    if (cv) drawClusterMarks(mapCtx, off);
    var ms = performance.now() - t0;
    performance.measure('md-redraw', { start: t0, duration: ms });
    $('md-map').dataset.redrawMs = ms.toFixed(2);
    $('md-map').dataset.period = D.periods[S.period];
    $('md-map').dataset.scheme = S.scheme + ':' + (S.scheme === 'run' ? D.run.k : S.k);
    $('md-map').dataset.view = cv ? 'clusters' : 'classes';
  }

  // ---------------------------------------------------------------- cluster marks
  // an outlier is a triangle (up: high among low, down: low among high) and a unit without
  // neighbours a small ring, at the unit's interior point, at a fixed size on screen
  function markPath(ctx, mark, x, y, s) {
    if (mark === 'up' || mark === 'down') {
      var d = mark === 'up' ? 1 : -1;
      ctx.moveTo(x, y - d * s * 0.62); ctx.lineTo(x - s * 0.6, y + d * s * 0.42); ctx.lineTo(x + s * 0.6, y + d * s * 0.42);
      ctx.closePath();
    } else if (mark === 'ring') {
      ctx.moveTo(x + s * 0.34, y); ctx.arc(x, y, s * 0.34, 0, 2 * Math.PI);
    }
  }
  function paintMarks(ctx, mark, colour, pts, s) {
    if (!pts.length) return;
    ctx.beginPath();
    for (var i = 0; i < pts.length; i += 2) markPath(ctx, mark, pts[i], pts[i + 1], s);
    ctx.lineJoin = 'round';
    if (mark === 'ring') {
      ctx.strokeStyle = D.clusterBlank; ctx.lineWidth = Math.max(2.5, s * 0.34); ctx.stroke();
      ctx.strokeStyle = colour; ctx.lineWidth = Math.max(1.2, s * 0.16); ctx.stroke();
    } else {
      // a thin paper-coloured halo keeps a mark apart from a neighbour's fill
      ctx.strokeStyle = D.clusterBlank; ctx.lineWidth = Math.max(1.5, s * 0.16); ctx.stroke();
      ctx.fillStyle = colour; ctx.fill();
    }
  }
  var sprites = {};  // one small canvas per label, emphasis and mark size, stamped per unit
  function sprite(c, faded, s) {
    var key = c + (faded ? 'f' : '') + ':' + s;
    if (!sprites[key]) {
      var half = Math.ceil(s * 0.8) + 2, cv = document.createElement('canvas');
      cv.width = cv.height = 2 * half + 1;
      var l = CL[c], rgb = hexRgb(l.markColour);
      paintMarks(cv.getContext('2d'), l.mark, rgbCss(faded ? fade(rgb) : rgb), [half + 0.5, half + 0.5], s);
      sprites[key] = { cv: cv, half: half };
    }
    return sprites[key];
  }
  function drawClusterMarks(ctx, off) {
    // one pass over the units: stamp the mark's sprite at each precomputed interior point
    // (whole-pixel offsets, so the stamp is copied, never resampled)
    var codes = A.clusters, s = S.markPx;
    for (var u = 0; u < N; u++) {
      var c = codes[off + u], l = c >= 0 ? CL[c] : null;
      if (!l || !l.mark) continue;
      var sp = sprite(c, emph && emph[u] !== 1, s);
      ctx.drawImage(sp.cv, A.ptX[u] - sp.half, A.ptY[u] - sp.half);
    }
  }
  function swatch(look) {
    // the legend's sample: the fill, with the mark drawn as on the map
    var cv = el('canvas', null, 'sw'), dpr = window.devicePixelRatio || 1;
    cv.width = Math.round(22 * dpr); cv.height = Math.round(16 * dpr);
    var ctx = cv.getContext('2d'); ctx.scale(dpr, dpr);
    ctx.fillStyle = look.fill; ctx.fillRect(0, 0, 22, 16);
    if (look.mark) paintMarks(ctx, look.mark, look.markColour, [11, 8], 12);
    return cv;
  }
  var cCounts = null; // [P][labels + 1] units per cluster label and no data
  function clusterCounts() {
    if (!A.clusters) return;
    var L = CL.length;
    cCounts = [];
    for (var j = 0; j < P; j++) {
      var c = new Array(L + 1).fill(0), off = j * N;
      for (var u = 0; u < N; u++) { var x = A.clusters[off + u]; c[x < 0 || x >= L ? L : x]++; }
      cCounts.push(c);
    }
  }

  var bx0, by0, bx1, by1;            // bounding box of each unit in raster pixels
  function unitBoxes() {
    bx0 = new Int32Array(N).fill(W); by0 = new Int32Array(N).fill(H);
    bx1 = new Int32Array(N).fill(-1); by1 = new Int32Array(N).fill(-1);
    var lab = A.label, i = 0;
    for (var y = 0; y < H; y++) {
      for (var x = 0; x < W; x++, i++) {
        var u = lab[i];
        if (u < 0) continue;
        if (x < bx0[u]) bx0[u] = x; if (x > bx1[u]) bx1[u] = x;
        if (y < by0[u]) by0[u] = y; if (y > by1[u]) by1[u] = y;
      }
    }
  }
  function drawLines() {
    // white boundaries between classes; grey ones on the cluster map, where most units are
    // almost paper and would otherwise run together
    var cv = $('md-lines'), ctx = cv.getContext('2d'), img = ctx.createImageData(W, H);
    var g = hexRgb(D.clusterLine || '#ffffff');
    var line = clusterView() ? pack32(g) : (180 << 24) | 0xffffff;
    var px = new Int32Array(img.data.buffer), lab = A.label;
    var i = 0;
    for (var y = 0; y < H; y++) {
      for (var x = 0; x < W; x++, i++) {
        var l = lab[i];
        if ((x + 1 < W && lab[i + 1] !== l) || (y + 1 < H && lab[i + W] !== l)) px[i] = line;
      }
    }
    ctx.putImageData(img, 0, 0);
  }
  function outline(px, u, col, inner) {
    // a 2-pixel line on the unit's edge: `inner` on the unit's side (default `col`), `col` outside
    if (inner === undefined) inner = col;
    if (u < 0 || bx1[u] < 0) return;
    var lab = A.label;
    var xa = Math.max(bx0[u] - 1, 0), xb = Math.min(bx1[u] + 1, W - 1);
    var ya = Math.max(by0[u] - 1, 0), yb = Math.min(by1[u] + 1, H - 1);
    for (var y = ya; y <= yb; y++) {
      for (var x = xa, i = y * W + xa; x <= xb; x++, i++) {
        if (lab[i] !== u) continue;
        if (x > 0 && lab[i - 1] !== u) { px[i] = inner; px[i - 1] = col; }
        if (x + 1 < W && lab[i + 1] !== u) { px[i] = inner; px[i + 1] = col; }
        if (y > 0 && lab[i - W] !== u) { px[i] = inner; px[i - W] = col; }
        if (y + 1 < H && lab[i + W] !== u) { px[i] = inner; px[i + W] = col; }
        if (x === 0 || y === 0 || x === W - 1 || y === H - 1) px[i] = inner;
      }
    }
  }
  function neighbours(u) {
    if (!A.nbrPtr || u < 0) return [];
    var out = [];
    for (var q = A.nbrPtr[u]; q < A.nbrPtr[u + 1]; q++) out.push(A.nbrIdx[q]);
    return out;
  }
  function drawMarks() {
    if (!bx1) return;
    var cv = $('md-marks'), ctx = cv.getContext('2d'), img = ctx.createImageData(W, H);
    var px = new Int32Array(img.data.buffer);
    var sel = pack32([23, 78, 166]), nb = pack32([214, 96, 20]), pin = pack32([20, 20, 20]);
    S.selected.forEach(function (u) { outline(px, u, sel); });
    neighbours(S.pinned).forEach(function (u) { outline(px, u, nb); });
    outline(px, S.pinned, pin, pack32([255, 255, 255]));
    ctx.putImageData(img, 0, 0);
  }

  // ---------------------------------------------------------------- map sizing and zoom
  function layoutMap() {
    var wrap = $('md-mapwrap'), stack = $('md-mapstack');
    var availW = wrap.clientWidth - 2, availH = Math.max(window.innerHeight * 0.72, 240);
    var base = Math.min(availW, availH * W / H);
    var w = Math.floor(base * S.zoom), h = Math.floor(w * H / W);
    S.markPx = Math.max(6, Math.round(13 * W / Math.max(base, 1))); // about 13 screen px at 1x
    stack.style.width = w + 'px'; stack.style.height = h + 'px';
    stack.classList.toggle('pixelated', w > W * 1.5);
    $('md-zoom-level').textContent = S.zoom + '\u00d7';
  }
  function setZoom(z) {
    var wrap = $('md-mapwrap');
    var cx = (wrap.scrollLeft + wrap.clientWidth / 2) / Math.max(wrap.scrollWidth, 1);
    var cy = (wrap.scrollTop + wrap.clientHeight / 2) / Math.max(wrap.scrollHeight, 1);
    S.zoom = Math.max(1, Math.min(8, z));
    layoutMap();
    wrap.scrollLeft = cx * wrap.scrollWidth - wrap.clientWidth / 2;
    wrap.scrollTop = cy * wrap.scrollHeight - wrap.clientHeight / 2;
  }
  function unitAtEvent(e) {
    var r = $('md-map').getBoundingClientRect();
    var x = Math.floor((e.clientX - r.left) / r.width * W), y = Math.floor((e.clientY - r.top) / r.height * H);
    if (x < 0 || y < 0 || x >= W || y >= H) return -1;
    return A.label[y * W + x];
  }

  // ---------------------------------------------------------------- tooltip and inspect card
  function showTip(u, e) {
    var tip = $('md-tip');
    if (u < 0) { tip.hidden = true; return; }
    clear(tip);
    var rows = facts(u, S.period);
    tip.appendChild(el('b', rows[1][1] + ' \u00b7 ' + rows[0][1]));
    rows.slice(3).forEach(function (r) { tip.appendChild(el('div', r[0] + ': ' + r[1], 'row2')); });
    tip.dataset.unit = D.units[u];
    tip.hidden = false;
    var col = $('md-tip').parentNode.getBoundingClientRect();
    var x = e.clientX - col.left + 14, y = e.clientY - col.top + 14;
    if (x + tip.offsetWidth > col.width) x = Math.max(0, e.clientX - col.left - tip.offsetWidth - 10);
    tip.style.left = x + 'px'; tip.style.top = y + 'px';
  }
  function renderInspect() {
    var dl = $('md-inspect'); clear(dl);
    var u = S.pinned;
    if (u < 0) {
      dl.appendChild(el('dt', 'None')); dl.appendChild(el('dd', 'click a unit on the map or in a list'));
      dl.dataset.unit = '';
    } else {
      facts(u, S.period).forEach(function (r) { dl.appendChild(el('dt', r[0])); dl.appendChild(el('dd', r[1])); });
      var nb = neighbours(u);
      if (A.nbrPtr) { dl.appendChild(el('dt', 'Neighbours')); dl.appendChild(el('dd', nb.length + ' (outlined in orange)')); }
      dl.dataset.unit = D.units[u];
    }
    drawTrajectory();
  }

  // ---------------------------------------------------------------- canvases with device pixels
  function sizeCanvas(cv, cssH) {
    // resize the backing store only when the size changed (a resize reallocates it)
    var dpr = window.devicePixelRatio || 1, w = Math.max(cv.clientWidth, 50);
    var bw = Math.round(w * dpr), bh = Math.round(cssH * dpr);
    if (cv.width !== bw || cv.height !== bh) { cv.width = bw; cv.height = bh; }
    var ctx = cv.getContext('2d'); ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
    ctx.clearRect(0, 0, w, cssH);
    return { ctx: ctx, w: w, h: cssH };
  }

  // ---------------------------------------------------------------- period strip
  var counts = null; // [P][k+1] units per class and no data, for the current classing
  function classCounts() {
    var cls = classesNow(), info = schemeInfo(), k = info.colours.length;
    counts = [];
    for (var j = 0; j < P; j++) {
      var c = new Array(k + 1).fill(0), off = j * N;
      for (var u = 0; u < N; u++) { var x = cls[off + u]; c[x < 0 ? k : x]++; }
      counts.push(c);
    }
  }
  function drawStrip() {
    var cv = $('md-strip-canvas'), g = sizeCanvas(cv, 72), ctx = g.ctx;
    var info = schemeInfo(), k = info.colours.length, top = 4, bottom = 18, bh = g.h - top - bottom;
    var colW = g.w / P, gap = Math.min(4, colW * 0.2);
    ctx.clearRect(0, 0, g.w, g.h);
    var clv = clusterView();
    for (var j = 0; j < P; j++) {
      var x = j * colW + gap / 2, w = colW - gap, y = top + bh, c = counts[j];
      if (clv) { stripClusterBar(ctx, j, x, w, top, bh); }
      else for (var i = 0; i <= k; i++) {
        var hgt = bh * c[i] / Math.max(N, 1);
        ctx.fillStyle = i < k ? info.colours[i] : D.nodata;
        ctx.fillRect(x, y - hgt, w, hgt);
        y -= hgt;
      }
      if (j === S.period) {
        ctx.strokeStyle = '#111'; ctx.lineWidth = 2.5; ctx.strokeRect(x - 1, top - 2, w + 2, bh + 4);
      }
    }
    ctx.fillStyle = '#1f2430'; ctx.font = '11px system-ui, sans-serif'; ctx.textAlign = 'center';
    var every = Math.max(1, Math.ceil(40 / colW));
    for (var jj = 0; jj < P; jj++) {
      if (jj % every !== 0 && jj !== S.period && jj !== P - 1) continue;
      if (jj !== S.period && Math.abs(jj - S.period) < every) continue;
      ctx.font = (jj === S.period ? 'bold ' : '') + '11px system-ui, sans-serif';
      ctx.fillText(D.periods[jj], jj * colW + colW / 2, g.h - 4);
    }
    var strip = $('md-strip');
    strip.setAttribute('aria-valuemin', '0'); strip.setAttribute('aria-valuemax', String(P - 1));
    strip.setAttribute('aria-valuenow', String(S.period)); strip.setAttribute('aria-valuetext', D.periods[S.period] + (clv ? ': ' + coreShares(S.period) : ''));
    strip.title = clv ? 'Bars: share of units in high-high (top) and low-low (bottom) cores per period. ' + D.periods[S.period] + ': ' + coreShares(S.period) : '';
  }

  function coreScale() {
    // the bars' top: the largest share of units in the two cores over all periods, rounded
    // up to 5%, so that small shares still show (the compare line says the scale)
    var m = 0;
    for (var j = 0; j < P; j++) m = Math.max(m, (cCounts[j][0] + (CL[1] ? cCounts[j][1] : 0)) / Math.max(N, 1));
    return Math.min(1, Math.max(0.05, Math.ceil(m * 20) / 20));
  }
  function coreShares(j) {
    return [0, 1].filter(function (i) { return CL[i]; }).map(function (i) {
      return CL[i].term + ' ' + Math.round(100 * cCounts[j][i] / Math.max(N, 1)) + '%';
    }).join(', ');
  }
  function stripClusterBar(ctx, j, x, w, top, bh) {
    // the period's shares of the two cores: low-low from the bottom, high-high above it, the
    // rest of the units blank (outlined so an empty period still shows its bar)
    var c = cCounts[j], y = top + bh, scale = coreScale();
    ctx.fillStyle = D.clusterBlank; ctx.fillRect(x, top, w, bh);
    ctx.strokeStyle = D.clusterLine; ctx.lineWidth = 1; ctx.strokeRect(x + 0.5, top + 0.5, w - 1, bh - 1);
    [1, 0].forEach(function (i) {
      if (!CL[i]) return;
      var hgt = bh * c[i] / Math.max(N, 1) / scale;
      ctx.fillStyle = CL[i].fill; ctx.fillRect(x, y - hgt, w, hgt); y -= hgt;
    });
  }

  // ---------------------------------------------------------------- legend
  function legendItems() {
    // [swatch look or colour, words, trade term, count, filter name] for the current view
    var j = S.period, items = [];
    if (clusterView()) {
      var cc = cCounts[j];
      CL.forEach(function (l, i) { items.push([l, l.words, l.term, cc[i], 'cluster:' + i]); });
      items.push([null, 'no data', '', cc[CL.length], 'cluster:-1']);
      return items;
    }
    var info = schemeInfo(), labels = labelsAt(info, j), c = counts[j];
    info.colours.forEach(function (col, i) { if (i < labels.length) items.push([col, labels[i], '', c[i], 'class:' + i]); });
    items.push([null, 'no data', '', c[info.colours.length], 'nodata']);
    return items;
  }
  function drawLegend() {
    var ul = $('md-legend');
    clear(ul);
    $('md-legend-period').textContent = D.periods[S.period];
    ul.dataset.view = clusterView() ? 'clusters' : 'classes';
    if (clusterView()) {
      legendItems().forEach(function (it) {
        var li = el('li'), name = el('span');
        li.appendChild(it[0] ? swatch(it[0]) : el('span', null, 'sw nd'));
        name.appendChild(el('span', it[1]));
        if (it[2]) name.appendChild(el('span', it[2], 'term'));
        li.appendChild(name); li.appendChild(el('span', it[3], 'n'));
        li.dataset.label = it[0] ? it[0].label : 'no data';
        if (S.filter === it[4]) li.classList.add('on');
        li.addEventListener('click', function () { setFilter(S.filter === it[4] ? 'all' : it[4]); });
        ul.appendChild(li);
      });
      return;
    }
    var info = schemeInfo(), labels = labelsAt(info, S.period), c = counts[S.period];
    info.colours.forEach(function (col, i) {
      if (i >= labels.length) return;
      var li = el('li'), sw = el('span', null, 'sw');
      sw.style.background = col;
      li.appendChild(sw); li.appendChild(el('span', labels[i])); li.appendChild(el('span', c[i], 'n'));
      li.dataset.cls = String(i);
      if (S.filter === 'class:' + i) li.classList.add('on');
      li.addEventListener('click', function () { setFilter(S.filter === 'class:' + i ? 'all' : 'class:' + i); });
      ul.appendChild(li);
    });
    var nd = el('li'); nd.appendChild(el('span', null, 'sw nd')); nd.appendChild(el('span', 'no data'));
    nd.appendChild(el('span', c[info.colours.length], 'n'));
    nd.addEventListener('click', function () { setFilter(S.filter === 'nodata' ? 'all' : 'nodata'); });
    if (S.filter === 'nodata') nd.classList.add('on');
    ul.appendChild(nd);
  }

  // ---------------------------------------------------------------- histogram and brush
  var HP = { left: 10, right: 10, top: 8, bottom: 22 };
  var brushDrag = null;
  function hx(v, g) { var lo = D.range[0], hi = D.range[1]; return HP.left + (v - lo) / ((hi - lo) || 1) * (g.w - HP.left - HP.right); }
  function hv(x, w) { var lo = D.range[0], hi = D.range[1]; return lo + (x - HP.left) / (w - HP.left - HP.right) * (hi - lo); }
  function drawHist() {
    var cv = $('md-hist'), g = sizeCanvas(cv, 150), ctx = g.ctx;
    var info = schemeInfo(), k = info.colours.length, cls = classesNow(), off = S.period * N, v = A.values;
    var lo = D.range[0], hi = D.range[1], span = (hi - lo) || 1;
    var nb = Math.max(10, Math.min(48, Math.round(Math.sqrt(N) * 1.5)));
    var bins = new Float64Array(nb * k), tot = new Float64Array(nb);
    for (var u = 0; u < N; u++) {
      var x = v[off + u], c = cls[off + u];
      if (x !== x || c < 0) continue;
      var b = Math.min(nb - 1, Math.max(0, Math.floor((x - lo) / span * nb)));
      bins[b * k + c]++; tot[b]++;
    }
    var maxc = Math.max.apply(null, Array.prototype.slice.call(tot).concat([1]));
    var pw = g.w - HP.left - HP.right, ph = g.h - HP.top - HP.bottom, bw = pw / nb;
    ctx.clearRect(0, 0, g.w, g.h);
    for (var i = 0; i < nb; i++) {
      var y = HP.top + ph;
      for (var cc = 0; cc < k; cc++) {
        var hgt = ph * bins[i * k + cc] / maxc;
        if (hgt <= 0) continue;
        ctx.fillStyle = info.colours[cc];
        ctx.fillRect(HP.left + i * bw + 0.5, y - hgt, Math.max(bw - 1, 0.5), hgt);
        y -= hgt;
      }
    }
    ctx.strokeStyle = '#8a93a3'; ctx.lineWidth = 1;
    ctx.beginPath(); ctx.moveTo(HP.left, HP.top + ph + 0.5); ctx.lineTo(HP.left + pw, HP.top + ph + 0.5); ctx.stroke();
    var e = edgesAt(info, S.period);
    ctx.strokeStyle = '#1f2430'; ctx.setLineDash([3, 3]);
    for (var q = 0; q < e.length - 1; q++) {
      var xe = Math.round(hx(e[q], g)) + 0.5;
      ctx.beginPath(); ctx.moveTo(xe, HP.top); ctx.lineTo(xe, HP.top + ph); ctx.stroke();
    }
    ctx.setLineDash([]);
    // selected and pinned units as ticks under the axis
    var marks = S.selected.slice(); if (S.pinned >= 0) marks.push(S.pinned);
    marks.forEach(function (u) {
      var x = v[off + u]; if (x !== x) return;
      ctx.strokeStyle = u === S.pinned ? '#111' : '#174ea6'; ctx.lineWidth = 2;
      var xx = hx(x, g);
      ctx.beginPath(); ctx.moveTo(xx, HP.top + ph + 2); ctx.lineTo(xx, HP.top + ph + 9); ctx.stroke();
    });
    ctx.fillStyle = '#5d6677'; ctx.font = '11px system-ui, sans-serif';
    ctx.textAlign = 'left'; ctx.fillText(fmt(lo), HP.left, g.h - 3);
    ctx.textAlign = 'right'; ctx.fillText(fmt(hi), g.w - HP.right, g.h - 3);
    var rng = brushDrag ? [Math.min(brushDrag[0], brushDrag[1]), Math.max(brushDrag[0], brushDrag[1])] : S.brush;
    if (rng) {
      var xa = hx(rng[0], g), xb = hx(rng[1], g);
      ctx.fillStyle = 'rgba(36,82,122,0.16)'; ctx.fillRect(xa, HP.top - 4, xb - xa, ph + 4);
      ctx.strokeStyle = '#24527a'; ctx.lineWidth = 1.5; ctx.strokeRect(xa, HP.top - 4, xb - xa, ph + 4);
    }
    cv.dataset.left = String(HP.left); cv.dataset.right = String(g.w - HP.right);
    cv.dataset.lo = String(lo); cv.dataset.hi = String(hi);
  }
  function histValue(e) {
    var cv = $('md-hist'), r = cv.getBoundingClientRect();
    var v = hv(e.clientX - r.left, r.width);
    return Math.max(D.range[0], Math.min(D.range[1], v));
  }
  function brushEvents() {
    var cv = $('md-hist'), startX = 0;
    cv.addEventListener('pointerdown', function (e) {
      cv.setPointerCapture(e.pointerId); startX = e.clientX;
      var v = histValue(e); brushDrag = [v, v]; drawHist();
    });
    cv.addEventListener('pointermove', function (e) {
      if (!brushDrag) return; brushDrag[1] = histValue(e); drawHist();
    });
    cv.addEventListener('pointerup', function (e) {
      if (!brushDrag) return;
      brushDrag[1] = histValue(e);
      var a = Math.min(brushDrag[0], brushDrag[1]), b = Math.max(brushDrag[0], brushDrag[1]);
      brushDrag = null;
      S.brush = Math.abs(e.clientX - startX) < 3 ? null : [a, b];
      update({ marks: false });
    });
  }

  // ---------------------------------------------------------------- filter and list
  function quickCounts(j) {
    // units that jumped, jumped credibly, entered a high-high cluster in period j (one pass)
    var jump = 0, cred = 0, entered = 0, off = j * N;
    for (var u = 0; u < N; u++) {
      if (A.jumps && A.jumps[off + u] !== 0) { jump++; if (A.credible && A.credible[off + u] === 2) cred++; }
      if (A.clusters && enteredHH(u, j)) entered++;
    }
    return { jump: jump, credible: cred, entered: entered };
  }
  function filterOptions() {
    var sel = $('md-filter'), j = S.period, keep = S.filter, q = quickCounts(j), c = counts[j];
    clear(sel);
    var opts = [['all', 'all units', N]];
    if (A.jumps) opts.push(['jump', 'jumped into ' + D.periods[j], q.jump]);
    if (A.credible) opts.push(['credible', 'credible jumps into ' + D.periods[j], q.credible]);
    if (A.clusters) opts.push(['entered', 'entered a high-high cluster in ' + D.periods[j], q.entered]);
    var info = schemeInfo(), labels = labelsAt(info, j);
    labels.forEach(function (l, i) { opts.push(['class:' + i, 'class ' + (i + 1) + ' (' + l + ')', c[i]]); });
    opts.push(['nodata', 'no data', c[info.colours.length]]);
    if (clusterView()) {
      CL.forEach(function (l, i) { opts.push(['cluster:' + i, l.words + (l.term ? ' (' + l.term + ')' : ''), cCounts[j][i]]); });
      opts.push(['cluster:-1', 'no cluster data', cCounts[j][CL.length]]);
    }
    opts.forEach(function (o) {
      var op = el('option', o[1] + ' \u2014 ' + o[2]); op.value = o[0]; sel.appendChild(op);
    });
    sel.value = opts.some(function (o) { return o[0] === keep; }) ? keep : 'all';
    S.filter = sel.value;
  }
  function setFilter(name) { S.filter = name; update({ marks: false }); }
  function renderList() {
    var ol = $('md-list'), txt = $('md-brush');
    clear(ol);
    if (!emph) {
      txt.textContent = S.selected.length ? S.selected.length + ' units selected on the map.' : 'Drag across the histogram to pick a range of values.';
      S.selected.forEach(function (u) { ol.appendChild(listItem(u)); });
      txt.dataset.lo = ''; txt.dataset.hi = ''; ol.dataset.count = String(S.selected.length);
      return;
    }
    var ids = [];
    for (var u = 0; u < N; u++) if (emph[u]) ids.push(u);
    var off = S.period * N;
    ids.sort(function (a, b) { return (A.values[off + b] || -Infinity) - (A.values[off + a] || -Infinity); });
    var what = [];
    if (S.brush) what.push('values ' + fmt(S.brush[0]) + ' to ' + fmt(S.brush[1]));
    if (S.filter !== 'all') what.push($('md-filter').selectedOptions[0].textContent.split(' \u2014 ')[0]);
    txt.textContent = ids.length + ' units: ' + what.join(', ') + ' (' + D.periods[S.period] + ')';
    txt.dataset.lo = S.brush ? String(S.brush[0]) : ''; txt.dataset.hi = S.brush ? String(S.brush[1]) : '';
    ol.dataset.count = String(ids.length);
    var cap = 300;
    ids.slice(0, cap).forEach(function (u) { ol.appendChild(listItem(u)); });
    if (ids.length > cap) ol.appendChild(el('li', '\u2026 and ' + (ids.length - cap) + ' more'));
  }
  function listItem(u) {
    var li = el('li'), b = el('button');
    b.type = 'button';
    b.appendChild(el('span', D.units[u] + ' \u00b7 ' + D.names[u] + ' '));
    b.appendChild(el('span', fmt(valueAt(u, S.period)), 'v'));
    b.addEventListener('click', function () { pin(u); });
    li.dataset.unit = D.units[u];
    li.appendChild(b);
    return li;
  }

  // ---------------------------------------------------------------- trajectory
  function drawTrajectory() {
    var cv = $('md-traj'), g = sizeCanvas(cv, 180), ctx = g.ctx, key = $('md-traj-key');
    ctx.clearRect(0, 0, g.w, g.h);
    var u = S.pinned;
    cv.style.display = u < 0 ? 'none' : 'block';
    if (u < 0) { key.textContent = ''; cv.dataset.unit = ''; return; }
    var info = schemeInfo(), L = 40, R = 8, T = 8, B = 20, pw = g.w - L - R, ph = g.h - T - B;
    var series = [], lo = Infinity, hi = -Infinity;
    var others = S.selected.filter(function (x) { return x !== u; }).slice(0, 25);
    [u].concat(others).forEach(function (w) {
      for (var j = 0; j < P; j++) {
        var x = valueAt(w, j);
        if (x === x) { lo = Math.min(lo, x); hi = Math.max(hi, x); }
        if (A.raw && w === u) { var r = A.raw[j * N + w]; if (r === r) { lo = Math.min(lo, r); hi = Math.max(hi, r); } }
      }
    });
    if (!isFinite(lo)) { key.textContent = 'No values for this unit.'; return; }
    var pad = (hi - lo) * 0.12 || Math.abs(hi) * 0.1 || 1; lo -= pad; hi += pad;
    var X = function (j) { return L + (P === 1 ? pw / 2 : j * pw / (P - 1)); };
    var Y = function (v) { return T + ph - (v - lo) / (hi - lo) * ph; };
    // class bands behind the line, one column per period (breaks may differ by period)
    for (var j = 0; j < P; j++) {
      var e = edgesAt(info, j), xa = j === 0 ? L : (X(j - 1) + X(j)) / 2, xb = j === P - 1 ? L + pw : (X(j) + X(j + 1)) / 2;
      for (var c = 0; c < info.colours.length && c < e.length; c++) {
        var top = c === e.length - 1 ? hi : Math.min(e[c], hi), bot = c === 0 ? lo : Math.max(e[c - 1], lo);
        if (top <= bot) continue;
        ctx.globalAlpha = 0.45; ctx.fillStyle = info.colours[c];
        ctx.fillRect(xa, Y(top), xb - xa, Y(bot) - Y(top));
      }
    }
    ctx.globalAlpha = 1;
    ctx.strokeStyle = '#111'; ctx.setLineDash([2, 3]);
    ctx.beginPath(); ctx.moveTo(X(S.period) + 0.5, T); ctx.lineTo(X(S.period) + 0.5, T + ph); ctx.stroke(); ctx.setLineDash([]);
    function line(get, colour, width, dash) {
      ctx.strokeStyle = colour; ctx.lineWidth = width; ctx.setLineDash(dash || []);
      ctx.beginPath(); var on = false;
      for (var j = 0; j < P; j++) {
        var v = get(j);
        if (v !== v) { on = false; continue; }
        if (on) ctx.lineTo(X(j), Y(v)); else ctx.moveTo(X(j), Y(v));
        on = true;
      }
      ctx.stroke(); ctx.setLineDash([]);
    }
    others.forEach(function (w) { line(function (j) { return valueAt(w, j); }, 'rgba(23,78,166,0.55)', 1); });
    if (A.raw) line(function (j) { return A.raw[j * N + u]; }, '#6b7280', 1.2, [4, 3]);
    line(function (j) { return valueAt(u, j); }, '#111', 2.2);
    for (var jj = 0; jj < P; jj++) {
      var v = valueAt(u, jj); if (v !== v) continue;
      var s = jumpAt(u, jj);
      ctx.fillStyle = '#111';
      ctx.beginPath(); ctx.arc(X(jj), Y(v), jj === S.period ? 4 : 2.5, 0, 2 * Math.PI); ctx.fill();
      if (s) { // a triangle at each jump, pointing the way it went
        var d = s > 0 ? -1 : 1, yy = Math.max(T + 8, Math.min(T + ph - 8, Y(v) + d * 9));
        if (Math.abs(yy - Y(v)) < 6) { d = -d; yy = Y(v) + d * 9; }
        ctx.fillStyle = '#c2410c'; ctx.beginPath();
        ctx.moveTo(X(jj), yy + d * 5); ctx.lineTo(X(jj) - 5, yy - d * 3); ctx.lineTo(X(jj) + 5, yy - d * 3); ctx.fill();
      }
    }
    ctx.fillStyle = '#5d6677'; ctx.font = '11px system-ui, sans-serif'; ctx.textAlign = 'right';
    ctx.fillText(fmt(hi), L - 4, T + 9); ctx.fillText(fmt(lo), L - 4, T + ph);
    ctx.textAlign = 'left'; ctx.fillText(D.periods[0], L, g.h - 4);
    ctx.textAlign = 'right'; ctx.fillText(D.periods[P - 1], L + pw, g.h - 4);
    var parts = ['value per period (black) over the class bands'];
    if (A.raw) parts.push('raw rate dashed grey; the map shows the smoothed value (' + D.smoothing + ')');
    if (A.jumps) parts.push('orange triangles: jumps');
    if (others.length) parts.push(others.length + (others.length === 1 ? ' selected unit' : ' selected units') + ' in blue');
    key.textContent = parts.join('; ') + '.';
    cv.dataset.unit = D.units[u];
  }

  // ---------------------------------------------------------------- compare line
  function compareLine() {
    var p = $('md-compare'), info = schemeInfo(), cls = classesNow(), run = A.classes, j = S.period;
    var k = info.colours.length, txt;
    var hold = [];
    var pooled = !info.perPeriod;
    if (pooled) {
      for (var jj = 0; jj < P; jj++) {
        var empty = [];
        for (var c = 0; c < k; c++) if (counts[jj][c] === 0) empty.push(c + 1);
        if (empty.length && counts[jj].slice(0, k).some(function (x) { return x > 0; })) hold.push(D.periods[jj] + ' (class ' + empty.join(', ') + ')');
      }
    }
    var holdTxt = !pooled ? 'Breaks differ by period: frames are not comparable.' :
      hold.length === 0 ? 'One set of breaks for every period, and every class is used in every period.' :
        'One set of breaks for every period, but some classes are empty in ' + hold.slice(0, 4).join(', ') + (hold.length > 4 ? ' and ' + (hold.length - 4) + ' more' : '') + '.';
    if (clusterView()) {
      txt = 'Showing local clusters in ' + D.periods[j] + ': ' + coreShares(j) + ' of units. Only the cores are filled; ' +
        'triangles mark outliers. The bars under the map show each period\u2019s cores on a scale up to ' +
        Math.round(coreScale() * 100) + '% of units.';
      p.dataset.changed = '0';
    } else if (S.scheme === 'run') {
      txt = 'Showing the run\u2019s classes: ' + info.describe + '. ' + holdTxt;
      p.dataset.changed = '0';
    } else {
      var now = 0, nowN = 0, key = S.scheme + ':' + S.k;
      if (!changedAll[key]) {
        var diff = 0, valid = 0;
        for (var q = 0; q < N * P; q++) {
          if (run[q] < 0) continue;
          valid++; if (cls[q] !== run[q]) diff++;
        }
        changedAll[key] = [diff, valid];
      }
      var all = changedAll[key][0], allN = changedAll[key][1];
      var off = j * N;
      for (var u = 0; u < N; u++) { if (run[off + u] < 0) continue; nowN++; if (cls[off + u] !== run[off + u]) now++; }
      txt = 'Compared with the run\u2019s classes (' + D.run.describe + '): ' + now + ' of ' + nowN + ' units change class in ' + D.periods[j] +
        '; ' + all + ' of ' + allN + ' unit-periods over all periods' + (k !== D.run.k ? ' (k differs: compared by class number)' : '') + '. ' + holdTxt;
      p.dataset.changed = String(now);
    }
    p.textContent = txt;
  }

  // ---------------------------------------------------------------- state changes
  function update(opts) {
    opts = opts || {};
    var parts = [['counts', function () { if (opts.classes) classCounts(); }], ['filter', filterOptions],
      ['map', redraw], ['strip', function () { $('md-period').textContent = D.periods[S.period]; drawStrip(); }],
      ['legend', drawLegend], ['hist', drawHist], ['list', renderList], ['compare', compareLine],
      ['inspect', renderInspect], ['marks', function () { if (opts.marks) drawMarks(); }]];
    var times = {};
    parts.forEach(function (p) { var t = performance.now(); p[1](); times[p[0]] = +(performance.now() - t).toFixed(2); });
    $('md-map').dataset.updateMs = JSON.stringify(times);
  }
  function setPeriod(j) {
    j = Math.max(0, Math.min(P - 1, j));
    if (j === S.period) return;
    var t0 = performance.now();
    S.period = j; update();
    performance.measure('md-period-change', { start: t0, duration: performance.now() - t0 });
  }
  function setView(v) {
    if (v === S.view || (v === 'clusters' && !A.clusters)) return;
    S.view = v;
    ['classes', 'clusters'].forEach(function (x) { $('md-view-' + x).setAttribute('aria-pressed', String(x === v)); });
    if (S.filter.indexOf('cluster:') === 0 && v !== 'clusters') S.filter = 'all';
    if (bx1) drawLines();
    update();
  }
  function pin(u) { S.pinned = (u === S.pinned) ? -1 : u; drawMarks(); drawHist(); renderInspect(); }
  function toggleSelect(u) {
    var i = S.selected.indexOf(u);
    if (i >= 0) S.selected.splice(i, 1); else S.selected.push(u);
    drawMarks(); drawHist(); renderList(); drawTrajectory();
  }
  function play(on) {
    S.playing = on; clearInterval(S.timer);
    var b = $('md-play'); b.textContent = on ? 'Pause' : 'Play'; b.setAttribute('aria-pressed', String(on));
    if (!on) return;
    if (S.period === P - 1) setPeriod(0);
    S.timer = setInterval(function () { if (S.period >= P - 1) play(false); else setPeriod(S.period + 1); }, 900);
  }

  // ---------------------------------------------------------------- export
  function exportPng() {
    var info = schemeInfo(), items = legendItems();
    var side = 360, head = 96, foot = 56, w = W + side + 40, h = Math.max(H, 40 + 26 * (items.length + 2)) + head + foot;
    var cv = document.createElement('canvas'); cv.width = w; cv.height = h;
    var ctx = cv.getContext('2d');
    ctx.fillStyle = '#fff'; ctx.fillRect(0, 0, w, h);
    ctx.fillStyle = '#1f2430'; ctx.font = 'bold 30px system-ui, sans-serif'; ctx.fillText(D.title || '', 20, 42);
    ctx.font = '18px system-ui, sans-serif'; ctx.fillStyle = '#5d6677'; ctx.fillText(D.subtitle || '', 20, 70);
    ctx.drawImage($('md-map'), 20, head); ctx.drawImage($('md-lines'), 20, head); ctx.drawImage($('md-marks'), 20, head);
    var x = W + 40, y = head + 10;
    ctx.fillStyle = '#1f2430'; ctx.font = 'bold 44px system-ui, sans-serif'; ctx.fillText(D.periods[S.period], x, y + 40);
    y += 70; ctx.font = '16px system-ui, sans-serif';
    items.forEach(function (it) {
      var look = it[0] && typeof it[0] === 'object' ? it[0] : null;
      ctx.fillStyle = look ? look.fill : it[0] || D.nodata; ctx.fillRect(x, y, 30, 18);
      if (look && look.mark) paintMarks(ctx, look.mark, look.markColour, [x + 15, y + 9], 14);
      ctx.strokeStyle = 'rgba(0,0,0,.3)'; ctx.lineWidth = 1; ctx.strokeRect(x + 0.5, y + 0.5, 29, 17);
      ctx.fillStyle = '#1f2430'; ctx.fillText(it[1] + (it[2] ? ' \u00b7 ' + it[2] : '') + '   (' + it[3] + ')', x + 40, y + 15); y += 26;
    });
    ctx.fillStyle = '#5d6677'; ctx.font = '14px system-ui, sans-serif';
    ctx.fillText((clusterView() ? 'Local clusters (local Moran)' : info.describe) + (D.source ? ' \u00b7 Source: ' + D.source : ''), 20, h - 30);
    if (D.notice) ctx.fillText(D.notice, 20, h - 10);
    cv.toBlob(function (blob) {
      var a = document.createElement('a');
      a.href = URL.createObjectURL(blob); a.download = 'mapdrift-' + D.periods[S.period] + '.png';
      document.body.appendChild(a); a.click(); a.remove();
      setTimeout(function () { URL.revokeObjectURL(a.href); }, 2000);
    }, 'image/png');
  }

  // ---------------------------------------------------------------- static texts
  function texts() {
    $('md-title').textContent = D.title || D.variable;
    $('md-subtitle').textContent = D.subtitle || '';
    if (D.notice) { $('md-notice').textContent = D.notice; $('md-notice').hidden = false; }
    var f = $('md-footer');
    f.appendChild(el('h3', 'Method'));
    var ul = el('ul');
    D.method.forEach(function (m) { ul.appendChild(el('li', m)); });
    ul.appendChild(el('li', 'Breaks (' + D.run.describe + '): ' + D.run.labels[0].join(' | ') + (D.run.perPeriod ? ' (first period; they differ by period)' : '')));
    f.appendChild(ul);
    if (D.source) { f.appendChild(el('h3', 'Source')); f.appendChild(el('p', D.source)); }
    if (D.cautions.length) {
      f.appendChild(el('h3', 'Cautions'));
      var cu = el('ul'); D.cautions.forEach(function (c) { cu.appendChild(el('li', c)); }); f.appendChild(cu);
    }
    f.appendChild(el('p', 'Made with mapdrift. This page works offline and sends nothing anywhere.'));
    var sch = $('md-scheme');
    [['run', 'the run\u2019s own (' + D.run.describe.split(',')[0] + ')'], ['quantile', 'quantile'],
      ['natural-breaks', 'natural breaks'], ['equal-interval', 'equal interval']].forEach(function (o) {
      var op = el('option', o[1]); op.value = o[0]; sch.appendChild(op);
    });
    var ks = $('md-k');
    for (var k = 2; k <= 9; k++) { var op = el('option', String(k)); op.value = String(k); ks.appendChild(op); }
    ks.value = String(Math.min(Math.max(D.run.k, 2), 9)); ks.disabled = true;
  }

  // ---------------------------------------------------------------- events
  function events() {
    var stack = $('md-mapstack'), last = -2;
    stack.addEventListener('mousemove', function (e) {
      var t0 = performance.now();
      var u = unitAtEvent(e);
      if (u !== last) { showTip(u, e); last = u; S.hover = u; }
      else if (u >= 0) { var tip = $('md-tip'), col = tip.parentNode.getBoundingClientRect(); tip.style.left = (e.clientX - col.left + 14) + 'px'; tip.style.top = (e.clientY - col.top + 14) + 'px'; }
      var ms = performance.now() - t0;
      performance.measure('md-hover', { start: t0, duration: ms });
      stack.dataset.hoverMs = ms.toFixed(3);
    });
    stack.addEventListener('mouseleave', function () { $('md-tip').hidden = true; last = -2; S.hover = -1; });
    // when zoomed in, dragging the map pans it (a drag is not a click)
    var pan = null;
    stack.addEventListener('pointerdown', function (e) {
      if (S.zoom > 1 && e.button === 0) pan = { x: e.clientX, y: e.clientY, moved: false };
    });
    window.addEventListener('pointermove', function (e) {
      if (!pan) return;
      var dx = e.clientX - pan.x, dy = e.clientY - pan.y;
      if (!pan.moved && Math.abs(dx) + Math.abs(dy) < 5) return;
      pan.moved = true;
      var wrap = $('md-mapwrap'); wrap.scrollLeft -= dx; wrap.scrollTop -= dy;
      pan.x = e.clientX; pan.y = e.clientY;
    });
    window.addEventListener('pointerup', function () { setTimeout(function () { pan = null; }, 0); });
    stack.addEventListener('click', function (e) {
      if (pan && pan.moved) return;
      var u = unitAtEvent(e);
      if (e.shiftKey) { if (u >= 0) toggleSelect(u); } else pin(u < 0 ? S.pinned : u);
    });
    var strip = $('md-strip'), dragging = false;
    function stripPeriod(e) { var r = strip.getBoundingClientRect(); return Math.floor((e.clientX - r.left) / r.width * P); }
    strip.addEventListener('pointerdown', function (e) { dragging = true; strip.setPointerCapture(e.pointerId); setPeriod(stripPeriod(e)); strip.focus(); });
    strip.addEventListener('pointermove', function (e) { if (dragging) setPeriod(stripPeriod(e)); });
    strip.addEventListener('pointerup', function () { dragging = false; });
    document.addEventListener('keydown', function (e) {
      var tag = (e.target && e.target.tagName) || '';
      if (tag === 'SELECT' || tag === 'INPUT' || tag === 'TEXTAREA' || e.ctrlKey || e.metaKey || e.altKey) return;
      if (e.key === 'ArrowRight' || e.key === 'ArrowUp') { setPeriod(S.period + 1); e.preventDefault(); }
      else if (e.key === 'ArrowLeft' || e.key === 'ArrowDown') { setPeriod(S.period - 1); e.preventDefault(); }
      else if (e.key === 'Home') { setPeriod(0); e.preventDefault(); }
      else if (e.key === 'End') { setPeriod(P - 1); e.preventDefault(); }
      else if (e.key === ' ' && tag !== 'BUTTON') { play(!S.playing); e.preventDefault(); }
      else if (e.key === '+' || e.key === '=') setZoom(S.zoom * 2);
      else if (e.key === '-') setZoom(S.zoom / 2);
      else if (e.key === 'Escape') { S.brush = null; S.selected = []; S.pinned = -1; drawMarks(); update(); }
    });
    $('md-play').addEventListener('click', function () { play(!S.playing); });
    $('md-zoom-in').addEventListener('click', function () { setZoom(S.zoom * 2); });
    $('md-zoom-out').addEventListener('click', function () { setZoom(S.zoom / 2); });
    $('md-scheme').addEventListener('change', function (e) {
      S.scheme = e.target.value; $('md-k').disabled = S.scheme === 'run';
      S.k = +$('md-k').value; update({ classes: true });
    });
    $('md-k').addEventListener('change', function (e) { S.k = +e.target.value; update({ classes: true }); });
    $('md-filter').addEventListener('change', function (e) { setFilter(e.target.value); });
    $('md-clear').addEventListener('click', function () { S.brush = null; S.selected = []; S.filter = 'all'; drawMarks(); update(); });
    $('md-export').addEventListener('click', exportPng);
    ['classes', 'clusters'].forEach(function (v) {
      $('md-view-' + v).addEventListener('click', function () { setView(v); });
    });
    var pending = 0;
    window.addEventListener('resize', function () {
      clearTimeout(pending);
      pending = setTimeout(function () { layoutMap(); drawStrip(); drawHist(); drawTrajectory(); }, 120);
    });
    brushEvents();
  }

  // ---------------------------------------------------------------- start
  function init() {
    var keys = Object.keys(D.arrays);
    performance.mark('md-start');
    return Promise.all(keys.map(function (key) { return unpack(D.arrays[key]); })).then(function (arrs) {
      keys.forEach(function (key, i) { A[key] = arrs[i]; });
      performance.mark('md-decoded');
      ['md-map', 'md-lines', 'md-marks'].forEach(function (id) { var c = $(id); c.width = W; c.height = H; });
      $('md-map').dataset.width = String(W); $('md-map').dataset.height = String(H);
      mapCtx = $('md-map').getContext('2d');
      mapImg = mapCtx.createImageData(W, H);
      mapPx = new Int32Array(mapImg.data.buffer);
      lut = new Int32Array(N + 1);
      clusterCounts();
      $('md-views').hidden = !A.clusters;
      texts();
      layoutMap();
      events();
      bx1 = null;
      update({ classes: true });
      requestAnimationFrame(function () {
        performance.mark('md-first-paint');
        // unit outlines and boundary lines are not needed for the first picture
        setTimeout(function () {
          unitBoxes();
          drawLines();
          drawMarks();
          performance.mark('md-complete');
          document.body.dataset.ready = '1';
          $('md-status').textContent = N.toLocaleString('en-US') + ' units \u00b7 ' + P + ' periods';
        }, 0);
      });
    });
  }
  init().catch(function (err) {
    var box = el('p', 'The explorer could not start: ' + (err && err.message ? err.message : err), 'error');
    document.body.insertBefore(box, document.body.firstChild);
    document.body.dataset.ready = 'error';
    throw err;
  });
})();
