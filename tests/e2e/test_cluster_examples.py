"""client_examples/cluster/ (Dask and SQL summaries) run against a real server.

Each script is run as client_examples/cluster/README.md says, with LINFER_URL pointing
at a test server, under a timeout, and its ``--json`` output is checked:

* dask_summary.py: 2,000,000 rows in 8 chunks reduced by dask.array.linalg.tsqr to a
  5 x 5 R factor. The answer is checked against numpy.linalg.lstsq and statsmodels OLS
  (test-only cross-check) on the same rows, computed here, to 1e-10 relative for
  estimates and standard errors. It runs against a server whose row limits allow
  2,000,000 observations, and also against the default server: a summary carries no
  rows, so the row limits (LINFER_MAX_ROWS, LINFER_MAX_CELLS) should not refuse it.
* sql_summary.py: cross_products.sql over the demo CSV in SQLite (and DuckDB when it is
  installed), posted as a cross_products summary; checked against the rows fit of the
  same CSV to the accuracy the cross-products form allows,
  ``10^-(estimated_correct_digits - 1)`` relative.

Needs dask[array] and statsmodels (test dependencies); duckdb is optional.
"""

from __future__ import annotations

import csv
import importlib.util
import json
import math
import os
import subprocess
import sys
from pathlib import Path
from types import ModuleType
from typing import Any, Callable

import dask
import numpy as np
import pytest
import statsmodels.api as sm

from service.client import Client

from ._server import REPO, Server

pytestmark = pytest.mark.e2e

CLUSTER = REPO / "client_examples" / "cluster"
DASK_SCRIPT = CLUSTER / "dask_summary.py"
SQL_SCRIPT = CLUSTER / "sql_summary.py"
CSV_FILE = REPO / "client_examples" / "data" / "warehouse_energy.csv"
RUN_SECONDS = 120
RTOL = 1e-10
BIG_LIMITS = {"LINFER_MAX_ROWS": "10000000", "LINFER_MAX_CELLS": "100000000"}


def run(script: Path, base_url: str, *args: str) -> subprocess.CompletedProcess[str]:
    """``python SCRIPT ARGS`` from the repository root, LINFER_URL set, no proxy variables."""
    env = {k: v for k, v in os.environ.items()
           if k.lower() not in ("http_proxy", "https_proxy", "all_proxy", "no_proxy")}
    env["LINFER_URL"] = base_url
    return subprocess.run([sys.executable, str(script), *args], cwd=REPO, env=env,
                          capture_output=True, text=True, timeout=RUN_SECONDS)


def ok_json(result: subprocess.CompletedProcess[str]) -> dict[str, Any]:
    assert result.returncode == 0, (f"{' '.join(result.args)} exited {result.returncode}\n"
                                    f"--- stdout ---\n{result.stdout[:3000]}\n"
                                    f"--- stderr ---\n{result.stderr[:3000]}")
    return json.loads(result.stdout)


def close(actual: Any, expected: Any, rtol: float, what: str) -> None:
    np.testing.assert_allclose(np.asarray(actual, dtype=float), np.asarray(expected, dtype=float),
                               rtol=rtol, atol=0.0, err_msg=what)


def load_script(path: Path) -> ModuleType:
    spec = importlib.util.spec_from_file_location(f"cluster_example_{path.stem}", path)
    module = importlib.util.module_from_spec(spec)
    assert spec.loader is not None
    spec.loader.exec_module(module)
    return module


# --- Dask -----------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def big_server(start_server: Callable[..., Server]) -> Server:
    """A server whose row limits allow the example's 2,000,000 observations."""
    return start_server(env=BIG_LIMITS, label="big-summaries")


@pytest.fixture(scope="module")
def dask_run(big_server: Server) -> dict[str, Any]:
    return ok_json(run(DASK_SCRIPT, big_server.base_url, "--json", "--check"))


@pytest.fixture(scope="module")
def dask_rows() -> tuple[np.ndarray, np.ndarray]:
    """The example's 2,000,000 rows, computed here from the script's own generator."""
    example = load_script(DASK_SCRIPT)
    x, y = example.make_data()
    with dask.config.set(scheduler="threads"):
        xs, ys = dask.compute(x, y)
    return xs, ys


