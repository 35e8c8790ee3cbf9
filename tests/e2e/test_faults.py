"""Faults under load against `linfer serve` (gunicorn, 2 sync workers) on 127.0.0.1.

- A worker killed (SIGKILL) in the middle of a burst: the master replaces it, at most the
  one request in flight on it fails (a sync worker holds one connection at a time;
  connections not yet accepted wait in the listening socket, which the master owns),
  and every request started after the kill succeeds.
- Workers recycled by ``max_requests`` under load lose no request.
- A slow client trickling its body ties up one worker; the other keeps answering.
- A client that stalls past the request time limit (LINFER_MAX_REQUEST_SECONDS) gets a
  408 problem naming it, and a computation past it a 422; the worker stays and takes
  the next request. A limit not below gunicorn's worker timeout is refused at start.

A sync worker reads the request body itself, so each slow client holds a whole worker
(two slow clients would stall a 2-worker server). The production answer is a buffering
proxy in front of gunicorn (nginx with its default ``proxy_request_buffering on``, which
reads the whole body before it opens the upstream connection, and ``client_body_timeout``
for the stalled ones); these tests only check that one slow client does not stall the
rest and that a stalled one is answered and let go.

Every server here is a dedicated one (faults must not reach the session's shared
server); every loop is bounded in count and in time.
"""

from __future__ import annotations

import json
import os
import signal
import socket
import threading
import time

import pytest

from ._server import HOST
from .test_load import burst, matrix_body, post, wait_for_workers, worker_pids

pytestmark = pytest.mark.e2e

BODY = matrix_body(2000, 5, seed=11)  # ~10 ms a fit: a kill is likely to land mid-request
SMALL = matrix_body(40, 3, seed=12)
THREADS = 12


def _fits(base_url: str):
    def call(case: int):
        return post(base_url, "/v1/fit", BODY if case == 0 else SMALL)
    return call


def _references(base_url: str) -> list[dict]:
    out = []
    for body in (BODY, SMALL):
        reply = post(base_url, "/v1/fit", body)
        assert reply.status == 200, reply.body[:300]
        out.append(reply.json())
    return out


def _failed(outcome, references) -> bool:
    reply = outcome.reply
    return (reply is None or reply.status != 200
            or reply.json() != references[outcome.case])


def test_killed_worker_is_replaced_and_only_its_request_fails(start_server) -> None:
    server = start_server(label="kill-worker")
    master = server.process.pid
    references = _references(server.base_url)
    workers = wait_for_workers(master, 2, 10.0)
    assert len(workers) == 2, workers
    victim = workers[0]
    killed_at: list[float] = []

    def kill(elapsed: float) -> None:
        # Only a pid that is still a worker of our own server (never a reused pid).
        if elapsed >= 2.0 and not killed_at and victim in worker_pids(master):
            os.kill(victim, signal.SIGKILL)
            killed_at.append(elapsed)

    result = burst(_fits(server.base_url), 2, THREADS, seconds=7.0, max_calls=4000,
                   on_tick=kill)
    assert killed_at, "the burst ended before the kill"
    replaced = wait_for_workers(master, 2, 15.0, without=frozenset({victim}))
    assert len(replaced) == 2 and victim not in replaced, (
        f"the master did not replace worker {victim}: workers now {replaced}\n"
        + server.stderr()[-2000:])

    failures = [o for o in result.outcomes if _failed(o, references)]
    late = [o for o in failures if o.started > killed_at[0]]
    after = [o for o in result.outcomes if o.started > killed_at[0]]
    assert len(failures) <= 1, (f"{len(failures)} failed calls, more than the one in flight "
                                f"on the killed worker: "
                                f"{[(o.started, o.error) for o in failures[:5]]}")
    assert not late, f"calls started after the kill failed: {[o.error for o in late[:3]]}"
    assert len(after) >= 50, f"only {len(after)} calls after the kill"
    for _ in range(5):  # and the service answers normally afterwards
        reply = post(server.base_url, "/v1/fit", SMALL)
        assert reply.status == 200 and reply.json() == references[1]
    print(f"\nkilled worker {victim} at {killed_at[0]:.1f} s: {len(result.outcomes)} calls, "
          f"{len(failures)} failed ({[o.error for o in failures]}), {len(after)} after the "
          f"kill; workers {workers} -> {replaced}")


