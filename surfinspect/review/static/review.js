// surfinspect review: the part viewer (zoom and pan), patch highlighting and keyboard keys.
// Hand-written, no library; loaded with `defer` from this server only.
(function () {
  "use strict";

  function typing(target) {
    var tag = target && target.tagName;
    return tag === "INPUT" || tag === "TEXTAREA" || tag === "SELECT" || (target && target.isContentEditable);
  }

  // previous / next part: keys p and n anywhere outside a form field
  document.addEventListener("keydown", function (ev) {
    if (typing(ev.target) || ev.ctrlKey || ev.metaKey || ev.altKey) return;
    var link = null;
    if (ev.key === "n") link = document.getElementById("next-part");
    if (ev.key === "p") link = document.getElementById("prev-part");
    if (link) { ev.preventDefault(); window.location.href = link.href; }
  });

  var viewer = document.getElementById("viewer");
  if (!viewer) return;
  var stage = document.getElementById("stage");
  var level = document.getElementById("zoom-level");
  var W = +viewer.dataset.width, H = +viewer.dataset.height;
  var view = { s: 1, x: 0, y: 0 };
  var MAX = 16;

  function minScale() { return Math.min(viewer.clientWidth / W, viewer.clientHeight / H, 1); }
  function apply() {
    stage.style.transform = "translate(" + view.x + "px," + view.y + "px) scale(" + view.s + ")";
    if (level) level.textContent = Math.round(view.s * 100) + " %";
    viewer.dataset.scale = view.s.toFixed(4);
  }
  function clampPan() {
    var vw = viewer.clientWidth, vh = viewer.clientHeight, w = W * view.s, h = H * view.s;
    view.x = w <= vw ? (vw - w) / 2 : Math.min(0, Math.max(vw - w, view.x));
    view.y = h <= vh ? (vh - h) / 2 : Math.min(0, Math.max(vh - h, view.y));
  }
  function zoomAt(factor, cx, cy) {
    var s = Math.max(minScale(), Math.min(MAX, view.s * factor));
    view.x = cx - (cx - view.x) * (s / view.s);
    view.y = cy - (cy - view.y) * (s / view.s);
    view.s = s; clampPan(); apply();
  }
  function fit() { view.s = Math.min(viewer.clientWidth / W, viewer.clientHeight / H); view.x = 0; view.y = 0; clampPan(); apply(); }
  function showBox(x, y, w, h) {
    var pad = 0.15;
    var s = Math.min(viewer.clientWidth / (w * (1 + 2 * pad)), viewer.clientHeight / (h * (1 + 2 * pad)), MAX);
    view.s = Math.max(s, minScale());
    view.x = viewer.clientWidth / 2 - (x + w / 2) * view.s;
    view.y = viewer.clientHeight / 2 - (y + h / 2) * view.s;
    clampPan(); apply();
  }
  window.addEventListener("resize", function () { clampPan(); apply(); });
  fit();

  viewer.addEventListener("wheel", function (ev) {
    ev.preventDefault();
    var r = viewer.getBoundingClientRect();
    zoomAt(ev.deltaY < 0 ? 1.25 : 0.8, ev.clientX - r.left, ev.clientY - r.top);
  }, { passive: false });

  var drag = null;
  viewer.addEventListener("pointerdown", function (ev) {
    drag = { x: ev.clientX, y: ev.clientY, vx: view.x, vy: view.y };
    viewer.setPointerCapture(ev.pointerId); viewer.classList.add("dragging");
  });
  viewer.addEventListener("pointermove", function (ev) {
    if (!drag) return;
    view.x = drag.vx + ev.clientX - drag.x; view.y = drag.vy + ev.clientY - drag.y; clampPan(); apply();
  });
  function endDrag() { drag = null; viewer.classList.remove("dragging"); }
  viewer.addEventListener("pointerup", endDrag);
  viewer.addEventListener("pointercancel", endDrag);

  function centre() { return [viewer.clientWidth / 2, viewer.clientHeight / 2]; }
  var actions = {
    "in": function () { var c = centre(); zoomAt(1.5, c[0], c[1]); },
    "out": function () { var c = centre(); zoomAt(1 / 1.5, c[0], c[1]); },
    "fit": fit,
    "full": function () { var c = centre(); zoomAt(1 / view.s, c[0], c[1]); }
  };
  document.querySelectorAll("[data-zoom]").forEach(function (b) {
    b.addEventListener("click", function () { actions[b.dataset.zoom](); });
  });
  document.addEventListener("keydown", function (ev) {
    if (typing(ev.target) || ev.ctrlKey || ev.metaKey || ev.altKey) return;
    var k = ev.key, step = 60;
    if (k === "+" || k === "=") actions["in"]();
    else if (k === "-") actions.out();
    else if (k === "0") actions.fit();
    else if (k === "1") actions.full();
    else if (document.activeElement === viewer && k.indexOf("Arrow") === 0) {
      if (k === "ArrowLeft") view.x += step; if (k === "ArrowRight") view.x -= step;
      if (k === "ArrowUp") view.y += step; if (k === "ArrowDown") view.y -= step;
      clampPan(); apply();
    } else return;
    ev.preventDefault();
  });

  // patches: highlight on hover or focus, zoom on click (or Enter / Space)
  document.querySelectorAll("button.patch").forEach(function (b) {
    var mark = document.getElementById("patch-mark-" + b.dataset.patch);
    function on() { b.classList.add("hot"); if (mark) mark.classList.add("hot"); }
    function off() { b.classList.remove("hot"); if (mark) mark.classList.remove("hot"); }
    b.addEventListener("mouseenter", on); b.addEventListener("focus", on);
    b.addEventListener("mouseleave", off); b.addEventListener("blur", off);
    b.addEventListener("click", function () {
      var bb = b.dataset.bbox.split(",").map(Number);
      showBox(bb[0], bb[1], bb[2], bb[3]); on();
    });
  });
})();
