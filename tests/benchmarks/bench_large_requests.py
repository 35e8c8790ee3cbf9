"""Large requests: an end-to-end HTTP fit against the in-process floor, and worker memory.

    python tests/benchmarks/bench_large_requests.py [--repeat 5] [--big]

For a 100,000 x 10 design (and 1,000,000 x 10 with ``--big``, on a server whose
LINFER_MAX_BODY_BYTES, LINFER_MAX_CELLS and LINFER_TIMEOUT are raised for it), in the
design_matrix layout as JSON:

- end to end: POST /v1/fit to `linfer serve --workers 2` on 127.0.0.1, from the first
  byte sent to the last byte of the answer read (the server's own access-log duration
  is shown beside it);
- the floor, in this process: ``orjson.loads`` of the same body, ``numpy.asarray`` of
  the design and response, the intercept column, and one
  ``scipy.linalg.qr(mode="economic")`` of the design: what any service must do at least;
- the service's own steps in process between the two (orjson, decode_fit, fit,
  encode_fit, orjson.dumps: what routes.fit_endpoint runs, without HTTP or Flask), to
  separate the cost of the computation from the cost of serving it;
- the peak memory growth of the worker per request: VmHWM after the request minus
  VmRSS before it (VmHWM reset through /proc/<pid>/clear_refs before each request),
  over the body size.

Goals from the issue "Serving for real": end to end <= 1.5 x the floor, peak growth
<= 6 x the body size.
"""

from __future__ import annotations

import argparse
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
import scipy.linalg  # noqa: E402


PREDICTORS, SEED = 10, 7
GOAL_TIME_RATIO, GOAL_MEMORY_RATIO = 1.5, 6.0


def request_body(rows: int) -> bytes:
    rng = np.random.default_rng(SEED)
    x = rng.normal(size=(rows, PREDICTORS)) * np.linspace(1.0, 50.0, PREDICTORS)
    y = 10.0 + x @ np.linspace(-2.0, 2.0, PREDICTORS) + rng.normal(scale=5.0, size=rows)
    return orjson.dumps({"design_matrix": x.tolist(), "response": y.tolist()})


def floor_growth(body: bytes) -> int | None:
    """Peak RSS growth over one floor run in a fresh process (bytes); None without clear_refs.

    A fresh process, like a fresh worker: this one has already freed (and its allocator
    kept) the memory of building the body, which a second run would reuse unseen.
    """
    with tempfile.TemporaryDirectory(prefix="linfer-bench-") as tmp:
        path = Path(tmp) / "body.json"
        path.write_bytes(body)
        run = subprocess.run([sys.executable, __file__, "--floor-memory", str(path)],
                             capture_output=True, text=True, timeout=600)
    if run.returncode != 0:
        raise RuntimeError(run.stderr)
    value = run.stdout.strip().splitlines()[-1]
    return None if value == "None" else int(value)


def _floor_memory(path: str) -> None:
    """The child of :func:`floor_growth`: print the peak growth of one floor run."""
    body = Path(path).read_bytes()
    if not peak_reset(os.getpid()):
        print("None")
        return
    before = proc_kib(os.getpid(), "VmRSS")
    floor_once(body)
    print((proc_kib(os.getpid(), "VmHWM") - before) * 1024)


def floor_once(body: bytes) -> float:
    start = time.perf_counter()
    doc = orjson.loads(body)
    x = np.asarray(doc["design_matrix"], dtype=float)
    y = np.asarray(doc["response"], dtype=float)
    design = np.column_stack([np.ones(x.shape[0]), x])
    q, r = scipy.linalg.qr(design, mode="economic")
    elapsed = time.perf_counter() - start
    assert r.shape == (PREDICTORS + 1, PREDICTORS + 1) and y.shape[0] == x.shape[0]
    return elapsed


def in_process_once(settings, body: bytes) -> float:
    """The service's own steps, as routes.fit_endpoint runs them, without HTTP or Flask."""
    from service.api.decode import decode_fit
    from service.api.encode import encode_fit
    from service.stats.fit import fit
    start = time.perf_counter()
    doc = orjson.loads(body)
    req = decode_fit(doc, settings)
    del doc
    result = fit(req.design, req.options)
    answer = orjson.dumps(encode_fit(result, req.column_pointers))
    elapsed = time.perf_counter() - start
    assert b'"coefficients"' in answer
    return elapsed


def own_time_profile(settings, body: bytes, top: int = 12) -> str:
    """cProfile of one in-process run: the functions with the most own time."""
    import cProfile
    import io
    import pstats
    profiler = cProfile.Profile()
    profiler.runcall(in_process_once, settings, body)
    out = io.StringIO()
    pstats.Stats(profiler, stream=out).sort_stats("tottime").print_stats(top)
    text = out.getvalue()
    return text[text.find("   ncalls"):].rstrip()


def served_once(server, body: bytes) -> dict:
    """One POST; the time, and the peak growth of the worker that served it (KiB)."""
    elapsed, growth, reset = served_request(server, "/v1/fit", body, "application/json")
    return {"seconds": elapsed, "peak_growth_kib": growth / 1024, "hwm_reset": reset}


def server_durations(server, rows: int) -> list[float]:
    """duration_ms of the /v1/fit lines with ``rows`` in the server's JSON access log."""
    out = []
    for line in server.stderr().splitlines():
        if line.startswith("{") and '"endpoint":"/v1/fit"' in line:
            entry = json.loads(line)
            if entry.get("rows") == rows and entry.get("status") == 200:
                out.append(entry["duration_ms"] / 1e3)
    return out