def test_dask_example_summary_is_a_triangular_factor(dask_run: dict[str, Any]) -> None:
    summary = dask_run["summary"]
    assert summary["kind"] == "triangular"
    assert summary["n_observations"] == dask_run["rows"] == 2_000_000
    assert dask_run["chunks"] == 8
    assert summary["column_names"] == ["intercept", "temp_c", "door_openings",
                                       "pallets_received"]
    r = np.array(summary["r_factor"])
    assert r.shape == (5, 5)
    assert np.all(np.tril(r, -1) == 0.0)
    assert math.isclose(abs(r[0, 0]), math.sqrt(2_000_000), rel_tol=1e-12)
    fit = dask_run["fit"]
    assert fit["residual_checks"] is None
    assert "no_rows" in [w["code"] for w in fit["warnings"]]


def test_dask_example_matches_numpy_and_statsmodels(dask_run: dict[str, Any],
                                                    dask_rows: tuple[np.ndarray, np.ndarray]
                                                    ) -> None:
    xs, ys = dask_rows
    assert xs.shape == (2_000_000, 3)
    fit = dask_run["fit"]
    est = [c["estimate"] for c in fit["coefficients"]]
    se = [c["standard_error"] for c in fit["coefficients"]]
    design = np.column_stack([np.ones(len(ys)), xs])
    beta, *_ = np.linalg.lstsq(design, ys, rcond=None)
    close(est, beta, RTOL, "estimates vs numpy.linalg.lstsq")
    # statsmodels OLS (test-only cross-check): estimates, standard errors, t, fit figures.
    res = sm.OLS(ys, design).fit()
    close(est, res.params, RTOL, "estimates vs statsmodels")
    close(se, res.bse, RTOL, "standard errors vs statsmodels")
    close([c["t_statistic"] for c in fit["coefficients"]], res.tvalues, RTOL, "t statistics")
    close(fit["fit"]["r_squared"], res.rsquared, RTOL, "R squared")
    close(fit["fit"]["residual_sum_of_squares"], res.ssr, RTOL, "RSS")
    close(fit["fit"]["residual_standard_deviation"], math.sqrt(res.scale), RTOL, "residual SD")
    close(fit["overall_f_test"]["statistic"], res.fvalue, RTOL, "overall F")
    ft = res.f_test((np.array([[0.0, 0.0, 1.0, 0.0]]), np.array([2.1])))
    close(fit["hypotheses"][0]["statistic"], float(np.squeeze(ft.fvalue)), RTOL,
          "the door_openings = 2.1 F test")
    # The script's own --check (numpy on the computed arrays) agrees.
    check = dask_run["check"]
    assert check["max_relative_difference_estimates"] <= RTOL
    assert check["max_relative_difference_standard_errors"] <= RTOL


def test_dask_example_synchronous_scheduler_uneven_chunks(big_server: Server) -> None:
    """The local synchronous scheduler, a row count that does not split evenly, --check."""
    doc = ok_json(run(DASK_SCRIPT, big_server.base_url, "--json", "--check", "--rows",
                      "300007", "--chunks", "7", "--scheduler", "synchronous"))
    assert doc["summary"]["n_observations"] == 300007
    assert doc["check"]["max_relative_difference_estimates"] <= RTOL


def test_dask_example_against_the_default_server(base_url: str,
                                                 dask_run: dict[str, Any]) -> None:
    """The default limits: a summary of 2,000,000 rows sends 25 numbers, not 10,000,000."""
    doc = ok_json(run(DASK_SCRIPT, base_url, "--json"))
    close([c["estimate"] for c in doc["fit"]["coefficients"]],
          [c["estimate"] for c in dask_run["fit"]["coefficients"]], 1e-14, "estimates")


# --- SQL ------------------------------------------------------------------------------------


