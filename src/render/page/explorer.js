/* voxstrata layer-map explorer: a canvas scatter of one layer's 2-D map at a time.
   Data (JSON in #vx-data): per capture, per layer the coordinates quantised to u16 per axis
   (little-endian x,y pairs in base64, with each axis's range), label columns as integer
   codes (-1: unlabelled) with name and colour tables, continuous columns (kind "continuous")
   as values (null: none) with their colour range (1st-99th percentile) and value-ramp
   colours, utterance codes and frame times.
   Hover uses a grid index of screen positions; no library, no network. */
(function () {
  "use strict";
  var holder = document.getElementById("vx-data");
  var root = document.getElementById("explorer");
  if (!holder || !root) return;
  var data = JSON.parse(holder.textContent);
  if (!data.sets || !data.sets.length) return;
  var canvas = document.getElementById("vx-canvas");
  var ctx = canvas.getContext("2d");
  var slider = document.getElementById("vx-layer");
  var layerName = document.getElementById("vx-layer-name");
  var colourSel = document.getElementById("vx-colour");
  var setSel = document.getElementById("vx-set");
  var legend = document.getElementById("vx-legend");
  var tip = document.getElementById("vx-tip");
  var CELL = 16, HIT = 12, MARGIN = 18, TOP = 30;
  var st = { set: 0, layer: 0, column: 0, highlight: -1, drawnLayer: null, drawnSet: null,
             px: null, py: null, cellStart: null, cellItems: null, gw: 0, gh: 0, cssW: 0, cssH: 0, hover: -1 };
  var decoded = {};
  var orders = {};

  function coords(si, li) {
    var key = si + ":" + li;
    if (decoded[key]) return decoded[key];
    var bin = atob(data.sets[si].layers[li].xy);
    var n = bin.length >> 2;
    var x = new Float32Array(n), y = new Float32Array(n);
    for (var i = 0, j = 0; i < n; i++, j += 4) {
      x[i] = (bin.charCodeAt(j) | (bin.charCodeAt(j + 1) << 8)) / 65535;
      y[i] = (bin.charCodeAt(j + 2) | (bin.charCodeAt(j + 3) << 8)) / 65535;
    }
    decoded[key] = { x: x, y: y };
    return decoded[key];
  }

  /* A fixed shuffled drawing order, so no class or utterance is always drawn on top. */
  function order(si) {
    if (orders[si]) return orders[si];
    var n = data.sets[si].n, o = new Uint32Array(n), s = 12345 >>> 0;
    for (var i = 0; i < n; i++) o[i] = i;
    for (var k = n - 1; k > 0; k--) {
      s = (Math.imul(s, 1664525) + 1013904223) >>> 0;
      var j = s % (k + 1), t = o[k]; o[k] = o[j]; o[j] = t;
    }
    orders[si] = o;
    return o;
  }

  function size() {
    var dpr = window.devicePixelRatio || 1;
    var w = Math.max(320, Math.round(canvas.parentNode.clientWidth || 900));
    var h = Math.max(260, Math.min(680, Math.round(w * 0.62)));
    if (canvas.width !== Math.round(w * dpr) || canvas.height !== Math.round(h * dpr)) {
      canvas.width = Math.round(w * dpr);
      canvas.height = Math.round(h * dpr);
    }
    canvas.style.height = h + "px";
    ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
    st.cssW = w; st.cssH = h;
  }

  function isValues(col) { return !!col && col.kind === "continuous"; }

  /* The ramp colour of value v on the column's range (ends clamped). */
  function rampColour(col, v) {
    var t = (v - col.lo) / ((col.hi - col.lo) || 1);
    t = Math.max(0, Math.min(1, t));
    return col.ramp[Math.round(t * (col.ramp.length - 1))];
  }

  /* The fill of point i when coloured by col: its class colour or its value's ramp colour;
     grey when unlabelled or without a value. */
  function fillOf(col, i) {
    if (!col) return data.other;
    if (isValues(col)) return col.values[i] === null ? data.other : rampColour(col, col.values[i]);
    return col.codes[i] < 0 ? data.other : col.colours[col.codes[i]];
  }

  function fmtValue(v) {
    if (v === null || v === undefined) return "(no value)";
    var a = Math.abs(v);
    return (a !== 0 && (a >= 1e5 || a < 1e-3)) ? v.toExponential(3) : String(Number(v.toPrecision(4)));
  }

  function draw() {
    var set = data.sets[st.set], L = set.layers[st.layer], n = set.n;
    size();
    var c = coords(st.set, st.layer), col = set.columns[st.column];
    var W = st.cssW, H = st.cssH;
    var rx = L.hi[0] - L.lo[0], ry = L.hi[1] - L.lo[1];
    var s = Math.min((W - 2 * MARGIN) / rx, (H - MARGIN - TOP) / ry);
    var ox = (W - rx * s) / 2, oy = TOP + (H - MARGIN - TOP - ry * s) / 2;
    var px = new Float32Array(n), py = new Float32Array(n), i;
    for (i = 0; i < n; i++) { px[i] = ox + c.x[i] * rx * s; py[i] = oy + (1 - c.y[i]) * ry * s; }
    ctx.fillStyle = "#ffffff";
    ctx.fillRect(0, 0, W, H);
    var r = n > 20000 ? 1.3 : n > 6000 ? 1.9 : n > 1500 ? 2.5 : 3.4;
    var ord = order(st.set), hl = st.highlight, vals = isValues(col) ? col.values : null;
    var codes = col && !vals ? col.codes : null;
    /* Pass 0: everything not highlighted; pass 1: the highlighted label on top. A value
       column draws its frames without a value first, so the grey lies under the values. */
    var under = !!vals && hl < 0;
    for (var pass = 0; pass < 2; pass++) {
      if (pass === 1 && hl < 0 && !under) break;
      for (var k = 0; k < n; k++) {
        i = ord[k];
        var code = vals ? (vals[i] === null ? -1 : 0) : (codes ? codes[i] : -1);
        var top = under ? code >= 0 : (hl >= 0 && code === hl);
        if ((pass === 1) !== top) continue;
        ctx.globalAlpha = hl < 0 ? (code < 0 ? 0.55 : 0.85) : (pass === 1 ? 1 : 0.13);
        ctx.fillStyle = fillOf(col, i);
        ctx.beginPath();
        ctx.arc(px[i], py[i], r, 0, 6.283185307);
        ctx.fill();
      }
    }
    ctx.globalAlpha = 1;
    ctx.fillStyle = "#1f2328";
    ctx.font = "600 14px system-ui, 'DejaVu Sans', sans-serif";
    var caption = "layer " + L.layer + (data.sets.length > 1 ? "  ·  " + set.capture : "");
    ctx.fillText(caption, 10, 19);
    ctx.font = "12px system-ui, 'DejaVu Sans', sans-serif";
    ctx.fillStyle = "#5b6270";
    ctx.fillText(n + " frames, coloured by " + (col ? col.name : "nothing"), 10 + ctx.measureText(caption).width * 14 / 12 + 16, 19);
    st.px = px; st.py = py;
    index();
    st.drawnLayer = L.layer; st.drawnSet = st.set;
    root.setAttribute("data-layer", String(L.layer));
    slider.value = String(st.layer);
    layerName.textContent = "layer " + L.layer;
  }

  /* Grid index of screen positions (counting sort into cells) for fast hit-testing. */
  function index() {
    var n = st.px.length, gw = Math.ceil(st.cssW / CELL) + 1, gh = Math.ceil(st.cssH / CELL) + 1;
    var cellOf = new Int32Array(n), start = new Int32Array(gw * gh + 1), i;
    for (i = 0; i < n; i++) {
      var cx = Math.min(gw - 1, Math.max(0, Math.floor(st.px[i] / CELL)));
      var cy = Math.min(gh - 1, Math.max(0, Math.floor(st.py[i] / CELL)));
      cellOf[i] = cy * gw + cx;
      start[cellOf[i] + 1]++;
    }
    for (i = 0; i < gw * gh; i++) start[i + 1] += start[i];
    var fill = start.slice(0, gw * gh), items = new Int32Array(n);
    for (i = 0; i < n; i++) items[fill[cellOf[i]]++] = i;
    st.gw = gw; st.gh = gh; st.cellStart = start; st.cellItems = items;
  }

  function nearest(mx, my) {
    var cx = Math.floor(mx / CELL), cy = Math.floor(my / CELL), best = -1, bd = HIT * HIT;
    for (var y = cy - 1; y <= cy + 1; y++) {
      if (y < 0 || y >= st.gh) continue;
      for (var x = cx - 1; x <= cx + 1; x++) {
        if (x < 0 || x >= st.gw) continue;
        var cell = y * st.gw + x;
        for (var k = st.cellStart[cell]; k < st.cellStart[cell + 1]; k++) {
          var i = st.cellItems[k], dx = st.px[i] - mx, dy = st.py[i] - my, d = dx * dx + dy * dy;
          if (d < bd) { bd = d; best = i; }
        }
      }
    }
    return best;
  }

  function line(label, value) {
    var d = document.createElement("div"), b = document.createElement("b");
    b.textContent = label;
    d.appendChild(b);
    d.appendChild(document.createTextNode(value));
    return d;
  }

  function showTip(i, mx, my) {
    var set = data.sets[st.set];
    tip.textContent = "";
    tip.appendChild(line("utterance", set.utterances[set.utt[i]]));
    tip.appendChild(line("time", set.time[i].toFixed(3) + " s"));
    var cols = set.columns.slice().sort(function (a, b) {
      var rank = function (c) { return c.name === "speaker" ? 0 : c.name === "phone" ? 1 : 2; };
      return rank(a) - rank(b);
    });
    cols.forEach(function (c) {
      if (isValues(c)) { tip.appendChild(line(c.name, fmtValue(c.values[i]))); return; }
      var k = c.codes[i];
      tip.appendChild(line(c.name, k < 0 ? "(unlabelled)" : c.classes[k]));
    });
    tip.setAttribute("data-frame", String(set.frames[i]));
    tip.hidden = false;
    var tw = tip.offsetWidth, th = tip.offsetHeight;
    var x = mx + 14, y = my + 14;
    if (x + tw > st.cssW - 4) x = mx - tw - 14;
    if (y + th > st.cssH - 4) y = my - th - 14;
    tip.style.left = Math.max(2, x) + "px";
    tip.style.top = Math.max(2, y) + "px";
  }

  function hide() { tip.hidden = true; st.hover = -1; }

  function buildLegend() {
    var set = data.sets[st.set], col = set.columns[st.column];
    legend.textContent = "";
    if (!col) return;
    if (isValues(col)) { colourBar(col); return; }
    var counts = new Array(col.classes.length).fill(0), unl = 0;
    col.codes.forEach(function (k) { if (k < 0) unl++; else counts[k]++; });
    col.classes.forEach(function (name, k) {
      var b = document.createElement("button");
      b.type = "button";
      b.setAttribute("data-code", String(k));
      var sw = document.createElement("span");
      sw.className = "sw";
      sw.style.background = col.colours[k];
      b.appendChild(sw);
      b.appendChild(document.createTextNode(name + " (" + counts[k] + ")"));
      b.title = "highlight " + name;
      b.addEventListener("click", function () {
        st.highlight = st.highlight === k ? -1 : k;
        markLegend();
        draw();
      });
      legend.appendChild(b);
    });
    if (unl > 0) {
      var u = document.createElement("span");
      u.className = "hint";
      u.textContent = "grey: unlabelled (" + unl + ")";
      legend.appendChild(u);
    }
    markLegend();
  }

  /* A continuous column's legend: the ramp as a bar between its range's ends, and the count
     of frames without a value (drawn grey). */
  function colourBar(col) {
    var stops = col.ramp.map(function (c, k) { return c + " " + (100 * k / (col.ramp.length - 1)).toFixed(1) + "%"; });
    var wrap = document.createElement("div");
    wrap.className = "vx-bar";
    wrap.style.cssText = "display:flex;align-items:center;gap:6px;font-size:12.5px";
    var lo = document.createElement("span"), hi = document.createElement("span"), bar = document.createElement("span");
    lo.className = "vx-lo"; hi.className = "vx-hi";
    lo.textContent = fmtValue(col.lo);
    hi.textContent = fmtValue(col.hi);
    bar.style.cssText = "display:inline-block;width:220px;height:12px;border:1px solid #d0d7de;border-radius:2px;background:linear-gradient(to right," + stops.join(",") + ")";
    wrap.appendChild(lo); wrap.appendChild(bar); wrap.appendChild(hi);
    legend.appendChild(wrap);
    var none = col.values.filter(function (v) { return v === null; }).length;
    var h = document.createElement("span");
    h.className = "hint";
    h.textContent = col.name + ", 1st to 99th percentile (values outside take the end colours)" +
      (none > 0 ? "; grey: no value (" + none + ")" : "");
    legend.appendChild(h);
  }

  function markLegend() {
    Array.prototype.forEach.call(legend.querySelectorAll("button"), function (b) {
      var k = Number(b.getAttribute("data-code"));
      b.className = st.highlight < 0 ? "" : (k === st.highlight ? "on" : "off");
    });
  }

  /* Fill the colour selector; keep the column named `keep` if this capture has it, else phone. */
  function fillColumns(keep) {
    var set = data.sets[st.set], want = -1, phone = -1;
    colourSel.textContent = "";
    set.columns.forEach(function (c, k) {
      var o = document.createElement("option");
      o.value = String(k);
      o.textContent = c.name;
      colourSel.appendChild(o);
      if (c.name === keep) want = k;
      if (c.name === "phone") phone = k;
    });
    st.column = want >= 0 ? want : (phone >= 0 ? phone : 0);
    colourSel.value = String(st.column);
  }

  function setLayer(li) {
    var m = data.sets[st.set].layers.length;
    li = Math.max(0, Math.min(m - 1, li));
    if (li === st.layer && st.drawnLayer !== null && st.drawnSet === st.set) return;
    st.layer = li;
    hide();
    draw();
  }

  function setSet(si) {
    var prevLayer = data.sets[st.set].layers[st.layer].layer;
    var prevColumn = data.sets[st.set].columns[st.column];
    st.set = si;
    var layers = data.sets[si].layers;
    st.layer = 0;
    layers.forEach(function (L, k) { if (L.layer === prevLayer) st.layer = k; });
    slider.max = String(layers.length - 1);
    fillColumns(prevColumn ? prevColumn.name : null);
    st.highlight = -1;
    buildLegend();
    hide();
    draw();
  }

  data.sets.forEach(function (s, k) {
    var o = document.createElement("option");
    o.value = String(k);
    o.textContent = s.capture;
    setSel.appendChild(o);
  });
  if (data.sets.length < 2) document.getElementById("vx-set-label").style.display = "none";
  setSel.addEventListener("change", function () { setSet(Number(setSel.value)); });
  slider.addEventListener("input", function () { setLayer(Number(slider.value)); });
  colourSel.addEventListener("change", function () {
    st.column = Number(colourSel.value);
    st.highlight = -1;
    buildLegend();
    draw();
  });
  document.addEventListener("keydown", function (e) {
    if (e.key !== "ArrowLeft" && e.key !== "ArrowRight") return;
    var t = e.target, tag = t && t.tagName;
    if (t === slider || tag === "SELECT" || tag === "TEXTAREA" || (tag === "INPUT" && t.type !== "range")) return;
    e.preventDefault();
    setLayer(st.layer + (e.key === "ArrowRight" ? 1 : -1));
  });
  canvas.addEventListener("mousemove", function (e) {
    var rect = canvas.getBoundingClientRect();
    var mx = (e.clientX - rect.left) * st.cssW / rect.width, my = (e.clientY - rect.top) * st.cssH / rect.height;
    var i = nearest(mx, my);
    if (i < 0) { hide(); return; }
    st.hover = i;
    showTip(i, mx, my);
  });
  canvas.addEventListener("mouseleave", hide);
  var pending = false;
  window.addEventListener("resize", function () {
    if (pending) return;
    pending = true;
    window.requestAnimationFrame(function () { pending = false; hide(); draw(); });
  });

  slider.max = String(data.sets[0].layers.length - 1);
  fillColumns(null);
  buildLegend();
  draw();

  /* For scripted checks: where point i is drawn, in page (client) coordinates. */
  window.voxstrataExplorer = {
    state: st,
    setLayer: setLayer,
    colourOf: function (i) { return fillOf(data.sets[st.set].columns[st.column], i); },
    pointClient: function (i) {
      var rect = canvas.getBoundingClientRect();
      return { x: rect.left + st.px[i] * rect.width / st.cssW, y: rect.top + st.py[i] * rect.height / st.cssH };
    }
  };
})();
