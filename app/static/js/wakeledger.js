/* wakeledger dashboard script: charts, regime map, live updates, job progress.
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

  function drawChart(id, figure, cursor) {
    var div = document.getElementById(id);
    if (!div || !window.Plotly) return null;
    charts[id] = figure;
    chartCursor[id] = typeof cursor === "number" ? cursor : null;
    chartAdded[id] = 0;
    div.classList.remove("loading");
    var done = Plotly.react(div, figure.data, figure.layout, PLOT_CONFIG);
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

  function drawFeedCharts() {
    var divs = document.querySelectorAll(".chart[data-feed]");
    Array.prototype.forEach.call(divs, function (div) {
      var load = function () {
        chartCursor[div.id] = null; // no live extension while it reloads
        return fetchJson(div.getAttribute("data-feed"))
          .then(function (feed) { showFacts(div.id, feed.facts); return drawChart(div.id, feed.figure, feed.cursor); })
          .catch(function (err) {
            div.classList.remove("loading");
            if (!div.data) div.textContent = "This chart could not be loaded (" + err.message + "). Reload the page to try again.";
          });
      };
      chartReload[div.id] = load;
      load();
    });
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

    function axisTypes() {
      var div = document.getElementById("chart-regime");
      if (div && div.data) {
        Plotly.relayout(div, { "xaxis.type": logx.checked ? "log" : "linear", "yaxis.type": logy.checked ? "log" : "linear" });
      }
    }

    function load() {
      var mine = ++seq;
      chartCursor["chart-regime"] = null;
      state.textContent = "loading\u2026";
      var url = cfg.url + "?x=" + encodeURIComponent(xs.value) + "&y=" + encodeURIComponent(ys.value);
      fetchJson(url)
        .then(function (feed) {
          if (mine !== seq) return;
          var figure = feed.figure;
          figure.layout.xaxis.type = logx.checked ? "log" : "linear";
          figure.layout.yaxis.type = logy.checked ? "log" : "linear";
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
    load();
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
      var update = { x: [], y: [], customdata: [] }, indices = [];
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
        update.x.push(xsNew); update.y.push(ysNew); update.customdata.push(ids); indices.push(i);
      });
      if (indices.length) Plotly.extendTraces(div, update, indices);
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
    if (f.bounded) return false;
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
    td = el("td", "flags");
    s.flags.forEach(function (f) {
      var chip = el("span", "flag");
      chip.appendChild(el("span", "mono", f.code));
      chip.appendChild(document.createTextNode(" "));
      chip.appendChild(el("span", "sev " + f.severity, f.severity));
      td.appendChild(chip);
    });
    tr.appendChild(td);
    tr.appendChild(el("td", null, s.seed_method));
    columns.forEach(function (c) { tr.appendChild(el("td", "num", s.text[c])); });
    td = el("td", "notes", s.notes.length > 160 ? s.notes.slice(0, 160) + "\u2026" : s.notes);
    s.tags.forEach(function (t) { td.appendChild(document.createTextNode(" ")); td.appendChild(el("span", "tag", t)); });
    tr.appendChild(td);
    return tr;
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
      if (busy || document.hidden) return;
      busy = true;
      fetch(cfg.url + "?since=" + cursor + extraFields(), { credentials: "same-origin", headers: { Accept: "application/json" } })
        .then(function (r) { if (!r.ok) throw new Error("HTTP " + r.status); return r.json(); })
        .then(function (data) {
          failures = 0;
          if (dot) dot.classList.remove("stale");
          cursor = data.cursor;
          updateCounts(data);
          if (data.shots.length) {
            if (cfg.page === "overview") extendCharts(data.shots);
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
    drawEmbeddedCharts();
    drawFeedCharts();
    setupRegime();
    setupLive();
    setupJob();
  }

  if (document.readyState === "loading") document.addEventListener("DOMContentLoaded", start);
  else start();
})();