def test_workers_recycled_by_max_requests_lose_no_request(start_server) -> None:
    # GUNICORN_CMD_ARGS overrides the config module: recycle each worker every 100 calls.
    server = start_server(env={"GUNICORN_CMD_ARGS": "--max-requests 100 "
                               "--max-requests-jitter 0"}, label="recycle")
    master = server.process.pid
    references = _references(server.base_url)
    first = set(wait_for_workers(master, 2, 10.0))
    result = burst(_fits(server.base_url), 2, THREADS, seconds=10.0, max_calls=600)
    failures = [(o.started, o.error or o.reply.status) for o in result.outcomes
                if _failed(o, references)]
    assert len(result.outcomes) == 600, f"{len(result.outcomes)} calls in {result.seconds:.1f} s"
    assert not failures, f"{len(failures)} calls failed while workers were recycled: " \
                         f"{failures[:5]}"
    now = set(wait_for_workers(master, 2, 10.0))
    assert not now & first, f"the workers were not recycled: {first} -> {now}"


def _slow_request(base_url: str, body: bytes, step: int, pause: float,
                  stall_after: int | None = None) -> socket.socket:
    """A raw connection that sends the headers, then ``step`` bytes every ``pause`` s.

    With ``stall_after``, it stops sending after that many body bytes (and keeps the
    connection open). Returns the socket, with the body sent (or the stall reached).
    """
    port = int(base_url.rsplit(":", 1)[1])
    sock = socket.create_connection((HOST, port), timeout=10.0)
    sock.sendall(b"POST /v1/fit HTTP/1.1\r\nHost: 127.0.0.1\r\n"
                 b"Content-Type: application/json\r\n"
                 + f"Content-Length: {len(body)}\r\n\r\n".encode())
    end = len(body) if stall_after is None else stall_after
    for i in range(0, end, step):
        sock.sendall(body[i:min(i + step, end)])
        time.sleep(pause)
    return sock


def _read_all(sock: socket.socket, seconds: float) -> bytes:
    """Read until the peer closes or ``seconds`` pass; a reset counts as a close."""
    deadline = time.monotonic() + seconds
    chunks = []
    while time.monotonic() < deadline:
        sock.settimeout(max(0.05, deadline - time.monotonic()))
        try:
            data = sock.recv(65536)
        except socket.timeout:
            break
        except ConnectionResetError:
            chunks.append(b"<reset>")
            break
        if not data:
            chunks.append(b"<closed>")
            break
        chunks.append(data)
    return b"".join(chunks)


def _other_callers_served(base_url: str, while_alive: threading.Thread,
                          reference: dict, max_calls: int = 200) -> list[float]:
    """Sequential small fits while ``while_alive`` runs; each must answer within 1 s."""
    seconds = []
    while while_alive.is_alive() and len(seconds) < max_calls:
        start = time.monotonic()
        reply = post(base_url, "/v1/fit", SMALL, timeout=5.0)
        elapsed = time.monotonic() - start
        assert reply.status == 200 and reply.json() == reference
        assert elapsed < 1.0, f"a call took {elapsed:.2f} s while one worker was tied up"
        seconds.append(elapsed)
        time.sleep(0.05)
    return seconds


def test_a_slow_client_does_not_stall_other_callers(start_server) -> None:
    server = start_server(label="slow-client")
    references = _references(server.base_url)
    body = matrix_body(8, 2, seed=13)  # ~400 bytes, sent 16 bytes every 0.2 s: ~5 s
    expected = post(server.base_url, "/v1/fit", body).json()
    holder: dict[str, socket.socket] = {}

    def trickle() -> None:
        holder["sock"] = _slow_request(server.base_url, body, step=16, pause=0.2)

    slow = threading.Thread(target=trickle, daemon=True)
    slow.start()
    time.sleep(0.5)  # the slow client has been accepted by one worker
    served_meanwhile = _other_callers_served(server.base_url, slow, references[1])
    slow.join(timeout=30.0)
    assert not slow.is_alive()
    assert len(served_meanwhile) >= 10, served_meanwhile

    sock = holder["sock"]
    try:
        raw = _read_all(sock, 10.0)
    finally:
        sock.close()
    head, _, payload = raw.partition(b"\r\n\r\n")
    assert head.startswith(b"HTTP/1.1 200"), raw[:300]
    assert json.loads(payload.replace(b"<closed>", b"")) == expected


