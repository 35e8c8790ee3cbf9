"""Small requests: /v1/fit (40 rows, 3 predictors) against a bare Flask endpoint.

    python tests/benchmarks/bench_small_requests.py [--seconds 5] [--rounds 3]

Both servers run side by side in one run, on the same gunicorn configuration: linfer
through `linfer serve --workers 2` (service/gunicorn_config.py: sync workers), the bare
app through ``gunicorn -c python:service.gunicorn_config -w 2``. The bare app (defined
below) parses the same body with orjson and returns a fixed small JSON object, so the
difference is the work linfer does per request. Load alternates between the two for a
few rounds (wrk if installed, else a bounded Python client); the figures are medians
over the rounds. A third server, linfer with the stats fit answered from the first
request's result (``create_cached_fit_app``), runs beside them: its ratio to the bare
endpoint is the ceiling of the web layer alone (decode, marshmallow, encode, hooks).

Goal from the issue "Serving for real": linfer's requests/s at least 0.7 x the bare
endpoint's. Also printed: where the time goes in-process (cProfile over the Flask test
client, top 15 functions by cumulative time, and the stages of the request path).
"""

from __future__ import annotations

import argparse
import cProfile
import io
import os
import pstats
import time
from pathlib import Path

import orjson
from flask import Flask, Response, request

ROWS, PREDICTORS, SEED = 40, 3, 20240601
REPO = Path(__file__).resolve().parents[2]
GOAL_RATIO = 0.7
CACHED = "linfer_fit_cached"


def create_bare_app() -> Flask:
    """The floor: Flask + orjson on the same body, a fixed small answer (gunicorn imports it)."""
    app = Flask("bare")
    answer = orjson.dumps({"n_observations": ROWS, "status": "ok"})

    @app.post("/v1/fit")
    def fit() -> Response:
        orjson.loads(request.get_data(cache=False))
        return Response(answer, mimetype="application/json")

    @app.get("/healthz")
    def healthz() -> Response:
        return Response(b'{"status":"ok"}', mimetype="application/json")

    return app


def create_cached_fit_app():
    """linfer with the stats fit answered from the first request's result (gunicorn
    imports it): everything else (body read, marshmallow, arrays, design, encoding,
    hooks) runs as served. Its ratio to the bare endpoint bounds what linfer could
    reach if the fit itself cost nothing."""
    from service.api import routes
    from service.app import create_app

    real_fit, memo = routes.fit, []

    def fit_once(design, options):
        if not memo:
            memo.append(real_fit(design, options))
        return memo[0]

    routes.fit = fit_once
    return create_app()


def request_body() -> bytes:
    import numpy as np
    rng = np.random.default_rng(SEED)
    x = rng.normal(size=(ROWS, PREDICTORS)) * [3.0, 10.0, 0.5] + [20.0, 100.0, 2.0]
    y = 5.0 + x @ [1.5, -0.2, 4.0] + rng.normal(size=ROWS)
    return orjson.dumps({"design_matrix": x.round(4).tolist(), "response": y.round(4).tolist()})


# The stages of the request path, by (file, function) as cProfile names them.
STAGES = [
    ("whole request (Flask dispatch)", "flask/app.py", "wsgi_app"),
    ("  view: fit_endpoint", "api/routes.py", "fit_endpoint"),
    ("    read + orjson.loads body", "api/routes.py", "_json_body"),
    ("    decode_fit (envelope + numbers)", "api/decode.py", "decode_fit"),
    ("      marshmallow load", "api/decode.py", "load_request"),
    ("    stats fit (all)", "stats/fit.py", "fit"),
    ("      lstsq.solve", "stats/lstsq.py", "solve"),
    ("      infer", "stats/inference.py", "infer"),
    ("      conditioning.assess", "stats/conditioning.py", "assess"),
    ("      residual checks", "stats/residuals.py", "check_residuals"),
    ("    encode_fit", "api/encode.py", "encode_fit"),
    ("    json_response", "api/encode.py", "json_response"),
    ("  after_request: metrics + access log", "service/observability.py", "_finish"),
]


