"""The gunicorn settings of the service: the one place they live.

Used as ``gunicorn -c python:service.gunicorn_config 'service.app:create_app()'``
(``linfer serve`` does exactly that; docker/gunicorn.conf.py imports this module).
Each value can be overridden by an environment variable or a command-line flag.
"""

import multiprocessing
import os

# One BLAS thread per worker: on a small machine, worker processes running
# multi-threaded BLAS fight over the same cores. Set before numpy is imported.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

# prometheus_client's multiprocess mode: every worker writes its metrics here and
# GET /metrics merges them. A fresh directory per server start.
_metrics_dir_made = None
if not os.environ.get("PROMETHEUS_MULTIPROC_DIR"):
    import tempfile

    _metrics_dir_made = tempfile.mkdtemp(prefix="linfer-metrics-")
    os.environ["PROMETHEUS_MULTIPROC_DIR"] = _metrics_dir_made


def on_exit(server):
    if _metrics_dir_made:
        import shutil

        shutil.rmtree(_metrics_dir_made, ignore_errors=True)


def pre_fork(server, worker):
    # Everything the preloaded app made lives as long as the worker: freeze it out of
    # the cyclic garbage collector, so that a full collection walks the objects of
    # requests only (otherwise some 100,000 objects, tens of milliseconds each time,
    # and a copy of every page they sit on).
    import gc

    gc.freeze()


def post_fork(server, worker):
    # Each worker's requests are stopped at LINFER_MAX_REQUEST_SECONDS with a problem
    # answer (a timer on the worker's main thread).
    from service import time_limit

    time_limit.install()


def child_exit(server, worker):
    from prometheus_client import multiprocess

    multiprocess.mark_process_dead(worker.pid)


bind = os.environ.get("LINFER_BIND", "127.0.0.1:8000")
workers = int(os.environ.get("LINFER_WORKERS", "0")) or multiprocessing.cpu_count()
worker_class = "sync"
timeout = int(os.environ.get("LINFER_TIMEOUT", "60"))
# The app stops a request at LINFER_MAX_REQUEST_SECONDS with a problem answer
# (service/time_limit.py); the worker timeout is the hard stop behind it, for a worker
# stuck in one long computation, so the first must be the shorter.
if not os.environ.get("LINFER_MAX_REQUEST_SECONDS"):
    os.environ["LINFER_MAX_REQUEST_SECONDS"] = str(timeout / 2)
from service import settings as _settings  # noqa: E402  (standard library only)

try:
    _request_seconds = _settings.load().max_request_seconds
except _settings.SettingsError as _err:  # the reason, without a traceback
    raise SystemExit(str(_err)) from None
if not _request_seconds < timeout:
    raise SystemExit(f"LINFER_MAX_REQUEST_SECONDS={_request_seconds:g} must be below the "
                     f"worker timeout LINFER_TIMEOUT={timeout}")
graceful_timeout = 20
keepalive = 5
preload_app = True
max_requests = 5000
max_requests_jitter = 500
accesslog = None
errorlog = "-"
loglevel = os.environ.get("LINFER_LOG_LEVEL", "info")
# No shared control socket: several servers on one machine must not meet there.
control_socket_disable = True
# Request lines can carry query parameters, never data; keep them short.
limit_request_line = 8190
