/* wakeledger planner page: collects the base shot and the axes, asks the page's feeds (same origin,
 * JSON) and draws what they answer. Figures are built on the server and every number arrives as the
 * server's text: this script never formats a number. Text goes in with textContent only. */
(function () {
  "use strict";

  var PLOT_CONFIG = { displaylogo: false, responsive: true, modeBarButtonsToRemove: ["lasso2d", "select2d"] };

  function byId(id) { return document.getElementById(id); }

  function readJson(id) {
    var node = byId(id);
    if (!node) return null;
    try { return JSON.parse(node.textContent); } catch (e) { return null; }
  }

  function el(tag, cls, text) {
    var node = document.createElement(tag);
    if (cls) node.className = cls;
    if (text !== undefined && text !== null) node.textContent = text;
    return node;
  }

  function clear(node) { while (node.firstChild) node.removeChild(node.firstChild); }

  var PRESENTATION = readJson("presentation") || { glyphs: {} };

  function statusNode(name) {
    var span = el("span", "status " + name);
    var shape = el("span", "shape", PRESENTATION.glyphs[name] || "");
    shape.setAttribute("aria-hidden", "true");
    span.appendChild(shape);
    span.appendChild(document.createTextNode(name));
    return span;
  }

  function flagChip(f) {
    var chip = el("span", "flag");
    chip.appendChild(el("span", "mono", f.code));
    chip.appendChild(document.createTextNode(" "));
    chip.appendChild(el("span", "sev " + f.severity, f.severity));
    return chip;
  }

  /* A number box as the API takes it: a number when the text is one, else the text itself (the server names the field). */
  function asNumber(text) {
    var n = Number(text);
    return text !== "" && isFinite(n) ? n : text;
  }

  function post(url, body) {
    return fetch(url, {
      method: "POST", credentials: "same-origin",
      headers: { "Content-Type": "application/json", Accept: "application/json" },
      body: JSON.stringify(body)
    }).then(function (r) {
      return r.json().catch(function () { return {}; }).then(function (answer) {
        if (!r.ok) {
          var err = new Error((answer && (answer.detail || answer.title)) || ("HTTP " + r.status));
          err.problems = (answer && answer.errors) || [];
          throw err;
        }
        return answer;
      });
    });
  }

  function start() {
    var cfg = readJson("plan-config");
    var chart = byId("chart-plan");
    if (!cfg || !chart || !window.Plotly) return;
    var boxes = Array.prototype.slice.call(document.querySelectorAll("#plan-fields [data-path]"));
    var axisSets = Array.prototype.slice.call(document.querySelectorAll("#plan-axes .plan-axis"));
    var edited = false;
    var clickBound = false;
    var drawnFields = [];
    var nearestInputs = null;
    var problems = { map: [], panels: [], point: [] };
    var seq = { map: 0, panels: 0, point: 0 };
    var timers = {};

    /* ------------------------------------------------------------ the request */

    function baseBody() {
      if (cfg.shot_id && !edited) return { shot_id: cfg.shot_id };
      var shot = {};
      boxes.forEach(function (box) {
        var text = box.value.trim();
        if (text === "") return;
        var parts = box.getAttribute("data-path").split(".");
        shot[parts[0]] = shot[parts[0]] || {};
        shot[parts[0]][parts[1]] = box.getAttribute("data-kind") === "enum" ? text : asNumber(text);
      });
      return shot;
    }

    function axesBody() {
      var axes = [];
      axisSets.forEach(function (set) {
        var field = set.querySelector("[name=field]").value;
        if (!field) return;
        axes.push({
          field: field,
          start: asNumber(set.querySelector("[name=start]").value.trim()),
          stop: asNumber(set.querySelector("[name=stop]").value.trim()),
          steps: asNumber(set.querySelector("[name=steps]").value.trim()),
          spacing: set.querySelector("[name=log]").checked ? "log" : "linear"
        });
      });
      return axes;
    }

    function checked(selector) {
      return Array.prototype.map.call(document.querySelectorAll(selector + " input[type=checkbox]:checked"),
        function (box) { return box.value; });
    }

    /* ------------------------------------------------------------ problems */

    function showProblems() {
      var all = problems.map.concat(problems.panels, problems.point);
      var seen = {};
      Array.prototype.forEach.call(document.querySelectorAll("[data-error-for]"), function (span) { span.textContent = ""; });
      Array.prototype.forEach.call(document.querySelectorAll("[aria-invalid]"), function (node) { node.removeAttribute("aria-invalid"); });
      var box = byId("plan-problems"), list = box.querySelector("ul");
      clear(list);
      all.forEach(function (p) {
        var key = p.field + "\u0000" + p.reason;
        if (seen[key]) return;
        seen[key] = true;
        list.appendChild(el("li", null, p.field + ": " + p.reason));
        var span = document.querySelector('[data-error-for="' + CSS.escape(p.field) + '"]');
        if (span) {
          span.textContent = p.reason;
          var input = span.parentNode.querySelector("input, select");
          if (input) input.setAttribute("aria-invalid", "true");
        }
      });
      box.hidden = all.length === 0;
    }

    function failed(kind, err) {
      problems[kind] = err.problems && err.problems.length ? err.problems : [{ field: kind, reason: err.message }];
      showProblems();
    }

    function succeeded(kind) {
      if (problems[kind].length) { problems[kind] = []; showProblems(); }
    }

    /* ------------------------------------------------------------ the map */

    function drawMap() {
      var mine = ++seq.map;
      var body = {
        base: baseBody(), axes: axesBody(),
        contour: byId("plan-contour").value || null,
        curves: checked("#plan-curves").slice(0, 4)
      };
      return post(cfg.feeds.map, body).then(function (view) {
        if (mine !== seq.map) return;
        succeeded("map");
        drawnFields = view.fields;
        byId("plan-summary").textContent = view.summary;
        chart.classList.remove("loading");
        return Plotly.react(chart, view.figure.data, view.figure.layout, PLOT_CONFIG).then(function () {
          if (!clickBound) { chart.on("plotly_click", onClick); clickBound = true; }
          chart.setAttribute("data-drawn", String(mine));
        });
      }).catch(function (err) { if (mine === seq.map) failed("map", err); });
    }

    function showPoint(values) {
      var mine = ++seq.point;
      post(cfg.feeds.point, { base: baseBody(), values: values }).then(function (view) {
        if (mine !== seq.point) return;
        succeeded("point");
        byId("plan-point-empty").hidden = true;
        byId("plan-point-result").hidden = false;
        var status = byId("plan-point-status");
        clear(status);
        status.appendChild(statusNode(view.status));
        byId("plan-point-values").textContent = view.values.map(function (pair) { return pair[0] + " = " + pair[1]; }).join(", ");
        var rows = byId("plan-point-flags");
        clear(rows);
        view.flags.forEach(function (f) {
          var tr = el("tr");
          tr.appendChild(el("td", "mono", f.code));
          var td = el("td"); td.appendChild(el("span", "sev " + f.severity, f.severity)); tr.appendChild(td);
          tr.appendChild(el("td", "num", f.value));
          tr.appendChild(el("td", "num", f.limit));
          tr.appendChild(el("td", null, f.message));
          rows.appendChild(tr);
        });
        if (!view.flags.length) {
          var none = el("tr"), cell = el("td", null, "No rule fired: every metric is inside its limits.");
          cell.colSpan = 5; none.appendChild(cell); rows.appendChild(none);
        }
        var outputs = byId("plan-point-outputs");
        clear(outputs);
        view.outputs.forEach(function (pair) {
          outputs.appendChild(el("dt", "mono", pair[0]));
          outputs.appendChild(el("dd", null, pair[1]));
        });
        byId("plan-point").setAttribute("data-shown", String(mine));
      }).catch(function (err) { if (mine === seq.point) failed("point", err); });
    }

    function onClick(ev) {
      var p = ev && ev.points && ev.points[0];
      var kind = p && p.data && p.data.meta && p.data.meta.plan;
      if (!p || (kind !== "status" && kind !== "curve") || !drawnFields.length) return;
      var values = {};
      values[drawnFields[0]] = p.x;
      if (drawnFields.length > 1) values[drawnFields[1]] = p.y;
      showPoint(values);
    }

    /* ------------------------------------------------------------ the panels */

    function fillWindows(rows) {
      var body = byId("plan-windows");
      clear(body);
      rows.forEach(function (w) {
        var tr = el("tr", "window");
        var td = el("td");
        td.appendChild(el("span", "mono", w.field));
        if (w.unit) td.appendChild(el("span", "unit", " [" + w.unit + "]"));
        tr.appendChild(td);
        tr.appendChild(el("td", "num", w.base));
        tr.appendChild(el("td", "num", w.low));
        tr.appendChild(el("td", "num", w.high));
        body.appendChild(tr);
        var below = w.low_rules.length ? "below: " + w.low_rules.join(", ") : "";
        var above = w.high_rules.length ? "above: " + w.high_rules.join(", ") : "";
        var note = el("tr", "note"), cell = el("td", "hint");
        cell.colSpan = 4;
        if (below || above) cell.appendChild(el("span", "mono", [below, above].filter(Boolean).join(" \u00b7 ")));
        if (w.note) cell.appendChild(el("span", null, (below || above ? " \u2014 " : "") + w.note));
        note.appendChild(cell);
        body.appendChild(note);
      });
    }

    function fillSensitivities(rows) {
      var body = byId("plan-sensitivities");
      clear(body);
      rows.forEach(function (r) {
        var tr = el("tr");
        tr.appendChild(el("td", "mono", r.output));
        tr.appendChild(el("td", "mono", r.field));
        tr.appendChild(el("td", "num", r.value));
        tr.appendChild(el("td", "hint", r.one_sided));
        body.appendChild(tr);
      });
    }

    function fillNearest(view) {
      var note = byId("plan-nearest-note"), table = byId("plan-nearest-table"), rows = byId("plan-nearest-rows");
      var button = byId("plan-nearest-use");
      clear(note);
      clear(rows);
      nearestInputs = view.found ? view.inputs : null;
      button.disabled = !view.found || view.note !== "";
      table.hidden = !view.found;
      if (view.found) {
        note.appendChild(statusNode(view.status));
        note.appendChild(document.createTextNode(" at distance " + view.distance + (view.note ? ". " + view.note : "")));
        view.changes.forEach(function (c) {
          var tr = el("tr");
          var td = el("td");
          td.appendChild(el("span", "mono", c.field));
          if (c.unit) td.appendChild(el("span", "unit", " [" + c.unit + "]"));
          tr.appendChild(td);
          tr.appendChild(el("td", "num", c.base));
          tr.appendChild(el("td", "num", c.value));
          tr.appendChild(el("td", "num", c.change));
          rows.appendChild(tr);
        });
      } else {
        note.textContent = view.note + view.problems.map(function (p) { return " " + p.field + ": " + p.reason; }).join(";");
      }
    }

    function drawPanels() {
      var mine = ++seq.panels;
      return post(cfg.feeds.panels, { base: baseBody(), vary: checked("#plan-vary") }).then(function (view) {
        if (mine !== seq.panels) return;
        succeeded("panels");
        var status = byId("plan-base-status"), flags = byId("plan-base-flags");
        clear(status); clear(flags);
        status.appendChild(statusNode(view.base.status));
        view.base.flags.forEach(function (f) { flags.appendChild(flagChip(f)); });
        fillWindows(view.windows);
        fillSensitivities(view.sensitivities);
        fillNearest(view.nearest);
        byId("plan-base").setAttribute("data-drawn", String(mine));
      }).catch(function (err) { if (mine === seq.panels) failed("panels", err); });
    }

    /* ------------------------------------------------------------ changes */

    function later(kind, draw) {
      window.clearTimeout(timers[kind]);
      timers[kind] = window.setTimeout(draw, cfg.debounce_ms);
    }

    function baseChanged() {
      edited = true;
      var mark = byId("plan-base-edited");
      if (mark) mark.hidden = false;
      later("map", drawMap);
      later("panels", drawPanels);
    }

    boxes.forEach(function (box) {
      box.addEventListener("input", baseChanged);
      box.addEventListener("change", baseChanged);
    });
    function stepsText() { return axesBody().length > 1 ? cfg.map_steps : cfg.curve_steps; }

    axisSets.forEach(function (set) {
      set.querySelector("[name=field]").addEventListener("change", function (ev) {
        var d = cfg.defaults[ev.target.value];
        if (d) {
          set.querySelector("[name=start]").value = d.start;
          set.querySelector("[name=stop]").value = d.stop;
          set.querySelector("[name=log]").checked = d.log;
        }
        // One axis draws curves (more points), two a map: from one to the other, the points of the new kind.
        var count = axesBody().length;
        if (count !== axisCount) {
          axisSets.forEach(function (other) { other.querySelector("[name=steps]").value = stepsText(); });
          axisCount = count;
        }
      });
    });
    var axisCount = axesBody().length;
    byId("plan-axes").addEventListener("input", function () { later("map", drawMap); });
    byId("plan-axes").addEventListener("change", function () { later("map", drawMap); });
    byId("plan-axes").addEventListener("submit", function (ev) { ev.preventDefault(); drawMap(); });
    byId("plan-vary").addEventListener("change", function () { later("panels", drawPanels); });
    byId("plan-nearest-use").addEventListener("click", function () {
      if (!nearestInputs) return;
      boxes.forEach(function (box) {
        var text = nearestInputs[box.getAttribute("data-path")];
        if (text !== undefined) box.value = text;
      });
      baseChanged();
      window.clearTimeout(timers.map); window.clearTimeout(timers.panels);
      drawMap(); drawPanels();
    });

    drawMap();
    drawPanels();
  }

  // Deferred scripts run in order (Plotly's first); DOMContentLoaded follows them all.
  var started = false;
  function startOnce() { if (!started) { started = true; start(); } }
  if (document.readyState === "loading") document.addEventListener("DOMContentLoaded", startOnce);
  else startOnce();
})();
