"""Metrics in the Prometheus text format and structured access logs; no request data in either.

Metrics (``GET /metrics``): request counts and latency histograms by endpoint and
status, and histograms of the rows and columns of each fit. Under gunicorn each worker
writes to ``PROMETHEUS_MULTIPROC_DIR`` (set by service/gunicorn_config.py) and
``/metrics`` merges them (prometheus_client's multiprocess mode).

Access log: one JSON object a line on the ``linfer.access`` logger (stderr): time,
request id, method, endpoint, status, rows, columns and duration in milliseconds.
Never bodies, never query values.
"""

from __future__ import annotations

import logging
import os
import sys
import time

import orjson
from flask import Flask, Response, g, request
from prometheus_client import (CONTENT_TYPE_LATEST, CollectorRegistry, Counter, Histogram,
                               generate_latest, multiprocess)

__all__ = ["init_app", "record_shape"]

_REQUESTS = Counter("linfer_requests", "HTTP requests answered", ["endpoint", "status"])
_LATENCY = Histogram("linfer_request_seconds", "Time to answer a request", ["endpoint"],
                     buckets=(0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1,
                              2.5, 5, 10, 30, 60))
_ROWS = Histogram("linfer_fit_rows", "Observations per fit",
                  buckets=(10, 30, 100, 300, 1_000, 10_000, 100_000, 1_000_000))
_COLUMNS = Histogram("linfer_fit_columns", "Design columns per fit",
                     buckets=(1, 2, 3, 5, 10, 20, 50, 100, 200))

access_log = logging.getLogger("linfer.access")


def record_shape(rows: int, columns: int) -> None:
    """Note the size of this request's design for the metrics and the access log."""
    g.rows = rows
    g.columns = columns
    _ROWS.observe(rows)
    _COLUMNS.observe(columns)


def _endpoint() -> str:
    rule = request.url_rule
    return rule.rule if rule is not None else "unmatched"


def _start() -> None:
    g.started = time.perf_counter()


def _finish(response: Response) -> Response:
    elapsed = time.perf_counter() - getattr(g, "started", time.perf_counter())
    endpoint = _endpoint()
    _REQUESTS.labels(endpoint=endpoint, status=str(response.status_code)).inc()
    _LATENCY.labels(endpoint=endpoint).observe(elapsed)
    if access_log.isEnabledFor(logging.INFO):
        access_log.info(orjson.dumps({
            "time": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
            "request_id": getattr(g, "request_id", None),
            "method": request.method,
            "endpoint": endpoint,
            "status": response.status_code,
            "rows": getattr(g, "rows", None),
            "columns": getattr(g, "columns", None),
            "duration_ms": round(elapsed * 1000, 3),
        }).decode())
    return response


def metrics() -> Response:
    if os.environ.get("PROMETHEUS_MULTIPROC_DIR"):
        registry = CollectorRegistry()
        multiprocess.MultiProcessCollector(registry)
        body = generate_latest(registry)
    else:
        body = generate_latest()
    return Response(body, mimetype=CONTENT_TYPE_LATEST.split(";")[0],
                    headers={"Content-Type": CONTENT_TYPE_LATEST})


def _configure_access_log() -> None:
    if not access_log.handlers:
        handler = logging.StreamHandler(sys.stderr)
        handler.setFormatter(logging.Formatter("%(message)s"))
        access_log.addHandler(handler)
        access_log.setLevel(logging.INFO)
        access_log.propagate = False


def init_app(app: Flask) -> None:
    _configure_access_log()
    app.before_request(_start)
    app.after_request(_finish)
    app.add_url_rule("/metrics", "metrics", metrics, methods=["GET"])
