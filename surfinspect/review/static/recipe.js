// surfinspect review: the recipe page. Draw regions on the reference photo, check and measure them as
// they change (the server runs the recipe loader and the engine), save. Hand-written, no library.
// The recipe is held as the mapping its YAML file holds; shapes are in frame units (px, or mm with
// pixel_size_mm), drawn inside one SVG group whose transform is the datum frame.
(function () {
  "use strict";
  var data = JSON.parse(document.getElementById("recipe-data").textContent);
  var csrf = document.getElementById("csrf-token").content;
  var recipe = data.recipe, frame = data.frame;
  var SHAPES = ["rect", "polygon", "circle", "annulus"];
  var viewer = document.getElementById("rp-viewer"), stage = document.getElementById("rp-stage");
  var W = data.image.width, H = data.image.height;
  var NS = "http://www.w3.org/2000/svg";
  var $ = function (id) { return document.getElementById(id); };
  var view = { s: 1, x: 0, y: 0 };
  var sel = { r: recipe.regions && recipe.regions.length ? 0 : -1, ex: -1 };
  var previews = [], checkSeq = 0, checked = false, problems = data.problems || [];
  var tool = "select", draft = null, drag = null;

  // ---------------------------------------------------------------- frame and units
  function fr() { return frame || { origin_px: [0, 0], rotation_deg: 0, px_per_unit: 1 }; }
  function trig() { var f = fr(), a = f.rotation_deg * Math.PI / 180; return [Math.cos(a), Math.sin(a), f.px_per_unit]; }
  function toImage(u, v) { var f = fr(), t = trig(), p0 = u * t[2], p1 = v * t[2];
    return [f.origin_px[0] + p0 * t[0] + p1 * t[1], f.origin_px[1] - p0 * t[1] + p1 * t[0]]; }
  function toFrame(x, y) { var f = fr(), t = trig(), q0 = x - f.origin_px[0], q1 = y - f.origin_px[1];
    return [(q0 * t[0] - q1 * t[1]) / t[2], (q0 * t[1] + q1 * t[0]) / t[2]]; }
  function step() { return num(recipe.pixel_size_mm) ? 0.1 : 1; }
  function snap(v) { var s = step(); return Number((Math.round(v / s) * s).toFixed(s < 1 ? 1 : 0)); }
  function num(v) { return typeof v === "number" && isFinite(v) ? v : null; }
  function unitPx() { return 1 / (view.s * trig()[2]); } // one screen pixel in frame units
  function parse(text) { // typed text -> number when it is one, else the text (the check names it)
    var t = String(text).trim();
    return /^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$/.test(t) ? Number(t) : t;
  }

  // ---------------------------------------------------------------- zoom and pan
  function minScale() { return Math.min(viewer.clientWidth / W, viewer.clientHeight / H, 1); }
  function apply() {
    stage.style.transform = "translate(" + view.x + "px," + view.y + "px) scale(" + view.s + ")";
    $("zoom-level").textContent = Math.round(view.s * 100) + " %";
    viewer.dataset.scale = view.s.toFixed(4);
    viewer.dataset.x = view.x.toFixed(2); viewer.dataset.y = view.y.toFixed(2);
    drawShapes();
  }
  function clampPan() {
    var vw = viewer.clientWidth, vh = viewer.clientHeight, w = W * view.s, h = H * view.s;
    view.x = w <= vw ? (vw - w) / 2 : Math.min(0, Math.max(vw - w, view.x));
    view.y = h <= vh ? (vh - h) / 2 : Math.min(0, Math.max(vh - h, view.y));
  }
  function zoomAt(f, cx, cy) {
    var s = Math.max(minScale(), Math.min(16, view.s * f));
    view.x = cx - (cx - view.x) * (s / view.s); view.y = cy - (cy - view.y) * (s / view.s);
    view.s = s; clampPan(); apply();
  }
  function fit() { view.s = Math.min(viewer.clientWidth / W, viewer.clientHeight / H); clampPan(); apply(); }
  function imagePoint(ev) { var r = viewer.getBoundingClientRect();
    return [(ev.clientX - r.left - view.x) / view.s, (ev.clientY - r.top - view.y) / view.s]; }
  function framePoint(ev) { var p = imagePoint(ev); return toFrame(p[0], p[1]); }
  var zooms = {
    "in": function () { zoomAt(1.5, viewer.clientWidth / 2, viewer.clientHeight / 2); },
    "out": function () { zoomAt(1 / 1.5, viewer.clientWidth / 2, viewer.clientHeight / 2); },
    "fit": fit,
    "full": function () { zoomAt(1 / view.s, viewer.clientWidth / 2, viewer.clientHeight / 2); }
  };
  document.querySelectorAll("[data-rzoom]").forEach(function (b) { b.addEventListener("click", function () { zooms[b.dataset.rzoom](); }); });
  viewer.addEventListener("wheel", function (ev) { ev.preventDefault(); var r = viewer.getBoundingClientRect();
    zoomAt(ev.deltaY < 0 ? 1.25 : 0.8, ev.clientX - r.left, ev.clientY - r.top); }, { passive: false });

  // ---------------------------------------------------------------- shapes
  function kindOf(m) { for (var i = 0; i < SHAPES.length; i++) if (m && m[SHAPES[i]] !== undefined) return SHAPES[i]; return null; }
  function region() { return sel.r >= 0 ? recipe.regions[sel.r] : null; }
  function selectedShape() { var g = region(); if (!g) return null; return sel.ex >= 0 ? (g.exclude || [])[sel.ex] : g; }
  function el(name, attrs, parent) { var e = document.createElementNS(NS, name);
    for (var k in attrs) e.setAttribute(k, attrs[k]); if (parent) parent.appendChild(e); return e; }
  function shapeEl(m, parent, attrs) {
    var k = kindOf(m), p = m[k], e;
    if (!Array.isArray(p)) return null;
    if (k === "rect") e = el("rect", { x: p[0], y: p[1], width: Math.abs(p[2]) || 0, height: Math.abs(p[3]) || 0 }, parent);
    else if (k === "circle") e = el("circle", { cx: p[0], cy: p[1], r: Math.abs(p[2]) || 0 }, parent);
    else if (k === "annulus") e = el("path", { d: ring(p[0], p[1], p[3]) + ring(p[0], p[1], p[2]), "fill-rule": "evenodd" }, parent);
    else e = el("polygon", { points: p.map(function (q) { return q.join(","); }).join(" ") }, parent);
    for (var a in attrs) e.setAttribute(a, attrs[a]);
    e.setAttribute("vector-effect", "non-scaling-stroke");
    return e;
  }
  function ring(cx, cy, r) { r = Math.abs(r) || 0;
    return "M" + (cx - r) + "," + cy + " a" + r + "," + r + " 0 1,0 " + 2 * r + ",0 a" + r + "," + r + " 0 1,0 " + -2 * r + ",0 Z "; }
  function centreOf(m) { var k = kindOf(m), p = m[k];
    if (k === "rect") return [p[0] + p[2] / 2, p[1] + p[3] / 2];
    if (k === "polygon") { var sx = 0, sy = 0; p.forEach(function (q) { sx += q[0]; sy += q[1]; }); return [sx / p.length, sy / p.length]; }
    return [p[0], p[1]]; }
  function sizeOf(m) { var k = kindOf(m), p = m[k];
    if (k === "rect") return Math.min(Math.abs(p[2]), Math.abs(p[3]));
    if (k === "circle") return 2 * p[2]; if (k === "annulus") return 2 * p[3];
    var xs = p.map(function (q) { return q[0]; }), ys = p.map(function (q) { return q[1]; });
    return Math.min(Math.max.apply(null, xs) - Math.min.apply(null, xs), Math.max.apply(null, ys) - Math.min.apply(null, ys)); }
  function corner(m) { var k = kindOf(m), p = m[k]; // top-left of the shape's box, where its name goes
    if (k === "rect") return [p[0], p[1]];
    if (k === "polygon") return [Math.min.apply(null, p.map(function (q) { return q[0]; })), Math.min.apply(null, p.map(function (q) { return q[1]; }))];
    var r = k === "circle" ? p[2] : p[3]; return [p[0] - r, p[1] - r]; }
  function handlesOf(m) { var k = kindOf(m), p = m[k];
    if (k === "rect") return [[p[0], p[1]], [p[0] + p[2], p[1]], [p[0] + p[2], p[1] + p[3]], [p[0], p[1] + p[3]]];
    if (k === "circle") return [[p[0] + p[2], p[1]]];
    if (k === "annulus") return [[p[0] + p[2], p[1]], [p[0] + p[3], p[1]]];
    return p.slice(); }
  function layAngles(g) { var d = g.lay_deg; var pat = patternOf(g);
    if (pat === "crossed") return Array.isArray(d) ? d : [];
    if (pat !== "directional") return [];
    var fixed = data.spellings[g.lay]; if (fixed && fixed[1] !== null) return [fixed[1]];
    return num(d) !== null ? [d] : []; }
  function patternOf(g) { var s = data.spellings[g.lay]; return g.lay === undefined ? "directional" : (s ? s[0] : g.lay); }
  function valid(m) { var k = kindOf(m), p = m && m[k]; if (!Array.isArray(p)) return false;
    return k === "polygon" ? p.every(function (q) { return Array.isArray(q) && q.every(isFinite); }) && p.length >= 3
      : p.every(function (v) { return typeof v === "number" && isFinite(v); }); }

  function drawShapes() {
    var shapes = $("shapes"), handles = $("handles"), f = fr(), t = trig();
    var matrix = "matrix(" + [t[2] * t[0], -t[2] * t[1], t[2] * t[1], t[2] * t[0], f.origin_px[0], f.origin_px[1]].join(",") + ")";
    $("frame-group").setAttribute("transform", matrix);
    shapes.textContent = ""; handles.textContent = "";
    drawRulers();
    (recipe.regions || []).forEach(function (g, i) {
      if (!valid(g)) return;
      var on = i === sel.r, verdict = previews[i] && previews[i].verdict;
      var e = shapeEl(g, shapes, { "class": "region" + (on ? " on" : "") + (verdict ? " v-" + verdict : ""), "data-region": i, "data-ex": -1 });
      (g.exclude || []).forEach(function (x, j) {
        if (valid(x)) shapeEl(x, shapes, { "class": "exclusion" + (on && sel.ex === j ? " on" : ""), "data-region": i, "data-ex": j });
      });
      var at0 = corner(g), label = el("text", { x: at0[0], y: at0[1], dy: -4 * unitPx(), "font-size": 12 * unitPx(), "stroke-width": 3 * unitPx(), "class": "region-label" }, shapes);
      label.textContent = g.name || "(no name)";
      if (e && on) drawArrows(g, handles);
    });
    var m = selectedShape();
    if (m && valid(m)) handlesOf(m).forEach(function (h, k) { handle(handles, h, "shape:" + k, "handle"); });
    if (draft) shapeEl(draft.shape, shapes, { "class": "draft" });
  }
  function handle(parent, p, name, cls) { var s = 5 * unitPx();
    el("rect", { x: p[0] - s, y: p[1] - s, width: 2 * s, height: 2 * s, "class": cls, "data-handle": name, "vector-effect": "non-scaling-stroke" }, parent); }
  function drawArrows(g, parent) {
    var c = centreOf(g), half = 0.35 * sizeOf(g), pat = patternOf(g);
    layAngles(g).forEach(function (a, k) {
      var r = a * Math.PI / 180, dx = Math.cos(r) * half, dy = -Math.sin(r) * half; // +Y up on screen
      el("line", { x1: c[0] - dx, y1: c[1] - dy, x2: c[0] + dx, y2: c[1] + dy, "class": "lay-arrow", "vector-effect": "non-scaling-stroke" }, parent);
      var tip = [c[0] + dx, c[1] + dy], s = 7 * unitPx();
      el("circle", { cx: tip[0], cy: tip[1], r: s, "class": "lay-handle", "data-handle": "lay:" + k, "vector-effect": "non-scaling-stroke" }, parent);
    });
    if ((pat === "circular" || pat === "radial") && Array.isArray(g.centre)) {
      var s = 8 * unitPx(), q = g.centre;
      el("path", { d: "M" + (q[0] - s) + "," + q[1] + "h" + 2 * s + "M" + q[0] + "," + (q[1] - s) + "v" + 2 * s, "class": "lay-arrow", "vector-effect": "non-scaling-stroke" }, parent);
      handle(parent, q, "centre", "lay-handle");
    }
  }
  function drawRulers() {
    var g = $("rulers"); g.textContent = "";
    var t = trig(), ppu = t[2], u = unitPx(), sz = frame && frame.size_px ? frame.size_px : [W, H];
    var lenU = sz[0] / ppu, lenV = sz[1] / ppu;
    el("rect", { x: 0, y: 0, width: lenU, height: lenV, "class": "frame-box", "vector-effect": "non-scaling-stroke" }, g);
    el("path", { d: "M0,0h" + 40 * u + "M0,0v" + 40 * u, "class": "frame-axes", "vector-effect": "non-scaling-stroke" }, g);
    if (!num(recipe.pixel_size_mm)) return;
    var each = [1, 5, 10, 50, 100].filter(function (mm) { return mm / u >= 6; })[0] || 100;
    var big = each * 10, font = 11 * u;
    [[lenU, 0], [lenV, 1]].forEach(function (axis) {
      for (var mm = 0; mm <= axis[0] + 1e-9; mm += each) {
        var long = Math.abs(mm / big - Math.round(mm / big)) < 1e-9, len = (long ? 12 : 6) * u;
        var d = axis[1] ? "M0," + mm + "h" + -len : "M" + mm + ",0v" + -len;
        el("path", { d: d, "class": "tick", "vector-effect": "non-scaling-stroke" }, g);
        if (long) { var tx = el("text", { x: axis[1] ? -14 * u : mm, y: axis[1] ? mm : -14 * u, "font-size": font, "stroke-width": 2.5 * u, "class": "tick-label",
          "text-anchor": axis[1] ? "end" : "middle" }, g); tx.textContent = Math.round(mm) + (mm === 0 ? " mm" : ""); }
      }
    });
  }
  function drawGlyphs() {
    var g = $("glyphs"); g.textContent = "";
    previews.forEach(function (p) {
      if (!p) return;
      var d = p.glyphs.map(function (s) { return "M" + s[0] + "," + s[1] + "L" + s[2] + "," + s[3]; }).join("");
      if (d) el("path", { d: d, "class": "glyph" }, g);
      var dd = p.deviating_glyphs.map(function (s) { return "M" + s[0] + "," + s[1] + "L" + s[2] + "," + s[3]; }).join("");
      if (dd) el("path", { d: dd, "class": "glyph deviating" }, g);
      p.patches.forEach(function (b) { el("rect", { x: b[0], y: b[1], width: b[2], height: b[3], "class": "patch-mark" }, g); });
    });
  }

  // ---------------------------------------------------------------- pointer: draw, move, resize, set the lay
  function newRegionName() { var n = (recipe.regions || []).length + 1, names = (recipe.regions || []).map(function (g) { return g.name; });
    while (names.indexOf("region-" + n) >= 0) n++; return "region-" + n; }
  viewer.addEventListener("pointerdown", function (ev) {
    if (ev.button !== 0) return;
    viewer.focus();
    var p = framePoint(ev), target = ev.target, h = target.getAttribute && target.getAttribute("data-handle");
    viewer.setPointerCapture(ev.pointerId);
    if (tool === "polygon") { polygonClick(p, ev); return; }
    if (tool !== "select") {
      var sp = [snap(p[0]), snap(p[1])], k = tool, shape = {};
      shape[k] = k === "rect" ? [sp[0], sp[1], 0, 0] : k === "circle" ? [sp[0], sp[1], 0] : [sp[0], sp[1], 0, 0];
      draft = { shape: shape, start: sp }; return;
    }
    if (h) { drag = { kind: h, start: p, before: JSON.stringify(selectedShape()) }; return; }
    var hit = target.closest && target.closest("[data-region]");
    if (hit) { sel = { r: +hit.dataset.region, ex: +hit.dataset.ex }; showRegion(); drag = { kind: "move", start: p, last: p }; drawShapes(); return; }
    drag = { kind: "pan", x: ev.clientX, y: ev.clientY, vx: view.x, vy: view.y };
  });
  viewer.addEventListener("pointermove", function (ev) {
    var p = framePoint(ev);
    $("pointer-status").textContent = "x " + snap(p[0]) + ", y " + snap(p[1]) + (num(recipe.pixel_size_mm) ? " mm" : " px");
    if (draft && draft.points) { draft.shape.polygon = draft.points.concat([[snap(p[0]), snap(p[1])]]); drawShapes(); return; }
    if (draft) { sizeDraft(draft, p); drawShapes(); return; }
    if (!drag) return;
    if (drag.kind === "pan") { view.x = drag.vx + ev.clientX - drag.x; view.y = drag.vy + ev.clientY - drag.y; clampPan(); apply(); return; }
    dragTo(drag, p); drawShapes(); showRegion(true);
  });
  function endPointer() {
    if (draft && !draft.points) {
      var k = kindOf(draft.shape), q = draft.shape[k], big = k === "rect" ? Math.min(q[2], q[3]) : q[q.length - 1];
      if (big >= 2 * step()) commitShape(draft.shape);
      draft = null; drawShapes();
    }
    if (drag && drag.kind !== "pan") changed(sel.r);
    drag = null;
  }
  viewer.addEventListener("pointerup", endPointer);
  viewer.addEventListener("pointercancel", endPointer);
  viewer.addEventListener("dblclick", function () { if (draft && draft.points) closePolygon(); });
  function sizeDraft(d, p) {
    var k = kindOf(d.shape), s = d.start, q = [snap(p[0]), snap(p[1])];
    if (k === "rect") d.shape.rect = [Math.min(s[0], q[0]), Math.min(s[1], q[1]), Math.abs(q[0] - s[0]), Math.abs(q[1] - s[1])];
    else { var r = snap(Math.hypot(q[0] - s[0], q[1] - s[1]));
      d.shape[k] = k === "circle" ? [s[0], s[1], r] : [s[0], s[1], snap(r / 2), r]; }
  }
  function polygonClick(p, ev) {
    var q = [snap(p[0]), snap(p[1])];
    if (!draft || !draft.points) { draft = { points: [q], shape: { polygon: [q] } }; return; }
    var first = draft.points[0];
    if (draft.points.length >= 3 && Math.hypot(q[0] - first[0], q[1] - first[1]) < 8 * unitPx()) { closePolygon(); return; }
    if (ev.detail < 2) draft.points.push(q);
  }
  function closePolygon() { // a double-click's second press repeats the last corner: drop repeats
    var pts = draft.points.filter(function (q, i, all) { return !i || q[0] !== all[i - 1][0] || q[1] !== all[i - 1][1]; }); draft = null;
    if (pts.length >= 3) commitShape({ polygon: pts }); drawShapes(); }
  function commitShape(shape) {
    var g = region();
    if ($("draw-exclusion").checked && g && kindOf(shape) !== "annulus") {
      g.exclude = (g.exclude || []).concat([shape]); sel.ex = g.exclude.length - 1;
    } else {
      var m = { name: newRegionName() }; m[kindOf(shape)] = shape[kindOf(shape)]; m.lay_deg = 0;
      recipe.regions = (recipe.regions || []).concat([m]); sel = { r: recipe.regions.length - 1, ex: -1 };
    }
    setTool("select"); changed(sel.r); showRegion();
  }
  function dragTo(d, p) {
    var m = selectedShape(), g = region(), k = kindOf(m), q = m && m[k], kind = d.kind;
    if (kind === "move") {
      var dx = snap(p[0] - d.last[0]), dy = snap(p[1] - d.last[1]); if (!dx && !dy) return;
      d.last = [d.last[0] + dx, d.last[1] + dy];
      var moved = sel.ex >= 0 ? [m] : [m].concat(g.exclude || []); // a region takes its exclusions along
      moved.forEach(function (s) { shift(s, dx, dy); });
      if (sel.ex < 0 && Array.isArray(g.centre) && g.centre.every(isFinite)) g.centre = [snap(g.centre[0] + dx), snap(g.centre[1] + dy)];
      return;
    }
    if (kind.indexOf("lay:") === 0) { var c = centreOf(g), a = Math.atan2(-(p[1] - c[1]), p[0] - c[0]) * 180 / Math.PI;
      a = Number((((a % 180) + 180) % 180).toFixed(1)) % 180; setAngle(g, +kind.slice(4), a); return; }
    if (kind === "centre") { g.centre = [snap(p[0]), snap(p[1])]; return; }
    var i = +kind.slice(6), s = [snap(p[0]), snap(p[1])];
    if (k === "rect") { var h = handlesOf(m), o = h[(i + 2) % 4];
      m.rect = [Math.min(o[0], s[0]), Math.min(o[1], s[1]), Math.abs(s[0] - o[0]), Math.abs(s[1] - o[1])]; }
    else if (k === "polygon") q[i] = s;
    else { var r = snap(Math.hypot(s[0] - q[0], s[1] - q[1]));
      if (k === "circle") q[2] = r; else if (i === 0) q[2] = Math.min(r, q[3] - step()); else q[3] = Math.max(r, q[2] + step()); }
  }
  function shift(m, dx, dy) {
    var k = kindOf(m), q = m[k]; if (!valid(m)) return;
    if (k === "polygon") m.polygon = q.map(function (v) { return [snap(v[0] + dx), snap(v[1] + dy)]; });
    else { q[0] = snap(q[0] + dx); q[1] = snap(q[1] + dy); }
  }
  function setAngle(g, k, a) {
    if (patternOf(g) === "crossed") { var d = Array.isArray(g.lay_deg) ? g.lay_deg.slice() : [0, 90]; d[k] = a; g.lay_deg = d; }
    else { if (g.lay !== undefined && g.lay !== "directional") delete g.lay; g.lay_deg = a; }
  }

  // ---------------------------------------------------------------- keyboard
  function setTool(t) { tool = t; draft = null; document.querySelectorAll('input[name=tool]').forEach(function (r) { r.checked = r.value === t; }); }
  document.querySelectorAll('input[name=tool]').forEach(function (r) { r.addEventListener("change", function () { setTool(r.value); }); });
  function typing(t) { var tag = t && t.tagName; return tag === "INPUT" || tag === "TEXTAREA" || tag === "SELECT"; }
  document.addEventListener("keydown", function (ev) {
    if (!typing(ev.target) && (ev.ctrlKey || ev.metaKey) && (ev.key === "z" || ev.key === "Z" || ev.key === "y")) {
      travel(ev.key === "y" || ev.shiftKey ? 1 : -1); ev.preventDefault(); return; }
    if (typing(ev.target) || ev.ctrlKey || ev.metaKey || ev.altKey) return;
    var k = ev.key, keys = { v: "select", r: "rect", g: "polygon", c: "circle", a: "annulus" };
    if (keys[k]) setTool(keys[k]);
    else if (k === "x") $("draw-exclusion").checked = !$("draw-exclusion").checked;
    else if (k === "+" || k === "=") zooms["in"](); else if (k === "-") zooms.out();
    else if (k === "0") zooms.fit(); else if (k === "1") zooms.full();
    else if (k === "Escape") { draft = null; drawShapes(); }
    else if (k === "Enter" && draft && draft.points) closePolygon();
    else if ((k === "Delete" || k === "Backspace") && document.activeElement === viewer) deleteSelected();
    else if (k.indexOf("Arrow") === 0 && document.activeElement === viewer) {
      var n = (ev.shiftKey ? 10 : 1) * step(), dx = k === "ArrowLeft" ? -n : k === "ArrowRight" ? n : 0, dy = k === "ArrowUp" ? -n : k === "ArrowDown" ? n : 0;
      if (selectedShape()) { var d = { kind: "move", last: [0, 0] }; dragTo(d, [dx, dy]); drawShapes(); showRegion(true); changed(sel.r); }
      else { view.x -= dx * 60; view.y -= dy * 60; clampPan(); apply(); }
    } else return;
    ev.preventDefault();
  });
  function deleteSelected() {
    var g = region(); if (!g) return;
    if (sel.ex >= 0) { g.exclude.splice(sel.ex, 1); if (!g.exclude.length) delete g.exclude; sel.ex = -1; changed(sel.r); }
    else { recipe.regions.splice(sel.r, 1); previews.splice(sel.r, 1); sel = { r: Math.min(sel.r, recipe.regions.length - 1), ex: -1 }; dirty = {}; changed(-1, true); }
    drawGlyphs(); showRegion();
  }
  $("delete-selected").addEventListener("click", deleteSelected);
  $("add-shape").addEventListener("click", function () { // drawing by keyboard: the chosen tool's shape, then its numbers
    var c = toFrame((viewer.clientWidth / 2 - view.x) / view.s, (viewer.clientHeight / 2 - view.y) / view.s);
    var s = snap(0.1 * Math.min(W, H) / trig()[2]), x = snap(c[0]), y = snap(c[1]), kind = tool === "select" ? "rect" : tool;
    var shapes = { rect: { rect: [x - s, y - s, 2 * s, 2 * s] }, circle: { circle: [x, y, s] }, annulus: { annulus: [x, y, snap(s / 2), s] },
      polygon: { polygon: [[x - s, y + s], [x + s, y + s], [x, y - s]] } };
    commitShape(shapes[kind]);
    var first = document.querySelector(sel.ex >= 0 ? "#r-excludes input, #r-excludes textarea" : "#r-coords input, #r-coords textarea");
    if (first) first.focus();
  });

  // ---------------------------------------------------------------- the forms
  var COORDS = { rect: ["x", "y", "width", "height"], circle: ["centre x", "centre y", "radius"], annulus: ["centre x", "centre y", "inner radius", "outer radius"] };
  function coordFields(box, m, label, prefix) {
    var k = kindOf(m), p = m[k], wrap = document.createElement("div"); wrap.className = "coords";
    var title = document.createElement("p"); title.className = "coords-title"; title.textContent = label + " (" + k + ")"; wrap.appendChild(title);
    if (k === "polygon") {
      var id = prefix + "-points", lab = document.createElement("label"); lab.htmlFor = id; lab.textContent = "points, one x, y a line";
      var ta = document.createElement("textarea"); ta.id = id; ta.dataset.points = prefix === "c" ? "-1" : prefix.split("-")[1]; ta.rows = Math.min(6, p.length); ta.value = p.map(function (q) { return q.join(", "); }).join("\n");
      ta.addEventListener("input", function () { m.polygon = ta.value.split("\n").filter(function (l) { return l.trim(); }).map(function (l) { return l.split(",").map(parse); }); redrawAfterTyping(); });
      wrap.appendChild(lab); wrap.appendChild(ta);
    } else {
      COORDS[k].forEach(function (name, i) {
        var id = prefix + "-" + i, lab = document.createElement("label"); lab.htmlFor = id; lab.textContent = name;
        var inp = document.createElement("input"); inp.id = id; inp.type = "text"; inp.inputMode = "decimal"; inp.value = p[i]; inp.dataset.coord = i;
        inp.setAttribute("aria-label", label + " " + name + (num(recipe.pixel_size_mm) ? " (mm)" : " (px)"));
        inp.addEventListener("input", function () { p[i] = parse(inp.value); redrawAfterTyping(); });
        wrap.appendChild(lab); wrap.appendChild(inp);
      });
    }
    box.appendChild(wrap);
  }
  function redrawAfterTyping() { drawShapes(); changed(sel.r); }
  function showRegion(numbersOnly) {
    var g = region(); $("region-form").hidden = !g; listRegions();
    if (!g) { showPreview(null); return; }
    if (numbersOnly) { // a drag: refresh the numbers in place, keep focus where it is
      document.querySelectorAll("#region-form [data-coord]").forEach(function (inp) {
        var owner = inp.id.indexOf("x-") === 0 ? (g.exclude || [])[+inp.id.split("-")[1]] : g, k = kindOf(owner);
        if (owner && document.activeElement !== inp) inp.value = owner[k][+inp.dataset.coord]; });
      document.querySelectorAll("#region-form textarea[data-points]").forEach(function (ta) {
        var owner = ta.dataset.points === "-1" ? g : (g.exclude || [])[+ta.dataset.points];
        if (owner && owner.polygon && document.activeElement !== ta) ta.value = owner.polygon.map(function (q) { return q.join(", "); }).join("\n"); });
      fillLay(g); return;
    }
    $("region-legend").textContent = "Region " + (g.name || "(no name)");
    $("r-name").value = g.name === undefined ? "" : g.name;
    var box = $("r-coords"); box.textContent = ""; coordFields(box, g, "shape", "c");
    var ex = $("r-excludes"); ex.textContent = "";
    (g.exclude || []).forEach(function (x, j) {
      if (kindOf(x)) coordFields(ex, x, "exclusion " + (j + 1), "x-" + j);
      var b = document.createElement("button"); b.type = "button"; b.textContent = "delete exclusion " + (j + 1);
      b.addEventListener("click", function () { sel.ex = j; deleteSelected(); }); ex.appendChild(b);
    });
    document.querySelectorAll("#region-form [data-limit]").forEach(function (inp) {
      var key = inp.dataset.limit, d = (recipe.defaults || {})[key];
      inp.value = g[key] === undefined ? "" : g[key];
      inp.placeholder = "default " + (d === undefined ? data.defaults[key] : d);
    });
    fillLay(g); showPreview(previews[sel.r]);
  }
  function fillLay(g) {
    var pat = patternOf(g), a = layAngles(g);
    $("r-lay").value = pat;
    $("r-angle-row").hidden = !(pat === "directional" || pat === "crossed");
    $("r-angle2-row").hidden = pat !== "crossed";
    $("r-centre-row").hidden = !(pat === "circular" || pat === "radial");
    var raw = pat === "crossed" ? (Array.isArray(g.lay_deg) ? g.lay_deg : []) : [g.lay_deg !== undefined ? g.lay_deg : a[0]];
    if (document.activeElement !== $("r-lay-deg")) $("r-lay-deg").value = raw[0] === undefined ? "" : raw[0];
    if (document.activeElement !== $("r-lay-deg2")) $("r-lay-deg2").value = raw[1] === undefined ? "" : raw[1];
    var c = Array.isArray(g.centre) ? g.centre : ["", ""];
    if (document.activeElement !== $("r-centre-x")) $("r-centre-x").value = c[0];
    if (document.activeElement !== $("r-centre-y")) $("r-centre-y").value = c[1];
  }
  function listRegions() {
    var ul = $("region-list"); ul.textContent = "";
    (recipe.regions || []).forEach(function (g, i) {
      var li = document.createElement("li"), b = document.createElement("button"); b.type = "button";
      var p = previews[i]; b.textContent = (g.name || "(no name)") + " · " + (kindOf(g) || "no shape") + (p ? " · " + p.verdict : "");
      b.setAttribute("aria-pressed", i === sel.r ? "true" : "false");
      b.addEventListener("click", function () { sel = { r: i, ex: -1 }; showRegion(); drawShapes(); });
      li.appendChild(b); ul.appendChild(li);
    });
  }
  $("r-name").addEventListener("input", function () { region().name = $("r-name").value; listRegions(); changed(sel.r); });
  $("r-lay").addEventListener("change", function () {
    var g = region(), pat = $("r-lay").value, a = layAngles(g);
    if (pat === "directional") { delete g.lay; g.lay_deg = a.length ? a[0] : 0; }
    else { g.lay = pat; if (pat === "crossed") g.lay_deg = [a[0] || 0, ((a[0] || 0) + 90) % 180]; else delete g.lay_deg; }
    if (pat !== "circular" && pat !== "radial") delete g.centre;
    showRegion(); drawShapes(); changed(sel.r);
  });
  function angleInput(k) { return function () { var g = region(), v = parse($(k ? "r-lay-deg2" : "r-lay-deg").value);
    if (patternOf(g) === "crossed") { var d = Array.isArray(g.lay_deg) ? g.lay_deg.slice() : ["", ""]; d[k] = v; g.lay_deg = d; }
    else { if (g.lay !== undefined) delete g.lay; if (v === "") delete g.lay_deg; else g.lay_deg = v; }
    drawShapes(); changed(sel.r); }; }
  $("r-lay-deg").addEventListener("input", angleInput(0));
  $("r-lay-deg2").addEventListener("input", angleInput(1));
  function centreInput() { var g = region(), x = $("r-centre-x").value.trim(), y = $("r-centre-y").value.trim();
    if (!x && !y) delete g.centre; else g.centre = [parse(x), parse(y)]; drawShapes(); changed(sel.r); }
  $("r-centre-x").addEventListener("input", centreInput); $("r-centre-y").addEventListener("input", centreInput);
  document.querySelectorAll("#region-form [data-limit]").forEach(function (inp) {
    inp.addEventListener("input", function () { var g = region(), v = inp.value.trim();
      if (v === "") delete g[inp.dataset.limit]; else g[inp.dataset.limit] = parse(v); changed(sel.r); });
  });
  $("use-measured").addEventListener("click", function () {
    var g = region(), p = previews[sel.r]; if (!g || !p) return;
    if (patternOf(g) === "crossed" && p.crossed_peaks.length === 2) g.lay_deg = p.crossed_peaks.slice();
    else if (p.use_measured !== null) setAngle(g, 0, p.use_measured);
    fillLay(g); drawShapes(); changed(sel.r);
  });
  function topInput(inp) {
    inp.addEventListener("input", function () {
      var key = inp.dataset.key, v = inp.value.trim();
      if (key === "pixel_size_mm") { if (v === "") delete recipe.pixel_size_mm; else recipe.pixel_size_mm = parse(v); }
      else if (key === "description" && v === "") delete recipe.description;
      else recipe[key] = key === "recipe" || key === "description" || key === "datum" ? inp.value : parse(v);
      changed(-1, true);
    });
  }
  document.querySelectorAll("#rp-form [data-key]").forEach(topInput);
  document.querySelectorAll("[data-default-key]").forEach(function (inp) {
    inp.addEventListener("input", function () { var key = inp.dataset.defaultKey, v = inp.value.trim();
      recipe.defaults = recipe.defaults || {}; if (v === "") delete recipe.defaults[key]; else recipe.defaults[key] = parse(v);
      if (!Object.keys(recipe.defaults).length) delete recipe.defaults; changed(-1, true); });
  });
  // a new pixel size (once typed, on leaving the field): the regions stay where they are on the photo
  var unitMm = num(recipe.pixel_size_mm);
  function ppuOf(mm) { return mm ? 1 / mm : 1; }
  $("f-pixel").addEventListener("change", function () {
    var mm = recipe.pixel_size_mm === undefined ? null : num(recipe.pixel_size_mm);
    if ((recipe.pixel_size_mm !== undefined && !(mm > 0)) || mm === unitMm) return;
    var f = ppuOf(unitMm) / ppuOf(mm), r = function (v) { return mm ? Number((Math.round(v * 10) / 10).toFixed(1)) : Math.round(v); };
    function sc(m) { var k = kindOf(m); if (!k || !valid(m)) return;
      m[k] = k === "polygon" ? m[k].map(function (q) { return [r(q[0] * f), r(q[1] * f)]; }) : m[k].map(function (v) { return r(v * f); }); }
    (recipe.regions || []).forEach(function (g) { sc(g); (g.exclude || []).forEach(sc);
      if (Array.isArray(g.centre) && g.centre.every(isFinite)) g.centre = g.centre.map(function (v) { return r(v * f); }); });
    if (frame) { frame.origin_px = frame.origin_px.slice(); frame.px_per_unit = ppuOf(mm); }
    unitMm = mm; showRegion(); drawShapes(); changed(-1, true);
  });
  function fillRecipe() {
    $("f-recipe").value = recipe.recipe || ""; $("f-description").value = recipe.description || "";
    $("f-datum").value = recipe.datum || "image"; $("f-pixel").value = recipe.pixel_size_mm === undefined ? "" : recipe.pixel_size_mm;
    document.querySelectorAll("[data-default-key]").forEach(function (inp) { var d = (recipe.defaults || {})[inp.dataset.defaultKey]; inp.value = d === undefined ? "" : d; });
    $("f-file").value = data.file_name; showRevision();
  }
  function showRevision() { var r = recipe.revision, b = data.base_revision;
    $("f-revision").textContent = b === null || b === undefined ? String(r) + " (a new recipe)" : b + " (saved as " + (b + 1) + ")"; }

  // ---------------------------------------------------------------- checking and previewing (debounced)
  var timers = {}, dirty = {}, inflight = false;
  function later(name, ms, fn) { clearTimeout(timers[name]); timers[name] = setTimeout(fn, ms); }
  function post(url, body) {
    body.reference = data.reference; body.file_name = $("f-file").value;
    return fetch(url, { method: "POST", headers: { "content-type": "application/json", "x-csrf-token": csrf }, body: JSON.stringify(body), credentials: "same-origin" })
      .then(function (r) { return r.json().then(function (j) { return { status: r.status, body: j }; }); });
  }
  function changed(index, all) {
    checked = false; updateSave(); later("history", 500, remember); unsaved = true;
    if (all) (recipe.regions || []).forEach(function (_, i) { dirty[i] = true; });
    else if (index >= 0) dirty[index] = true;
    Object.keys(dirty).forEach(function (i) { if (previews[i]) previews[i].stale = true; }); // not offered until measured again
    if (dirty[sel.r]) showPreview(previews[sel.r]);
    later("check", 250, runCheck); later("preview", 400, runPreview);
  }
  function runCheck() {
    var seq = ++checkSeq;
    post("/recipe/check", { recipe: recipe, comments: data.comments }).then(function (r) {
      if (seq !== checkSeq) return;
      problems = r.status === 200 ? r.body.problems : [r.body.error];
      if (r.status === 200) $("file-text").textContent = r.body.text;
      if (r.status === 200 && r.body.frame) { var moved = JSON.stringify(frame) !== JSON.stringify(r.body.frame); frame = r.body.frame; if (moved) drawShapes(); }
      checked = true; showProblems(); updateSave();
    });
  }
  function runPreview() {
    if (inflight) { later("preview", 200, runPreview); return; }
    var i = Object.keys(dirty).map(Number).filter(function (k) { return k < (recipe.regions || []).length; })[0];
    if (i === undefined) { dirty = {}; return; }
    delete dirty[i]; inflight = true;
    var snapshot = JSON.stringify(recipe.regions[i]);
    post("/recipe/preview", { recipe: recipe, index: i }).then(function (r) {
      inflight = false;
      var still = recipe.regions[i] && JSON.stringify(recipe.regions[i]) === snapshot;
      if (still) previews[i] = r.status === 200 ? r.body : null;
      if (still && r.status !== 200) previews[i] = null;
      drawGlyphs(); drawShapes(); listRegions();
      if (i === sel.r) showPreview(previews[i], r.status === 200 ? null : r.body.error);
      if (Object.keys(dirty).length) runPreview();
    }, function () { inflight = false; });
  }
  function showPreview(p, error) {
    var cells = { verdict: "p-verdict", lay: "p-lay", deviation: "p-deviation", uncertainty: "p-uncertainty", coherence: "p-coherence", deviating: "p-deviating" };
    for (var k in cells) $(cells[k]).textContent = p ? p[k] : "-";
    $("p-reasons").textContent = error ? error : p ? p.reasons.join("; ") : "-";
    $("p-time").textContent = p ? (p.stale ? "measuring again… " : "") + "measured in " + p.elapsed_ms + " ms (" + p.lay_is + ")" : "";
    var b = $("use-measured"), g = region(), crossed = g && patternOf(g) === "crossed";
    var v = p && !p.stale ? (crossed ? (p.crossed_peaks.length === 2 ? p.crossed_peaks.map(function (a) { return a.toFixed(1); }).join("° / ") : null) : (p.use_measured === null ? null : p.use_measured.toFixed(1))) : null;
    b.disabled = v === null; b.textContent = v === null ? "use measured" : "use measured " + v + "°";
    b.setAttribute("aria-label", v === null ? "use the measured lay (measure first)" : "use the measured lay, " + v + " degrees");
    $("r-measured-row").hidden = !g || !(patternOf(g) === "directional" || crossed);
  }
  function showProblems() {
    var ul = $("problems"); ul.textContent = "";
    if (!problems.length) { var ok = document.createElement("li"); ok.className = "ok"; ok.textContent = "No problem: surfinspect check accepts this recipe."; ul.appendChild(ok); }
    problems.forEach(function (t) { var li = document.createElement("li"); li.className = "problem"; li.textContent = t; ul.appendChild(li); });
  }
  function updateSave() { $("save").disabled = !data.can_save || !checked || problems.length > 0; }

  // ---------------------------------------------------------------- undo and redo
  var history = [JSON.stringify(recipe)], at = 0, unsaved = false;
  function remember() { var now = JSON.stringify(recipe); if (now === history[at]) return;
    history = history.slice(0, at + 1).concat([now]).slice(-200); at = history.length - 1; undoButtons(); }
  function travel(step) {
    clearTimeout(timers.history); remember();
    if (at + step < 0 || at + step >= history.length) return;
    at += step; recipe = JSON.parse(history[at]); previews = []; dirty = {};
    sel = { r: Math.min(Math.max(sel.r, 0), (recipe.regions || []).length - 1), ex: -1 };
    fillRecipe(); showRegion(); drawGlyphs(); drawShapes(); changed(-1, true); clearTimeout(timers.history); undoButtons();
  }
  function undoButtons() { $("undo").disabled = at <= 0; $("redo").disabled = at >= history.length - 1; }
  $("undo").addEventListener("click", function () { travel(-1); });
  $("redo").addEventListener("click", function () { travel(1); });
  window.addEventListener("beforeunload", function (ev) { if (unsaved) { ev.preventDefault(); ev.returnValue = ""; } });

  // ---------------------------------------------------------------- saving
  function save(overwrite) {
    $("save").disabled = true; $("save-msg").textContent = "Saving…";
    post("/recipe/save", { recipe: recipe, base_revision: data.base_revision, comments: data.comments, overwrite: overwrite }).then(function (r) {
      $("overwrite").hidden = true;
      if (r.status === 200) {
        data.base_revision = r.body.revision; recipe.revision = r.body.revision; data.file_name = r.body.saved;
        $("save-msg").textContent = r.body.message; showRevision(); unsaved = false;
      } else if (r.status === 409) {
        $("overwrite-msg").textContent = r.body.error; $("overwrite").hidden = false; $("save-msg").textContent = ""; $("overwrite-yes").focus();
      } else {
        $("save-msg").textContent = "Not saved: " + r.body.error;
        if (r.body.problems && r.body.problems.length) { problems = r.body.problems; showProblems(); }
      }
      updateSave();
    });
  }
  $("save").addEventListener("click", function () { save(false); });
  $("overwrite-yes").addEventListener("click", function () { save(true); });
  $("overwrite-no").addEventListener("click", function () { $("overwrite").hidden = true; $("save-msg").textContent = "Not saved."; $("save").focus(); });
  $("f-file").addEventListener("input", function () { changed(-1); });

  // ---------------------------------------------------------------- start
  window.addEventListener("resize", function () { clampPan(); apply(); });
  fillRecipe(); fit(); showRegion(); showProblems(); changed(-1, true); unsaved = false; undoButtons();
  $("rp-form").addEventListener("submit", function (ev) { ev.preventDefault(); });
})();
