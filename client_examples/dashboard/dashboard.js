// linfer dashboard: fit the demo data, keep the model summary, draw the coefficient
// intervals, and ask /v1/predict for a confidence band over temperature on demand.
//
// Plain JavaScript, no build step, no libraries, nothing loaded from elsewhere.
// Query parameters of the page:
//   api    the linfer base URL, e.g. ?api=http://127.0.0.1:8000 (the default)
//   data   the request body to fit (default ../data/warehouse_energy_table.json,
//          fetched from the page's own server)
//   x      the predictor on the band's horizontal axis (default temp_c)
//   level  the confidence level of the coefficient intervals (default 0.95)
//
// The page is served from another origin than the API, so the service must allow it:
// LINFER_CORS_ORIGINS=<this page's origin> (README, "Browsers").
//
// Every SVG element carries the numbers it shows as data attributes (data-lower,
// data-upper, data-estimate, ...), written with String(number): the shortest text
// that reads back to the same double, so a test can compare them with the API's.

"use strict";

(function () {
  const params = new URLSearchParams(window.location.search);
  const API = (params.get("api") || "http://127.0.0.1:8000").replace(/\/+$/, "");
  const DATA_URL = params.get("data") || "../data/warehouse_energy_table.json";
  const X = params.get("x") || "temp_c";
  const LEVEL = Number(params.get("level") || "0.95");
  const TIMEOUT_MS = 30000;
  const SVG_NS = "http://www.w3.org/2000/svg";

  // What the page holds after the fit: the request, the answer, the model summary.
  const state = { request: null, fit: null, model: null, means: null, band: null };
  window.linferDashboard = state;

  const $ = (id) => document.getElementById(id);

  // --- messages ------------------------------------------------------------------------

  function setStatus(kind, text) {
    const status = $("status");
    status.dataset.state = kind;
    status.textContent = text;
  }

  function showError(text) {
    const box = $("error");
    box.textContent = text;
    box.dataset.visible = "true";
    setStatus("error", "Stopped: see the message below.");
  }

  function clearError() {
    const box = $("error");
    box.textContent = "";
    box.dataset.visible = "false";
  }

  class ProblemError extends Error {
    // An error answer of the service: its RFC 9457 problem document.
    constructor(status, problem) {
      const lines = [`${status} ${problem.title || ""}: ${problem.detail || ""}`];
      for (const e of (problem.errors || []).slice(0, 10)) {
        lines.push(`  at ${e.pointer || "/"}: ${e.message}`);
      }
      super(lines.join("\n"));
      this.status = status;
      this.problem = problem;
    }
  }

  // A request the browser refuses to hand over (CORS) looks to the page exactly like an
  // unreachable server. A "no-cors" GET of /healthz tells the two apart: it resolves
  // (with an opaque answer) whenever the server answers at all.
  async function explainNetworkError(err) {
    let reachable = false;
    try {
      await fetch(API + "/healthz", { mode: "no-cors", signal: AbortSignal.timeout(5000) });
      reachable = true;
    } catch (_) {
      reachable = false;
    }
    if (reachable) {
      return `linfer answers at ${API}, but the browser did not let this page read the ` +
        `answer: the service does not allow this page's origin (${window.location.origin}). ` +
        `Start it with LINFER_CORS_ORIGINS=${window.location.origin} (CORS is off by default).`;
    }
    return `Could not reach linfer at ${API} (${err.message}). Is the service running ` +
      `there? Give its address as ?api=http://HOST:PORT; it must allow this page's origin ` +
      `with LINFER_CORS_ORIGINS=${window.location.origin}.`;
  }

  async function post(path, body) {
    let response;
    try {
      response = await fetch(API + path, {
        method: "POST",
        headers: { "Content-Type": "application/json", Accept: "application/json" },
        body: JSON.stringify(body),
        signal: AbortSignal.timeout(TIMEOUT_MS),
      });
    } catch (err) {
      if (err.name === "TimeoutError") {
        throw new Error(`linfer at ${API} gave no answer to ${path} within ` +
                        `${TIMEOUT_MS / 1000} s.`);
      }
      throw new Error(await explainNetworkError(err));
    }
    const text = await response.text();
    let doc;
    try {
      doc = JSON.parse(text);
    } catch (_) {
      doc = { title: response.statusText, detail: text.slice(0, 500) };
    }
    if (!response.ok) throw new ProblemError(response.status, doc);
    return doc;
  }

  // --- SVG helpers ---------------------------------------------------------------------

  function el(name, attrs, text) {
    const node = document.createElementNS(SVG_NS, name);
    for (const [key, value] of Object.entries(attrs || {})) node.setAttribute(key, value);
    if (text !== undefined) node.textContent = text;
    return node;
  }

  const num = (x) => String(x); // shortest round-trip text of a double
  const nums = (xs) => xs.map(num).join(" ");

  function fmt(x) {
    if (x === null || x === undefined) return "n/a";
    const a = Math.abs(x);
    if (a !== 0 && (a >= 1e6 || a < 1e-3)) return x.toExponential(3);
    return Number(x.toPrecision(4)).toString();
  }

  function clear(svg) {
    while (svg.firstChild) svg.removeChild(svg.firstChild);
  }

  function linear(d0, d1, r0, r1) {
    const span = d1 - d0;
    return (v) => r0 + (span === 0 ? 0.5 : (v - d0) / span) * (r1 - r0);
  }

  // Ticks at 1, 2 or 5 times a power of ten, about `count` of them.
  function ticks(lo, hi, count) {
    const span = hi - lo;
    if (!(span > 0)) return [lo];
    const raw = span / count;
    const power = Math.pow(10, Math.floor(Math.log10(raw)));
    const step = [1, 2, 5, 10].map((m) => m * power).find((s) => s >= raw);
    const out = [];
    for (let v = Math.ceil(lo / step) * step; v <= hi + step * 1e-9; v += step) {
      out.push(Math.abs(v) < step * 1e-9 ? 0 : v);
    }
    return out;
  }

  // --- the fit -------------------------------------------------------------------------

  function columnMean(values) {
    // Left-to-right sum over the non-missing values, then one division.
    let sum = 0;
    let count = 0;
    for (const v of values) {
      if (v !== null && v !== undefined) {
        sum += v;
        count += 1;
      }
    }
    return count ? sum / count : NaN;
  }

  function drawSummary(fit) {
    const dl = $("summary");
    dl.textContent = "";
    const items = [
      ["observations", fit.n_observations],
      ["R\u00b2", fmt(fit.fit.r_squared)],
      ["residual SD", fmt(fit.fit.residual_standard_deviation)],
      ["conditioning", fit.conditioning.status],
      ["warnings", fit.warnings.length ? fit.warnings.map((w) => w.code).join(", ") : "none"],
    ];
    for (const [name, value] of items) {
      const dt = document.createElement("dt");
      dt.textContent = name;
      const dd = document.createElement("dd");
      dd.textContent = String(value);
      dl.append(dt, dd);
    }
  }

  function drawCoefficients(fit) {
    const svg = $("coef-svg");
    clear(svg);
    const width = Number(svg.getAttribute("width"));
    const rowHeight = 56;
    const top = 10;
    const labelWidth = 180;
    const left = labelWidth + 60;
    const right = width - 70;
    svg.setAttribute("height", String(top * 2 + rowHeight * fit.coefficients.length));
    svg.dataset.level = num(LEVEL);
    svg.dataset.count = String(fit.coefficients.length);

    fit.coefficients.forEach((c, i) => {
      const y = top + rowHeight * i + rowHeight / 2 + 4;
      const iv = (c.intervals || []).find((v) => v.level === LEVEL);
      const g = el("g", { class: "coef", "data-name": c.name, "data-level": num(LEVEL),
                          "data-index": String(i) });
      g.appendChild(el("text", { class: "coef-label", x: "8", y: String(y + 4),
                                 "data-name": c.name }, c.name));
      if (!c.estimable || !iv || iv.lower === null || iv.upper === null ||
          c.estimate === null) {
        g.setAttribute("data-estimable", "false");
        g.appendChild(el("text", { class: "coef-missing", x: String(left), y: String(y + 4),
                                   "data-name": c.name },
                         c.estimable ? "interval undefined" : "not estimable (aliased)"));
        svg.appendChild(g);
        return;
      }
      g.setAttribute("data-estimable", "true");
      g.setAttribute("data-estimate", num(c.estimate));
      g.setAttribute("data-lower", num(iv.lower));
      g.setAttribute("data-upper", num(iv.upper));
      g.setAttribute("data-standard-error", num(c.standard_error));
      g.setAttribute("data-p-value", num(c.p_value));

      // Each row on its own scale, from zero (or the interval's end beyond it) to the
      // other end, padded: how far the interval lies from zero is what the row shows.
      const lo = Math.min(0, iv.lower);
      const hi = Math.max(0, iv.upper);
      const pad = hi > lo ? (hi - lo) * 0.06 : 1;
      const x = linear(lo - pad, hi + pad, left, right);
      g.appendChild(el("line", { class: "zero", x1: String(x(0)), x2: String(x(0)),
                                 y1: String(y - 14), y2: String(y + 10),
                                 "data-value": "0" }));
      g.appendChild(el("text", { class: "zero-label", x: String(x(0)), y: String(y + 22),
                                 "text-anchor": "middle", "data-value": "0" }, "0"));
      g.appendChild(el("line", { class: "ci", x1: String(x(iv.lower)), x2: String(x(iv.upper)),
                                 y1: String(y), y2: String(y),
                                 "data-lower": num(iv.lower), "data-upper": num(iv.upper),
                                 "data-level": num(LEVEL) }));
      for (const [side, v] of [["lower", iv.lower], ["upper", iv.upper]]) {
        g.appendChild(el("line", { class: `cap cap-${side}`, x1: String(x(v)), x2: String(x(v)),
                                   y1: String(y - 6), y2: String(y + 6),
                                   stroke: "#1f5fa8", "stroke-width": "2",
                                   [`data-${side}`]: num(v) }));
      }
      g.appendChild(el("circle", { class: "estimate", cx: String(x(c.estimate)),
                                   cy: String(y), r: "5",
                                   "data-estimate": num(c.estimate) }));
      g.appendChild(el("text", { class: "ci-lower-label", x: String(x(iv.lower) - 6),
                                 y: String(y + 4), "text-anchor": "end",
                                 "data-lower": num(iv.lower) }, fmt(iv.lower)));
      g.appendChild(el("text", { class: "ci-upper-label", x: String(x(iv.upper) + 6),
                                 y: String(y + 4), "data-upper": num(iv.upper) },
                       fmt(iv.upper)));
      g.appendChild(el("text", { class: "estimate-label", x: String(x(c.estimate)),
                                 y: String(y - 10), "text-anchor": "middle",
                                 "data-estimate": num(c.estimate) }, fmt(c.estimate)));
      svg.appendChild(g);
    });
    svg.dataset.state = "drawn";
  }

  // --- the band ------------------------------------------------------------------------

  function bandRows(temps) {
    // One row per temperature, in the model's predictor order (the intercept is added by
    // the service); every predictor but X at its mean over the fitted data.
    return temps.map((t) => state.model.names
      .filter((name) => !(state.model.intercept && name === "intercept"))
      .map((name) => (name === X ? t : state.means[name])));
  }

  function readBandInputs() {
    const from = Number($("t-from").value);
    const to = Number($("t-to").value);
    const points = Number($("t-points").value);
    const level = Number($("band-level").value);
    if (!Number.isFinite(from) || !Number.isFinite(to) || !(from < to)) {
      throw new Error(`Give a temperature range with from < to (now ${$("t-from").value} ` +
                      `to ${$("t-to").value}).`);
    }
    if (!Number.isInteger(points) || points < 2 || points > 200) {
      throw new Error(`Give between 2 and 200 points (now ${$("t-points").value}).`);
    }
    const temps = [];
    for (let i = 0; i < points; i += 1) temps.push(from + ((to - from) * i) / (points - 1));
    return { temps, level };
  }

  function drawBand(temps, level, answer) {
    const svg = $("band-svg");
    clear(svg);
    const width = Number(svg.getAttribute("width"));
    const height = Number(svg.getAttribute("height"));
    const m = { left: 70, right: 20, top: 20, bottom: 45 };
    const preds = answer.predictions;
    const lower = [];
    const upper = [];
    const mean = [];
    preds.forEach((p, i) => {
      const iv = p.intervals.find((v) => v.level === level);
      if (!iv || iv.lower === null || iv.upper === null || p.mean === null) {
        throw new Error(`The service gave no ${level} band at ${X} = ${temps[i]}.`);
      }
      lower.push(iv.lower);
      upper.push(iv.upper);
      mean.push(p.mean);
    });
    const yLo = Math.min(...lower);
    const yHi = Math.max(...upper);
    const yPad = (yHi - yLo) * 0.06 || 1;
    const sx = linear(temps[0], temps[temps.length - 1], m.left, width - m.right);
    const sy = linear(yLo - yPad, yHi + yPad, height - m.bottom, m.top);

    // Axes with ticks; each tick label carries its value.
    svg.appendChild(el("line", { class: "axis", "data-axis": "x", x1: String(m.left),
                                 x2: String(width - m.right), y1: String(height - m.bottom),
                                 y2: String(height - m.bottom) }));
    svg.appendChild(el("line", { class: "axis", "data-axis": "y", x1: String(m.left),
                                 x2: String(m.left), y1: String(m.top),
                                 y2: String(height - m.bottom) }));
    for (const v of ticks(temps[0], temps[temps.length - 1], 8)) {
      svg.appendChild(el("text", { class: "tick tick-x", x: String(sx(v)),
                                   y: String(height - m.bottom + 16), "text-anchor": "middle",
                                   "data-value": num(v) }, fmt(v)));
    }
    for (const v of ticks(yLo - yPad, yHi + yPad, 6)) {
      svg.appendChild(el("text", { class: "tick tick-y", x: String(m.left - 6),
                                   y: String(sy(v) + 4), "text-anchor": "end",
                                   "data-value": num(v) }, fmt(v)));
    }
    svg.appendChild(el("text", { class: "axis-label", x: String((m.left + width - m.right) / 2),
                                 y: String(height - 8), "text-anchor": "middle",
                                 "data-name": X }, `${X} (\u00b0C)`));
    svg.appendChild(el("text", { class: "axis-label", x: "14", y: String(m.top + 4),
                                 "data-name": state.request.response_column || "response" },
                       state.request.response_column || "response"));

    // The band: along the upper bounds, then back along the lower ones.
    const d = temps.map((t, i) => `${i ? "L" : "M"}${sx(t)},${sy(upper[i])}`).join(" ") + " " +
      temps.map((t, i) => i).reverse().map((i) => `L${sx(temps[i])},${sy(lower[i])}`).join(" ") +
      " Z";
    svg.appendChild(el("path", { class: "band", d, "data-level": num(level),
                                 "data-kind": answer.kind, "data-temps": nums(temps),
                                 "data-lower": nums(lower), "data-upper": nums(upper),
                                 "data-estimate": nums(mean) }));
    svg.appendChild(el("polyline", {
      class: "mean-line", points: temps.map((t, i) => `${sx(t)},${sy(mean[i])}`).join(" "),
      "data-temps": nums(temps), "data-estimate": nums(mean) }));
    temps.forEach((t, i) => {
      svg.appendChild(el("circle", { class: "band-point", cx: String(sx(t)),
                                     cy: String(sy(mean[i])), r: "2.5",
                                     "data-temp": num(t), "data-estimate": num(mean[i]),
                                     "data-lower": num(lower[i]), "data-upper": num(upper[i]),
                                     "data-standard-error": num(preds[i].standard_error),
                                     "data-level": num(level) }));
    });
    svg.dataset.level = num(level);
    svg.dataset.count = String(temps.length);
    svg.dataset.state = "drawn";
  }

  async function onBand() {
    const svg = $("band-svg");
    const button = $("band-button");
    clearError();
    let temps;
    let level;
    try {
      ({ temps, level } = readBandInputs());
    } catch (err) {
      svg.dataset.state = "error";
      showError(err.message);
      return;
    }
    svg.dataset.state = "loading";
    button.disabled = true;
    setStatus("predicting", "Asking /v1/predict for the band.");
    try {
      const answer = await post("/v1/predict", {
        model: state.model, new_rows: bandRows(temps), kind: "band", levels: [level],
      });
      state.band = { temps, level, answer };
      drawBand(temps, level, answer);
      setStatus("ready", `Band drawn: ${temps.length} temperatures from ${fmt(temps[0])} to ` +
                `${fmt(temps[temps.length - 1])} \u00b0C, ${level * 100}% simultaneous.`);
    } catch (err) {
      svg.dataset.state = "error";
      showError(err.message);
    } finally {
      button.disabled = false;
    }
  }

  // --- start ---------------------------------------------------------------------------

  async function main() {
    $("coef-level").textContent = `${LEVEL * 100}%`;
    $("coef-svg").dataset.state = "empty";
    $("band-svg").dataset.state = "empty";
    setStatus("loading", `Loading the data (${DATA_URL}).`);
    let request;
    try {
      const response = await fetch(DATA_URL, { signal: AbortSignal.timeout(TIMEOUT_MS) });
      if (!response.ok) throw new Error(`${response.status} ${response.statusText}`);
      request = await response.json();
    } catch (err) {
      showError(`Could not load the data from ${DATA_URL}: ${err.message}. Serve this ` +
                "folder's parent over HTTP (python -m http.server) and open " +
                "dashboard/index.html from there.");
      return;
    }
    state.request = request;
    const table = request.table || {};
    if (!Array.isArray(table[X])) {
      showError(`The data have no column ${X} to draw the band over (?x= names it).`);
      return;
    }
    state.means = {};
    for (const [name, values] of Object.entries(table)) state.means[name] = columnMean(values);

    setStatus("fitting", `Fitting at ${API}.`);
    let fit;
    try {
      fit = await post("/v1/fit", { ...request, levels: [LEVEL], return_model: true });
    } catch (err) {
      $("coef-svg").dataset.state = "error";
      showError(err.message);
      return;
    }
    state.fit = fit;
    state.model = fit.model;
    if (!state.model.names.includes(X)) {
      showError(`The model has no predictor ${X} to draw the band over.`);
      return;
    }
    drawSummary(fit);
    drawCoefficients(fit);

    const xs = table[X].filter((v) => v !== null);
    $("t-from").value = String(Math.min(...xs));
    $("t-to").value = String(Math.max(...xs));
    const button = $("band-button");
    button.addEventListener("click", onBand);
    button.disabled = false;
    setStatus("ready", `Fitted ${fit.n_observations} rows at ${API}. Choose a temperature ` +
              "range and draw the band.");
  }

  main();
})();
