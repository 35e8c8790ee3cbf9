"""Metrics in the Prometheus text format and structured access logs; no request data in either.

Metrics (``GET /metrics``): request counts and latency histograms by endpoint and
status, and histograms of the rows and columns of each fit. Under gunicorn each worker
writes to ``PROMETHEUS_MULTIPROC_DIR`` (set by service/gunicorn_config.py) and
``/metrics`` merges them (prometheus_client's multiprocess mode).

Access log: one JSON object a line on the ``linfer.access`` logger (stderr): time,
request id, method, endpoint, status, rows, columns and duration in milliseconds.
Never bodies, never query values.

Request ids: the caller's ``X-Request-ID`` when it is a usable one (1 to 128 letters,
digits and ``._:-``), else a new random one; the answer carries it back, and the
access log line names it.
"""

from __future__ import annotations

import logging
import os
import re
import sys
import time
from typing import Any

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
    ctx = g._get_current_object()
    ctx.rows = rows
    ctx.columns = columns
    _ROWS.observe(rows)
    _COLUMNS.observe(columns)


# The labelled children, found once per label values (what ``labels()`` looks up under
# a lock on every call); prometheus_client keeps them valid across gunicorn's fork.
_request_counters: dict[tuple[str, int], Any] = {}
_latency_histograms: dict[str, Any] = {}
# The access log's time to the second, formatted once a second.
_stamp: list = [None, ""]


_REQUEST_ID = re.compile(r"^[A-Za-z0-9._:-]{1,128}$")
_UUID_CLEAR = ~((0xc000 << 48) | (0xf000 << 64))
_UUID_SET = (0x8000 << 48) | (4 << 76)


def _new_id() -> str:
    """A random (version 4) UUID in hex, as ``uuid.uuid4().hex`` writes it, without the
    UUID object: the variant and version bits set on 128 random bits."""
    return "%032x" % (int.from_bytes(os.urandom(16), "big") & _UUID_CLEAR | _UUID_SET)


def _start() -> None:
    ctx = g._get_current_object()
    given = request.environ.get("HTTP_X_REQUEST_ID", "")  # request.headers.get, less its wrapper
    ctx.request_id = given if _REQUEST_ID.match(given) else _new_id()
    ctx.started = time.perf_counter()


def _now() -> str:
    second = int(time.time())
    if _stamp[0] != second:
        _stamp[:] = [second, time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(second))]
    return _stamp[1]


def _finish(response: Response) -> Response:
    ctx = g._get_current_object()
    req = request._get_current_object()
    now = time.perf_counter()
    elapsed = now - getattr(ctx, "started", now)
    rule = req.url_rule
    endpoint = rule.rule if rule is not None else "unmatched"
    status = response.status_code
    counter = _request_counters.get((endpoint, status))
    if counter is None:
        counter = _request_counters[endpoint, status] = _REQUESTS.labels(
            endpoint=endpoint, status=str(status))
    counter.inc()
    latency = _latency_histograms.get(endpoint)
    if latency is None:
        latency = _latency_histograms[endpoint] = _LATENCY.labels(endpoint=endpoint)
    latency.observe(elapsed)
    request_id = getattr(ctx, "request_id", None)
    if access_log.isEnabledFor(logging.INFO):
        line = orjson.dumps({
            "time": _now(),
            "request_id": request_id,
            "method": req.method,
            "endpoint": endpoint,
            "status": status,
            "rows": getattr(ctx, "rows", None),
            "columns": getattr(ctx, "columns", None),
            "duration_ms": round(elapsed * 1000, 3),
        }).decode()
        handler = _own_handler()
        if handler is not None:
            handler.write_line(line)
        else:
            access_log.handle(_record(line))
    response.headers["X-Request-ID"] = request_id or _new_id()
    return response


def _record(line: str) -> logging.LogRecord:
    """The record ``access_log.info(line)`` makes, less its stack walk for the caller
    (the record names _finish as its source)."""
    return access_log.makeRecord(access_log.name, logging.INFO, __file__,
                                 _finish.__code__.co_firstlineno, line, (), None, "_finish")


class _LineHandler(logging.StreamHandler):
    """The access log's handler: each message on a line of its own (stderr)."""

    def write_line(self, line: str) -> None:
        """Write ``line`` as ``handle`` of its record writes it (the format is the bare
        message), without making the record."""
        with self.lock:
            try:
                stream = self.stream
                stream.write(line + self.terminator)
                # What self.flush() does, already under the lock it would take again.
                if stream and hasattr(stream, "flush"):
                    stream.flush()
            except RecursionError:
                raise
            except Exception:
                self.handleError(_record(line))


_PLAIN = logging.Formatter("%(message)s")


def _own_handler() -> _LineHandler | None:
    """The access log's own handler when it is the only way out for its lines (no
    filters, no other handlers, no propagation, the bare format); else None."""
    handlers = access_log.handlers
    if len(handlers) != 1 or access_log.propagate or access_log.filters:
        return None
    handler = handlers[0]
    if (type(handler) is _LineHandler and handler.formatter is _PLAIN
            and not handler.filters and handler.level <= logging.INFO):
        return handler
    return None


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
        handler = _LineHandler(sys.stderr)
        handler.setFormatter(_PLAIN)
        access_log.addHandler(handler)
        access_log.setLevel(logging.INFO)
        access_log.propagate = False


def init_app(app: Flask) -> None:
    _configure_access_log()
    app.before_request(_start)
    app.after_request(_finish)
    app.add_url_rule("/metrics", "metrics", metrics, methods=["GET"])
