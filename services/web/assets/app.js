// bunchsieve run view: polls api/status once a second, keeps two minutes
// of history in memory and draws it as SVG sparklines. No libraries.
"use strict";

(function () {
  const HISTORY = 120; // samples kept, one per poll
  const POLL_MS = 1000;
  const STALE_MS = 3500; // no answer for this long: say so
  const SVG = "http://www.w3.org/2000/svg";
  const LAT_MIN = 1e-5, LAT_MAX = 10; // latency bar scale, seconds

  const hist = { t: [], crossings: [], built: [], accepted: [], incomplete: [], p99: [], e2e: [], rules: new Map() };
  let lastOK = 0;
  let ruleKey = "";
  let sourceKey = "";

  const $ = (id) => document.getElementById(id);

  function push(arr, v) {
    arr.push(Number.isFinite(v) ? v : 0);
    if (arr.length > HISTORY) arr.shift();
  }

  // Numbers --------------------------------------------------------------

  function fmtRate(hz) {
    if (!Number.isFinite(hz)) return "-";
    const a = Math.abs(hz);
    if (a >= 1e6) return (hz / 1e6).toFixed(a >= 1e7 ? 1 : 2) + " M";
    if (a >= 1e4) return (hz / 1e3).toFixed(1) + " k";
    if (a >= 1000) return (hz / 1e3).toFixed(2) + " k";
    if (a >= 100) return hz.toFixed(0);
    if (a >= 10) return hz.toFixed(1);
    return hz.toFixed(2);
  }

  function fmtCount(n) {
    if (!Number.isFinite(n)) return "-";
    return Math.round(n).toString().replace(/\B(?=(\d{3})+(?!\d))/g, "\u2009");
  }

  function fmtSeconds(s) {
    if (!Number.isFinite(s) || s <= 0) return "-";
    if (s < 1e-3) return (s * 1e6).toFixed(s < 1e-4 ? 1 : 0) + " \u00b5s";
    if (s < 1) return (s * 1e3).toFixed(s < 1e-2 ? 2 : 1) + " ms";
    return s.toFixed(2) + " s";
  }

  function fmtUptime(s) {
    if (!Number.isFinite(s) || s < 0) return "-";
    s = Math.floor(s);
    const h = Math.floor(s / 3600), m = Math.floor((s % 3600) / 60), r = s % 60;
    const two = (x) => String(x).padStart(2, "0");
    return (h > 0 ? h + ":" + two(m) : String(m)) + ":" + two(r);
  }

  function fmtPercent(f) {
    if (!Number.isFinite(f)) return "-";
    const p = f * 100;
    if (p === 0) return "0";
    if (p < 0.01) return "<0.01";
    return p < 10 ? p.toFixed(2) : p.toFixed(1);
  }

  // Drawing --------------------------------------------------------------

  function el(name, attrs) {
    const e = document.createElementNS(SVG, name);
    for (const k in attrs) e.setAttribute(k, attrs[k]);
    return e;
  }

  // spark draws values (oldest first) into svg as a line over a shaded
  // area (or shade as the area, when given). A young history is stretched
  // over the full width; the y axis starts at zero.
  function spark(svg, values, shade) {
    const vb = svg.viewBox.baseVal;
    const w = vb.width, h = vb.height, pad = 2;
    while (svg.firstChild) svg.removeChild(svg.firstChild);
    svg.appendChild(el("line", { class: "base", x1: 0, y1: h - 0.5, x2: w, y2: h - 0.5 }));
    if (values.length === 0) return;
    let max = 0;
    for (const v of values) max = Math.max(max, v);
    if (shade) for (const v of shade) max = Math.max(max, v);
    if (max <= 0) max = 1;
    const span = Math.max(values.length - 1, 1);
    const x = (i, n) => w - (n - 1 - i) * (w / span);
    const y = (v) => h - pad - (v / (max * 1.08)) * (h - 2 * pad);
    const path = (vals) => vals.map((v, i) => x(i, vals.length).toFixed(1) + "," + y(v).toFixed(1));
    if (shade && shade.length > 0) {
      const p = path(shade);
      svg.appendChild(el("polygon", { class: "area", points: x(0, shade.length).toFixed(1) + "," + h + " " + p.join(" ") + " " + w + "," + h }));
    }
    const p = path(values);
    if (!shade) {
      svg.appendChild(el("polygon", { class: "area", points: x(0, values.length).toFixed(1) + "," + h + " " + p.join(" ") + " " + w + "," + h }));
    }
    svg.appendChild(el("polyline", { class: "line", points: p.join(" ") }));
  }

  function latWidth(s) {
    if (!Number.isFinite(s) || s <= 0) return "0%";
    const f = (Math.log10(s) - Math.log10(LAT_MIN)) / (Math.log10(LAT_MAX) - Math.log10(LAT_MIN));
    return (Math.min(1, Math.max(0.01, f)) * 100).toFixed(1) + "%";
  }

  // Panels ---------------------------------------------------------------

  function renderHeader(s) {
    const phase = s.phase || "unknown";
    $("phase").textContent = phase;
    $("phase-box").className = "phase " + phase.replace(/[^a-z]/g, "");
    $("run").textContent = s.run;
    $("lumi-slice").textContent = s.lumi_slice;
    $("prescale-set").textContent = s.prescale_set || "-";
    $("menu").textContent = s.menu || "-";
    $("menu-hash").textContent = s.menu_hash ? s.menu_hash.slice(0, 8) : "";
    $("menu-hash").title = s.menu_hash || "";
    $("uptime").textContent = fmtUptime(s.uptime_s);
    const d = $("detail");
    d.hidden = !s.detail;
    d.textContent = s.detail || "";
    // A note on the last run reads as a note; only a failure is an alarm.
    d.className = phase === "faulted" ? "detail fault" : "detail";
  }

  function renderFlows(s) {
    $("crossings-hz").textContent = fmtRate(s.crossings_hz);
    $("built-hz").textContent = fmtRate(s.built_hz);
    $("accepted-hz").textContent = fmtRate(s.accepted_hz);
    $("incomplete").textContent = fmtPercent(s.incomplete_fraction);
    spark($("spark-crossings"), hist.crossings);
    spark($("spark-built"), hist.built);
    spark($("spark-accepted"), hist.accepted);
    spark($("spark-incomplete"), hist.incomplete);
    range("crossings", hist.crossings, fmtRate, " /s");
    range("built", hist.built, fmtRate, " /s");
    range("accepted", hist.accepted, fmtRate, " /s");
    range("incomplete", hist.incomplete, (v) => fmtPercent(v / 100), " %");
  }

  // range writes the span of a tile's history under its sparkline.
  function range(name, values, fmt, unit) {
    const e = $("range-" + name);
    if (values.length < 2) {
      e.textContent = "collecting history";
      return;
    }
    let lo = Infinity, hi = -Infinity;
    for (const v of values) { lo = Math.min(lo, v); hi = Math.max(hi, v); }
    const secs = Math.round((hist.t[hist.t.length - 1] - hist.t[0]) / 1000);
    e.textContent = "last " + secs + " s: " + fmt(lo) + " .. " + fmt(hi) + unit;
  }

  function ruleRow(r) {
    const tr = document.createElement("tr");
    tr.dataset.rule = r.name;
    const cells = [
      ["name l", ""], ["ps", ""], ["pass-hz", ""], ["acc-hz", ""], ["hist l", ""], ["share l", ""], ["total", ""],
    ];
    for (const [cls] of cells) {
      const td = document.createElement("td");
      td.className = cls;
      tr.appendChild(td);
    }
    tr.children[0].textContent = r.name;
    const svg = el("svg", { viewBox: "0 0 240 22", preserveAspectRatio: "none", "aria-hidden": "true" });
    tr.children[4].appendChild(svg);
    const bar = document.createElement("div");
    bar.className = "share-bar";
    bar.innerHTML = '<span class="track"><span class="fill"></span></span><span class="pct"></span>';
    tr.children[5].appendChild(bar);
    return tr;
  }

  function renderRules(s) {
    const rules = s.rules || [];
    const key = rules.map((r) => r.name).join("\n");
    const body = document.querySelector("#rules tbody");
    if (key !== ruleKey) {
      body.textContent = "";
      for (const r of rules) body.appendChild(ruleRow(r));
      for (const name of hist.rules.keys()) if (!rules.some((r) => r.name === name)) hist.rules.delete(name);
      ruleKey = key;
    }
    const total = s.accepted_hz > 0 ? s.accepted_hz : 0;
    let on = 0;
    rules.forEach((r, i) => {
      if (!hist.rules.has(r.name)) hist.rules.set(r.name, []);
      const h = hist.rules.get(r.name);
      push(h, r.accepted_hz);
      const tr = body.children[i];
      const off = r.prescale === 0;
      if (!off) on++;
      tr.classList.toggle("off", off);
      tr.children[1].textContent = off ? "off" : r.prescale;
      tr.children[2].textContent = fmtRate(r.passed_hz);
      tr.children[3].textContent = fmtRate(r.accepted_hz);
      spark(tr.children[4].firstChild, h);
      const share = total > 0 ? Math.min(1, r.accepted_hz / total) : 0;
      tr.children[5].querySelector(".fill").style.width = (share * 100).toFixed(1) + "%";
      tr.children[5].querySelector(".pct").textContent = total > 0 ? (share * 100).toFixed(0) + "%" : "-";
      tr.children[6].textContent = fmtCount(r.accepted);
      tr.title = r.name + ": " + fmtCount(r.passed) + " passed, " + fmtCount(r.accepted) + " accepted";
    });
    $("rules-note").textContent = rules.length + " rules, " + on + " on \u00b7 an event kept by several rules counts in each share";
  }

  function renderLatency(s) {
    const rows = [["p50", s.build_latency_p50_s], ["p90", s.build_latency_p90_s], ["p99", s.build_latency_p99_s]];
    for (const [q, v] of rows) {
      $("lat-" + q).textContent = fmtSeconds(v);
      $("bar-" + q).style.width = latWidth(v);
    }
    $("e2e-p99").textContent = fmtSeconds(s.end_to_end_p99_s);
    $("bar-e2e").style.width = latWidth(s.end_to_end_p99_s);
    spark($("spark-p99"), hist.p99, hist.e2e);
  }

  function renderSources(s) {
    const sources = s.sources || [];
    const grid = $("sources");
    const key = sources.map((x) => x.id).join(",");
    if (key !== sourceKey) {
      grid.textContent = "";
      for (const src of sources) {
        const d = document.createElement("div");
        d.className = "src";
        d.dataset.source = src.id;
        d.textContent = src.id;
        grid.appendChild(d);
      }
      if (sources.length === 0) {
        const e = document.createElement("div");
        e.className = "empty";
        e.textContent = "no sources reported";
        grid.appendChild(e);
      }
      sourceKey = key;
    }
    let alive = 0, discarded = 0;
    sources.forEach((src, i) => {
      const d = grid.children[i];
      if (src.alive) alive++;
      discarded += src.discarded;
      d.dataset.alive = src.alive ? "1" : "0";
      d.className = "src" + (src.alive ? (src.discarded > 0 ? " warn" : "") : " dead");
      d.title = "source " + src.id + (src.alive ? ", sending" : ", silent") + ": " +
        fmtCount(src.received) + " fragments received, " + fmtCount(src.discarded) + " discarded";
    });
    $("sources-note").textContent = sources.length === 0 ? "" :
      alive + " of " + sources.length + " sending" + (discarded > 0 ? " \u00b7 " + fmtCount(discarded) + " discarded" : "");
  }

  function render(s) {
    push(hist.t, Date.now());
    push(hist.crossings, s.crossings_hz);
    push(hist.built, s.built_hz);
    push(hist.accepted, s.accepted_hz);
    push(hist.incomplete, s.incomplete_fraction * 100);
    push(hist.p99, s.build_latency_p99_s);
    push(hist.e2e, s.end_to_end_p99_s);
    renderHeader(s);
    renderFlows(s);
    renderRules(s);
    renderLatency(s);
    renderSources(s);
    document.body.classList.remove("waiting");
  }

  function linkState() {
    const link = $("link");
    if (lastOK === 0) {
      link.textContent = "connecting";
      return;
    }
    const age = Date.now() - lastOK;
    const stale = age > STALE_MS;
    link.classList.toggle("lost", stale);
    document.body.classList.toggle("stale", stale);
    link.textContent = stale ? "no answer for " + Math.round(age / 1000) + " s" : "live";
  }

  async function poll() {
    try {
      const r = await fetch("api/status", { cache: "no-store" });
      if (!r.ok) throw new Error("status " + r.status);
      const s = await r.json();
      lastOK = Date.now();
      render(s);
    } catch (e) {
      // Keep the last picture; the link indicator says it is old.
    }
    linkState();
    setTimeout(poll, POLL_MS);
  }

  setInterval(linkState, 500);
  poll();
})();
