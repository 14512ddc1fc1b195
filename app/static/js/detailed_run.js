/* wakeledger shot page: the detailed-run panel (envelope solver).
 * Reads its configuration from the application/json block #detailed-run-config, draws the
 * latest stored run, starts a run through the API (ingest or admin), follows the job and draws
 * the new run without a reload. Text goes in with textContent only. */
(function () {
  "use strict";

  var PLOT_CONFIG = { displaylogo: false, responsive: true, modeBarButtonsToRemove: ["lasso2d", "select2d"] };
  var CHARTS = { map: "chart-detailed-map", growth: "chart-detailed-growth", field: "chart-detailed-field" };
  var POLL_MS = 1000;
  var MAX_POLLS = 3600; // an hour of polling at most

  // The path prefix the app is served under (WAKELEDGER_ROOT_PATH), from <html data-root>.
  var ROOT = document.documentElement.getAttribute("data-root") || "";

  function byId(id) { return document.getElementById(id); }

  // A write through the browser session carries the session's CSRF token (a meta tag of the page).
  function writeHeaders() {
    var meta = document.querySelector("meta[name=csrf-token]");
    var headers = { "Content-Type": "application/json", Accept: "application/json" };
    if (meta) headers["X-CSRF-Token"] = meta.getAttribute("content");
    return headers;
  }

  function readConfig() {
    var block = byId("detailed-run-config");
    if (!block) return null;
    try { return JSON.parse(block.textContent); } catch (e) { return null; }
  }

  function getJson(url) {
    return fetch(url, { credentials: "same-origin", headers: { Accept: "application/json" } })
      .then(function (r) {
        return r.json().catch(function () { return {}; }).then(function (body) {
          if (!r.ok) throw new Error(problemText(body, r.status));
          return body;
        });
      });
  }

  function problemText(body, status) {
    var text = (body && (body.detail || body.title)) || ("HTTP " + status);
    if (body && body.errors && body.errors.length) {
      text += ": " + body.errors.map(function (e) { return e.field + " " + e.reason; }).join("; ");
    }
    return text;
  }

  function showRun(view) {
    if (!view) return;
    byId("detailed-run-empty").hidden = true;
    byId("detailed-run-result").hidden = false;
    byId("detailed-run-validity-text").textContent = view.validity_note || "";
    var stale = byId("detailed-run-stale");
    stale.textContent = view.stale_note || "";
    stale.hidden = !view.stale_note;
    var facts = byId("detailed-run-facts");
    while (facts.firstChild) facts.removeChild(facts.firstChild);
    (view.facts || []).forEach(function (pair) {
      var dt = document.createElement("dt"), dd = document.createElement("dd");
      dt.textContent = pair[0];
      dd.textContent = pair[1];
      facts.appendChild(dt);
      facts.appendChild(dd);
    });
    if (!window.Plotly) return;
    Object.keys(CHARTS).forEach(function (key) {
      var div = byId(CHARTS[key]), figure = view.figures && view.figures[key];
      if (div && figure) Plotly.react(div, figure.data, figure.layout, PLOT_CONFIG);
    });
  }

  function follow(cfg, jobId) {
    var box = byId("detailed-run-job"), bar = byId("detailed-run-bar"), text = byId("detailed-run-job-text");
    var button = document.querySelector("#detailed-run-form button");
    var cancel = byId("detailed-run-cancel");
    var polls = 0;
    box.hidden = false;
    if (button) button.disabled = true;
    if (cancel) {
      cancel.hidden = false;
      cancel.disabled = false;
      cancel.onclick = function () {
        cancel.disabled = true;
        fetch(ROOT + "/api/v1/jobs/" + encodeURIComponent(jobId), { method: "DELETE", credentials: "same-origin", headers: writeHeaders() })
          .then(function (r) { if (!r.ok) throw new Error("HTTP " + r.status); text.textContent = "Cancelling the run\u2026"; })
          .catch(function (err) { cancel.disabled = false; text.textContent = "The run was not cancelled (" + err.message + ")."; });
      };
    }

    function finish(message) {
      text.textContent = message;
      if (button) button.disabled = false;
      if (cancel) cancel.hidden = true;
    }

    function poll() {
      polls += 1;
      getJson(ROOT + "/api/v1/jobs/" + encodeURIComponent(jobId))
        .then(function (job) {
          var pct = job.total ? Math.round(100 * job.done / job.total) : (job.state === "succeeded" ? 100 : 0);
          bar.style.width = pct + "%";
          text.textContent = "Detailed run " + job.state + ": " + pct + " %" + (job.message ? " \u2014 " + job.message : "");
          if (job.state === "succeeded" && job.result && job.result.run_id !== undefined) {
            return getJson(cfg.runs_url + "/" + encodeURIComponent(job.result.run_id) + "/figures")
              .then(function (view) { showRun(view); finish("Detailed run finished: run #" + view.run.id + " is shown above."); });
          }
          if (job.state === "failed") return finish("The detailed run failed: " + job.message);
          if (job.state === "cancelled") return finish("The detailed run was cancelled.");
          if (polls < MAX_POLLS) window.setTimeout(poll, POLL_MS);
          else finish("Still running; reload the page later to see the result.");
        })
        .catch(function (err) { finish("Could not follow the run (" + err.message + ")."); });
    }
    poll();
  }

  function setupForm(cfg) {
    var form = byId("detailed-run-form");
    if (!form) return;
    form.addEventListener("submit", function (event) {
      event.preventDefault();
      var body = {};
      var spw = form.elements.slices_per_wavelength.value.trim();
      var dz = form.elements.dz_m.value.trim();
      // Numbers as numbers; anything else as typed, so the API's 422 names the field.
      if (spw !== "") body.slices_per_wavelength = isFinite(Number(spw)) ? Number(spw) : spw;
      if (dz !== "") body.dz_m = isFinite(Number(dz)) ? Number(dz) : dz;
      var text = byId("detailed-run-job-text");
      byId("detailed-run-job").hidden = false;
      text.textContent = "Starting the detailed run\u2026";
      fetch(cfg.runs_url, {
        method: "POST", credentials: "same-origin",
        headers: writeHeaders(),
        body: JSON.stringify(body)
      })
        .then(function (r) {
          return r.json().catch(function () { return {}; }).then(function (answer) {
            if (r.status !== 202) throw new Error(problemText(answer, r.status));
            follow(cfg, answer.job_id);
          });
        })
        .catch(function (err) { text.textContent = "The run was not started: " + err.message; });
    });
  }

  function start() {
    var cfg = readConfig();
    if (!cfg) return;
    showRun(cfg.latest);
    setupForm(cfg);
    if (cfg.job_id) follow(cfg, cfg.job_id);
  }

  // This deferred file runs before Plotly's (which comes later in the page) while the document is
  // already "interactive"; DOMContentLoaded fires only after every deferred script, Plotly included.
  var started = false;
  function startOnce() { if (!started) { started = true; start(); } }
  if (document.readyState === "complete") startOnce();
  else {
    document.addEventListener("DOMContentLoaded", startOnce);
    window.addEventListener("load", startOnce);
  }
})();
