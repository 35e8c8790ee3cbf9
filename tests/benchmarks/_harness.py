"""What the benchmark scripts share: servers on 127.0.0.1, load, /proc memory, results.

Servers are started as their own process group and always stopped (the e2e helpers in
tests/e2e/_server.py do the same for the test suite, and are reused here). Load comes
from ``wrk`` when it is installed (a Lua script posts the body), else from a bounded
Python client (threads with keep-alive ``http.client`` connections). Every load run is
bounded in time and in count; only 127.0.0.1 is ever contacted.
"""

from __future__ import annotations

import contextlib
import http.client
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Callable, Iterator, Mapping, Sequence
from urllib.parse import urlsplit

# One BLAS thread, as in each gunicorn worker (service/gunicorn_config.py): the in-process
# figures then match the served ones, and a busy machine does not make multi-threaded
# BLAS spin on the tiny systems of a small request (measured: 7 ms instead of 2 ms a
# 40 x 3 request). Set before numpy is first imported.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

BENCH_DIR = Path(__file__).resolve().parent
REPO = BENCH_DIR.parents[1]
for _path in (REPO, REPO / "tests"):
    if str(_path) not in sys.path:
        sys.path.insert(0, str(_path))

from e2e._server import (HOST, START_ATTEMPTS, STARTUP_SECONDS, Server,  # noqa: E402
                         _healthy, free_port, server_env, start_once)
from e2e.test_load import proc_kib, wait_for_workers, worker_pids  # noqa: E402

RESULTS = BENCH_DIR / "results"

__all__ = ["BENCH_DIR", "REPO", "RESULTS", "Load", "environment", "gunicorn_server",
           "served_request",
           "linfer_server", "load", "median", "peak_reset", "proc_kib", "wait_for_workers",
           "table", "worker_pids", "write_results"]


# --- servers ---------------------------------------------------------------------------

def _first_healthy(attempt: Callable[[], Server | str]) -> Server:
    failures = []
    for _ in range(START_ATTEMPTS):
        result = attempt()
        if isinstance(result, Server):
            return result
        failures.append(result)
    raise SystemExit("the server did not start:\n" + "\n\n".join(failures))


@contextlib.contextmanager
def linfer_server(env: Mapping[str, str] | None = None,
                  label: str = "linfer") -> Iterator[Server]:
    """`linfer serve --workers 2` (the project's gunicorn config) on a free port."""
    with tempfile.TemporaryDirectory(prefix="linfer-bench-") as tmp:
        server = _first_healthy(lambda: start_once(Path(tmp), env, label))
        try:
            yield server
        finally:
            server.stop()


def _gunicorn_once(tmp: Path, app: str, args: Sequence[str], cwd: Path,
                   label: str) -> Server | str:
    port = free_port()
    base_url = f"http://{HOST}:{port}"
    err_path = tmp / f"{label}-{port}.stderr"
    cmd = [sys.executable, "-m", "gunicorn", *args, "--bind", f"{HOST}:{port}", app]
    with open(err_path, "wb") as err:
        process = subprocess.Popen(cmd, cwd=cwd, env=server_env(), stdin=subprocess.DEVNULL,
                                   stdout=subprocess.DEVNULL, stderr=err,
                                   start_new_session=True)
    server = Server(base_url, process, err_path)
    deadline = time.monotonic() + STARTUP_SECONDS
    while time.monotonic() < deadline and process.poll() is None:
        if _healthy(base_url):
            return server
        time.sleep(0.1)
    server.stop()
    return f"{' '.join(cmd)} did not become healthy:\n{server.stderr()}"


@contextlib.contextmanager
def gunicorn_server(app: str, args: Sequence[str], cwd: Path = BENCH_DIR,
                    label: str = "gunicorn") -> Iterator[Server]:
    """``python -m gunicorn ARGS --bind 127.0.0.1:<free port> APP``; APP must serve /healthz."""
    with tempfile.TemporaryDirectory(prefix="linfer-bench-") as tmp:
        server = _first_healthy(lambda: _gunicorn_once(Path(tmp), app, args, cwd, label))
        try:
            yield server
        finally:
            server.stop()


def peak_reset(pid: int) -> bool:
    """Reset VmHWM of ``pid`` to its current VmRSS (``5`` into /proc/<pid>/clear_refs)."""
    try:
        Path(f"/proc/{pid}/clear_refs").write_text("5")
        return True
    except OSError:
        return False


def served_request(server: Server, path: str, body: bytes, content_type: str
                   ) -> tuple[float, int, bool]:
    """One POST to a 2-worker server: seconds from the first byte sent to the last read,
    the serving worker's peak memory growth in bytes (VmHWM after minus VmRSS before,
    VmHWM reset first), and whether the reset worked (without it, growth is counted from
    the older peak, so only what this request added shows)."""
    from e2e.test_load import post

    pids = wait_for_workers(server.process.pid, 2, 10.0)
    reset = all(peak_reset(pid) for pid in pids)
    base = {pid: proc_kib(pid, "VmRSS") if reset
            else max(proc_kib(pid, "VmRSS"), proc_kib(pid, "VmHWM")) for pid in pids}
    start = time.perf_counter()
    reply = post(server.base_url, path, body, content_type=content_type, timeout=600.0)
    elapsed = time.perf_counter() - start
    if reply.status != 200:
        raise RuntimeError(f"{reply.status}: {reply.body[:300]!r}")
    growth = [0]
    for pid, before in base.items():
        try:
            growth.append(proc_kib(pid, "VmHWM") - before)
        except OSError:  # the worker was replaced
            pass
    return elapsed, max(growth) * 1024, reset


