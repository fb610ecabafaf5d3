"use strict";
// hexvigil tile viewer: a small slippy map over the pyramid next to this page. No network,
// no libraries. The page embeds the list of tiles that exist (empty tiles are never written,
// so none is requested in vain) and the land and road context drawn under the tiles.
(function () {
  var data = JSON.parse(document.getElementById("hv-data").textContent);
  var map = document.getElementById("hv-map");
  var layer = document.getElementById("hv-tiles");
  var canvas = document.getElementById("hv-context");
  var statusEl = document.getElementById("hv-status");
  var scaleBar = document.getElementById("hv-scale-bar");
  var scaleLabel = document.getElementById("hv-scale-label");
  var TILE = 256;
  var EARTH_CIRCUMFERENCE = 2 * Math.PI * 6378137;
  var LIMIT = 85.0511287798066;
  var present = {};
  data.present.forEach(function (t) { present[t] = true; });
  var minZoom = Math.max(0, data.minzoom - 2);
  var maxZoom = Math.min(24, data.maxzoom + 3);

  function mercX(lon) { return (lon + 180) / 360; }
  function mercY(lat) {
    var s = Math.sin(Math.max(-LIMIT, Math.min(LIMIT, lat)) * Math.PI / 180);
    return 0.5 - Math.log((1 + s) / (1 - s)) / (4 * Math.PI);
  }
  function latOf(y) { return Math.atan(Math.sinh(Math.PI * (1 - 2 * y))) * 180 / Math.PI; }
  function clamp(v, lo, hi) { return Math.max(lo, Math.min(hi, v)); }

  var home = { x: mercX(data.center[0]), y: mercY(data.center[1]), z: data.center[2] };
  var view = { x: home.x, y: home.y, z: home.z };
  // A shared link keeps its view: #zoom/lat/lon.
  var hash = /^#(\d+)\/(-?[\d.]+)\/(-?[\d.]+)$/.exec(window.location.hash);
  if (hash) {
    view = { x: mercX(+hash[3]), y: mercY(+hash[2]), z: clamp(+hash[1], minZoom, maxZoom) };
  }
  var images = {};

  function worldPx(z) { return TILE * Math.pow(2, z); }

  function drawContext(left, top, world, w, h) {
    var ratio = window.devicePixelRatio || 1;
    if (canvas.width !== Math.round(w * ratio) || canvas.height !== Math.round(h * ratio)) {
      canvas.width = Math.round(w * ratio);
      canvas.height = Math.round(h * ratio);
    }
    var ctx = canvas.getContext("2d");
    ctx.setTransform(ratio, 0, 0, ratio, 0, 0);
    var c = data.colours;
    ctx.fillStyle = data.context.land.length ? c.water : c.plain;
    ctx.fillRect(0, 0, w, h);
    function path(flat, close) {
      for (var i = 0; i + 1 < flat.length; i += 2) {
        var px = flat[i] * world - left, py = flat[i + 1] * world - top;
        if (i === 0) { ctx.moveTo(px, py); } else { ctx.lineTo(px, py); }
      }
      if (close) { ctx.closePath(); }
    }
    if (data.context.land.length) {
      ctx.beginPath();
      data.context.land.forEach(function (polygon) {
        polygon.forEach(function (ring) { path(ring, true); });
      });
      ctx.fillStyle = c.land;
      ctx.fill("evenodd");
      ctx.strokeStyle = c.coast;
      ctx.lineWidth = 1;
      ctx.stroke();
    }
    if (data.context.roads.length) {
      ctx.beginPath();
      data.context.roads.forEach(function (line) { path(line, false); });
      ctx.globalAlpha = c.road_opacity;
      ctx.strokeStyle = c.road;
      ctx.lineWidth = view.z >= 13 ? 2 : 1;
      ctx.lineJoin = "round";
      ctx.stroke();
      ctx.globalAlpha = 1;
    }
  }

  function niceMetres(m) {
    var decade = Math.pow(10, Math.floor(Math.log10(m)));
    var steps = [5, 2, 1];
    for (var i = 0; i < steps.length; i++) {
      if (steps[i] * decade <= m) { return steps[i] * decade; }
    }
    return decade;
  }

  function draw() {
    var w = map.clientWidth, h = map.clientHeight;
    var world = worldPx(view.z);
    view.x = clamp(view.x, 0, 1);
    view.y = clamp(view.y, 0, 1);
    var left = view.x * world - w / 2, top = view.y * world - h / 2;
    drawContext(left, top, world, w, h);

    var tz = clamp(view.z, data.minzoom, data.maxzoom);
    var size = TILE * Math.pow(2, view.z - tz);
    var n = Math.pow(2, tz);
    var x0 = Math.max(0, Math.floor(left / size)), x1 = Math.min(n - 1, Math.floor((left + w) / size));
    var y0 = Math.max(0, Math.floor(top / size)), y1 = Math.min(n - 1, Math.floor((top + h) / size));
    var keep = {};
    for (var x = x0; x <= x1; x++) {
      for (var y = y0; y <= y1; y++) {
        var key = tz + "/" + x + "/" + y;
        if (!present[key]) { continue; }
        keep[key] = true;
        var img = images[key];
        if (!img) {
          img = document.createElement("img");
          img.className = "hv-tile";
          img.alt = "";
          img.draggable = false;
          img.src = key + ".png";
          images[key] = img;
          layer.appendChild(img);
        }
        img.style.left = Math.round(x * size - left) + "px";
        img.style.top = Math.round(y * size - top) + "px";
        img.style.width = size + "px";
        img.style.height = size + "px";
      }
    }
    Object.keys(images).forEach(function (key) {
      if (!keep[key]) {
        layer.removeChild(images[key]);
        delete images[key];
      }
    });

    var lat = latOf(view.y), lon = view.x * 360 - 180;
    var metresPerPx = EARTH_CIRCUMFERENCE * Math.cos(lat * Math.PI / 180) / world;
    var metres = niceMetres(metresPerPx * 120);
    scaleBar.style.width = Math.round(metres / metresPerPx) + "px";
    scaleLabel.textContent = metres >= 1000 ? (metres / 1000) + " km" : metres + " m";
    if (window.history && window.history.replaceState) {
      try {
        window.history.replaceState(null, "", "#" + view.z + "/" + lat.toFixed(5) + "/" + lon.toFixed(5));
      } catch (err) {
        // Some browsers refuse to change the address of a page opened from disk; the view works
        // without it.
      }
    }
    statusEl.textContent = "zoom " + view.z + " \u00b7 " + Math.abs(lat).toFixed(4) + "\u00b0" +
      (lat < 0 ? "S" : "N") + " " + Math.abs(lon).toFixed(4) + "\u00b0" + (lon < 0 ? "W" : "E");
  }

  function zoomAt(step, px, py) {
    var z = clamp(view.z + step, minZoom, maxZoom);
    if (z === view.z) { return; }
    var w = map.clientWidth, h = map.clientHeight;
    var before = worldPx(view.z), after = worldPx(z);
    var wx = view.x + (px - w / 2) / before, wy = view.y + (py - h / 2) / before;
    view.x = wx - (px - w / 2) / after;
    view.y = wy - (py - h / 2) / after;
    view.z = z;
    draw();
  }

  function panBy(dx, dy) {
    var world = worldPx(view.z);
    view.x -= dx / world;
    view.y -= dy / world;
    draw();
  }

  var drag = null;
  map.addEventListener("pointerdown", function (e) {
    drag = { x: e.clientX, y: e.clientY };
    map.setPointerCapture(e.pointerId);
    map.classList.add("hv-dragging");
  });
  map.addEventListener("pointermove", function (e) {
    if (!drag) { return; }
    panBy(e.clientX - drag.x, e.clientY - drag.y);
    drag = { x: e.clientX, y: e.clientY };
  });
  function endDrag() { drag = null; map.classList.remove("hv-dragging"); }
  map.addEventListener("pointerup", endDrag);
  map.addEventListener("pointercancel", endDrag);

  var wheel = 0;
  map.addEventListener("wheel", function (e) {
    e.preventDefault();
    wheel += e.deltaY;
    if (Math.abs(wheel) >= 60) {
      var rect = map.getBoundingClientRect();
      zoomAt(wheel < 0 ? 1 : -1, e.clientX - rect.left, e.clientY - rect.top);
      wheel = 0;
    }
  }, { passive: false });
  map.addEventListener("dblclick", function (e) {
    var rect = map.getBoundingClientRect();
    zoomAt(e.shiftKey ? -1 : 1, e.clientX - rect.left, e.clientY - rect.top);
  });
  map.addEventListener("keydown", function (e) {
    var w = map.clientWidth, h = map.clientHeight, step = 96;
    var actions = {
      ArrowLeft: function () { panBy(step, 0); },
      ArrowRight: function () { panBy(-step, 0); },
      ArrowUp: function () { panBy(0, step); },
      ArrowDown: function () { panBy(0, -step); },
      "+": function () { zoomAt(1, w / 2, h / 2); },
      "=": function () { zoomAt(1, w / 2, h / 2); },
      "-": function () { zoomAt(-1, w / 2, h / 2); }
    };
    if (actions[e.key]) { e.preventDefault(); actions[e.key](); }
  });
  document.getElementById("hv-zoom-in").addEventListener("click", function () {
    zoomAt(1, map.clientWidth / 2, map.clientHeight / 2);
  });
  document.getElementById("hv-zoom-out").addEventListener("click", function () {
    zoomAt(-1, map.clientWidth / 2, map.clientHeight / 2);
  });
  document.getElementById("hv-home").addEventListener("click", function () {
    view = { x: home.x, y: home.y, z: home.z };
    draw();
  });
  window.addEventListener("resize", draw);
  // The map's box can change without a window resize (fonts, the legend wrapping).
  if (window.ResizeObserver) {
    new window.ResizeObserver(draw).observe(map);
  }
  draw();
  document.body.setAttribute("data-ready", "true");
}());