def profile(body: bytes, calls: int = 500) -> dict:
    """cProfile of ``calls`` /v1/fit requests through the Flask test client."""
    import logging

    for name in [n for n in os.environ if n.startswith("LINFER_")]:
        del os.environ[name]
    from service.app import create_app

    linfer = create_app().test_client()
    bare = create_bare_app().test_client()
    # The access log is part of the path: keep formatting it, but into /dev/null.
    devnull = open(os.devnull, "w")
    for handler in logging.getLogger("linfer.access").handlers:
        if isinstance(handler, logging.StreamHandler):
            handler.setStream(devnull)
    try:
        timings = {}
        for label, client in (("linfer", linfer), ("bare", bare)):
            for _ in range(100):
                assert client.post("/v1/fit", data=body,
                                   content_type="application/json").status_code == 200
            start = time.perf_counter()
            for _ in range(calls):
                client.post("/v1/fit", data=body, content_type="application/json")
            timings[label] = (time.perf_counter() - start) / calls * 1e3
        profiler = cProfile.Profile()
        profiler.enable()
        for _ in range(calls):
            linfer.post("/v1/fit", data=body, content_type="application/json")
        profiler.disable()
    finally:
        devnull.close()
    stats = pstats.Stats(profiler)

    def listing(order: str, *restrictions: object) -> str:
        out = io.StringIO()
        stats.stream = out
        stats.sort_stats(order).print_stats(*restrictions)
        text = out.getvalue()
        return text[text.find("   ncalls"):].rstrip().replace(str(REPO) + os.sep, "")

    # The request path proper (the service's own functions; the test client and Flask
    # frames above it add nothing to read), then where the time is spent, any module.
    top = listing("cumulative", r"service[/\\]", 15)
    own = listing("tottime", 15)
    stages = []
    for label, path, func in STAGES:
        found = [v for (file, _, name), v in stats.stats.items()
                 if name == func and file.replace(os.sep, "/").endswith(path)]
        if found:
            cumulative = sum(v[3] for v in found)
            stages.append((label, round(cumulative / calls * 1e3, 3)))
    return {"calls": calls, "in_process_ms": {k: round(v, 3) for k, v in timings.items()},
            "top15_cumulative": top, "top15_own_time": own, "stages_ms_profiled": stages}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--seconds", type=float, default=5.0, help="length of one load run")
    parser.add_argument("--rounds", type=int, default=3, help="alternating rounds")
    parser.add_argument("--connections", type=int, default=4)
    args = parser.parse_args()

    from _harness import (BENCH_DIR, gunicorn_server, linfer_server, load, median, table,
                          write_results)
    from e2e.test_load import post

    body = request_body()
    # The bare app under the very same gunicorn settings as linfer (sync workers,
    # preloaded app, garbage-collector freeze before fork), two workers.
    bare_args = ["-c", "python:service.gunicorn_config", "-w", "2"]
    runs: dict[str, list] = {"linfer": [], "bare": [], CACHED: []}
    with linfer_server(label="small-linfer") as linfer, \
            gunicorn_server("bench_small_requests:create_bare_app()", bare_args,
                            BENCH_DIR, label="small-bare") as bare, \
            gunicorn_server("bench_small_requests:create_cached_fit_app()", bare_args,
                            BENCH_DIR, label="small-cached") as cached:
        servers = {"linfer": linfer, "bare": bare, CACHED: cached}
        urls = {name: server.base_url + "/v1/fit" for name, server in servers.items()}
        for name, server in servers.items():
            reply = post(server.base_url, "/v1/fit", body)
            assert reply.status == 200, (name, reply.body[:300])
        answer = post(linfer.base_url, "/v1/fit", body).body
        assert len(orjson.loads(answer)["coefficients"]) == PREDICTORS + 1
        assert post(cached.base_url, "/v1/fit", body).body == answer
        for name in runs:  # warm-up
            load(urls[name], body, 2.0, args.connections)
        for r in range(args.rounds):
            order = list(runs) if r % 2 == 0 else list(runs)[::-1]
            for name in order:
                run = load(urls[name], body, args.seconds, args.connections)
                runs[name].append(run)
                print(f"round {r + 1} {name:16s}: {run.rps:8.1f} req/s  p50 {run.p50_ms:6.2f} ms"
                      f"  p99 {run.p99_ms:6.2f} ms  errors {run.errors}  ({run.tool}, "
                      f"{run.connections} connections, {run.requests} requests)")
    summary = {name: {"rps": round(median([r.rps for r in rs]), 1),
                      "p50_ms": round(median([r.p50_ms for r in rs]), 3),
                      "p99_ms": round(median([r.p99_ms for r in rs]), 3),
                      "errors": sum(r.errors for r in rs)} for name, rs in runs.items()}
    ratio = summary["linfer"]["rps"] / summary["bare"]["rps"]
    per_round = [a.rps / b.rps for a, b in zip(runs["linfer"], runs["bare"])]
    ceiling = summary[CACHED]["rps"] / summary["bare"]["rps"]

    prof = profile(body)
    rows = [[name, s["rps"], s["p50_ms"], s["p99_ms"], s["errors"]]
            for name, s in summary.items()]
    verdict = "meets" if ratio >= GOAL_RATIO else "misses"
    md = "\n".join([
        f"# Small requests: /v1/fit {ROWS} x {PREDICTORS} vs a bare Flask endpoint",
        "",
        "Both on gunicorn with service/gunicorn_config.py, 2 sync workers; load "
        f"{runs['linfer'][0].tool}, "
        f"{args.connections} connections, {args.rounds} alternating rounds of "
        f"{args.seconds:g} s (medians); body {len(body)} bytes.",
        "",
        table(["server", "req/s", "p50 ms", "p99 ms", "errors"], rows),
        "",
        f"**Ratio linfer / bare: {ratio:.3f}** (per round: "
        f"{', '.join(f'{x:.3f}' for x in per_round)}); goal >= {GOAL_RATIO}: {verdict}.",
        "",
        f"Web-layer ceiling: {CACHED} (the fit answered from the first request's result, "
        f"all else as served) / bare = **{ceiling:.3f}**: the ratio linfer would reach if "
        "the fit cost nothing.",
        "",
        f"In-process (Flask test client, no HTTP): linfer {prof['in_process_ms']['linfer']} ms,"
        f" bare {prof['in_process_ms']['bare']} ms per request.",
        "",
        f"## Where the time goes (cProfile, {prof['calls']} requests, ms per request "
        "with profiler overhead)",
        "",
        table(["stage", "ms"], prof["stages_ms_profiled"]),
        "",
        "## Top 15 functions of the request path (service/) by cumulative time",
        "",
        "```",
        prof["top15_cumulative"],
        "```",
        "",
        "## Top 15 functions by own time (any module)",
        "",
        "```",
        prof["top15_own_time"],
        "```",
    ])
    print("\n" + md)
    write_results("small_requests", {
        "rows": ROWS, "predictors": PREDICTORS, "body_bytes": len(body),
        "runs": {k: [r.as_dict() for r in v] for k, v in runs.items()},
        "summary": summary, "ratio": round(ratio, 4), "ratio_per_round": per_round,
        "fit_cached_ratio": round(ceiling, 4),
        "goal_ratio": GOAL_RATIO, "profile": prof}, md)


if __name__ == "__main__":
    main()
