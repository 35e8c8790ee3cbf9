"""Large CSV uploads: an end-to-end HTTP fit against the pandas floor, and worker memory.

    python tests/benchmarks/bench_csv.py [--rows 100000] [--repeat 5] [--big]

For a rows x 10 invented table (10 predictor columns and the response ``y``, seeded,
as in bench_arrow.py) written as CSV with a header (and 1,000,000 x 10 with ``--big``,
on a server whose LINFER_MAX_BODY_BYTES, LINFER_MAX_ROWS, LINFER_MAX_CELLS and
LINFER_TIMEOUT are raised for it):

- end to end: POST /v1/fit?response_column=y with Content-Type text/csv to
  `linfer serve --workers 2` on 127.0.0.1, from the first byte sent to the last byte
  of the answer read (the server's own access-log duration is shown beside it);
- the floor, in this process: ``pandas.read_csv`` of the same body, the columns as
  float64 numpy arrays, the intercept column, and one
  ``scipy.linalg.qr(mode="economic")`` of the design: what any service must do at least;
- the service's own steps in process between the two (csv_io.table_body_from_csv,
  decode_fit, fit, encode_fit, orjson.dumps: what routes.fit_endpoint runs for a CSV
  body, without HTTP or Flask), with a cProfile own-time list of one run;
- the peak memory growth of the worker per request: VmHWM after the request minus
  VmRSS before it (VmHWM reset through /proc/<pid>/clear_refs before each request),
  over the body size; and the floor's, over one floor run in a fresh process.

Goals from the issue: end to end <= 1.5 x the floor, peak growth <= 3 x the body size.
"""

from __future__ import annotations

import argparse
import io
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from _harness import (linfer_server, median, peak_reset, proc_kib, served_request, table,
                      write_results)

import numpy as np  # noqa: E402  (after _harness: one BLAS thread)
import orjson  # noqa: E402
import pandas as pd  # noqa: E402
import scipy.linalg  # noqa: E402
from bench_arrow import PREDICTORS, columns  # noqa: E402
from bench_large_requests import server_durations  # noqa: E402

GOAL_TIME_RATIO, GOAL_MEMORY_RATIO = 1.5, 3.0
PATH, CSV = "/v1/fit?response_column=y", "text/csv"
QUERY = {"response_column": "y"}


def csv_body(rows: int) -> bytes:
    """The invented table as CSV bytes: a header row, then one row per observation."""
    return pd.DataFrame(columns(rows)).to_csv(index=False).encode()


def floor_once(body: bytes) -> float:
    start = time.perf_counter()
    frame = pd.read_csv(io.BytesIO(body))
    arrays = [frame[name].to_numpy(dtype=np.float64) for name in frame.columns]
    y = arrays[-1]
    design = np.column_stack([np.ones(y.shape[0])] + arrays[:-1])
    q, r = scipy.linalg.qr(design, mode="economic")
    elapsed = time.perf_counter() - start
    if r.shape != (PREDICTORS + 1, PREDICTORS + 1):
        raise RuntimeError(f"the floor read {r.shape[1] - 1} predictors")
    return elapsed


def peak_growth(call) -> int | None:
    """Peak RSS growth of this process over ``call()`` (bytes); None without clear_refs."""
    pid = os.getpid()
    if not peak_reset(pid):
        return None
    before = proc_kib(pid, "VmRSS")
    call()
    return (proc_kib(pid, "VmHWM") - before) * 1024


def floor_growth(body: bytes) -> int | None:
    """:func:`peak_growth` of one floor run in a fresh process, as in a fresh worker.

    This process has already freed (and its allocator kept) the memory of building
    the body, which a run here would reuse unseen.
    """
    with tempfile.NamedTemporaryFile(prefix="linfer-bench-", suffix=".csv") as file:
        file.write(body)
        file.flush()
        # This very script, with a file it has just written: no outside input.
        child = [sys.executable, __file__, "--floor-memory", file.name]
        run = subprocess.run(child, capture_output=True, text=True, timeout=600)  # noqa: S603
    if run.returncode != 0:
        raise RuntimeError(run.stderr)
    return json.loads(run.stdout.splitlines()[-1])


