// Running assessments: asks the server for the state every few seconds and moves the progress bars.
// When a fold completes or the status changes the page is loaded again (its folds come from the server);
// a finished run's page gives way to its assessment's.
(function () {
  "use strict";

  function fill(root, run) {
    var bar = root.querySelector("progress");
    if (bar) { bar.max = run.fits_total; bar.value = run.fits_done; bar.textContent = run.percent.toFixed(1) + "%"; }
    var texts = {
      status_text: run.status_text, progress_text: run.progress_text, expected_end_text: run.expected_end_text,
      folds: run.n_folds_done + " of " + run.n_folds
    };
    if (run.seconds_per_fit !== null) {
      texts.pace_text = seconds(run.seconds_per_fit) + " of wall time per fit, " + seconds(run.mean_fit_time) +
        " of fitting each";
    }
    Object.keys(texts).forEach(function (name) {
      root.querySelectorAll('[data-field="' + name + '"]').forEach(function (node) { node.textContent = texts[name]; });
    });
  }

  function seconds(value) {
    if (value === null) { return "–"; }
    if (value < 60) { return value.toFixed(1) + " s"; }
    if (value < 3600) { return (value / 60).toFixed(1) + " min"; }
    return (value / 3600).toFixed(1) + " h";
  }

  function poll(url, every, handle) {
    function ask() {
      fetch(url, { credentials: "same-origin", headers: { accept: "application/json" } })
        .then(function (response) { return response.ok ? response.json() : null; })
        .then(function (body) { if (body !== null && handle(body) === false) { return; } setTimeout(ask, every); })
        .catch(function () { setTimeout(ask, every); });
    }
    setTimeout(ask, every);
  }

  document.addEventListener("DOMContentLoaded", function () {
    var page = document.getElementById("live-run");
    if (page) {
      var every = 1000 * parseFloat(page.dataset.pollSeconds || "2");
      poll(page.dataset.liveRun, every, function (body) {
        var run = body.run;
        if (run.assessment_url) { window.location.assign(run.assessment_url); return false; }
        if (run.status !== page.dataset.status || String(run.n_folds_done) !== page.dataset.foldsDone) {
          window.location.reload();
          return false;
        }
        fill(page, run);
        return true;
      });
    }
    var list = document.getElementById("running");
    if (list) {
      poll(list.dataset.liveList, 2000, function (runs) {
        var uuids = runs.map(function (run) { return run.uuid; }).join(",");
        var statuses = runs.map(function (run) { return run.status; }).join(",");
        if (uuids !== list.dataset.uuids || statuses !== list.dataset.statuses) {
          window.location.reload();
          return false;
        }
        runs.forEach(function (run) {
          var row = list.querySelector('tr[data-uuid="' + run.uuid + '"]');
          if (row) { fill(row, run); }
        });
        return true;
      });
    }
  });
})();