def csv_table() -> dict[str, list[float]]:
    with CSV_FILE.open(newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    return {c: [float(r[c]) for r in rows]
            for c in ("temp_c", "door_openings", "pallets_received", "kwh")}


@pytest.fixture(scope="module")
def rows_fit(base_url: str) -> dict[str, Any]:
    """The rows fit of the same CSV through the Python client."""
    client = Client(base_url, timeout=30, trust_env=False)
    return client.fit(table=csv_table(), response_column="kwh", return_model=True).raw


@pytest.fixture(scope="module")
def sql_run(base_url: str) -> dict[str, Any]:
    return ok_json(run(SQL_SCRIPT, base_url, "--json"))


def test_sql_example_builds_the_cross_products(sql_run: dict[str, Any]) -> None:
    summary = sql_run["summary"]
    assert summary["kind"] == "cross_products" and summary["n_observations"] == 40
    table = csv_table()
    x = np.column_stack([np.ones(40)] + [table[c] for c in
                                         ("temp_c", "door_openings", "pallets_received")])
    y = np.array(table["kwh"])
    close(summary["xtx"], x.T @ x, 1e-13, "xtx")
    close(summary["xty"], x.T @ y, 1e-13, "xty")
    close(summary["yty"], y @ y, 1e-13, "yty")
    codes = [w["code"] for w in sql_run["fit"]["warnings"]]
    assert "cross_products_precision" in codes and "no_rows" in codes


def _tolerance(doc: dict[str, Any]) -> float:
    return 10.0 ** -(doc["numerics"]["estimated_correct_digits"] - 1)


def test_sql_example_estimates_match_the_rows_fit(sql_run: dict[str, Any],
                                                  rows_fit: dict[str, Any]) -> None:
    fit = sql_run["fit"]
    rtol = _tolerance(fit)
    assert [c["name"] for c in fit["coefficients"]] == [c["name"] for c in
                                                         rows_fit["coefficients"]]
    close([c["estimate"] for c in fit["coefficients"]],
          [c["estimate"] for c in rows_fit["coefficients"]], rtol, "estimates")


def test_sql_example_inference_matches_the_rows_fit(sql_run: dict[str, Any],
                                                    rows_fit: dict[str, Any]) -> None:
    """Standard errors, t, intervals, fit statistics and F, to the digits claimed."""
    fit = sql_run["fit"]
    rtol = _tolerance(fit)
    got, want = fit["coefficients"], rows_fit["coefficients"]
    for key in ("standard_error", "t_statistic"):
        close([c[key] for c in got], [c[key] for c in want], rtol, key)
    for end in ("lower", "upper"):
        close([c["intervals"][0][end] for c in got], [c["intervals"][0][end] for c in want],
              rtol, f"interval {end}")
    for key in ("r_squared", "adjusted_r_squared", "residual_standard_deviation",
                "residual_sum_of_squares", "regression_sum_of_squares",
                "total_sum_of_squares", "log_likelihood", "aic", "bic"):
        close(fit["fit"][key], rows_fit["fit"][key], rtol, key)
    close(fit["overall_f_test"]["statistic"], rows_fit["overall_f_test"]["statistic"], rtol,
          "overall F")
    assert fit["conditioning"]["status"] == rows_fit["conditioning"]["status"]


def test_sql_example_with_duckdb(base_url: str, sql_run: dict[str, Any]) -> None:
    pytest.importorskip("duckdb", reason="duckdb is optional (pip install duckdb)")
    doc = ok_json(run(SQL_SCRIPT, base_url, "--json", "--engine", "duckdb"))
    for key in ("xtx", "xty", "yty"):
        close(doc["summary"][key], sql_run["summary"][key], 1e-13, key)
    close([c["estimate"] for c in doc["fit"]["coefficients"]],
          [c["estimate"] for c in sql_run["fit"]["coefficients"]], 1e-12, "estimates")


def test_sql_example_human_output(base_url: str) -> None:
    result = run(SQL_SCRIPT, base_url)
    assert result.returncode == 0, result.stderr
    assert "temp_c" in result.stdout and "cross_products_precision" in result.stdout
