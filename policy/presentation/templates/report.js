/* The report's live cost controls, in plain JavaScript (no framework, nothing loaded).
 *
 * From the data island (per-cell outcome probabilities p[x, j, d], weights w(x), decision costs
 * c_dec(d, x)) it recomputes, for the costs the reader sets, what the tool's engine computes:
 *   C(d, x) = c_dec(d, x) + sum_j c_j p_jd(x)                       (policy/costs.py)
 *   rule(g) = argmin_d sum_{x in g} w(x) C(d, x), ties to the more lenient level within a
 *             relative tolerance                                     (policy/solve.py)
 *   cost, outcome rates, decision shares, regret and agreement       (policy/evaluate.py)
 * Text from the scenario is written with textContent only, never as markup.
 */
(function () {
  "use strict";

  var island = document.getElementById("report-data");
  if (!island) { return; }
  var live = JSON.parse(island.textContent).live;
  var n = live.n_cells, J = live.n_outcomes, L = live.n_levels;
  var w = live.weights, p = live.p, base = live.decision_base, ridx = live.rule_index;
  var G = live.rule_cells.length;
  var digits = live.digits;

  var totalWeight = 0;
  for (var x0 = 0; x0 < n; x0++) { totalWeight += w[x0]; }

  // ---- formatting: the same digits as the page rendered by the tool ------------------------
  function fmtPct(v, d) {
    if (!isFinite(v)) { return "\u2013"; }
    return (100 * v).toFixed(d) + "%";
  }
  function fmtNum(v, d) {
    if (!isFinite(v)) { return "\u2013"; }
    var parts = Math.abs(v).toFixed(d).split(".");
    parts[0] = parts[0].replace(/\B(?=(\d{3})+(?!\d))/g, ",");
    var text = parts.join(".");
    return (v < 0 && /[1-9]/.test(text)) ? "-" + text : text;
  }

  // ---- the cost settings ------------------------------------------------------------------
  var outcomeCost = live.outcome_costs.slice();
  var decisionSetting = [];  // per level: {mode: "value" | "scale", value: number}
  for (var d0 = 0; d0 < L; d0++) { decisionSetting.push({ mode: "value", value: 0 }); }
  live.controls.forEach(function (c) {
    if (c.kind === "decision") { decisionSetting[c.index] = { mode: c.mode, value: c.value }; }
  });

  function decisionCost(x, d) {
    var s = decisionSetting[d];
    return s.mode === "scale" ? base[x * L + d] * s.value : s.value;
  }

  // ---- the engine -------------------------------------------------------------------------
  function perCaseCosts() {
    var out = new Float64Array(n * L);
    for (var x = 0; x < n; x++) {
      for (var d = 0; d < L; d++) {
        var s = 0;
        for (var j = 0; j < J; j++) { s += p[(x * J + j) * L + d] * outcomeCost[j]; }
        out[x * L + d] = decisionCost(x, d) + s;
      }
    }
    return out;
  }

  function optimalLevels(per) {
    var totals = new Float64Array(G * L);
    for (var x = 0; x < n; x++) {
      var g = ridx[x];
      for (var d = 0; d < L; d++) { totals[g * L + d] += w[x] * per[x * L + d]; }
    }
    var levels = new Int32Array(G);
    for (var g2 = 0; g2 < G; g2++) {
      var best = Infinity;
      for (var d2 = 0; d2 < L; d2++) { best = Math.min(best, totals[g2 * L + d2]); }
      var slack = live.tie_tolerance * Math.max(1, Math.abs(best));
      var chosen = 0;
      while (chosen < L - 1 && !(totals[g2 * L + chosen] <= best + slack)) { chosen++; }
      levels[g2] = chosen;
    }
    return levels;
  }

  function evaluateOptimal(per, levels) {
    var cost = 0, rates = new Float64Array(J), shares = new Float64Array(L);
    for (var x = 0; x < n; x++) {
      var d = levels[ridx[x]];
      cost += w[x] * per[x * L + d];
      shares[d] += w[x];
      for (var j = 0; j < J; j++) { rates[j] += w[x] * p[(x * J + j) * L + d]; }
    }
    for (var j2 = 0; j2 < J; j2++) { rates[j2] /= totalWeight; }
    for (var d2 = 0; d2 < L; d2++) { shares[d2] /= totalWeight; }
    return { cost: cost / totalWeight, rates: rates, shares: shares };
  }

  function evaluateCompared(rule, per, levels) {
    var cost = 0, agree = 0, rates = new Float64Array(J), shares = new Float64Array(L);
    for (var x = 0; x < n; x++) {
      var row = rule.delta[rule.index[x]];
      var opt = levels[ridx[x]];
      for (var d = 0; d < L; d++) {
        cost += w[x] * row[d] * per[x * L + d];
        shares[d] += w[x] * row[d];
        for (var j = 0; j < J; j++) { rates[j] += w[x] * row[d] * p[(x * J + j) * L + d]; }
      }
      agree += w[x] * row[opt];
    }
    for (var j2 = 0; j2 < J; j2++) { rates[j2] /= totalWeight; }
    for (var d2 = 0; d2 < L; d2++) { shares[d2] /= totalWeight; }
    return { cost: cost / totalWeight, agreement: agree / totalWeight, rates: rates, shares: shares };
  }

  // ---- where the rule would change: the nearest exact breakpoint of one outcome's cost -----
  // Per rule cell g and level d the total cost is A(g, d) + c_j B(g, d), a line in c_j; the rule
  // changes where the first other line crosses the chosen level's line (policy/assessment/sweep).
  function nearestBreaks(j, per, levels) {
    var A = new Float64Array(G * L), B = new Float64Array(G * L);
    for (var x = 0; x < n; x++) {
      var g = ridx[x];
      for (var d = 0; d < L; d++) {
        var b = w[x] * p[(x * J + j) * L + d];
        B[g * L + d] += b;
        A[g * L + d] += w[x] * per[x * L + d] - outcomeCost[j] * b;
      }
    }
    var c = outcomeCost[j], slack = 1e-9 * Math.max(1, Math.abs(c));
    var up = { cost: Infinity, g: -1, from: 0, to: 0 }, down = { cost: -Infinity, g: -1, from: 0, to: 0 };
    for (var g2 = 0; g2 < G; g2++) {
      var s = levels[g2];
      for (var d2 = 0; d2 < L; d2++) {
        var den = B[g2 * L + s] - B[g2 * L + d2];
        if (d2 === s || den === 0) { continue; }
        var at = (A[g2 * L + d2] - A[g2 * L + s]) / den;
        if (den > 0 && at > c + slack && at < up.cost) { up = { cost: at, g: g2, from: s, to: d2 }; }
        if (den < 0 && at < c - slack && at >= 0 && at > down.cost) { down = { cost: at, g: g2, from: s, to: d2 }; }
      }
    }
    return { up: up, down: down };
  }

  function cellText(g) {
    var names = live.export.rule_column_labels;
    if (!names.length) { return "every case"; }
    return names.map(function (name, k) { return name + " " + live.rule_cells[g][k]; }).join(", ");
  }

  // ---- the page ---------------------------------------------------------------------------
  function each(kind, fn) {
    var nodes = document.querySelectorAll('[data-live="' + kind + '"]');
    for (var i = 0; i < nodes.length; i++) { fn(nodes[i], Number(nodes[i].getAttribute("data-index"))); }
  }

  function describeCosts() {
    var parts = [];
    live.controls.forEach(function (c) {
      var label = document.querySelector('label[for="' + c.id + '-range"]').textContent;
      var value = c.kind === "outcome" ? outcomeCost[c.index] : decisionSetting[c.index].value;
      parts.push(label + ": " + (c.mode === "scale" ? "\u00d7" + fmtNum(value, 2) : fmtNum(value, 0) + " " + live.unit));
    });
    return parts.join("; ");
  }

  function atScenarioCosts() {
    return live.controls.every(function (c) {
      var value = c.kind === "outcome" ? outcomeCost[c.index] : decisionSetting[c.index].value;
      return value === c.value;
    });
  }

  // the summary's texts as the tool wrote them at the scenario's costs (with intervals and the sweeps' breakpoints)
  var exactSummary = {};
  ["sum-diff", "sum-cheaper", "sum-chosen", "grid-stability", "bp-below", "bp-below-text", "bp-above", "bp-above-text", "bp-below-lead", "bp-above-lead"].forEach(function (kind) {
    exactSummary[kind] = [];
    var nodes = document.querySelectorAll('[data-live="' + kind + '"]');
    for (var i = 0; i < nodes.length; i++) { exactSummary[kind].push(nodes[i].textContent); }
  });
  function restore(kind) {
    var nodes = document.querySelectorAll('[data-live="' + kind + '"]');
    for (var i = 0; i < nodes.length; i++) { nodes[i].textContent = exactSummary[kind][i]; }
  }

  function showBreakpoints(per, levels, exact) {
    if (exact) {
      ["bp-below", "bp-below-text", "bp-above", "bp-above-text", "bp-below-lead", "bp-above-lead"].forEach(restore);
    }
    var items = document.querySelectorAll("#summary-breakpoints li");
    for (var i = 0; i < items.length; i++) {
      var item = items[i], j = Number(item.getAttribute("data-outcome"));
      item.querySelector('[data-live="bp-now"]').textContent = fmtNum(outcomeCost[j], 0);
      if (exact) { continue; }
      var br = nearestBreaks(j, per, levels);
      var labels = live.level_labels;
      item.querySelector('[data-live="bp-below-lead"]').textContent = br.down.g < 0 ? "" : "the rule changes at";
      item.querySelector('[data-live="bp-above-lead"]').textContent = br.up.g < 0 ? "" : "it changes at";
      item.querySelector('[data-live="bp-below"]').textContent = br.down.g < 0 ? "no change" : fmtNum(br.down.cost, 0);
      item.querySelector('[data-live="bp-below-text"]').textContent = br.down.g < 0 ? "(down to 0)"
        : "(" + cellText(br.down.g) + ": " + labels[br.down.from] + " \u2192 " + labels[br.down.to] + ")";
      item.querySelector('[data-live="bp-above"]').textContent = br.up.g < 0 ? "no change" : fmtNum(br.up.cost, 0);
      item.querySelector('[data-live="bp-above-text"]').textContent = br.up.g < 0 ? "(at any higher cost)"
        : "(" + cellText(br.up.g) + ": " + labels[br.up.from] + " \u2192 " + labels[br.up.to] + ")";
    }
  }

  function showGrid(levels) {
    var cells = document.querySelectorAll("[data-grid-cell]");
    for (var i = 0; i < cells.length; i++) {
      var td = cells[i], g = Number(td.getAttribute("data-grid-cell")), d = levels[g];
      td.setAttribute("data-level", String(d));
      td.style.background = live.level_colours[d][1];
      td.style.borderLeftColor = live.level_colours[d][0];
      td.querySelector('[data-live="grid-level"]').textContent = live.level_labels[d];
      var was = live.scenario_levels[g];
      td.querySelector('[data-live="grid-changed"]').textContent = d !== was ? " \u00b7 was " + live.level_labels[was] : "";
      td.classList.toggle("changed", d !== was);
    }
  }

  // ---- export: the chosen costs as the command line and a scenario snippet; the rule as CSV --
  function word(text) {
    return /^[A-Za-z0-9_.,:\/=+@%-]+$/.test(text) ? text : "'" + text.replace(/'/g, "'\\''") + "'";
  }

  function costOptions() {
    var ex = live.export, parts = [];
    for (var j = 0; j < J; j++) { parts.push("--cost " + word(ex.outcome_keys[j] + "=" + String(outcomeCost[j]))); }
    for (var d = 0; d < L; d++) {
      var s = decisionSetting[d];
      parts.push((s.mode === "scale" ? "--decision-cost-factor " : "--decision-cost ") + word(ex.level_values[d] + "=" + String(s.value)));
    }
    return parts.join(" ");
  }

  function snippet() {
    var ex = live.export;
    var lines = ["# Costs chosen on the page (" + live.unit + "). Put these cost keys in the scenario's tables of the same",
                 "# value / key (labels, sources and other keys stay as they are)."];
    for (var d = 0; d < L; d++) {
      var s = decisionSetting[d];
      lines.push("", "[[decisions]]", "value = " + JSON.stringify(ex.level_values[d]));
      if (s.mode === "scale") {
        lines.push("cost_column = " + JSON.stringify(ex.level_columns[d]), "cost_factor = " + String(s.value));
      } else {
        lines.push("cost = " + String(s.value));
      }
    }
    for (var j = 0; j < J; j++) {
      lines.push("", "[[outcomes]]", "key = " + JSON.stringify(ex.outcome_keys[j]), "cost = " + String(outcomeCost[j]));
    }
    return lines.join("\n") + "\n";
  }

  function csvField(text) {
    return /[",\r\n]/.test(text) ? '"' + text.replace(/"/g, '""') + '"' : text;
  }

  function ruleCsv(levels) {
    var rows = [live.export.rule_columns.concat(["level", "level_value", "cases"]).map(csvField).join(",")];
    for (var g = 0; g < G; g++) {
      rows.push(live.rule_cells[g].concat([live.level_labels[levels[g]], live.export.level_values[levels[g]],
        String(live.rule_cases[g])]).map(csvField).join(","));
    }
    return rows.join("\r\n") + "\r\n";
  }

  function showExport(levels) {
    var options = costOptions();
    var scen = live.export.scenario;
    document.getElementById("export-command").value = "policy solve " + scen + " --out chosen-costs " + options;
    document.getElementById("export-report-command").value = "policy report " + scen + " --out report-at-chosen-costs " + options;
    document.getElementById("export-snippet").value = snippet();
    document.getElementById("export-rule").setAttribute("href", "data:text/csv;charset=utf-8," + encodeURIComponent(ruleCsv(levels)));
  }

  function update() {
    var per = perCaseCosts();
    var levels = optimalLevels(per);
    var ev = evaluateOptimal(per, levels);
    each("share", function (el, i) { el.textContent = fmtPct(ev.shares[i], digits.share); });
    each("summary-share", function (el, i) { el.textContent = fmtPct(ev.shares[i], digits.share); });
    each("rate", function (el, i) { el.textContent = fmtPct(ev.rates[i], digits.rate); });
    each("cost", function (el) { el.textContent = fmtNum(1000 * ev.cost, digits.cost); });
    var left = 0;
    each("share-rect", function (el, i) {
      el.setAttribute("x", (1000 * left).toFixed(3));
      el.setAttribute("width", (1000 * ev.shares[i]).toFixed(3));
      left += ev.shares[i];
    });
    var changed = 0;
    each("level", function (el, g) {
      el.textContent = live.level_labels[levels[g]];
      var moved = levels[g] !== live.scenario_levels[g];
      if (moved) { changed++; }
      el.parentNode.classList.toggle("changed", moved);
    });
    each("changed", function (el, g) { el.textContent = levels[g] !== live.scenario_levels[g] ? "changed" : ""; });
    var exact = atScenarioCosts();
    live.compared.forEach(function (rule, i) {
      var r = evaluateCompared(rule, per, levels);
      var mine = function (kind, fn) { each(kind, function (el, k) { if (k === i) { el.textContent = fn(); } }); };
      mine("compared-cost", function () { return fmtNum(1000 * r.cost, digits.cost); });
      mine("regret", function () { return fmtNum(1000 * (r.cost - ev.cost), digits.cost); });
      mine("agreement", function () { return fmtPct(r.agreement, digits.share); });
      mine("sum-cost", function () { return fmtNum(1000 * r.cost, digits.cost); });
      if (!exact) {
        mine("sum-diff", function () { var t = fmtNum(1000 * (r.cost - ev.cost), digits.cost); return t.charAt(0) === "-" ? t : "+" + t; });
        mine("sum-cheaper", function () { return ""; });
      }
      mine("change", function () {
        var gap = 1000 * (r.cost - ev.cost);
        var parts = live.level_labels.map(function (lab, d) {
          return lab + " to " + fmtPct(ev.shares[d], digits.share) + (d === 0 ? " of cases" : "") + " instead of "
            + fmtPct(r.shares[d], digits.share);
        });
        return "Against \u201c" + rule.name + "\u201d, the recommended rule gives " + parts.join(", ") + ", and costs "
          + fmtNum(Math.abs(gap), digits.cost) + (gap > 0 ? " less" : " more") + " per 1,000 cases.";
      });
      for (var d = 0; d < L; d++) { mine("sum-share-" + d, function () { return fmtPct(r.shares[d], digits.share); }); }
      for (var j = 0; j < J; j++) { mine("sum-rate-" + j, function () { return fmtPct(r.rates[j], digits.rate); }); }
    });
    // intervals, shares of replicates and stability hold at the scenario's costs only
    if (exact) { restore("sum-diff"); restore("sum-cheaper"); restore("sum-chosen"); restore("grid-stability"); }
    else { each("grid-stability", function (el) { el.textContent = ""; }); each("sum-chosen", function (el) { el.textContent = ""; }); }
    showGrid(levels);
    showBreakpoints(per, levels, exact);
    showExport(levels);
    live.controls.forEach(function (c) {
      var mean = document.getElementById(c.id + "-mean");
      if (mean) { mean.textContent = fmtNum(meanDecisionCost(c.index), 0); }
    });
    showConstrained();
    var status = document.getElementById("live-status");
    var printed = document.getElementById("printed-costs");
    if (atScenarioCosts()) {
      status.textContent = "Figures at the scenario's own costs.";
      printed.textContent = "Printed at the scenario's own costs.";
    } else {
      status.textContent = "Figures at the costs chosen here: the rule differs from the one at the scenario's costs in "
        + changed + " of " + G + " rule cells; " + live.level_labels.map(function (lab, d) {
          return fmtPct(ev.shares[d], digits.share) + " " + lab; }).join(", ") + ".";
      printed.textContent = "Printed at the costs chosen on the page: " + describeCosts() + ".";
    }
  }

  // ---- the constrained rule: the precomputed point nearest the chosen ratio ----------------
  var lastOutcome = null;

  function meanDecisionCost(d) {
    var m = 0;
    for (var x = 0; x < n; x++) { m += w[x] * decisionCost(x, d); }
    return m / totalWeight;
  }

  // the constrained figures as the tool wrote them: the exact solution at the scenario's costs
  var exactConstrained = {};
  ["c-cost", "c-price", "c-share"].forEach(function (kind) {
    exactConstrained[kind] = [];
    each(kind, function (el, i) { exactConstrained[kind][i] = el.textContent; });
  });

  function showConstrained() {
    var sweeps = live.constrained;
    var note = document.getElementById("constrained-note");
    if (!sweeps || !sweeps.length || !note) { return; }
    var moved = [], decisionMoved = false;
    live.controls.forEach(function (c) {
      var value = c.kind === "outcome" ? outcomeCost[c.index] : decisionSetting[c.index].value;
      if (value !== c.value) {
        if (c.kind === "outcome") { moved.push(c.index); } else { decisionMoved = true; }
      }
    });
    if (!moved.length && !decisionMoved) {
      ["c-cost", "c-price", "c-share"].forEach(function (kind) {
        each(kind, function (el, i) { el.textContent = exactConstrained[kind][i]; });
      });
      note.textContent = "At the scenario's own costs: the constrained rule solved at exactly these costs.";
      return;
    }
    var j = moved.indexOf(lastOutcome) >= 0 ? lastOutcome : (moved.length ? moved[0] : sweeps[0].outcome_index);
    var sweep = sweeps.filter(function (s) { return s.outcome_index === j; })[0];
    if (!sweep) { return; }
    // the chosen ratio: the outcome's cost over the mean cost of the harshest level, as chosen
    var ref = meanDecisionCost(L - 1);
    var target = ref > 0 ? outcomeCost[j] / ref : Infinity;
    var best = -1, gap = Infinity;
    sweep.ratios.forEach(function (r, i) {
      if (sweep.feasible[i] && Math.abs(r - target) < gap) { gap = Math.abs(r - target); best = i; }
    });
    var label = live.outcome_labels[j];
    if (best < 0) {
      ["c-cost", "c-price", "c-share"].forEach(function (kind) { each(kind, function (el) { el.textContent = "\u2013"; }); });
      note.textContent = "The constraints cannot all hold at any precomputed point of the " + label + " sweep.";
      return;
    }
    each("c-cost", function (el) { el.textContent = fmtNum(1000 * sweep.cost[best], digits.cost); });
    each("c-price", function (el) { el.textContent = fmtNum(1000 * sweep.price[best], digits.cost); });
    each("c-share", function (el, i) { el.textContent = fmtPct(sweep.shares[best][i], digits.share); });
    var text = "Precomputed point nearest the ratio chosen: cost of one " + label + " "
      + fmtNum(sweep.ratios[best] * sweep.reference_cost, 0) + " " + live.unit + " (ratio "
      + fmtNum(sweep.ratios[best], 2) + " to the mean cost of " + live.level_labels[L - 1] + "; chosen here: "
      + fmtNum(target, 2) + "), every other cost at the scenario's value.";
    if (moved.length > 1 || decisionMoved) {
      text += " The other costs changed here are not reflected in these constrained figures.";
    }
    note.textContent = text;
  }

  // ---- wiring the controls ----------------------------------------------------------------
  function setValue(c, value) {
    if (c.kind === "outcome") {
      outcomeCost[c.index] = value;
      lastOutcome = c.index;
    } else {
      decisionSetting[c.index].value = value;
    }
  }

  live.controls.forEach(function (c) {
    var range = document.getElementById(c.id + "-range");
    var box = document.getElementById(c.id + "-number");
    range.addEventListener("input", function () {
      var value = Number(range.value);
      box.value = range.value;
      box.removeAttribute("aria-invalid");
      setValue(c, value);
      update();
    });
    box.addEventListener("input", function () {
      var value = Number(box.value);
      if (box.value.trim() === "" || !isFinite(value) || value < 0) {
        box.setAttribute("aria-invalid", "true");
        return;
      }
      box.removeAttribute("aria-invalid");
      range.value = String(value);
      setValue(c, value);
      update();
    });
  });

  document.getElementById("reset-costs").addEventListener("click", function () {
    live.controls.forEach(function (c) {
      document.getElementById(c.id + "-range").value = String(c.value);
      var box = document.getElementById(c.id + "-number");
      box.value = String(c.value);
      box.removeAttribute("aria-invalid");
      setValue(c, c.value);
    });
    update();
  });

  document.getElementById("cost-controls").addEventListener("submit", function (event) { event.preventDefault(); });
  document.documentElement.classList.add("live");
  update();
}());