def measure(rows: int, repeat: int, env: dict[str, str] | None) -> dict:
    body = request_body(rows)
    print(f"\n{rows} x {PREDICTORS}: body {len(body) / 1e6:.1f} MB")
    floor = [floor_once(body) for _ in range(repeat)]
    floor_peak = floor_growth(body)
    print(f"  floor (orjson + asarray + qr): median {median(floor):.3f} s"
          + (f", peak growth {floor_peak / len(body):.2f} x body" if floor_peak else ""))

    from service.settings import load
    settings = load({k: v for k, v in (env or {}).items() if k.startswith("LINFER_")})
    in_process_once(settings, body)  # warm-up
    in_process = [in_process_once(settings, body) for _ in range(repeat)]
    profile = own_time_profile(settings, body)
    print(f"  in-process service path: median {median(in_process):.3f} s")

    with linfer_server(env=env, label=f"large-{rows}") as server:
        served = [served_once(server, body) for _ in range(repeat + 1)]
        logged = server_durations(server, rows)
    first, served = served[0], served[1:]  # the first request of a worker also warms it up
    seconds = [s["seconds"] for s in served]
    growth = [s["peak_growth_kib"] * 1024 for s in served]
    print(f"  end to end over HTTP: median {median(seconds):.3f} s "
          f"(first {first['seconds']:.3f} s);"
          f" server-side (access log) median {median(logged[1:] or logged):.3f} s")
    print(f"  worker peak growth: median {median(growth) / 1e6:.1f} MB = "
          f"{median(growth) / len(body):.2f} x body (first request "
          f"{first['peak_growth_kib'] * 1024 / len(body):.2f} x)")
    return {
        "rows": rows, "columns": PREDICTORS + 1, "body_bytes": len(body), "repeat": repeat,
        "in_process_profile": profile, "floor_s": floor, "floor_peak_growth_bytes": floor_peak,
        "in_process_s": in_process, "served_s": seconds,
        "served_first_s": first["seconds"], "server_logged_s": logged,
        "peak_growth_bytes": growth, "first_peak_growth_bytes": first["peak_growth_kib"] * 1024,
        "hwm_reset": all(s["hwm_reset"] for s in served),
        "time_ratio": median(seconds) / median(floor),
        "in_process_ratio": median(in_process) / median(floor),
        "memory_ratio": median(growth) / len(body),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--big", action="store_true", help="also 1,000,000 x 10")
    parser.add_argument("--floor-memory", help=argparse.SUPPRESS)  # internal
    args = parser.parse_args()
    if args.floor_memory:
        _floor_memory(args.floor_memory)
        return
    cases = [(100_000, None)]
    if args.big:
        cases.append((1_000_000, {"LINFER_MAX_BODY_BYTES": str(512 * 1024 * 1024),
                                  "LINFER_MAX_CELLS": str(20_000_000),
                                  "LINFER_TIMEOUT": "600"}))
    results = [measure(rows, args.repeat if rows <= 100_000 else max(2, args.repeat // 2),
                       env) for rows, env in cases]
    rows = [[f"{r['rows']} x {PREDICTORS}", f"{r['body_bytes'] / 1e6:.1f}",
             f"{median(r['floor_s']):.3f}", f"{median(r['in_process_s']):.3f}",
             f"{median(r['served_s']):.3f}", f"{r['time_ratio']:.2f}",
             f"{median(r['peak_growth_bytes']) / 1e6:.1f}", f"{r['memory_ratio']:.2f}",
             f"{r['floor_peak_growth_bytes'] / r['body_bytes']:.2f}"
             if r["floor_peak_growth_bytes"] else "n/a"]
            for r in results]
    verdicts = []
    for r in results:
        t = "meets" if r["time_ratio"] <= GOAL_TIME_RATIO else "misses"
        m = "meets" if r["memory_ratio"] <= GOAL_MEMORY_RATIO else "misses"
        verdicts.append(f"- {r['rows']} x {PREDICTORS}: time ratio {r['time_ratio']:.2f} "
                        f"({t} <= {GOAL_TIME_RATIO}); in-process service / floor "
                        f"{r['in_process_ratio']:.2f}; memory {r['memory_ratio']:.2f} x body "
                        f"({m} <= {GOAL_MEMORY_RATIO})"
                        + ("" if r["hwm_reset"] else " [VmHWM not resettable: first-peak "
                           "only]"))
    md = "\n".join([
        "# Large requests: end-to-end HTTP fit vs the in-process floor",
        "",
        "Floor: orjson.loads + numpy.asarray + intercept column + one "
        "scipy.linalg.qr(mode='economic'), in process. Served: `linfer serve --workers 2`, "
        "POST /v1/fit (design_matrix JSON), medians over the repeats after one warm-up "
        "request. Peak growth: worker VmHWM after - VmRSS before, per request (the floor's: "
        "this process's, over one floor run; orjson.loads alone touches several times the "
        "body).",
        "",
        table(["design", "body MB", "floor s", "in-process s", "HTTP s", "HTTP / floor",
               "peak growth MB", "growth / body", "floor growth / body"], rows),
        "",
        *verdicts,
        "",
        *[line for r in results for line in (
            f"## Own time of the in-process service path, {r['rows']} x {PREDICTORS} "
            "(cProfile, one run)", "", "```", r["in_process_profile"], "```", "")],
    ])
    print("\n" + md)
    write_results("large_requests", {"cases": results, "goal_time_ratio": GOAL_TIME_RATIO,
                                     "goal_memory_ratio": GOAL_MEMORY_RATIO}, md)


if __name__ == "__main__":
    main()
