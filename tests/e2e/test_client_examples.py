"""The client examples (client_examples/curl, node, java) run against the real server.

Each program is run as the README in client_examples/ says, with LINFER_URL pointing at
the test server, under a timeout; its output is checked against the same request made
through the Python client (estimates and predictions to 1e-9 relative). A tool that is
not installed skips its test with the reason (CI installs curl, Node.js 18+ and JDK 17+).

The CSV half of the curl example needs /v1/fit to take ``text/csv`` and to answer
``Accept: text/csv`` (service.api.csv_io wired into the routes); until then
``test_curl_example_csv_upload`` fails, on purpose.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import re
import shutil
import subprocess
from pathlib import Path
from typing import Any

import pytest

from service.client import Client, FitResult

from ._server import REPO

pytestmark = pytest.mark.e2e

EXAMPLES = REPO / "client_examples"
TABLE = json.loads((EXAMPLES / "data" / "warehouse_energy_table.json").read_text())
PREDICTORS = ["temp_c", "door_openings", "pallets_received"]
RUN_SECONDS = 60
COMPILE_SECONDS = 120
REL = 1e-9
CSV_HEADER = ["name", "estimable", "estimate", "standard_error", "t_statistic", "p_value",
              "lower_0.95", "upper_0.95", "vif"]


def tool(name: str, minimum_major: int | None = None, version_args: tuple[str, ...] = ()) -> str:
    """The path of ``name``, or skip; with ``minimum_major``, skip older versions too."""
    path = shutil.which(name)
    if path is None:
        pytest.skip(f"{name} is not installed on this machine (CI installs it)")
    if minimum_major is not None:
        out = subprocess.run([path, *version_args], capture_output=True, text=True,
                             timeout=RUN_SECONDS)
        match = re.search(r"(\d+)(?:\.\d+)*", out.stdout + out.stderr)
        if match is None or int(match.group(1)) < minimum_major:
            pytest.skip(f"{name} {match.group(0) if match else '?'} is older than "
                        f"{minimum_major} (the example needs {minimum_major}+)")
    return path


def run(cmd: list[str], base_url: str, timeout: float = RUN_SECONDS,
        cwd: Path = REPO) -> subprocess.CompletedProcess[str]:
    """Run an example with LINFER_URL set and no proxy variables (only 127.0.0.1 is asked)."""
    env = {k: v for k, v in os.environ.items()
           if k.lower() not in ("http_proxy", "https_proxy", "all_proxy", "no_proxy")}
    env["LINFER_URL"] = base_url
    return subprocess.run(cmd, cwd=cwd, env=env, capture_output=True, text=True,
                          timeout=timeout)


def ok(result: subprocess.CompletedProcess[str]) -> str:
    assert result.returncode == 0, (f"{' '.join(result.args)} exited {result.returncode}\n"
                                    f"--- stdout ---\n{result.stdout[:3000]}\n"
                                    f"--- stderr ---\n{result.stderr[:3000]}")
    return result.stdout


def close(a: float | None, b: float | None, where: str) -> None:
    assert a is not None and b is not None, f"{where}: {a!r} vs {b!r}"
    assert math.isclose(a, b, rel_tol=REL, abs_tol=0.0), f"{where}: {a!r} != {b!r}"


def assert_same_estimates(document: dict[str, Any], reference: FitResult) -> None:
    names = [c["name"] for c in document["coefficients"]]
    assert names == reference.names
    for c in document["coefficients"]:
        ref = reference.coefficient(c["name"])
        close(float(c["estimate"]), ref.estimate, f"{c['name']} estimate")
        close(float(c["standard_error"]), ref.standard_error, f"{c['name']} standard_error")


@pytest.fixture(scope="module")
def linfer(base_url: str) -> Client:
    return Client(base_url, timeout=30, trust_env=False)


@pytest.fixture(scope="module")
def reference(linfer: Client) -> FitResult:
    """The demo fit through the Python client, with the model summary."""
    return linfer.fit(**TABLE, return_model=True)


# --- curl ---------------------------------------------------------------------------------

CURL_SCRIPT = EXAMPLES / "curl" / "fit.sh"


def test_curl_example_json(base_url: str, reference: FitResult) -> None:
    tool("curl")
    bash = tool("bash")
    out = ok(run([bash, str(CURL_SCRIPT), "json"], base_url))
    document = json.loads(out)
    assert_same_estimates(document, reference)
    close(document["fit"]["r_squared"], reference.fit.r_squared, "r_squared")


def test_curl_example_csv_upload(base_url: str, reference: FitResult) -> None:
    """The whole script: the JSON fit, then the CSV upload answered as CSV.

    Needs the routing glue for text/csv on /v1/fit (see the module docstring).
    """
    tool("curl")
    bash = tool("bash")
    out = ok(run([bash, str(CURL_SCRIPT)], base_url))
    first, _, rest = out.partition("\n")
    assert_same_estimates(json.loads(first), reference)
    rows = list(csv.reader(io.StringIO(rest)))
    assert rows[0] == CSV_HEADER
    by_name = {r[0]: dict(zip(CSV_HEADER, r)) for r in rows[1:]}
    assert list(by_name) == reference.names
    for name, row in by_name.items():
        ref = reference.coefficient(name)
        assert row["estimable"] == "true"
        close(float(row["estimate"]), ref.estimate, f"{name} estimate (CSV)")
        close(float(row["lower_0.95"]), ref.interval(0.95).lower, f"{name} lower (CSV)")
        close(float(row["p_value"]), ref.p_value, f"{name} p_value (CSV)")
    assert by_name["intercept"]["vif"] == ""
    close(float(by_name["temp_c"]["estimate"]), reference.coefficient("temp_c").estimate,
          "temp_c estimate (CSV)")


# --- Node.js ------------------------------------------------------------------------------

def test_node_example(base_url: str, linfer: Client, reference: FitResult) -> None:
    node = tool("node", 18, ("--version",))
    out = json.loads(ok(run([node, str(EXAMPLES / "node" / "fit.mjs")], base_url)))
    for name, estimate in out["estimates"].items():
        close(estimate, reference.coefficient(name).estimate, f"{name} estimate")
    assert list(out["estimates"]) == reference.names
    new_days = out["new_days"]
    assert set(new_days) == set(PREDICTORS) and all(len(v) == 2 for v in new_days.values())
    expected = linfer.predict(model=reference, new_table=new_days, levels=[0.95],
                              kind="observation")
    assert out["kind"] == "observation"
    assert len(out["predictions"]) == len(expected.predictions) == 2
    for i, (got, want) in enumerate(zip(out["predictions"], expected.predictions)):
        close(got["mean"], want.mean, f"day {i} mean")
        close(got["standard_error"], want.standard_error, f"day {i} standard_error")
        (interval,) = got["intervals"]
        assert interval["level"] == 0.95
        close(interval["lower"], want.intervals[0].lower, f"day {i} lower")
        close(interval["upper"], want.intervals[0].upper, f"day {i} upper")


# --- Java ---------------------------------------------------------------------------------

def test_java_example(base_url: str, reference: FitResult, tmp_path: Path) -> None:
    javac = tool("javac", 17, ("-version",))
    java = tool("java", 17, ("-version",))
    source = EXAMPLES / "java" / "LinferExample.java"
    ok(run([javac, "-d", str(tmp_path), str(source)], base_url, timeout=COMPILE_SECONDS))
    out = ok(run([java, "-cp", str(tmp_path), "LinferExample"], base_url))
    body, estimate_line = out.rstrip("\n").rsplit("\n", 1)
    assert_same_estimates(json.loads(body), reference)
    match = re.fullmatch(r"temp_c estimate: (\S+) kWh per degree C", estimate_line)
    assert match, estimate_line
    close(float(match.group(1)), reference.coefficient("temp_c").estimate, "temp_c (regex)")


def test_java_example_reports_an_error_answer(base_url: str, tmp_path: Path) -> None:
    javac = tool("javac", 17, ("-version",))
    java = tool("java", 17, ("-version",))
    ok(run([javac, "-d", str(tmp_path), str(EXAMPLES / "java" / "LinferExample.java")],
           base_url, timeout=COMPILE_SECONDS))
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps({**TABLE, "response_column": "kw"}))
    result = run([java, "-cp", str(tmp_path), "LinferExample", str(bad)], base_url)
    assert result.returncode == 1
    assert "linfer answered 422" in result.stderr
    assert '"pointer":"/response_column"' in result.stderr
