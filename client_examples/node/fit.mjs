// Fit the warehouse demo data with linfer, keep the compact model summary, and ask
// /v1/predict for intervals for two new days from the summary alone (no data resent).
//
//   node client_examples/node/fit.mjs
//
// Node.js 18 or newer (built-in fetch), no packages. The service is at $LINFER_URL
// (default http://127.0.0.1:8000). Prints one JSON document to stdout; on an error
// answer prints the problem document to stderr and exits with status 1.

import { readFile } from "node:fs/promises";

const BASE_URL = (process.env.LINFER_URL ?? "http://127.0.0.1:8000").replace(/\/+$/, "");
const DATA = new URL("../data/warehouse_energy_table.json", import.meta.url);
const TIMEOUT_MS = 30_000;

// Two new days: outside temperature, door openings and pallets received.
const NEW_DAYS = {
  temp_c: [12.5, -3.0],
  door_openings: [240, 180],
  pallets_received: [70, 35],
};

class ApiError extends Error {
  constructor(status, problem) {
    super(`${status} ${problem.title ?? ""}: ${problem.detail ?? ""}`);
    this.status = status;
    this.problem = problem;
  }
}

async function post(path, body) {
  const response = await fetch(BASE_URL + path, {
    method: "POST",
    headers: { "Content-Type": "application/json", Accept: "application/json" },
    body: JSON.stringify(body),
    signal: AbortSignal.timeout(TIMEOUT_MS),
  });
  const text = await response.text();
  let doc;
  try {
    doc = JSON.parse(text);
  } catch {
    doc = { title: response.statusText, detail: text.slice(0, 500) };
  }
  if (!response.ok) throw new ApiError(response.status, doc);
  return doc;
}

async function main() {
  const request = JSON.parse(await readFile(DATA, "utf8"));
  const fit = await post("/v1/fit", { ...request, return_model: true });

  // Later, e.g. in a dashboard: only the model summary travels, not the 40 days of data.
  const prediction = await post("/v1/predict", {
    model: fit.model,
    new_table: NEW_DAYS,
    levels: [0.95],
    kind: "observation",
  });

  const estimates = Object.fromEntries(fit.coefficients.map((c) => [c.name, c.estimate]));
  const output = {
    estimates,
    r_squared: fit.fit.r_squared,
    new_days: NEW_DAYS,
    kind: prediction.kind,
    predictions: prediction.predictions,
    warnings: [...fit.warnings, ...prediction.warnings],
  };
  process.stdout.write(JSON.stringify(output, null, 2) + "\n");
}

main().catch((err) => {
  if (err instanceof ApiError) {
    process.stderr.write(`linfer answered ${err.message}\n${JSON.stringify(err.problem, null, 2)}\n`);
  } else {
    process.stderr.write(`request to ${BASE_URL} failed: ${err.cause?.message ?? err.message}\n`);
  }
  process.exit(1);
});
