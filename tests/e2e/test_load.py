"""A bounded burst of mixed valid and invalid requests against `linfer serve` (2 workers).

Every valid request must come back 200 with exactly the numbers of a single call, every
invalid one as a 4xx ``application/problem+json``, and the workers' resident memory
must not grow by more than a modest bound between a warm-up burst and the main burst.

The module also holds the helpers the other reliability tests (test_faults.py) and the
benchmarks (tests/benchmarks/) share: worker pids and memory from /proc, one HTTP
call with http.client, and a bounded burst of calls from threads. Only 127.0.0.1 is
ever contacted; every loop is bounded in count and in time.
"""

from __future__ import annotations

import contextlib
import http.client
import json
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable
from urllib.parse import urlsplit

import numpy as np
import pytest

pytestmark = pytest.mark.e2e

PROBLEM_JSON = "application/problem+json"
CALL_TIMEOUT = 10.0


# --- helpers shared with test_faults.py and tests/benchmarks/ ---------------------------

def worker_pids(master: int) -> list[int]:
    """The pids of the processes whose parent is ``master`` (gunicorn's workers), sorted."""
    children = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:  # the process ended while we looked
            continue
        # Field 4 is the parent pid; the command name (field 2) may hold spaces and ')'.
        fields_after_name = stat.rsplit(")", 1)[1].split()
        if int(fields_after_name[1]) == master:
            children.append(int(entry.name))
    return sorted(children)


def proc_kib(pid: int, name: str) -> int:
    """A ``kB`` line of /proc/<pid>/status (``VmRSS``, ``VmHWM``, ...), in KiB."""
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith(name + ":"):
            return int(line.split()[1])
    raise KeyError(f"{name} not in /proc/{pid}/status")


def wait_for_workers(master: int, count: int, seconds: float,
                     without: frozenset[int] = frozenset()) -> list[int]:
    """Poll until ``master`` has ``count`` workers, none of them in ``without``; bounded."""
    deadline = time.monotonic() + seconds
    pids = worker_pids(master)
    while time.monotonic() < deadline:
        if len(pids) == count and not set(pids) & without:
            return pids
        time.sleep(0.1)
        pids = worker_pids(master)
    return pids


@dataclass
class Reply:
    status: int
    content_type: str
    body: bytes

    def json(self) -> Any:
        return json.loads(self.body)


def post(base_url: str, path: str, body: bytes, content_type: str = "application/json",
         timeout: float = CALL_TIMEOUT) -> Reply:
    """One POST over a fresh connection; connection errors are raised, not hidden."""
    parts = urlsplit(base_url)
    conn = http.client.HTTPConnection(parts.hostname, parts.port, timeout=timeout)
    with contextlib.closing(conn):
        conn.request("POST", path, body=body, headers={"Content-Type": content_type})
        resp = conn.getresponse()
        data = resp.read()
        return Reply(resp.status, (resp.getheader("Content-Type") or "").split(";")[0], data)


@dataclass
class Outcome:
    """One call of a burst: which case, when it started and ended, and its reply or error."""

    case: int
    started: float
    ended: float
    reply: Reply | None = None
    error: str | None = None


@dataclass
class Burst:
    outcomes: list[Outcome] = field(default_factory=list)
    seconds: float = 0.0


def burst(call: Callable[[int], Reply], cases: int, threads: int, seconds: float,
          max_calls: int, on_tick: Callable[[float], None] | None = None) -> Burst:
    """``threads`` callers cycle through ``call(case)`` for ``case`` in ``range(cases)``.

    Stops after ``seconds`` or ``max_calls`` calls, whichever comes first. Each caller
    starts at a different case, so the mix is interleaved. ``on_tick(elapsed)`` runs
    in the calling thread about every 0.1 s while the burst lasts (to inject a fault).
    """
    lock = threading.Lock()
    result = Burst()
    issued = 0
    start = time.monotonic()
    deadline = start + seconds

    def caller(offset: int) -> None:
        nonlocal issued
        i = offset
        while time.monotonic() < deadline:
            with lock:
                if issued >= max_calls:
                    return
                issued += 1
            case = i % cases
            i += 1
            t0 = time.monotonic()
            try:
                reply, error = call(case), None
            except (OSError, http.client.HTTPException) as err:
                reply, error = None, f"{type(err).__name__}: {err}"
            outcome = Outcome(case, t0 - start, time.monotonic() - start, reply, error)
            with lock:
                result.outcomes.append(outcome)

    workers = [threading.Thread(target=caller, args=(n,), daemon=True) for n in range(threads)]
    for w in workers:
        w.start()
    while any(w.is_alive() for w in workers) and time.monotonic() < deadline + CALL_TIMEOUT:
        if on_tick is not None:
            on_tick(time.monotonic() - start)
        time.sleep(0.1)
    for w in workers:
        w.join(timeout=CALL_TIMEOUT)
    result.seconds = time.monotonic() - start
    return result


