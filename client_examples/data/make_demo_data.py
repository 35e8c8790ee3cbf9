"""Generate the invented demo data for the linfer client examples.

Scenario: a cold-storage warehouse's daily electricity use (kwh) over 40 days, against
outside temperature (temp_c), door openings (door_openings) and pallets received
(pallets_received). The data follow
    kwh = 1200 + 38*temp_c + 2.1*door_openings + 4.5*pallets_received + noise (sd 60).
A second variant adds forklift_hours, almost exactly 0.05*door_openings + 0.2*pallets_received,
to show near-collinearity.

Usage: python client_examples/data/make_demo_data.py
The seed is fixed and every number is rounded before it is written, so each run writes
byte-identical files next to this script. Needs numpy only.
"""

import json
from pathlib import Path

import numpy as np

SEED = 20261202
N_DAYS = 40
OUT = Path(__file__).resolve().parent
PREDICTORS = ["temp_c", "door_openings", "pallets_received"]


def generate():
    """Return the columns as plain Python lists of rounded numbers."""
    rng = np.random.default_rng(SEED)
    temp_c = np.round(rng.uniform(-5.0, 30.0, N_DAYS), 1)
    door_openings = rng.integers(80, 401, N_DAYS)
    pallets_received = rng.integers(10, 121, N_DAYS)
    noise = rng.normal(0.0, 60.0, N_DAYS)
    kwh = 1200 + 38 * temp_c + 2.1 * door_openings + 4.5 * pallets_received + noise
    forklift = 0.05 * door_openings + 0.2 * pallets_received + rng.normal(0.0, 0.01, N_DAYS)
    # "+ 0.0" turns a rounded -0.0 into 0.0
    return {
        "temp_c": [float(v) + 0.0 for v in temp_c],
        "door_openings": [int(v) for v in door_openings],
        "pallets_received": [int(v) for v in pallets_received],
        "forklift_hours": [round(float(v), 3) + 0.0 for v in forklift],
        "kwh": [round(float(v), 1) + 0.0 for v in kwh],
    }


def to_json(obj, level=0):
    """JSON text with one list (or one matrix row) per line."""
    pad, inner = "  " * level, "  " * (level + 1)
    if isinstance(obj, dict):
        items = [f"{inner}{json.dumps(k)}: {to_json(v, level + 1)}" for k, v in obj.items()]
        return "{\n" + ",\n".join(items) + "\n" + pad + "}"
    if isinstance(obj, list) and obj and isinstance(obj[0], list):
        return "[\n" + ",\n".join(inner + json.dumps(row) for row in obj) + "\n" + pad + "]"
    return json.dumps(obj)


def write(name, text):
    with open(OUT / name, "w", encoding="utf-8", newline="\n") as f:
        f.write(text)


def main():
    cols = generate()
    header = ["day", *PREDICTORS, "kwh"]
    rows = [",".join(header)]
    for i in range(N_DAYS):
        rows.append(",".join(str(v) for v in [i + 1] + [cols[c][i] for c in header[1:]]))
    write("warehouse_energy.csv", "\n".join(rows) + "\n")

    table = {c: cols[c] for c in [*PREDICTORS, "kwh"]}
    write("warehouse_energy_table.json",
          to_json({"table": table, "response_column": "kwh"}) + "\n")

    matrix = [[cols[c][i] for c in PREDICTORS] for i in range(N_DAYS)]
    write("warehouse_energy_matrix.json",
          to_json({"design_matrix": matrix, "response": cols["kwh"],
                   "column_names": PREDICTORS}) + "\n")

    collinear = {c: cols[c] for c in [*PREDICTORS, "forklift_hours", "kwh"]}
    write("warehouse_collinear_table.json",
          to_json({"table": collinear, "response_column": "kwh"}) + "\n")
    print("\n".join(rows[:4]))


if __name__ == "__main__":
    main()