def in_process_once(settings, body: bytes) -> float:
    """The service's steps for a CSV body, as routes.fit_endpoint runs them, without HTTP."""
    from service.api.csv_io import table_body_from_csv
    from service.api.decode import decode_fit
    from service.api.encode import encode_fit
    from service.stats.fit import fit
    start = time.perf_counter()
    doc = table_body_from_csv(body, QUERY)
    req = decode_fit(doc, settings)
    del doc
    result = fit(req.design, req.options)
    answer = orjson.dumps(encode_fit(result, req.column_pointers))
    elapsed = time.perf_counter() - start
    if b'"coefficients"' not in answer:
        raise RuntimeError(answer[:300])
    return elapsed


def own_time_profile(call, top: int = 14) -> str:
    """cProfile of ``call()``: the functions with the most own time."""
    import cProfile
    import pstats
    profiler = cProfile.Profile()
    profiler.runcall(call)
    out = io.StringIO()
    pstats.Stats(profiler, stream=out).sort_stats("tottime").print_stats(top)
    listing = out.getvalue()
    return listing[listing.index("   ncalls"):].rstrip()


def timed_runs(run, repeat: int) -> list[float]:
    """The seconds ``run()`` reports, ``repeat`` times after one warm-up run."""
    run()
    return [run() for _ in range(repeat)]


def measure(rows: int, repeat: int) -> dict:
    body = csv_body(rows)
    # The limits are raised only for a table past the defaults (the big case).
    env = big_env(rows, len(body)) if rows > 100_000 else None
    print(f"\n{rows} x {PREDICTORS}: CSV body {len(body) / 1e6:.1f} MB")
    from service.settings import load
    settings = load(env or {})  # every variable of env is a LINFER_ one
    floor = timed_runs(lambda: floor_once(body), repeat)
    floor_peak = floor_growth(body)
    in_process = timed_runs(lambda: in_process_once(settings, body), repeat)
    profile = own_time_profile(lambda: in_process_once(settings, body))
    print(f"  floor (read_csv + float64 + qr): median {median(floor):.3f} s, peak growth "
          f"{_ratio(floor_peak, len(body))} x body; in-process service path: median "
          f"{median(in_process):.3f} s")

    with linfer_server(env=env, label=f"csv-{rows}") as server:
        served = [served_request(server, PATH, body, CSV) for _ in range(repeat + 2)]
        logged = server_durations(server, rows)
    # The first request of each worker also warms it up.
    first, served = served[:2], served[2:]
    seconds = [s for s, _, _ in served]
    growth = [g for _, g, _ in served]
    mid, body_mb = median(growth), len(body) / 1e6
    print(f"  over HTTP: median {median(seconds):.3f} s, access log "
          f"{median(logged[2:] or logged):.3f} s, first {first[0][0]:.3f} s; worker peak "
          f"growth {mid / 1e6:.1f} MB for {body_mb:.1f} MB ({_ratio(mid, len(body))} x, "
          f"first {_ratio(first[0][1], len(body))} x)")
    return {
        "rows": rows, "columns": PREDICTORS + 1, "body_bytes": len(body), "repeat": repeat,
        "in_process_profile": profile, "floor_s": floor, "floor_peak_growth_bytes": floor_peak,
        "in_process_s": in_process, "served_s": seconds, "served_first_s": first[0][0],
        "server_logged_s": logged, "peak_growth_bytes": growth,
        "first_peak_growth_bytes": first[0][1], "hwm_reset": all(r for _, _, r in served),
        "time_ratio": median(seconds) / median(floor),
        "in_process_ratio": median(in_process) / median(floor),
        "memory_ratio": median(growth) / len(body),
    }


