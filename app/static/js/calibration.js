/* wakeledger calibration page: draws the figures of its JSON blocks, opens a shot's page when one of
 * its points is clicked, and lets an admin apply a density scale (a settings change, after a
 * confirmation). Figures and every number come from the server; text goes in with textContent. */
(function () {
  "use strict";

  var PLOT_CONFIG = { displaylogo: false, responsive: true, modeBarButtonsToRemove: ["lasso2d", "select2d"] };

  function byId(id) { return document.getElementById(id); }

  function readJson(node) {
    try { return JSON.parse(node.textContent); } catch (e) { return null; }
  }

  // The path prefix the app is served under (WAKELEDGER_ROOT_PATH), from <html data-root>.
  var ROOT = document.documentElement.getAttribute("data-root") || "";

  var configNode = byId("calibration-config");
  var CONFIG = (configNode && readJson(configNode)) || {};

  function openShotOnClick(div) {
    if (!div.on || !CONFIG.shot_base) return;
    div.on("plotly_click", function (ev) {
      var p = ev && ev.points && ev.points[0];
      if (p && typeof p.customdata === "string") {
        window.location.href = ROOT + CONFIG.shot_base + encodeURIComponent(p.customdata);
      }
    });
  }

  function drawCharts() {
    var blocks = document.querySelectorAll('script[type="application/json"][data-chart]');
    var pending = [];
    Array.prototype.forEach.call(blocks, function (block) {
      var figure = readJson(block);
      var div = byId(block.getAttribute("data-chart"));
      if (!figure || !div || !window.Plotly) return;
      pending.push(Promise.resolve(Plotly.newPlot(div, figure.data, figure.layout, PLOT_CONFIG)).then(function () {
        openShotOnClick(div);
        div.setAttribute("data-drawn", "1");
      }));
    });
    Promise.all(pending).then(function () { document.body.setAttribute("data-charts-drawn", String(pending.length)); });
  }

  function csrfToken() {
    var meta = document.querySelector('meta[name="csrf-token"]');
    return meta ? meta.getAttribute("content") : "";
  }

  function applyScale(button) {
    var value = Number(button.getAttribute("data-scale"));
    var text = button.getAttribute("data-text");
    var out = byId("calib-apply-result");
    if (!isFinite(value)) return;
    if (!window.confirm("Set the campaign's density_scale to " + text + "? Every shot of the campaign is re-evaluated with it.")) return;
    button.disabled = true;
    fetch(ROOT + CONFIG.settings_url, {
      method: "PATCH", credentials: "same-origin",
      headers: { "Content-Type": "application/json", Accept: "application/json", "X-CSRF-Token": csrfToken() },
      body: JSON.stringify({ density_scale: value })
    }).then(function (r) {
      return r.json().catch(function () { return {}; }).then(function (answer) {
        if (!r.ok) throw new Error((answer && (answer.detail || answer.title)) || ("HTTP " + r.status));
        return answer;
      });
    }).then(function (answer) {
      var job = answer && answer.job && answer.job.id;
      if (out) {
        out.textContent = "Applied: density_scale is " + text + " (settings version " + (answer.campaign && answer.campaign.settings_version) +
          "); the re-evaluation" + (job ? " (job " + job + ")" : "") + " runs in the background. Reload this page once it is done.";
        out.setAttribute("data-applied", text);
      }
    }).catch(function (err) {
      button.disabled = false;
      if (out) out.textContent = "Not applied: " + err.message;
    });
  }

  function setupApply() {
    var buttons = document.querySelectorAll("#calib-apply, .calib-apply-after");
    Array.prototype.forEach.call(buttons, function (button) {
      button.addEventListener("click", function () { applyScale(button); });
    });
  }

  function start() { drawCharts(); setupApply(); }

  if (document.readyState === "loading") document.addEventListener("DOMContentLoaded", start);
  else start();
})();
