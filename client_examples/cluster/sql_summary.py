"""Fit a table that stays in a database: SUM aggregates -> linfer's cross_products summary.

Loads client_examples/data/warehouse_energy.csv into a table ``warehouse_energy`` of an
in-memory SQLite database (Python's sqlite3; or DuckDB with ``--engine duckdb`` when
``pip install duckdb`` has been run), runs cross_products.sql beside this file, turns its
one row into ``{"kind": "cross_products", "n_observations", "column_names", "xtx", "xty",
"yty"}`` and posts it through the Python client. Only the 15 sums leave the database.

Run from the repository root with a service running::

    LINFER_URL=http://127.0.0.1:8000 python client_examples/cluster/sql_summary.py

Options: ``--engine sqlite|duckdb``, ``--csv FILE`` (a CSV with the four columns),
``--json`` (print one JSON document: the summary and the answer). Exits 1 after
printing the problem document when the service answers with an error.
"""

from __future__ import annotations

import argparse
import csv
import json
import os
import sqlite3
import sys
from pathlib import Path
from typing import Any

try:
    from service.client import ApiError, Client, LinferError
except ImportError:  # run from a checkout without `pip install -e .`
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
    from service.client import ApiError, Client, LinferError

HERE = Path(__file__).resolve().parent
QUERY = HERE / "cross_products.sql"
CSV = HERE.parent / "data" / "warehouse_energy.csv"
PREDICTORS = ["temp_c", "door_openings", "pallets_received"]
RESPONSE = "kwh"
COLUMNS = PREDICTORS + [RESPONSE]


def connect(engine: str) -> Any:
    """A DB-API connection to an empty in-memory database."""
    if engine == "duckdb":
        import duckdb  # optional: pip install duckdb

        return duckdb.connect(":memory:")
    return sqlite3.connect(":memory:")


def load_csv(conn: Any, path: Path) -> int:
    """The CSV's four columns as table warehouse_energy (floating point); the row count."""
    conn.execute("CREATE TABLE warehouse_energy (" +
                 ", ".join(f"{c} DOUBLE PRECISION" for c in COLUMNS) + ")")
    with path.open(newline="", encoding="utf-8") as fh:
        rows = [tuple(float(r[c]) if r[c].strip() else None for c in COLUMNS)
                for r in csv.DictReader(fh)]
    conn.executemany("INSERT INTO warehouse_energy VALUES (" +
                     ", ".join("?" for _ in COLUMNS) + ")", rows)
    return len(rows)


def run_query(conn: Any, sql: str) -> dict[str, float]:
    """The one row of cross_products.sql as {column name: value}."""
    cursor = conn.execute(sql)
    names = [d[0].lower() for d in cursor.description]
    row = cursor.fetchone()
    return dict(zip(names, row))


def summary_from_sums(sums: dict[str, float]) -> dict[str, Any]:
    """The cross_products summary of [1 X y] from the query's ``n``, ``sum_A``, ``sum_A__B``."""
    n = int(sums["n"])
    if n == 0:
        raise ValueError("the query counted no complete rows")

    def s(a: str, b: str | None = None) -> float:
        if a == "1":
            return float(n) if b in (None, "1") else float(sums[f"sum_{b}"])
        if b is None or b == "1":
            return float(sums[f"sum_{a}"])
        i, j = sorted((COLUMNS.index(a), COLUMNS.index(b)))
        return float(sums[f"sum_{COLUMNS[i]}__{COLUMNS[j]}"])

    design = ["1"] + PREDICTORS
    return {"kind": "cross_products", "n_observations": n,
            "column_names": ["intercept"] + PREDICTORS,
            "xtx": [[s(a, b) for b in design] for a in design],
            "xty": [s(a, RESPONSE) for a in design],
            "yty": s(RESPONSE, RESPONSE)}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--engine", choices=["sqlite", "duckdb"], default="sqlite")
    parser.add_argument("--csv", type=Path, default=CSV)
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args(argv)

    conn = connect(args.engine)
    loaded = load_csv(conn, args.csv)
    summary = summary_from_sums(run_query(conn, QUERY.read_text(encoding="utf-8")))
    client = Client(os.environ.get("LINFER_URL", "http://127.0.0.1:8000"), timeout=30)
    try:
        result = client.fit_summary(summary, return_model=True)
    except ApiError as err:
        print(json.dumps(err.problem, indent=2), file=sys.stderr)
        return 1
    except LinferError as err:
        print(f"error: {err}", file=sys.stderr)
        return 1

    if args.json:
        print(json.dumps({"engine": args.engine, "rows_loaded": loaded, "summary": summary,
                          "fit": result.raw}))
        return 0
    print(f"{loaded} rows in {args.engine} -> {summary['n_observations']} complete rows as "
          "cross products; fitted by linfer:")
    print(f"{'name':<18}{'estimate':>14}{'std. error':>14}{'p value':>12}")
    for c in result.coefficients:
        print(f"{c.name:<18}{c.estimate:>14.6f}{c.standard_error:>14.6f}{c.p_value:>12.3g}")
    print(f"R^2 {result.fit.r_squared:.6f}, residual SD "
          f"{result.fit.residual_standard_deviation:.4f}, about "
          f"{result.numerics.estimated_correct_digits} correct digits")
    for w in result.warnings:
        print(f"warning {w.code}: {w.message}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
