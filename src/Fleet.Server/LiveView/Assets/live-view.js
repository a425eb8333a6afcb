// Fleet live floor view. Plain browser JavaScript, no dependencies. The server sends a static plan once
// (GET /api/view/{site}/floor) and then server-sent events: "poses" ~10 per second (robots that moved, each with its
// 1-σ horizontal covariance ellipse computed server-side) and "anchors" once a second. Drawing runs on
// requestAnimationFrame: the static layer (floor, heat map, racks, anchors) is cached in an offscreen canvas, and each
// frame draws trails, ellipses and robots in a handful of batched paths, so 200 robots stay smooth.
(function () {
  "use strict";

  // Okabe–Ito colours (colour-blind safe) plus a distinct shape per state, so colour is never the only cue.
  const STATES = [
    { key: "locked", label: "locked", colour: "#009E73", shape: "disc" },
    { key: "acquiring", label: "acquiring", colour: "#56B4E9", shape: "ring" },
    { key: "uncertain", label: "uncertain", colour: "#E69F00", shape: "diamond" },
    { key: "lost", label: "lost", colour: "#D55E00", shape: "cross" },
    { key: "unknown", label: "unknown", colour: "#000000", shape: "ring" },
  ];
  const STATE_BY_KEY = Object.fromEntries(STATES.map((s) => [s.key, s]));
  const STALE_SECONDS = 10;
  const MAGNIFY = 10;

  const siteId = decodeURIComponent(location.pathname.replace(/^\/view\//, "").replace(/\/$/, ""));
  const params = new URLSearchParams(location.search);

  // State the page exposes for tests and for anyone poking at it from the console.
  const view = {
    site: siteId,
    connected: false,
    messages: 0,
    poseUpdates: 0,
    robots: {},
    anchors: {},
    floorLoaded: false,
    framesDrawn: 0,
    ellipsesDrawn: 0,
    robotsDrawn: 0,
    frameMsAverage: 0, // script time per frame (ms), exponentially averaged: a smoothness figure for benchmarks
    dropped: 0,
  };
  window.fleetView = view;

  const el = (id) => document.getElementById(id);
  const canvas = el("floor");
  const ctx = canvas.getContext("2d");
  const staticLayer = document.createElement("canvas");
  let plan = null;
  let mapIndex = 0;
  let transform = { scale: 1, ox: 0, oy: 0 };
  let staticDirty = true;
  let updateTimes = [];
  let lastValidTime = NaN;
  let hover = null;

  const fmt = (v, digits) => (v === null || v === undefined || !isFinite(v) ? "–" : Number(v).toFixed(digits));

  // ---------- static plan ----------

  async function loadPlan() {
    const height = params.get("height");
    const url = "/api/view/" + encodeURIComponent(siteId) + "/floor" + (height ? "?height=" + encodeURIComponent(height) : "");
    const response = await fetch(url, { cache: "no-store" });
    if (!response.ok) {
      let detail = response.statusText;
      try { detail = (await response.json()).detail || detail; } catch (e) { /* not JSON */ }
      throw new Error(detail);
    }

    plan = await response.json();
    document.title = "Fleet live view · " + plan.displayName;
    el("site-name").textContent = plan.displayName + (plan.displayName !== plan.site ? " (" + plan.site + ")" : "");
    el("tag-height").textContent = "Tag height " + fmt(plan.tagHeight, 2) + " m (" + plan.tagHeightSource +
      "); grid " + (plan.grid ? fmt(plan.grid.step, 2) + " m" : "–") + "; only anchors in range and line of sight count.";
    el("notes").textContent = plan.notes.join(" · ");
    const choice = el("map-choice");
    choice.innerHTML = "";
    plan.maps.forEach((m, i) => {
      const option = document.createElement("option");
      option.value = String(i);
      option.textContent = m.label + " (" + m.unit + ")";
      choice.appendChild(option);
    });
    choice.onchange = () => { mapIndex = Number(choice.value); drawLegend(); staticDirty = true; };
    el("magnify").onchange = () => updateEllipseLabels();
    updateEllipseLabels();
    el("trail-label").textContent = "trail: last " + fmt(plan.trailSeconds, 0) + " s";
    buildStateKeys();
    buildAnchorTable();
    drawLegend();
    view.floorLoaded = true;
    staticDirty = true;
  }

  function updateEllipseLabels() {
    const [e1, e2] = plan.ellipses;
    const drawn = el("magnify").checked ? " (drawn ×" + MAGNIFY + ")" : "";
    el("ellipse1-label").textContent = fmt(e1.k, 0) + "-σ ellipse, solid: holds " + fmt(100 * e1.probability, 1) + " %" + drawn;
    el("ellipse2-label").textContent = fmt(e2.k, 0) + "-σ ellipse, dashed: holds " + fmt(100 * e2.probability, 1) + " %" + drawn;
  }

  function drawLegend() {
    const bar = el("colour-bar");
    const b = bar.getContext("2d");
    const map = plan && plan.maps[mapIndex];
    b.clearRect(0, 0, bar.width, bar.height);
    if (!map) {
      el("map-meaning").textContent = "No map: the site needs at least three anchors.";
      return;
    }

    for (let x = 0; x < bar.width; x++) {
      b.fillStyle = plan.palette[Math.round((x / (bar.width - 1)) * (plan.palette.length - 1))];
      b.fillRect(x, 0, 1, bar.height);
    }

    const unit = " " + map.unit;
    el("bar-min").textContent = fmt(map.min, map.unit === "m" ? 3 : 1) + unit;
    el("bar-mid").textContent = fmt((map.min + map.max) / 2, map.unit === "m" ? 3 : 1) + unit;
    el("bar-max").textContent = "≥ " + fmt(map.max, map.unit === "m" ? 3 : 1) + unit;
    el("map-meaning").textContent = map.label + ": " + map.meaning + ".";
  }

  function buildStateKeys() {
    const list = el("state-keys");
    list.innerHTML = "";
    for (const s of STATES) {
      const li = document.createElement("li");
      const icon = document.createElement("canvas");
      icon.className = "state";
      icon.width = 36; icon.height = 36;
      const c = icon.getContext("2d");
      drawGlyphs(c, s, [[18, 18]], 12, 2);
      const label = document.createElement("span");
      label.textContent = s.label;
      const n = document.createElement("span");
      n.className = "n";
      n.id = "count-" + s.key;
      n.textContent = "0";
      li.append(icon, label, n);
      list.appendChild(li);
    }
  }

  function buildAnchorTable() {
    const body = el("anchor-table").tBodies[0];
    body.innerHTML = "";
    for (const a of plan.anchors) {
      const tr = document.createElement("tr");
      tr.id = "anchor-" + a.id;
      for (const text of [a.id, fmt(a.z, 1), "–", "–", "–"]) {
        const td = document.createElement("td");
        td.textContent = text;
        tr.appendChild(td);
      }

      body.appendChild(tr);
    }
  }

  // ---------- geometry ----------

  function layout() {
    const dpr = window.devicePixelRatio || 1;
    const rect = canvas.getBoundingClientRect();
    const width = Math.max(200, Math.round(rect.width * dpr));
    const height = Math.max(200, Math.round(rect.height * dpr));
    if (canvas.width !== width || canvas.height !== height) {
      canvas.width = width;
      canvas.height = height;
      staticLayer.width = width;
      staticLayer.height = height;
      staticDirty = true;
    }

    if (!plan) {
      return;
    }

    const f = plan.floor;
    const margin = { left: 46 * dpr, right: 16 * dpr, top: 14 * dpr, bottom: 40 * dpr };
    const scale = Math.min((width - margin.left - margin.right) / (f.xMax - f.xMin), (height - margin.top - margin.bottom) / (f.yMax - f.yMin));
    const usedW = (f.xMax - f.xMin) * scale;
    const usedH = (f.yMax - f.yMin) * scale;
    const left = margin.left + (width - margin.left - margin.right - usedW) / 2;
    const top = margin.top + (height - margin.top - margin.bottom - usedH) / 2;
    transform = { scale, dpr, ox: left - f.xMin * scale, oy: top + f.yMax * scale };
  }

  // Site frame (m, y up) to canvas pixels (y down).
  const px = (x) => transform.ox + x * transform.scale;
  const py = (y) => transform.oy - y * transform.scale;

  function drawStatic() {
    const c = staticLayer.getContext("2d");
    const { scale, dpr } = transform;
    const f = plan.floor;
    c.setTransform(1, 0, 0, 1, 0, 0);
    c.clearRect(0, 0, staticLayer.width, staticLayer.height);
    c.fillStyle = "#ffffff";
    c.fillRect(px(f.xMin), py(f.yMax), (f.xMax - f.xMin) * scale, (f.yMax - f.yMin) * scale);

    // Heat map: one pixel per cell in a small canvas, scaled up without smoothing so cells stay honest squares.
    const map = plan.maps[mapIndex];
    if (map && plan.grid) {
      const g = plan.grid;
      const cells = document.createElement("canvas");
      cells.width = g.nx; cells.height = g.ny;
      const cc = cells.getContext("2d");
      const image = cc.createImageData(g.nx, g.ny);
      const rgb = plan.palette.map((hex) => [parseInt(hex.slice(1, 3), 16), parseInt(hex.slice(3, 5), 16), parseInt(hex.slice(5, 7), 16)]);
      for (let iy = 0; iy < g.ny; iy++) {
        for (let ix = 0; ix < g.nx; ix++) {
          const v = map.values[iy * g.nx + ix];
          const o = ((g.ny - 1 - iy) * g.nx + ix) * 4; // image rows run top-down, the grid bottom-up
          let colour;
          if (v === null) {
            colour = [185, 189, 195]; // no fix, or inside a rack (racks are drawn on top)
          } else {
            const t = Math.min(1, Math.max(0, (v - map.min) / (map.max - map.min)));
            colour = rgb[Math.round(t * (rgb.length - 1))];
          }

          image.data[o] = colour[0]; image.data[o + 1] = colour[1]; image.data[o + 2] = colour[2]; image.data[o + 3] = 255;
        }
      }

      cc.putImageData(image, 0, 0);
      c.save();
      c.imageSmoothingEnabled = false;
      // Lighter than full strength so robots and ellipses stay readable on top.
      c.globalAlpha = 0.55;
      c.drawImage(cells, px(g.xMin), py(g.yMin + g.ny * g.step), g.nx * g.step * scale, g.ny * g.step * scale);
      c.restore();
    }

    // Racks: hatched grey boxes with their height.
    const hatch = document.createElement("canvas");
    hatch.width = hatch.height = 8 * dpr;
    const h = hatch.getContext("2d");
    h.fillStyle = "#c9cdd2"; h.fillRect(0, 0, hatch.width, hatch.height);
    h.strokeStyle = "#8d939b"; h.lineWidth = 2 * dpr;
    h.beginPath(); h.moveTo(0, hatch.height); h.lineTo(hatch.width, 0); h.stroke();
    c.fillStyle = c.createPattern(hatch, "repeat");
    c.strokeStyle = "#5b636e";
    c.lineWidth = 1 * dpr;
    c.font = (10 * dpr) + "px system-ui, sans-serif";
    for (const r of plan.racks) {
      const x = px(r.xMin), y = py(r.yMax), w = (r.xMax - r.xMin) * scale, hh = (r.yMax - r.yMin) * scale;
      c.fillRect(x, y, w, hh);
      c.strokeRect(x, y, w, hh);
    }

    c.fillStyle = "#1d2126";
    c.textBaseline = "middle";
    for (const r of plan.racks) {
      const label = "rack " + fmt(r.height, 1) + " m";
      const w = c.measureText(label).width;
      if (w < (r.xMax - r.xMin) * scale - 6 * dpr) {
        c.fillStyle = "rgba(255,255,255,0.85)";
        c.fillRect(px((r.xMin + r.xMax) / 2) - w / 2 - 2 * dpr, py((r.yMin + r.yMax) / 2) - 6 * dpr, w + 4 * dpr, 12 * dpr);
        c.fillStyle = "#1d2126";
        c.fillText(label, px((r.xMin + r.xMax) / 2) - w / 2, py((r.yMin + r.yMax) / 2));
      }
    }

    // Floor outline and metre ticks.
    c.strokeStyle = "#1d2126";
    c.lineWidth = 1.5 * dpr;
    c.strokeRect(px(f.xMin), py(f.yMax), (f.xMax - f.xMin) * scale, (f.yMax - f.yMin) * scale);
    c.fillStyle = "#5b636e";
    c.font = (11 * dpr) + "px system-ui, sans-serif";
    const step = niceStep((f.xMax - f.xMin) / 8);
    c.textAlign = "center"; c.textBaseline = "top";
    for (let x = Math.ceil(f.xMin / step) * step; x <= f.xMax + 1e-9; x += step) {
      c.fillRect(px(x), py(f.yMin), 1 * dpr, 4 * dpr);
      c.fillText(fmt(x, 0), px(x), py(f.yMin) + 6 * dpr);
    }

    c.textAlign = "right"; c.textBaseline = "middle";
    for (let y = Math.ceil(f.yMin / step) * step; y <= f.yMax + 1e-9; y += step) {
      c.fillRect(px(f.xMin) - 4 * dpr, py(y), 4 * dpr, 1 * dpr);
      c.fillText(fmt(y, 0), px(f.xMin) - 7 * dpr, py(y));
    }

    c.textAlign = "center"; c.textBaseline = "top";
    c.fillText("x (m)", px((f.xMin + f.xMax) / 2), py(f.yMin) + 22 * dpr);
    c.save();
    c.translate(px(f.xMin) - 36 * dpr, py((f.yMin + f.yMax) / 2));
    c.rotate(-Math.PI / 2);
    c.fillText("y (m)", 0, 0);
    c.restore();

    // Anchors: a square, the boresight's plan projection as an arrow (length ∝ its horizontal part), id and height.
    c.textAlign = "left"; c.textBaseline = "alphabetic";
    c.font = "600 " + (11 * dpr) + "px system-ui, sans-serif";
    for (const a of plan.anchors) {
      const x = px(a.x), y = py(a.y);
      const horizontal = Math.hypot(a.bx, a.by);
      c.strokeStyle = "#1d2126"; c.fillStyle = "#1d2126"; c.lineWidth = 2 * dpr;
      if (horizontal > 0.05) {
        const len = 22 * dpr * horizontal;
        const ux = a.bx / horizontal, uy = -a.by / horizontal;
        const tx = x + ux * len, ty = y + uy * len;
        c.beginPath(); c.moveTo(x, y); c.lineTo(tx, ty); c.stroke();
        c.beginPath();
        c.moveTo(tx + ux * 5 * dpr, ty + uy * 5 * dpr);
        c.lineTo(tx - uy * 4 * dpr, ty + ux * 4 * dpr);
        c.lineTo(tx + uy * 4 * dpr, ty - ux * 4 * dpr);
        c.closePath(); c.fill();
      }

      c.fillStyle = "#ffffff"; c.fillRect(x - 6 * dpr, y - 6 * dpr, 12 * dpr, 12 * dpr);
      c.fillStyle = "#1d2126"; c.fillRect(x - 4.5 * dpr, y - 4.5 * dpr, 9 * dpr, 9 * dpr);
      if (a.bz < -0.9) {
        // Pointing straight down: a white dot in the square.
        c.fillStyle = "#ffffff"; c.beginPath(); c.arc(x, y, 1.8 * dpr, 0, 2 * Math.PI); c.fill();
      }

      labelBox(c, a.id + "  z " + fmt(a.z, 1) + " m", x + 8 * dpr, y - 8 * dpr, dpr);
    }

    staticDirty = false;
  }

  function labelBox(c, text, x, y, dpr) {
    const w = c.measureText(text).width;
    const f = plan.floor;
    if (x + w > px(f.xMax)) {
      x = x - w - 16 * dpr; // keep labels of anchors on the right edge inside the floor
    }

    c.fillStyle = "rgba(255,255,255,0.85)";
    c.fillRect(x - 2 * dpr, y - 10 * dpr, w + 4 * dpr, 13 * dpr);
    c.fillStyle = "#1d2126";
    c.fillText(text, x, y);
  }

  function niceStep(raw) {
    const p = Math.pow(10, Math.floor(Math.log10(raw)));
    for (const m of [1, 2, 5, 10]) {
      if (m * p >= raw) {
        return m * p;
      }
    }

    return 10 * p;
  }

  // ---------- live data ----------

  function connect() {
    const source = new EventSource("/api/view/" + encodeURIComponent(siteId) + "/events");
    const status = el("connection");
    source.onopen = () => { view.connected = true; status.className = "connection open"; status.textContent = "live"; };
    source.onerror = () => {
      view.connected = false;
      status.className = source.readyState === EventSource.CLOSED ? "connection closed" : "connection connecting";
      status.textContent = source.readyState === EventSource.CLOSED ? "disconnected" : "reconnecting…";
    };
    source.addEventListener("poses", (e) => onPoses(JSON.parse(e.data)));
    source.addEventListener("anchors", (e) => onAnchors(JSON.parse(e.data)));
  }

  function onPoses(message) {
    const now = performance.now();
    view.messages++;
    view.dropped = message.dropped;
    updateTimes.push(now);
    const trailMs = (plan ? plan.trailSeconds : 5) * 1000;
    for (const p of message.robots) {
      view.poseUpdates++;
      let r = view.robots[p.id];
      if (!r) {
        r = view.robots[p.id] = { id: p.id, trail: [], from: null, receivedAt: now };
      }

      // Animate from where the robot is drawn now to the new pose over one update interval.
      r.from = r.x === undefined ? null : { x: displayX(r, now), y: displayY(r, now) };
      r.receivedAt = now;
      r.x = p.x; r.y = p.y; r.yaw = p.yaw; r.t = p.t; r.speed = p.speed;
      r.state = p.state; r.rejected = p.rejected; r.a = p.a; r.b = p.b; r.angle = p.angle;
      r.trail.push(p.x, p.y, now);
      while (r.trail.length > 3 && now - r.trail[2] > trailMs) {
        r.trail.splice(0, 3);
      }

      if (isFinite(p.t) && !(p.t <= lastValidTime)) {
        lastValidTime = p.t;
      }
    }
  }

  function onAnchors(message) {
    for (const a of message.anchors) {
      view.anchors[a.id] = a;
      const row = document.getElementById("anchor-" + a.id);
      if (!row) {
        continue;
      }

      const cells = row.cells;
      cells[2].textContent = fmt(a.rate, 1);
      cells[3].textContent = a.heard ? fmt(100 * a.rejected, 1) : "–";
      cells[4].textContent = a.heard ? fmt(a.nis, 2) : "–";
      cells[3].className = a.heard && a.rejected > 0.2 ? "high" : "";
      row.className = a.heard ? "" : "silent";
      for (const cell of cells) {
        if (!a.heard) cell.classList.add("silent");
      }
    }
  }

  const interval = () => 1000 / ((plan && plan.updateRateHz) || 10);

  function progress(r, now) {
    return r.from ? Math.min(1, (now - r.receivedAt) / interval()) : 1;
  }

  function displayX(r, now) { const f = progress(r, now); return r.from ? r.from.x + (r.x - r.from.x) * f : r.x; }
  function displayY(r, now) { const f = progress(r, now); return r.from ? r.from.y + (r.y - r.from.y) * f : r.y; }

  // ---------- frame ----------

  // Draws one state's glyph at every point in one batched path per pass (a few canvas calls for any number of robots).
  function drawGlyphs(c, state, points, radius, unit) {
    if (points.length === 0) return;
    c.lineWidth = 1.2 * unit;
    c.strokeStyle = "#1d2126";
    c.beginPath();
    switch (state.shape) {
      case "disc":
        for (const [x, y] of points) { c.moveTo(x + radius, y); c.arc(x, y, radius, 0, 2 * Math.PI); }
        c.fillStyle = state.colour; c.fill(); c.stroke();
        break;
      case "ring":
        for (const [x, y] of points) { c.moveTo(x + radius, y); c.arc(x, y, radius, 0, 2 * Math.PI); }
        c.fillStyle = "#ffffff"; c.fill(); c.stroke();
        c.beginPath();
        for (const [x, y] of points) { c.moveTo(x + radius * 0.62, y); c.arc(x, y, radius * 0.62, 0, 2 * Math.PI); }
        c.lineWidth = radius * 0.55; c.strokeStyle = state.colour; c.stroke();
        break;
      case "diamond": {
        const k = radius * 1.25;
        for (const [x, y] of points) { c.moveTo(x, y - k); c.lineTo(x + k, y); c.lineTo(x, y + k); c.lineTo(x - k, y); c.closePath(); }
        c.fillStyle = state.colour; c.fill(); c.stroke();
        break;
      }
      case "cross": {
        const k = radius * 0.95;
        for (const [x, y] of points) { c.moveTo(x - k, y - k); c.lineTo(x + k, y + k); c.moveTo(x + k, y - k); c.lineTo(x - k, y + k); }
        c.lineCap = "round";
        c.lineWidth = radius * 0.7; c.stroke();
        c.lineWidth = radius * 0.38; c.strokeStyle = state.colour; c.stroke();
        c.lineCap = "butt";
        break;
      }
    }
  }

  function frame() {
    requestAnimationFrame(frame);
    if (!plan) {
      return;
    }

    layout();
    if (staticDirty) {
      drawStatic();
    }

    const now = performance.now();
    const { scale, dpr } = transform;
    ctx.setTransform(1, 0, 0, 1, 0, 0);
    ctx.clearRect(0, 0, canvas.width, canvas.height);
    ctx.drawImage(staticLayer, 0, 0);

    const showEllipses = el("show-ellipses").checked;
    const magnify = el("magnify").checked ? MAGNIFY : 1;
    const showTrails = el("show-trails").checked;
    const showLabels = el("show-labels").checked;
    const robots = Object.values(view.robots);
    const counts = Object.fromEntries(STATES.map((s) => [s.key, 0]));
    const byState = new Map(STATES.map((s) => [s.key, []]));
    for (const r of robots) {
      const stale = (now - r.receivedAt) / 1000 > STALE_SECONDS;
      const key = STATE_BY_KEY[r.state] ? r.state : "unknown";
      counts[key]++;
      byState.get(key).push({ r, stale, x: px(displayX(r, now)), y: py(displayY(r, now)) });
    }

    // Trails: one path per state colour, fading is approximated by a light stroke.
    if (showTrails) {
      ctx.lineWidth = 2 * dpr;
      ctx.lineJoin = "round";
      for (const s of STATES) {
        ctx.strokeStyle = s.colour;
        ctx.globalAlpha = 0.55;
        ctx.beginPath();
        for (const { r, x, y } of byState.get(s.key)) {
          const t = r.trail;
          const trailMs = plan.trailSeconds * 1000;
          let started = false;
          for (let i = 0; i < t.length; i += 3) {
            if (now - t[i + 2] > trailMs) continue;
            if (!started) { ctx.moveTo(px(t[i]), py(t[i + 1])); started = true; } else { ctx.lineTo(px(t[i]), py(t[i + 1])); }
          }

          if (started) ctx.lineTo(x, y);
        }

        ctx.stroke();
      }

      ctx.globalAlpha = 1;
    }

    // Ellipses: k-σ semi-axes k·a and k·b (m) along the major-axis angle (site frame, counter-clockwise from +x).
    let ellipses = 0;
    if (showEllipses) {
      const [e1, e2] = plan.ellipses;
      for (const s of STATES) {
        ctx.fillStyle = s.colour;
        ctx.globalAlpha = 0.28;
        ctx.beginPath();
        for (const { r, x, y } of byState.get(s.key)) {
          if (!isFinite(r.a) || !isFinite(r.b)) continue;
          const a = Math.max(r.a * e1.k * magnify * scale, 0.75 * dpr), b = Math.max(r.b * e1.k * magnify * scale, 0.75 * dpr);
          ctx.moveTo(x + a * Math.cos(-r.angle), y + a * Math.sin(-r.angle));
          ctx.ellipse(x, y, a, b, -r.angle, 0, 2 * Math.PI);
        }

        ctx.fill();
      }

      ctx.globalAlpha = 1;
      ctx.strokeStyle = "#1d2126";
      ctx.lineWidth = 1.3 * dpr;
      ctx.beginPath();
      const dashed = new Path2D();
      for (const list of byState.values()) {
        for (const { r, x, y } of list) {
          if (!isFinite(r.a) || !isFinite(r.b)) continue;
          const a1 = Math.max(r.a * e1.k * magnify * scale, 0.75 * dpr), b1 = Math.max(r.b * e1.k * magnify * scale, 0.75 * dpr);
          const a2 = Math.max(r.a * e2.k * magnify * scale, 1.5 * dpr), b2 = Math.max(r.b * e2.k * magnify * scale, 1.5 * dpr);
          ctx.moveTo(x + a1 * Math.cos(-r.angle), y + a1 * Math.sin(-r.angle));
          ctx.ellipse(x, y, a1, b1, -r.angle, 0, 2 * Math.PI);
          dashed.moveTo(x + a2 * Math.cos(-r.angle), y + a2 * Math.sin(-r.angle));
          dashed.ellipse(x, y, a2, b2, -r.angle, 0, 2 * Math.PI);
          ellipses += 2;
        }
      }

      ctx.stroke();
      ctx.setLineDash([4 * dpr, 3 * dpr]);
      ctx.lineWidth = 1 * dpr;
      ctx.stroke(dashed);
      ctx.setLineDash([]);
    }

    // Robots: heading ticks, then the state glyphs (faded when no update came for a while), batched per state.
    const radius = 5 * dpr;
    for (const stale of [false, true]) {
      ctx.globalAlpha = stale ? 0.35 : 1;
      ctx.strokeStyle = "#1d2126";
      ctx.lineWidth = 2 * dpr;
      ctx.lineCap = "round";
      ctx.beginPath();
      for (const list of byState.values()) {
        for (const d of list) {
          if (d.stale !== stale || !isFinite(d.r.yaw)) continue;
          ctx.moveTo(d.x, d.y);
          ctx.lineTo(d.x + Math.cos(d.r.yaw) * radius * 2.1, d.y - Math.sin(d.r.yaw) * radius * 2.1);
        }
      }

      ctx.stroke();
      ctx.lineCap = "butt";
      for (const s of STATES) {
        drawGlyphs(ctx, s, byState.get(s.key).filter((d) => d.stale === stale).map((d) => [d.x, d.y]), radius, dpr);
      }
    }

    ctx.globalAlpha = 1;
    if (showLabels) {
      ctx.font = (10 * dpr) + "px system-ui, sans-serif";
      ctx.fillStyle = "#1d2126";
      ctx.textBaseline = "bottom";
      for (const list of byState.values()) {
        for (const { r, x, y } of list) ctx.fillText(r.id, x + radius + 2 * dpr, y - radius);
      }
    }

    drawAnchorHealth(dpr);
    if (hover) {
      drawHover(now);
    }

    view.framesDrawn++;
    view.frameMsAverage += 0.05 * ((performance.now() - now) - view.frameMsAverage);
    view.ellipsesDrawn = ellipses;
    view.robotsDrawn = robots.length;
    updateStatus(now, counts, robots.length);
  }

  // Per-anchor rejection share under each anchor's label; vermillion and bold above 20 %.
  function drawAnchorHealth(dpr) {
    ctx.font = (10.5 * dpr) + "px system-ui, sans-serif";
    ctx.textBaseline = "alphabetic";
    for (const a of plan.anchors) {
      const h = view.anchors[a.id];
      const text = !h ? "" : h.heard ? "rejected " + fmt(100 * h.rejected, 1) + " % · " + fmt(h.rate, 0) + "/s" : "not heard";
      if (!text) continue;
      const high = h.heard && h.rejected > 0.2;
      ctx.font = (high ? "700 " : "") + (10.5 * dpr) + "px system-ui, sans-serif";
      let x = px(a.x) + 8 * dpr;
      let y = py(a.y) + 6 * dpr;
      if (y > py(plan.floor.yMin) - 2 * dpr) y = py(a.y) - 22 * dpr; // anchors on the bottom wall: above the id
      const w = ctx.measureText(text).width;
      if (x + w > px(plan.floor.xMax)) x = px(a.x) - w - 8 * dpr;
      ctx.fillStyle = "rgba(255,255,255,0.85)";
      ctx.fillRect(x - 2 * dpr, y - 10 * dpr, w + 4 * dpr, 13 * dpr);
      ctx.fillStyle = high ? "#D55E00" : "#3b4048";
      ctx.fillText(text, x, y);
    }
  }

  let lastStatus = 0;
  function updateStatus(now, counts, total) {
    if (now - lastStatus < 250) {
      return;
    }

    lastStatus = now;
    updateTimes = updateTimes.filter((t) => now - t < 2000);
    el("update-rate").textContent = fmt(updateTimes.length / 2, 1) + " updates/s";
    el("valid-time").textContent = isFinite(lastValidTime) ? "pose time " + fmt(lastValidTime, 1) + " s" : "pose time –";
    el("robot-total").textContent = String(total);
    for (const s of STATES) {
      el("count-" + s.key).textContent = String(counts[s.key]);
    }
  }

  // ---------- hover details ----------

  canvas.addEventListener("mousemove", (e) => {
    const rect = canvas.getBoundingClientRect();
    hover = { x: (e.clientX - rect.left) * (transform.dpr || 1), y: (e.clientY - rect.top) * (transform.dpr || 1), cx: e.clientX - rect.left, cy: e.clientY - rect.top };
  });
  canvas.addEventListener("mouseleave", () => { hover = null; el("tooltip").hidden = true; });

  function drawHover(now) {
    let best = null, bestD = 14 * (transform.dpr || 1);
    for (const r of Object.values(view.robots)) {
      const d = Math.hypot(px(displayX(r, now)) - hover.x, py(displayY(r, now)) - hover.y);
      if (d < bestD) { best = r; bestD = d; }
    }

    const tip = el("tooltip");
    if (!best) {
      tip.hidden = true;
      return;
    }

    const sigma = isFinite(best.a) ? Math.sqrt(best.a * best.a + best.b * best.b) : NaN;
    tip.textContent = best.id + " · " + best.state +
      "\nx " + fmt(best.x, 2) + " m, y " + fmt(best.y, 2) + " m, yaw " + fmt(best.yaw * 180 / Math.PI, 0) + "°" +
      "\nspeed " + fmt(best.speed, 2) + " m/s" +
      "\n1-σ ellipse " + fmt(best.a * 100, 1) + " × " + fmt(best.b * 100, 1) + " cm" +
      "\nhorizontal σ (RMS) " + fmt(sigma * 100, 1) + " cm" +
      "\nrecent rejections " + fmt(100 * best.rejected, 1) + " %" +
      "\nlast update " + fmt((now - best.receivedAt) / 1000, 1) + " s ago";
    tip.hidden = false;
    tip.style.left = (hover.cx + 16) + "px";
    tip.style.top = (hover.cy + 12) + "px";
  }

  window.addEventListener("resize", () => { staticDirty = true; });
  loadPlan()
    .then(() => { connect(); requestAnimationFrame(frame); })
    .catch((e) => {
      const status = el("connection");
      status.className = "connection closed";
      status.textContent = "cannot load the site: " + e.message;
      view.error = e.message;
    });
})();
