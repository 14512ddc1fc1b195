/* wakeledger dashboard script: charts, regime map, live updates (and the opt-in notice of outside shots), job progress.
 * Data arrives as JSON (application/json script blocks or same-origin feeds); no user
 * text is ever run as code, and text is inserted with textContent only. */
(function () {
  "use strict";

  var PLOT_CONFIG = { displaylogo: false, responsive: true, modeBarButtonsToRemove: ["lasso2d", "select2d"] };

  function readJson(id) {
    var el = document.getElementById(id);
    if (!el) return null;
    try { return JSON.parse(el.textContent); } catch (e) { return null; }
  }

  function unescapeText(s) {
    // Chart labels carry HTML-escaped user text (Plotly renders a few tags in hover text).
    return String(s).replace(/&lt;/g, "<").replace(/&gt;/g, ">").replace(/&quot;/g, '"').replace(/&#x27;/g, "'").replace(/&amp;/g, "&");
  }

  function el(tag, cls, text) {
    var node = document.createElement(tag);
    if (cls) node.className = cls;
    if (text !== undefined && text !== null) node.textContent = text;
    return node;
  }

  // Glyphs of the statuses come from the server's one palette (app/presentation/palette.py),
  // and every number and time shown in a live row comes as text from the server's formatters:
  // this script never formats a number itself.
  var PRESENTATION = readJson("presentation") || { glyphs: {} };

  // The one exception: a page's running count of table rows, an integer the page adds to.
  // Same rule as app/presentation/numbers.py for integers (thousands separators from
  // 10,000 on); tests/browser holds the two equal.
  function formatCount(n) {
    return Math.abs(n) >= 10000 ? n.toLocaleString("en") : String(n);
  }
  window.wakeledgerFormatCount = formatCount;

  // The path prefix the app is served under (WAKELEDGER_ROOT_PATH), from <html data-root>.
  var ROOT = document.documentElement.getAttribute("data-root") || "";

  function shotLinkBase() {
    var path = window.location.pathname;
    if (ROOT && path.indexOf(ROOT + "/") === 0) path = path.slice(ROOT.length);
    var m = path.match(/^\/campaigns\/[^/]+/);
    return m ? ROOT + m[0] + "/shots/" : null;
  }

  /* ---------------------------------------------------------------- charts */

  var charts = {};
  var chartCursor = {}; // chart id -> last shot pk it already shows (null: not live)
  var chartReload = {}; // chart id -> function that fetches the chart afresh (thinned again)
  var chartAdded = {}; // chart id -> points added by live updates since it was drawn
  var LIVE_POINTS_BEFORE_RELOAD = 3000;

  function openShotOnClick(div) {
    var base = shotLinkBase();
    if (!base || !div.on) return;
    div.on("plotly_click", function (ev) {
      var p = ev && ev.points && ev.points[0];
      if (p && typeof p.customdata === "string" && p.data && p.data.meta && p.data.meta.status) {
        window.location.href = base + encodeURIComponent(unescapeText(p.customdata));
      }
    });
  }

  // This script runs before plotly.min.js (both deferred, this one first) so that the feeds
  // are asked for while the browser is still parsing Plotly; charts are drawn once it is there.
  var plotlyReady = new Promise(function (resolve) {
    if (window.Plotly || document.readyState === "complete") resolve();
    else document.addEventListener("DOMContentLoaded", function () { resolve(); });
  });

  // The main-thread time Plotly took to draw each chart (its synchronous part, where the SVG is
  // built), as a performance measure "wakeledger draw <chart id>" that the browser's developer
  // tools and tests/bench/bench_pages.py read.
  function measureDraw(id, started) {
    try { performance.measure("wakeledger draw " + id, { start: started, end: performance.now() }); } catch (e) { /* old browser */ }
  }

  function drawChart(id, figure, cursor) {
    var div = document.getElementById(id);
    if (!div || !window.Plotly) return null;
    charts[id] = figure;
    chartCursor[id] = typeof cursor === "number" ? cursor : null;
    chartAdded[id] = 0;
    div.classList.remove("loading");
    // The box keeps the figure's height: on a resize Plotly's responsive mode drops the layout's
    // height and fits the chart to its box, which would otherwise shrink to the CSS minimum
    // (the plot spilling over the cards below).
    if (figure.layout && figure.layout.height) div.style.height = figure.layout.height + "px";
    var started = performance.now();
    var done = Plotly.react(div, figure.data, figure.layout, PLOT_CONFIG);
    measureDraw(id, started);
    if (!div.dataset.clickBound) {
      div.dataset.clickBound = "1";
      Promise.resolve(done).then(function () { openShotOnClick(div); });
    }
    return done;
  }

  function fetchJson(url) {
    return fetch(url, { credentials: "same-origin", headers: { Accept: "application/json" } })
      .then(function (r) { if (!r.ok) throw new Error("HTTP " + r.status); return r.json(); });
  }

  function showFacts(chartId, facts) {
    var dl = document.getElementById("facts-" + chartId);
    if (!dl || !facts) return;
    while (dl.firstChild) dl.removeChild(dl.firstChild);
    facts.forEach(function (pair) {
      dl.appendChild(el("dt", null, pair[0]));
      dl.appendChild(el("dd", null, pair[1]));
    });
  }

  // Every feed is asked for at once; each chart is drawn as soon as its feed arrives
  // (no chart waits for another), and window.wakeledgerChartsDrawn resolves when all are.
  function drawFeedCharts() {
    var divs = document.querySelectorAll(".chart[data-feed]");
    var all = Array.prototype.map.call(divs, function (div) {
      var load = function () {
        chartCursor[div.id] = null; // no live extension while it reloads
        return fetchJson(div.getAttribute("data-feed"))
          .then(function (feed) { return plotlyReady.then(function () { return feed; }); })
          .then(function (feed) { showFacts(div.id, feed.facts); return drawChart(div.id, feed.figure, feed.cursor); })
          .catch(function (err) {
            div.classList.remove("loading");
            if (!div.data) div.textContent = "This chart could not be loaded (" + err.message + "). Reload the page to try again.";
          });
      };
      chartReload[div.id] = load;
      return load();
    });
    return Promise.all(all);
  }

  function drawEmbeddedCharts() {
    var blocks = document.querySelectorAll('script[type="application/json"][data-chart]');
    Array.prototype.forEach.call(blocks, function (block) {
      var figure;
      try { figure = JSON.parse(block.textContent); } catch (e) { return; }
      drawChart(block.getAttribute("data-chart"), figure);
    });
  }

  /* ------------------------------------------------------------ regime map */

  function setupRegime() {
    var cfg = readJson("regime-config");
    var form = document.getElementById("regime-controls");
    if (!cfg || !form) return;
    var xs = document.getElementById("regime-x"), ys = document.getElementById("regime-y");
    var logx = document.getElementById("regime-logx"), logy = document.getElementById("regime-logy");
    var state = document.getElementById("regime-state");
    var seq = 0;

    // A robust range (meta.robust: the pinned limits) is kept on a log axis as its log10,
    // when positive; otherwise the axis fits the points.
    function axisUpdate(name, log, robust) {
      var update = {};
      update[name + ".type"] = log ? "log" : "linear";
      if (robust && (!log || robust[0] > 0)) {
        var lo = log ? Math.log10(robust[0]) : robust[0], hi = log ? Math.log10(robust[1]) : robust[1];
        var pad = (hi - lo) * 0.03 || 1;
        update[name + ".range"] = [lo - pad, hi + pad];
      } else {
        update[name + ".autorange"] = true;
      }
      return update;
    }

    function robustOf(figureLayout, name) {
      var r = figureLayout && figureLayout.meta && figureLayout.meta.robust;
      return r ? r[name] : null;
    }

    function axisTypes() {
      var div = document.getElementById("chart-regime");
      if (div && div.data) {
        var update = Object.assign(axisUpdate("xaxis", logx.checked, robustOf(div.layout, "x")),
                                   axisUpdate("yaxis", logy.checked, robustOf(div.layout, "y")));
        Plotly.relayout(div, update);
      }
    }

    function load() {
      var mine = ++seq;
      chartCursor["chart-regime"] = null;
      state.textContent = "loading\u2026";
      var url = cfg.url + "?x=" + encodeURIComponent(xs.value) + "&y=" + encodeURIComponent(ys.value);
      return fetchJson(url)
        .then(function (feed) { return plotlyReady.then(function () { return feed; }); })
        .then(function (feed) {
          if (mine !== seq) return;
          var figure = feed.figure;
          [["xaxis", logx.checked, "x"], ["yaxis", logy.checked, "y"]].forEach(function (a) {
            var update = axisUpdate(a[0], a[1], robustOf(figure.layout, a[2]));
            figure.layout[a[0]].type = update[a[0] + ".type"];
            if (update[a[0] + ".range"]) figure.layout[a[0]].range = update[a[0] + ".range"];
            else delete figure.layout[a[0]].range;
          });
          state.textContent = "";
          return drawChart("chart-regime", figure, feed.cursor);
        })
        .catch(function (err) { if (mine === seq) state.textContent = "could not load the map (" + err.message + ")"; });
    }
    xs.addEventListener("change", load);
    ys.addEventListener("change", load);
    logx.addEventListener("change", axisTypes);
    logy.addEventListener("change", axisTypes);
    form.addEventListener("submit", function (e) { e.preventDefault(); load(); });
    chartReload["chart-regime"] = load;
    return load();
  }

  /* ----------------------------------------------------------- live updates */

  function extendCharts(allShots) {
    Object.keys(charts).forEach(function (id) {
      var div = document.getElementById(id);
      var seen = chartCursor[id];
      if (!div || !div.data || seen === null || seen === undefined) return;
      var shots = allShots.filter(function (s) { return s.pk > seen; });
      if (!shots.length) return;
      chartCursor[id] = shots[shots.length - 1].pk;
      chartAdded[id] += shots.length;
      if (chartAdded[id] > LIVE_POINTS_BEFORE_RELOAD && chartReload[id]) {
        chartReload[id](); // a long-open page: fetch the chart thinned again instead of growing it
        return;
      }
      // Traces whose markers stand for cells of shots carry hover text (a new shot stands for
      // itself: no text); Plotly extends an attribute only where the trace has it, so those go apart.
      var plain = { x: [], y: [], customdata: [] }, plainIndices = [];
      var withText = { x: [], y: [], customdata: [], text: [] }, textIndices = [];
      div.data.forEach(function (trace, i) {
        var meta = trace.meta;
        if (!meta || !meta.status) return;
        var xsNew = [], ysNew = [], ids = [];
        shots.forEach(function (s) {
          if (s.status !== meta.status) return;
          var x = meta.x === "taken_at" ? s.t : s.values[meta.x];
          var y = s.values[meta.y];
          if (x === null || x === undefined || y === null || y === undefined) return;
          xsNew.push(x); ysNew.push(y);
          ids.push(s.shot_id.replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;"));
        });
        if (!xsNew.length) return;
        var update = Array.isArray(trace.text) ? withText : plain;
        update.x.push(xsNew); update.y.push(ysNew); update.customdata.push(ids);
        if (update === withText) { update.text.push(ids.map(function () { return ""; })); textIndices.push(i); }
        else plainIndices.push(i);
      });
      if (plainIndices.length) Plotly.extendTraces(div, plain, plainIndices);
      if (textIndices.length) Plotly.extendTraces(div, withText, textIndices);
    });
  }

  function updateCounts(data) {
    var nodes = document.querySelectorAll("[data-count]");
    Array.prototype.forEach.call(nodes, function (n) {
      var key = n.getAttribute("data-count");
      var text = data.counts_text[key];
      if (text !== undefined) n.textContent = text;
    });
    var rows = document.querySelectorAll("#flag-count-rows tr[data-flag]");
    Array.prototype.forEach.call(rows, function (tr) {
      var c = data.flag_counts[tr.getAttribute("data-flag")] || {};
      var sum = 0;
      Array.prototype.forEach.call(tr.querySelectorAll("[data-sev]"), function (td) {
        var sev = td.getAttribute("data-sev");
        if (sev === "total") return;
        sum += c[sev] || 0;
        td.textContent = String(c[sev] || 0);
      });
      var t = tr.querySelector('[data-sev="total"]');
      if (t) t.textContent = String(sum);
    });
  }

  // A table cell of flag chips: code and severity of each fired rule (live rows of the table and
  // of the latest outside shots).
  function flagsCell(flags) {
    var td = el("td", "flags");
    flags.forEach(function (f) {
      var chip = el("span", "flag");
      chip.appendChild(el("span", "mono", f.code));
      chip.appendChild(document.createTextNode(" "));
      chip.appendChild(el("span", "sev " + f.severity, f.severity));
      td.appendChild(chip);
    });
    return td;
  }

  function statusNode(name) {
    var span = el("span", "status " + name);
    var shape = el("span", "shape", PRESENTATION.glyphs[name] || "");
    shape.setAttribute("aria-hidden", "true");
    span.appendChild(shape);
    span.appendChild(document.createTextNode(name));
    return span;
  }

  function matchesFilter(s, f) {
    if (!f) return true;
    if (f.bounded || f.only_excluded) return false;
    if (f.status && s.status !== f.status) return false;
    if (f.seed && s.seed_method !== f.seed) return false;
    if (f.flag && !s.flags.some(function (x) { return x.code === f.flag; })) return false;
    if (f.text) {
      var q = f.text.toLowerCase();
      var hay = (s.notes + " " + s.tags.join(" ") + " " + s.shot_id).toLowerCase();
      if (hay.indexOf(q) < 0) return false;
    }
    return true;
  }

  function tableRow(s, columns) {
    var tr = el("tr", "fresh");
    var td = el("td", "nowrap");
    var a = el("a", "mono", s.shot_id);
    a.href = s.url.replace(/[^/]+$/, encodeURIComponent(s.shot_id));
    td.appendChild(a);
    tr.appendChild(td);
    tr.appendChild(el("td", "mono nowrap", s.taken_local));
    td = el("td"); td.appendChild(statusNode(s.status)); tr.appendChild(td);
    tr.appendChild(flagsCell(s.flags));
    tr.appendChild(el("td", null, s.seed_method));
    columns.forEach(function (c) { tr.appendChild(el("td", "num", s.text[c])); });
    td = el("td", "notes", s.notes);
    s.tags.forEach(function (t) { td.appendChild(document.createTextNode(" ")); td.appendChild(el("span", "tag", t)); });
    tr.appendChild(td);
    return tr;
  }

  // The overview's latest outside shots: new ones at the top, the list kept to its length.
  function updateOutside(shots) {
    var body = document.getElementById("outside-rows");
    var table = document.getElementById("outside-table");
    if (!body || !table) return;
    var columns = readJson("outside-columns") || [];
    var max = Number(table.getAttribute("data-max-rows")) || 8;
    shots.forEach(function (s) {
      if (s.status !== "outside") return;
      var empty = body.querySelector("tr.empty");
      if (empty) empty.remove();
      var tr = el("tr", "fresh");
      var td = el("td", "nowrap");
      var a = el("a", "mono", s.shot_id);
      a.href = s.url.replace(/[^/]+$/, encodeURIComponent(s.shot_id));
      td.appendChild(a);
      tr.appendChild(td);
      tr.appendChild(el("td", "mono nowrap", s.taken_local));
      tr.appendChild(flagsCell(s.flags));
      columns.forEach(function (c) { tr.appendChild(el("td", "num", s.text[c])); });
      body.insertBefore(tr, body.firstChild);
    });
    while (body.rows.length > max) body.deleteRow(body.rows.length - 1);
  }

  function updateTable(cfg, shots) {
    var body = document.getElementById("shot-rows");
    if (!body) return;
    var columns = readJson("table-columns") || [];
    var fresh = shots.filter(function (s) { return matchesFilter(s, cfg.filter); });
    if (!fresh.length) return;
    var note = document.getElementById("table-new");
    var total = document.getElementById("table-total");
    if (total) {
      var n = Number(total.getAttribute("data-total")) + fresh.length;
      total.setAttribute("data-total", String(n));
      total.textContent = formatCount(n);
    }
    if (cfg.prepend) {
      var empty = body.querySelector("tr.empty");
      if (empty) empty.remove();
      fresh.forEach(function (s) { body.insertBefore(tableRow(s, columns), body.firstChild); });
      while (body.rows.length > 100) body.deleteRow(body.rows.length - 1);
      if (note) note.textContent = fresh.length + " new shot(s) added at the top";
    } else if (note) {
      note.textContent = fresh.length + " new shot(s) match \u2014 reload or sort by time to see them";
    }
  }

  /* ------------------------------------- the overview's notice of outside shots (opt-in) */

  var outsideNotice = null; // set up by setupOutsideNotice on the overview

  function setupOutsideNotice() {
    var box = document.getElementById("outside-alert");
    if (!box) return;
    var mode = document.getElementById("outside-alert-mode");
    var KEY = "wakeledger.outsideNotice";
    var audio = null;
    var canNotify = typeof window.Notification === "function";

    function say(text) { if (mode) mode.textContent = text; }
    function describe() {
      if (!box.checked) { say(""); return; }
      say(canNotify && Notification.permission === "granted" ? "(desktop notice)" : "(a short beep; desktop notices not permitted)");
    }
    function prepareSound() {
      var Ctx = window.AudioContext || window.webkitAudioContext;
      if (!audio && Ctx) audio = new Ctx(); // made in the click, so the browser lets it sound
      if (audio && audio.state === "suspended") audio.resume();
    }
    function beep() {
      if (!audio) return;
      var osc = audio.createOscillator(), gain = audio.createGain(), t = audio.currentTime;
      osc.frequency.value = 880;
      gain.gain.setValueAtTime(0.0001, t);
      gain.gain.exponentialRampToValueAtTime(0.2, t + 0.02);
      gain.gain.exponentialRampToValueAtTime(0.0001, t + 0.35);
      osc.connect(gain); gain.connect(audio.destination);
      osc.start(t); osc.stop(t + 0.4);
    }
    function switched() {
      try { window.localStorage.setItem(KEY, box.checked ? "on" : "off"); } catch (e) { /* private mode */ }
      if (box.checked) {
        prepareSound();
        if (canNotify && Notification.permission === "default") {
          var asked = Notification.requestPermission(describe);
          if (asked && asked.then) asked.then(describe);
        }
      }
      describe();
    }
    try { box.checked = window.localStorage.getItem(KEY) === "on"; } catch (e) { box.checked = false; }
    box.addEventListener("change", switched);
    describe();

    outsideNotice = {
      on: function () { return box.checked; },
      shots: function (shots) {
        var outside = shots.filter(function (s) { return s.status === "outside"; });
        if (!box.checked || !outside.length) return;
        var last = outside[outside.length - 1];
        var codes = last.flags.map(function (f) { return f.code; }).join(", ");
        box.dataset.noticed = String(Number(box.dataset.noticed || 0) + outside.length); // for the browser tests
        if (canNotify && Notification.permission === "granted") {
          var title = outside.length === 1 ? "Outside shot " + last.shot_id : outside.length + " outside shots, the last " + last.shot_id;
          var notice = new Notification(title, { body: codes, tag: "wakeledger-outside" });
          notice.onclick = function () { window.focus(); window.location.href = last.url; };
        } else {
          prepareSound();
          beep();
        }
      },
    };
  }

  function setupLive() {
    var cfg = readJson("live-config");
    if (!cfg || !cfg.url) return;
    var cursor = cfg.cursor || 0;
    var dot = document.querySelector("#live-state .live-dot");
    var failures = 0;
    var busy = false;

    function extraFields() {
      var x = document.getElementById("regime-x"), y = document.getElementById("regime-y");
      return x && y ? "&fields=" + encodeURIComponent(x.value + "," + y.value) : "";
    }

    function poll() {
      // A hidden page stops polling, unless it is to give notice of outside shots.
      if (busy || (document.hidden && !(outsideNotice && outsideNotice.on()))) return;
      busy = true;
      fetch(cfg.url + "?since=" + cursor + extraFields(), { credentials: "same-origin", headers: { Accept: "application/json" } })
        .then(function (r) { if (!r.ok) throw new Error("HTTP " + r.status); return r.json(); })
        .then(function (data) {
          failures = 0;
          if (dot) dot.classList.remove("stale");
          cursor = data.cursor;
          updateCounts(data);
          if (data.shots.length) {
            if (cfg.page === "overview") { extendCharts(data.shots); updateOutside(data.shots); }
            if (cfg.page === "overview" && outsideNotice) outsideNotice.shots(data.shots);
            if (cfg.page === "table") updateTable(cfg, data.shots);
          }
        })
        .catch(function () { failures += 1; if (dot && failures > 1) dot.classList.add("stale"); })
        .then(function () { busy = false; });
    }
    window.setInterval(poll, cfg.interval_ms || 2500);
  }

  /* ----------------------------------------------------------- job progress */

  function setupJob() {
    var cfg = readJson("job-config");
    if (!cfg || !cfg.job_id) return;
    var panel = document.getElementById("job-panel");
    var bar = document.getElementById("job-bar");
    var text = document.getElementById("job-text");
    var url = ROOT + "/api/v1/jobs/" + encodeURIComponent(cfg.job_id);
    var cancel = document.getElementById("job-cancel");
    var polls = 0;
    panel.hidden = false;
    if (cancel) {
      cancel.addEventListener("click", function () {
        var meta = document.querySelector("meta[name=csrf-token]");
        cancel.disabled = true;
        fetch(url, { method: "DELETE", credentials: "same-origin",
                     headers: { Accept: "application/json", "X-CSRF-Token": meta ? meta.getAttribute("content") : "" } })
          .then(function (r) { if (!r.ok) throw new Error("HTTP " + r.status); })
          .catch(function (err) { cancel.disabled = false; text.textContent = "Not cancelled (" + err.message + ")."; });
      });
    }

    function poll() {
      polls += 1;
      fetch(url, { credentials: "same-origin", headers: { Accept: "application/json" } })
        .then(function (r) { if (!r.ok) throw new Error("HTTP " + r.status); return r.json(); })
        .then(function (job) {
          var pct = job.total ? Math.round(100 * job.done / job.total) : (job.state === "succeeded" ? 100 : 0);
          var open = job.state === "queued" || job.state === "running";
          bar.style.width = pct + "%";
          text.textContent = "Re-evaluation " + job.state + ": " + job.done + " of " + job.total + " shots (" + pct + " %)" + (job.message ? " \u2014 " + job.message : "");
          if (cancel) cancel.hidden = !open || job.cancel_requested;
          if (open && polls < 2000) window.setTimeout(poll, 1500);
        })
        .catch(function (err) { text.textContent = "Could not read the job (" + err.message + ")."; });
    }
    poll();
  }

  function start() {
    plotlyReady.then(drawEmbeddedCharts);
    var feeds = drawFeedCharts();
    var regime = setupRegime();
    setupOutsideNotice();
    window.wakeledgerChartsDrawn = Promise.all([feeds, regime]);
    setupLive();
    setupJob();
  }

  if (document.readyState === "loading") document.addEventListener("DOMContentLoaded", start);
  else start();
})();