def _problem_reply(raw: bytes) -> tuple[int, str, dict]:
    head, _, payload = raw.partition(b"\r\n\r\n")
    status = int(head.split(b" ", 2)[1])
    content_type = next((line.split(b":", 1)[1].strip().decode() for line in
                         head.split(b"\r\n") if line.lower().startswith(b"content-type:")), "")
    return status, content_type, json.loads(payload.replace(b"<closed>", b"")
                                            .replace(b"<reset>", b""))


def test_a_stalled_client_gets_a_408_naming_the_limit_and_the_worker_stays(
        start_server) -> None:
    limit = 1.5
    server = start_server(env={"LINFER_TIMEOUT": "10", "LINFER_MAX_REQUEST_SECONDS": str(limit)},
                          label="stalled-client")
    master = server.process.pid
    references = _references(server.base_url)
    before = set(wait_for_workers(master, 2, 10.0))
    body = matrix_body(8, 2, seed=14)
    started = time.monotonic()
    sock = _slow_request(server.base_url, body, step=len(body) // 2, pause=0.0,
                         stall_after=len(body) // 2)
    try:
        # Meanwhile the other worker answers.
        for _ in range(5):
            reply = post(server.base_url, "/v1/fit", SMALL, timeout=5.0)
            assert reply.status == 200 and reply.json() == references[1]
        raw = _read_all(sock, limit + 8)
    finally:
        sock.close()
    answered_after = time.monotonic() - started
    status, content_type, problem = _problem_reply(raw)
    assert status == 408 and content_type == "application/problem+json", raw[:300]
    assert problem["type"].endswith("/request_timeout")
    assert f"{limit:g} s (LINFER_MAX_REQUEST_SECONDS)" in problem["detail"]
    assert limit <= answered_after < limit + 5, answered_after
    # The worker was not restarted: the same two answer normally.
    assert set(worker_pids(master)) == before
    for _ in range(5):
        reply = post(server.base_url, "/v1/fit", SMALL)
        assert reply.status == 200 and reply.json() == references[1]
    print(f"\nstalled client answered 408 after {answered_after:.1f} s (limit {limit} s)")


def test_a_computation_past_the_limit_is_a_422_and_the_worker_stays(start_server) -> None:
    limit = 1.0
    # Every fit recomputed in extended precision, without the work bound: 20,000 x 8
    # takes about 3 s of mpmath.
    server = start_server(env={"LINFER_TIMEOUT": "10", "LINFER_MAX_REQUEST_SECONDS": str(limit),
                               "LINFER_EXTENDED_BELOW_DIGITS": "16",
                               "LINFER_EXTENDED_MAX_WORK": "1000000000"},
                          label="slow-computation")
    master = server.process.pid
    before = set(wait_for_workers(master, 2, 10.0))
    small = post(server.base_url, "/v1/fit", SMALL)
    assert small.status == 200
    started = time.monotonic()
    reply = post(server.base_url, "/v1/fit", matrix_body(20_000, 8, seed=15), timeout=15.0)
    took = time.monotonic() - started
    assert reply.status == 422, reply.body[:300]
    problem = reply.json()
    assert problem["type"].endswith("/time_limit_exceeded")
    assert f"{limit:g} s (LINFER_MAX_REQUEST_SECONDS)" in problem["detail"]
    assert took < limit + 3, took
    assert set(worker_pids(master)) == before
    again = post(server.base_url, "/v1/fit", SMALL)
    assert again.status == 200 and again.json() == small.json()


def test_a_request_limit_not_below_the_worker_timeout_is_refused_at_start(
        tmp_path) -> None:
    import subprocess
    import sys

    env = {**os.environ, "LINFER_TIMEOUT": "5", "LINFER_MAX_REQUEST_SECONDS": "5",
           "LINFER_BIND": f"{HOST}:0"}
    done = subprocess.run([sys.executable, "-m", "service.cli", "serve"], env=env,
                          capture_output=True, text=True, timeout=60, cwd=tmp_path)
    assert done.returncode != 0
    assert "LINFER_MAX_REQUEST_SECONDS=5 must be below the worker timeout LINFER_TIMEOUT=5" \
        in done.stderr + done.stdout