# --- load ------------------------------------------------------------------------------

@dataclass
class Load:
    """One load run against one URL: throughput and latency."""

    tool: str
    connections: int
    requests: int
    seconds: float
    errors: int
    p50_ms: float
    p99_ms: float

    @property
    def rps(self) -> float:
        return self.requests / self.seconds

    def as_dict(self) -> dict:
        return {**asdict(self), "rps": round(self.rps, 1)}


_WRK_SCRIPT = """
wrk.method = "POST"
wrk.headers["Content-Type"] = "application/json"
local f = assert(io.open("{body}", "rb"))
wrk.body = f:read("*a")
f:close()
done = function(summary, latency, requests)
  local e = summary.errors
  io.write(string.format(
    "WRKJSON {{\\"requests\\": %d, \\"duration_us\\": %d, \\"errors\\": %d, " ..
    "\\"p50_us\\": %d, \\"p99_us\\": %d}}\\n",
    summary.requests, summary.duration,
    e.connect + e.read + e.write + e.status + e.timeout,
    latency:percentile(50), latency:percentile(99)))
end
"""


def _wrk(url: str, body: bytes, seconds: float, connections: int) -> Load:
    with tempfile.TemporaryDirectory(prefix="linfer-wrk-") as tmp:
        body_path = Path(tmp) / "body.json"
        body_path.write_bytes(body)
        script = Path(tmp) / "post.lua"
        script.write_text(_WRK_SCRIPT.format(body=body_path))
        cmd = ["wrk", "-t1", f"-c{connections}", f"-d{seconds:g}s", "--timeout", "10s",
               "-s", str(script), url]
        run = subprocess.run(cmd, capture_output=True, text=True, timeout=seconds + 60)
    line = next((ln for ln in run.stdout.splitlines() if ln.startswith("WRKJSON ")), None)
    if run.returncode != 0 or line is None:
        raise RuntimeError(f"wrk failed ({run.returncode}): {run.stdout}\n{run.stderr}")
    doc = json.loads(line[len("WRKJSON "):])
    return Load("wrk", connections, doc["requests"], doc["duration_us"] / 1e6, doc["errors"],
                doc["p50_us"] / 1e3, doc["p99_us"] / 1e3)


def _python_load(url: str, body: bytes, seconds: float, connections: int,
                 max_requests: int = 200_000) -> Load:
    parts = urlsplit(url)
    lock = threading.Lock()
    latencies: list[float] = []
    errors = 0
    deadline = time.monotonic() + seconds

    def client() -> None:
        nonlocal errors
        conn = http.client.HTTPConnection(parts.hostname, parts.port, timeout=10.0)
        mine: list[float] = []
        failed = 0
        with contextlib.closing(conn):
            while time.monotonic() < deadline and len(mine) < max_requests // connections:
                t0 = time.perf_counter()
                try:
                    conn.request("POST", parts.path, body=body,
                                 headers={"Content-Type": "application/json"})
                    resp = conn.getresponse()
                    resp.read()
                    ok = 200 <= resp.status < 300
                except (OSError, http.client.HTTPException):
                    conn.close()  # reopened by the next request
                    ok = False
                if ok:
                    mine.append(time.perf_counter() - t0)
                else:
                    failed += 1
        with lock:
            latencies.extend(mine)
            errors += failed

    start = time.monotonic()
    threads = [threading.Thread(target=client, daemon=True) for _ in range(connections)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=seconds + 30)
    elapsed = time.monotonic() - start
    latencies.sort()

    def pct(q: float) -> float:
        return latencies[min(len(latencies) - 1, int(q * len(latencies)))] * 1e3 \
            if latencies else float("nan")

    return Load("python", connections, len(latencies), elapsed, errors, pct(0.5), pct(0.99))


def load(url: str, body: bytes, seconds: float, connections: int) -> Load:
    """POST ``body`` to ``url`` from ``connections`` connections for ``seconds``."""
    if shutil.which("wrk"):
        return _wrk(url, body, seconds, connections)
    return _python_load(url, body, seconds, connections)


def median(values: Sequence[float]) -> float:
    return float(statistics.median(values))


# --- results ---------------------------------------------------------------------------

def environment() -> dict:
    """Where the figures were measured."""
    import numpy
    import scipy
    cpu = platform.processor() or platform.machine()
    with contextlib.suppress(OSError):
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    return {"when": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
            "cpus": os.cpu_count(), "cpu": cpu, "python": platform.python_version(),
            "numpy": numpy.__version__, "scipy": scipy.__version__,
            "load_tool": "wrk" if shutil.which("wrk") else "python"}


def write_results(name: str, data: dict, markdown: str) -> list[Path]:
    """tests/benchmarks/results/<name>.json and <name>.md (the folder is gitignored)."""
    RESULTS.mkdir(exist_ok=True)
    json_path = RESULTS / f"{name}.json"
    md_path = RESULTS / f"{name}.md"
    json_path.write_text(json.dumps({"environment": environment(), **data}, indent=2) + "\n")
    md_path.write_text(markdown.rstrip() + "\n")
    print(f"\nwrote {json_path.relative_to(REPO)} and {md_path.relative_to(REPO)}")
    return [json_path, md_path]


def table(headers: Sequence[str], rows: Sequence[Sequence[object]]) -> str:
    """A markdown table (also readable as plain text)."""
    cells = [[str(h) for h in headers]] + [[str(c) for c in r] for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]
    lines = ["| " + " | ".join(c.rjust(w) for c, w in zip(r, widths)) + " |" for r in cells]
    lines.insert(1, "|" + "|".join("-" * (w + 2) for w in widths) + "|")
    return "\n".join(lines)