def big_env(rows: int, body_bytes: int) -> dict[str, str]:
    """Limits raised for a rows x 10 CSV upload of body_bytes."""
    return {"LINFER_MAX_BODY_BYTES": str(2 * body_bytes), "LINFER_MAX_ROWS": str(rows),
            "LINFER_MAX_CELLS": str(rows * (PREDICTORS + 2)), "LINFER_TIMEOUT": "600"}


def _ratio(part: float | None, whole: float) -> str:
    return "n/a" if part is None else f"{part / whole:.2f}"


# The table's columns: heading, and the cell of one case.
COLUMNS = (
    ("design", lambda r: f"{r['rows']} x {PREDICTORS}"),
    ("CSV MB", lambda r: f"{r['body_bytes'] / 1e6:.1f}"),
    ("floor s", lambda r: f"{median(r['floor_s']):.3f}"),
    ("in-process s", lambda r: f"{median(r['in_process_s']):.3f}"),
    ("HTTP s", lambda r: f"{median(r['served_s']):.3f}"),
    ("HTTP / floor", lambda r: f"{r['time_ratio']:.2f}"),
    ("peak growth MB", lambda r: f"{median(r['peak_growth_bytes']) / 1e6:.1f}"),
    ("growth / body", lambda r: f"{r['memory_ratio']:.2f}"),
    ("floor growth / body", lambda r: _ratio(r["floor_peak_growth_bytes"], r["body_bytes"])),
)


def verdict(r: dict) -> str:
    """One case against the goals, in words."""
    def against(value: float, goal: float) -> str:
        return f"{value:.2f} ({'meets' if value <= goal else 'misses'} <= {goal})"
    return (f"- {r['rows']} x {PREDICTORS}: HTTP / floor "
            f"{against(r['time_ratio'], GOAL_TIME_RATIO)}; in-process service / floor "
            f"{r['in_process_ratio']:.2f}; memory growth / body "
            f"{against(r['memory_ratio'], GOAL_MEMORY_RATIO)}"
            + ("" if r["hwm_reset"] else " [VmHWM not resettable]"))


def report(results: list[dict]) -> str:
    rows = [[cell(r) for _, cell in COLUMNS] for r in results]
    verdicts = [verdict(r) for r in results]
    return "\n".join([
        "# CSV uploads: end-to-end HTTP fit vs the pandas floor",
        "",
        "Floor: pandas.read_csv + the columns as float64 + intercept column + one "
        "scipy.linalg.qr(mode='economic'), in process. Served: `linfer serve --workers 2`, "
        "POST /v1/fit?response_column=y (text/csv), medians over the repeats after one "
        "warm-up request per worker. Peak growth: worker VmHWM after - VmRSS before, per "
        "request (the floor's: a fresh process over one floor run).",
        "",
        table([heading for heading, _ in COLUMNS], rows),
        "",
        *verdicts,
        "",
        *[line for r in results for line in (
            f"## Own time of the in-process service path, {r['rows']} x {PREDICTORS} "
            "(cProfile, one run)", "", "```", r["in_process_profile"], "```", "")],
    ])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rows", type=int, default=100_000)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--big", action="store_true", help="also 1,000,000 x 10")
    parser.add_argument("--floor-memory", help=argparse.SUPPRESS)  # internal
    args = parser.parse_args()
    if args.floor_memory:  # the child of floor_growth
        body = Path(args.floor_memory).read_bytes()
        print(json.dumps(peak_growth(lambda: floor_once(body))))
        return
    cases = [args.rows] + ([1_000_000] if args.big and args.rows != 1_000_000 else [])
    results = [measure(rows, args.repeat if rows <= 100_000 else max(2, args.repeat // 2))
               for rows in cases]
    md = report(results)
    print("\n" + md)
    write_results("csv", {"cases": results, "goal_time_ratio": GOAL_TIME_RATIO,
                          "goal_memory_ratio": GOAL_MEMORY_RATIO}, md)


if __name__ == "__main__":
    main()