def matrix_body(n: int, k: int, seed: int, **options: Any) -> bytes:
    """A seeded /v1/fit body in the design_matrix layout: n rows, k predictors."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, k))
    y = 3.0 + x @ np.arange(1.0, k + 1.0) + rng.normal(size=n)
    return json.dumps({"design_matrix": x.tolist(), "response": y.tolist(),
                       **options}).encode()


# --- the burst ---------------------------------------------------------------------------

THREADS = 32
WARMUP_SECONDS, WARMUP_CALLS = 4.0, 800
# Bounded in count too: ~3000 calls a worker stays under gunicorn's max_requests (5000),
# so the same worker processes are measured before and after (recycling under load is
# tested in test_faults.py).
BURST_SECONDS, BURST_CALLS = 15.0, 5000
# Resident memory may grow a little as allocators and caches settle; keeping any part of
# a request (the 1 MB body of the large case, or its arrays) would grow it by hundreds
# of MiB over the burst.
RSS_GROWTH_KIB = 16 * 1024

VALID: list[bytes] = [
    matrix_body(40, 3, seed=1),
    matrix_body(300, 5, seed=2, covariance="hc3", levels=[0.9, 0.99]),
    matrix_body(5000, 10, seed=3, include=["residuals"]),  # a 1 MB body
    json.dumps({"table": {"a": [1, 2, 3, 4, 5, 6, 7, 8], "b": [2, 1, 4, 3, 6, 5, 8, 9],
                          "y": [1.1, 2.3, 2.9, 4.2, 5.1, 5.8, 7.2, 8.1]},
                "response_column": "y",
                "hypotheses": [{"label": "b", "restrictions": [
                    {"coefficients": {"b": 1}, "equals": 0}]}]}).encode(),
]
# (body, content type, expected status)
INVALID: list[tuple[bytes, str, int]] = [
    (b'{"design_matrix": [[1, 2], [3, ', "application/json", 400),
    (b'{"design_matrix": [[1], [2], ["x"]], "response": [1, 2, 3]}', "application/json", 422),
    (b'{"design_matrix": [[1], [2], [3]], "response": [1, 2]}', "application/json", 422),
    (b'{"table": {"y": [1, 2, 3]}, "response_column": "z"}', "application/json", 422),
    (b'{"design_matrix": [[1, 2], [2, 4], [3, 6], [4, 8]], "response": [1, 2, 3, 5]}',
     "application/json", 422),  # rank-deficient
    (b'{"surprise": true}', "application/json", 422),
    (b"a,b\n1,2\n", "text/plain", 415),
]


def _call_case(base_url: str) -> Callable[[int], Reply]:
    def call(case: int) -> Reply:
        if case < len(VALID):
            return post(base_url, "/v1/fit", VALID[case])
        body, content_type, _ = INVALID[case - len(VALID)]
        return post(base_url, "/v1/fit", body, content_type)
    return call


def _rss(pids: list[int]) -> dict[int, int]:
    return {pid: proc_kib(pid, "VmRSS") for pid in pids}


def test_bounded_burst_answers_every_call_correctly_without_memory_growth(served) -> None:
    base_url = served.base_url
    master = served.process.pid
    references = []
    for body in VALID:
        single = post(base_url, "/v1/fit", body)
        assert single.status == 200, single.body[:500]
        references.append(single.json())
    call = _call_case(base_url)
    cases = len(VALID) + len(INVALID)

    warm = burst(call, cases, THREADS, WARMUP_SECONDS, WARMUP_CALLS)
    assert not [o for o in warm.outcomes if o.error], "connection errors in the warm-up"
    before = _rss(wait_for_workers(master, 2, 10.0))

    main = burst(call, cases, THREADS, BURST_SECONDS, BURST_CALLS)
    after = _rss(wait_for_workers(master, 2, 10.0))

    errors = [o.error for o in main.outcomes if o.error]
    assert not errors, f"{len(errors)} calls failed, e.g. {errors[:3]}"
    assert len(main.outcomes) >= 100, f"only {len(main.outcomes)} calls in {main.seconds:.1f} s"
    wrong = []
    for o in main.outcomes:
        reply = o.reply
        if o.case < len(VALID):
            if reply.status != 200 or reply.content_type != "application/json" \
                    or reply.json() != references[o.case]:
                wrong.append((o.case, reply.status, reply.body[:200]))
        else:
            expected = INVALID[o.case - len(VALID)][2]
            if reply.status != expected or reply.content_type != PROBLEM_JSON \
                    or reply.json().get("status") != expected:
                wrong.append((o.case, reply.status, reply.body[:200]))
    assert not wrong, f"{len(wrong)} of {len(main.outcomes)} answers differ: {wrong[:3]}"

    # Workers present in both snapshots (a worker restarted by max_requests starts afresh).
    common = sorted(set(before) & set(after))
    assert common, f"every worker was replaced during the burst: {before} -> {after}"
    growth = {pid: after[pid] - before[pid] for pid in common}
    assert max(growth.values()) <= RSS_GROWTH_KIB, (
        f"worker VmRSS grew by {growth} KiB over {len(main.outcomes)} calls "
        f"(before {before}, after {after}); bound {RSS_GROWTH_KIB} KiB")
    rate = len(main.outcomes) / main.seconds
    print(f"\nburst: {len(main.outcomes)} calls in {main.seconds:.1f} s ({rate:.0f}/s) at "
          f"{THREADS} connections; worker VmRSS KiB before {before}, after {after}")
