// Ensembles of fold winners. On a page with the builder (templates/_ensemble_builder.html): a tick box on
// every element carrying data-config / data-repeat / data-outer-fold, quick picks, a live estimate from
// POST .../ensembles/preview, a Plotly chart of the outer-fold scores, and saving. On a saved ensemble's
// page: the same chart from the estimate embedded as JSON, and deleting. No inline scripts; every URL
// comes from a data- attribute.
(function () {
  "use strict";

  // The page's one chart style (templates/base.html, from app/web/charts/base.py): config, layout, axes.
  function chartStyle() { return JSON.parse(document.getElementById("foldwise-chart-style").textContent); }

  // How a metric reads (app/web/metric_display.py, handed over as data-metric-displays): a loss that
  // scikit-learn negates (neg_*) is shown as itself. The numbers from the API keep scikit-learn's sign.
  function displayOf(node, metric) {
    var holder = node.closest("[data-metric-displays]");
    var all = holder ? JSON.parse(holder.dataset.metricDisplays) : {};
    var shown = all[metric] || { name: metric, negated: false, label: metric };
    return { name: shown.name, label: shown.label,
             level: function (value) { return value === null || value === undefined || !shown.negated ? value : -value; } };
  }

  function number(value, digits) {
    return value === null || value === undefined ? "–" : value.toFixed(digits === undefined ? 3 : digits);
  }

  // The JSON body of a response, or an Error carrying the server's detail (it names what was wrong).
  function answer(response) {
    return response.json().then(function (body) {
      if (response.ok) { return body; }
      // Every refusal's detail is a list of {loc, msg, type}: the messages name what was wrong.
      throw new Error(body.detail.map(function (entry) { return entry.msg; }).join("; "));
    });
  }

  function folds(n) { return n + (n === 1 ? " fold" : " folds"); }

  function element(tag, text, className) {
    var node = document.createElement(tag);
    if (text !== undefined && text !== null) { node.textContent = text; }
    if (className) { node.className = className; }
    return node;
  }

  // plotly.js is large: use the page's copy, or load the locally served one once, on first need.
  var plotlyWaiting = null;
  function withPlotly(url, callback) {
    if (window.Plotly) { callback(window.Plotly); return; }
    if (!plotlyWaiting) {
      plotlyWaiting = [];
      var script = document.createElement("script");
      script.src = url;
      script.addEventListener("load", function () {
        plotlyWaiting.forEach(function (waiting) { waiting(window.Plotly); });
      });
      document.head.appendChild(script);
    }
    plotlyWaiting.push(callback);
  }

  function drawChart(target, estimate, colours, plotlyUrl) {
    var shown = displayOf(target, estimate.metric);
    var labels = estimate.folds.map(function (f) { return "r" + f.repeat + " o" + f.outer_fold; });
    function trace(name, key, colour, dash) {
      return { type: "scatter", mode: "lines+markers", name: name, x: labels,
               y: estimate.folds.map(function (f) { return shown.level(f[key]); }),
               line: { color: colour, dash: dash || "solid" }, marker: { color: colour } };
    }
    // The ensemble in ink, the selection procedure in grey; the best family keeps its family colour.
    var style = chartStyle(), best = estimate.best_family.family, inks = style.colours;
    var data = [trace("ensemble", "ensemble", inks.ink), trace("selection procedure", "selection", inks.muted, "dash"),
                trace("best family (" + best + ")", "best_family", (colours && colours[best]) || inks.muted, "dot")];
    var layout = Object.assign({}, style.layout, {
      height: 260, margin: { l: 55, r: 15, t: 10, b: 40 }, showlegend: true, legend: { orientation: "h", y: -0.25 },
      xaxis: Object.assign({ title: { text: "outer fold" } }, style.axis),
      yaxis: Object.assign({ title: { text: shown.label } }, style.axis) });
    target.dataset.drawn = "false";
    withPlotly(plotlyUrl, function (Plotly) {
      Plotly.react(target, data, layout, style.config).then(function () {
        target.dataset.drawn = "true";
      });
    });
  }

  function comparisonText(estimate) {
    var c = estimate.comparison;
    if (!c) { return estimate.comparison_note || ""; }
    return "Against the selection procedure, paired over " + c.n + " outer folds: mean difference " +
      number(c.mean_diff, 4) + " (positive favours the ensemble), corrected resampled t-test p = " + number(c.corrected_p) +
      ", Wilcoxon p = " + number(c.wilcoxon_p) + "; " + c.verdict + ".";
  }

  function Builder(root) {
    this.root = root;
    this.chosen = [];  // configuration ids in ticking order, each once
    this.sequence = 0;
    this.colours = root.dataset.colours ? JSON.parse(root.dataset.colours) : {};
    var hooks = document.querySelectorAll("[data-config][data-repeat][data-outer-fold]");
    this.hooks = Array.prototype.slice.call(hooks);
    this.part = function (name) { return root.querySelector("[data-" + name + "]"); };
    this.addBoxes();
    this.addPicks();
    var self = this;
    this.part("ensemble-metric").addEventListener("change", function () { self.refresh(); });
    // Members read as on the rest of the page: family (with its colour) and short parameter text.
    this.labels = {};
    this.hooks.forEach(function (hook) {
      self.labels[hook.dataset.config] = { family: hook.dataset.family, params: hook.dataset.params || "" };
    });
    // The Save form is on the page only for a visitor with the write key.
    var form = this.part("save-form");
    if (form) {
      form.addEventListener("submit", function (event) { event.preventDefault(); self.save(false); });
      this.part("save-again").addEventListener("click", function () { self.save(true); });
      this.part("save-cancel").addEventListener("click", function () { self.part("duplicate").hidden = true; });
    }
    // The draft lives in the query string (?member=...), so a copied URL or a reload shows the same one.
    var known = this.hooks.map(function (hook) { return hook.dataset.config; });
    this.chosen = new URLSearchParams(window.location.search).getAll("member").filter(function (config, i, all) {
      return known.indexOf(config) >= 0 && all.indexOf(config) === i;
    });
    if (this.chosen.length) { this.changed(); }
  }

  Builder.prototype.addBoxes = function () {
    var self = this;
    this.hooks.forEach(function (hook) {
      var box = element("input", null, "ensemble-tick");
      box.type = "checkbox";
      box.value = hook.dataset.config;
      box.setAttribute("aria-label", "add " + hook.dataset.family + " of repeat " + hook.dataset.repeat +
                       ", outer fold " + hook.dataset.outerFold + " to the ensemble");
      box.addEventListener("change", function () { self.toggle(hook.dataset.config, box.checked); });
      hook.insertBefore(box, hook.firstChild);
    });
  };

  Builder.prototype.addPicks = function () {
    var self = this, families = [];
    this.hooks.forEach(function (hook) {
      if (families.indexOf(hook.dataset.family) < 0) { families.push(hook.dataset.family); }
    });
    var holder = this.part("family-picks");
    families.forEach(function (family) {
      var button = element("button", "All " + family + " winners");
      button.type = "button";
      button.dataset.pick = "family";
      button.dataset.family = family;
      holder.appendChild(button);
    });
    this.root.querySelectorAll("button[data-pick]").forEach(function (button) {
      button.addEventListener("click", function () { self.pick(button.dataset.pick, button.dataset.family); });
    });
  };

  Builder.prototype.pick = function (kind, family) {
    var picked = [];
    this.hooks.forEach(function (hook) {
      var wanted = kind === "overall" ? hook.dataset.overall === "true"
        : kind === "family" && hook.dataset.family === family;
      if (wanted && picked.indexOf(hook.dataset.config) < 0) { picked.push(hook.dataset.config); }
    });
    this.chosen = picked;
    this.changed();
  };

  Builder.prototype.toggle = function (config, on) {
    var at = this.chosen.indexOf(config);
    if (on && at < 0) { this.chosen.push(config); }
    if (!on && at >= 0) { this.chosen.splice(at, 1); }
    this.changed();
  };

  Builder.prototype.changed = function () {
    var chosen = this.chosen;
    // Every box of a configuration shows whether it is in: it counts once, whichever fold it was ticked in.
    this.root.ownerDocument.querySelectorAll("input.ensemble-tick").forEach(function (box) {
      box.checked = chosen.indexOf(box.value) >= 0;
    });
    this.root.dataset.members = String(chosen.length);
    var saveButton = this.part("save-button");
    if (saveButton) {
      saveButton.disabled = !chosen.length;
      saveButton.title = chosen.length ? "" : "Tick at least one fold winner first";
      this.part("duplicate").hidden = true;
    }
    var query = new URLSearchParams(window.location.search);
    query.delete("member");
    chosen.forEach(function (config) { query.append("member", config); });
    var search = query.toString();
    var url = window.location.pathname + (search ? "?" + search : "") + window.location.hash;
    window.history.replaceState(null, "", url);
    this.refresh();
  };

  Builder.prototype.refresh = function () {
    var self = this, sequence = ++this.sequence;
    this.part("message").textContent = "";
    if (!this.chosen.length) { this.show(null); this.root.dataset.state = "empty"; return; }
    this.root.dataset.state = "loading";
    fetch(this.root.dataset.previewUrl, {
      method: "POST", headers: { "content-type": "application/json", accept: "application/json" },
      body: JSON.stringify({ members: this.chosen, metric: this.part("ensemble-metric").value })
    }).then(answer).then(function (estimate) {
      if (sequence !== self.sequence) { return; }  // a later change has been sent since
      self.show(estimate);
      self.root.dataset.state = "ready";
    }).catch(function (error) {
      if (sequence !== self.sequence) { return; }
      self.show(null);
      self.part("message").textContent = error.message;
      self.root.dataset.state = "error";
    });
  };

  Builder.prototype.show = function (estimate) {
    var members = this.part("member-list"), rows = this.part("fold-table").querySelector("tbody");
    members.textContent = "";
    rows.textContent = "";
    this.part("fold-table").hidden = !estimate;
    this.part("caution").hidden = !estimate;
    if (!estimate) {
      this.part("estimate").textContent = "–";
      ["voting", "rule", "comparison"].forEach(function (name) { this.part(name).textContent = ""; }, this);
      this.part("ensemble-chart").textContent = "";
      return;
    }
    this.root.dataset.estimate = String(estimate.mean);
    var big = this.part("estimate"), shown = displayOf(this.root, estimate.metric);
    big.textContent = number(shown.level(estimate.mean));
    if (estimate.sd !== null) { big.appendChild(element("small", " ± " + number(estimate.sd))); }
    big.appendChild(element("small", " " + shown.label + " over " + estimate.n + " outer folds"));
    this.part("caution").textContent = estimate.caution;
    this.part("voting").textContent = "Combined by " + estimate.voting_text + "." +
      (estimate.metric_note ? " " + estimate.metric_note + "." : "");
    var best = estimate.best_family;
    this.part("rule").textContent = "Members: " + estimate.rule + ". Selection procedure " +
      number(shown.level(estimate.selection.mean)) + " ± " + number(estimate.selection.sd) + "; best single family (" +
      best.family + ") " + number(shown.level(best.mean)) + " ± " + number(best.sd) + ".";
    this.part("comparison").textContent = comparisonText(estimate);
    estimate.member_details.forEach(function (member) {
      var item = element("li");
      var label = this.labels[member.config] || { family: member.family, params: "" };
      item.title = member.config;
      item.dataset.member = member.config;
      item.appendChild(element("span", null, "dot")).style.background = this.colours[member.family] || chartStyle().colours.muted;
      item.appendChild(element("span", label.family + " "));
      if (label.params) { item.appendChild(element("code", label.params)); }
      item.appendChild(element("span", " family winner in " + folds(member.n_family_wins) + ", overall in " +
                               folds(member.n_overall_wins), "hint"));
      members.appendChild(item);
    }, this);
    this.part("best-family-heading").textContent = "Best family (" + estimate.best_family.family + ")";
    estimate.folds.forEach(function (fold) {
      var row = element("tr");
      [fold.repeat, fold.outer_fold].forEach(function (value) { row.appendChild(element("td", String(value))); });
      // Levels as the metric reads; the difference keeps its sign (positive favours the ensemble).
      [shown.level(fold.ensemble), shown.level(fold.selection), shown.level(fold.best_family), fold.diff].forEach(function (value, i) {
        row.appendChild(element("td", number(value, i === 3 ? 4 : 3), "num"));
      });
      rows.appendChild(row);
    });
    drawChart(this.part("ensemble-chart"), estimate, this.colours, this.root.dataset.plotlyUrl);
  };

  // Saving the members of an ensemble already saved asks first ("Save again" or "Cancel").
  Builder.prototype.save = function (again) {
    var self = this, form = this.part("save-form"), message = this.part("message");
    if (!this.chosen.length) { message.textContent = "Tick at least one fold winner first."; return; }
    var members = this.chosen.slice().sort().join("\n");
    var check = again ? Promise.resolve([]) : fetch(this.root.dataset.savedUrl, { headers: { accept: "application/json" } })
      .then(answer);
    check.then(function (saved) {
      var same = saved.filter(function (e) { return e.members.slice().sort().join("\n") === members; });
      if (same.length) {
        self.part("duplicate-text").textContent = "An ensemble with exactly these members is already saved (" +
          same.map(function (e) { return "\u201c" + e.name + "\u201d"; }).join(", ") + "). Save another copy?";
        self.part("duplicate").hidden = false;
        self.root.dataset.state = "asking";
        return null;
      }
      self.part("duplicate").hidden = true;
      return fetch(self.root.dataset.saveUrl, {
        method: "POST", headers: { "content-type": "application/json", accept: "application/json" },
        body: JSON.stringify({ name: form.elements.name.value, note: form.elements.note.value,
                               members: self.chosen, metric: self.part("ensemble-metric").value })
      }).then(answer).then(function (ensemble) {
        message.textContent = "Saved: ";
        message.appendChild(element("a", ensemble.name)).href = ensemble.url;
        message.appendChild(document.createTextNode(" \u00b7 "));
        message.appendChild(element("a", "specification (JSON)")).href = ensemble.spec_url;
        self.root.dataset.saved = ensemble.id;
        self.root.dataset.state = "ready";
      });
    }).catch(function (error) { message.textContent = "Not saved: " + error.message; });
  };

  function showSaved(root) {
    var source = document.getElementById(root.dataset.estimateSource);
    var colours = root.dataset.colours ? JSON.parse(root.dataset.colours) : {};
    drawChart(root, JSON.parse(source.textContent), colours, root.dataset.plotlyUrl);
  }

  function wireDelete(button) {
    button.addEventListener("click", function () {
      if (!window.confirm("Delete the saved ensemble " + button.dataset.name + "?")) { return; }
      fetch(button.dataset.deleteUrl, { method: "DELETE" }).then(function (response) {
        if (response.ok) { window.location.href = button.dataset.afterUrl; }
      });
    });
  }

  document.addEventListener("DOMContentLoaded", function () {
    document.querySelectorAll(".ensemble-builder").forEach(function (root) { root.builder = new Builder(root); });
    document.querySelectorAll("[data-estimate-source]").forEach(showSaved);
    document.querySelectorAll("button[data-delete-url]").forEach(wireDelete);
  });
})();
