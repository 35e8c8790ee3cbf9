"""Replicas behind a load balancer, without containers: the topology of docker/compose.yaml.

Two ``linfer serve --workers 1`` (gunicorn) on free loopback ports play linfer-a and
linfer-b; Debian's nginx (/usr/sbin/nginx, skipped when absent) runs docker/nginx.conf
with only its place-naming lines rewritten to loopback (see the head of that file) on a
third port, as the current user, with every path inside the test's temp directory.

Through nginx: 200 POST /v1/fit of the demo body from 4 threads; both replicas answer
(each replica's own access log on its stderr names the request ids it served), every
answer is a 200 identical to one direct call, and when replica B is SIGKILLed (its whole
process group: gunicorn master and worker) in the middle of the run, every request sent
after the kill succeeds through replica A; only requests in flight at the kill may fail.

Only 127.0.0.1 is ever bound or contacted; every request has a 10 s timeout, the traffic
has a 60 s budget, and nginx and both servers are torn down at the end, even on failure.
"""

from __future__ import annotations

import concurrent.futures
import contextlib
import grp
import http.client
import json
import os
import pwd
import re
import signal
import subprocess
import sys
import threading
import time
import urllib.error
import urllib.request
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterator, Mapping

import pytest

from ._server import (HOST, OPENER, POLL_SECONDS, REPO, START_ATTEMPTS, STARTUP_SECONDS,
                      TERM_GRACE_SECONDS, Server, _healthy, free_port, server_env)

NGINX = Path("/usr/sbin/nginx")
NGINX_CONF = REPO / "docker" / "nginx.conf"
TABLE_FILE = REPO / "client_examples" / "data" / "warehouse_energy_table.json"

N_REQUESTS = 200
N_THREADS = 4
KILL_AFTER = 100          # replica B is killed once this many requests have been answered
REQUEST_TIMEOUT = 10.0
TRAFFIC_BUDGET_SECONDS = 60.0
LOG_WAIT_SECONDS = 5.0

DOCKERFILE = REPO / "docker" / "Dockerfile"
COMPOSE = REPO / "docker" / "compose.yaml"

pytestmark = pytest.mark.e2e


# --- the topology ----------------------------------------------------------------------

def loopback_config(text: str, prefix: Path, listen_port: int,
                    upstream_ports: tuple[int, int]) -> str:
    """docker/nginx.conf with its place-naming directives rewritten for this machine.

    Each rewrite must match exactly as often as expected (on directive lines, not in
    comments), so a change to the file that the test would silently miss fails here.
    """
    assert not re.search(r"[\s;'\"{}]", str(prefix)), f"unusable temp path {prefix}"
    if os.geteuid() == 0:
        # The master runs as root: run the workers as the invoking user, not `nginx`
        # (Debian has no such user).
        user = (f"user {pwd.getpwuid(os.getuid()).pw_name} "
                f"{grp.getgrgid(os.getgid()).gr_name};")
    else:
        user = ""  # not root: nginx cannot switch users, and the directive is ignored
    port_a, port_b = upstream_ports
    rewrites = [
        (r"^(\s*)user\s+nginx;", rf"\g<1>{user}", 1),
        (r"^(\s*)pid\s+\S+;", rf"\g<1>pid {prefix}/nginx.pid;", 1),
        (r"^(\s*)(\w+_temp_path\s+)/var/cache/nginx/", rf"\g<1>\g<2>{prefix}/", 5),
        (r"^(\s*)server\s+linfer-a:8000\b", rf"\g<1>server {HOST}:{port_a}", 1),
        (r"^(\s*)server\s+linfer-b:8000\b", rf"\g<1>server {HOST}:{port_b}", 1),
        (r"^(\s*)listen\s+8080;", rf"\g<1>listen {HOST}:{listen_port};", 1),
    ]
    for pattern, replacement, expected in rewrites:
        text, count = re.subn(pattern, replacement, text, flags=re.MULTILINE)
        assert count == expected, (f"{NGINX_CONF}: {pattern!r} matched {count} times, "
                                   f"expected {expected}; keep the file and this test in step")
    # Nothing else may name a place off this machine or outside the temp directory.
    for line in text.splitlines():
        code = line.split("#", 1)[0]
        assert not re.search(r"\blinfer-[ab]\b|/var/|\blisten\s+\d+;", code), line
    return text


@dataclass
class Topology:
    nginx: Server       # its stderr is nginx's error log
    replica_a: Server
    replica_b: Server

    @property
    def nginx_access_log(self) -> Path:
        return access_log_of(self.nginx)


def access_log_of(nginx: Server) -> Path:
    """nginx's stdout (`access_log /dev/stdout`), beside its stderr (`error_log stderr`)."""
    return nginx.stderr_path.with_name("access.log")


def _signal_group(process: subprocess.Popen, sig: int) -> None:
    # Only while the group leader is not reaped, so its pid still names our group.
    try:
        os.killpg(process.pid, sig)
    except (ProcessLookupError, PermissionError):
        pass


def _json_lines(text: str) -> list[dict[str, Any]]:
    docs = []
    for line in text.splitlines():
        line = line.strip()
        if line.startswith("{"):
            with contextlib.suppress(ValueError):
                docs.append(json.loads(line))
    return docs


def _wait_healthy(process: subprocess.Popen, base_url: str) -> str | None:
    """None once GET /healthz answers 200, else why not (exited, or no answer in 30 s)."""
    deadline = time.monotonic() + STARTUP_SECONDS
    while time.monotonic() < deadline:
        if process.poll() is not None:
            return f"exited with status {process.returncode} before answering"
        if _healthy(base_url):
            return None
        time.sleep(POLL_SECONDS)
    return f"did not answer GET /healthz within {STARTUP_SECONDS:.0f} s"


def _start_replica(tmp: Path, label: str) -> Server | str:
    """One ``linfer serve --workers 1`` on a free loopback port (as _server.start_once,
    which always starts 2 workers), with its own metrics and runtime directories."""
    port = free_port()
    base_url = f"http://{HOST}:{port}"
    stderr_path = tmp / f"{label}-{port}.stderr"
    out = open(tmp / f"{label}-{port}.stdout", "wb")
    err = open(stderr_path, "wb")
    runtime_dir = tmp / f"run-{label}-{port}"
    metrics_dir = tmp / f"metrics-{label}-{port}"
    runtime_dir.mkdir(mode=0o700)
    metrics_dir.mkdir(mode=0o700)
    env = server_env({"XDG_RUNTIME_DIR": str(runtime_dir),
                      "PROMETHEUS_MULTIPROC_DIR": str(metrics_dir)})
    cmd = [sys.executable, "-m", "service.cli", "serve",
           "--bind", f"{HOST}:{port}", "--workers", "1"]
    try:
        process = subprocess.Popen(cmd, cwd=REPO, env=env, stdin=subprocess.DEVNULL,
                                   stdout=out, stderr=err, start_new_session=True)
    except BaseException:
        out.close()
        err.close()
        raise
    server = Server(base_url, process, stderr_path, [out, err])
    try:
        reason = _wait_healthy(process, base_url)
    except BaseException:
        server.stop()
        raise
    if reason is None:
        return server
    server.stop()
    return f"{' '.join(cmd)}\n  {reason}\n--- stderr ---\n{server.stderr()}--- end ---"


def _replica(tmp: Path, label: str) -> Server:
    failures = []
    for _ in range(START_ATTEMPTS):
        result = _start_replica(tmp, label)
        if isinstance(result, Server):
            return result
        failures.append(result)
    pytest.fail(f"replica {label} did not start:\n" + "\n\n".join(failures), pytrace=False)


def _start_nginx(tmp: Path, upstream_ports: tuple[int, int]) -> Server | str:
    port = free_port()
    prefix = tmp / f"nginx-{port}"
    prefix.mkdir()
    conf = prefix / "nginx.conf"
    conf.write_text(loopback_config(NGINX_CONF.read_text(), prefix, port, upstream_ports))
    error_log_path = prefix / "error.log"
    cmd = [str(NGINX), "-e", "stderr", "-p", str(prefix), "-c", str(conf),
           "-g", "daemon off;"]
    check = subprocess.run([*cmd[:-2], "-t"], capture_output=True, timeout=10,
                           stdin=subprocess.DEVNULL)
    if check.returncode != 0:
        pytest.fail(f"nginx -t rejects the loopback variant of {NGINX_CONF}:\n"
                    f"{check.stderr.decode(errors='replace')}", pytrace=False)
    out = open(error_log_path.with_name("access.log"), "wb")
    err = open(error_log_path, "wb")
    try:
        process = subprocess.Popen(cmd, cwd=prefix, stdin=subprocess.DEVNULL, stdout=out,
                                   stderr=err, start_new_session=True)
    except BaseException:
        out.close()
        err.close()
        raise
    # Server.stop: SIGTERM (nginx's fast shutdown) to the group, SIGKILL after 10 s.
    nginx = Server(f"http://{HOST}:{port}", process, error_log_path, [out, err])
    try:
        reason = _wait_healthy(process, nginx.base_url)  # through nginx: a replica answered
    except BaseException:
        nginx.stop()
        raise
    if reason is None:
        return nginx
    nginx.stop()
    return f"{' '.join(cmd)}\n  {reason}\n--- stderr ---\n{nginx.stderr()}--- end ---"


@pytest.fixture(scope="module")
def topology(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Topology]:
    if not os.access(NGINX, os.X_OK):
        pytest.skip(f"{NGINX} not installed (Debian package nginx, listed in "
                    ".ci/system-packages.txt)")
    tmp = tmp_path_factory.mktemp("replicas")
    with contextlib.ExitStack() as stack:
        started = time.monotonic()
        # Both replicas start at once (each takes a second or two to import the stack).
        with concurrent.futures.ThreadPoolExecutor(max_workers=2) as pool:
            futures = [pool.submit(_replica, tmp, label) for label in ("a", "b")]
            concurrent.futures.wait(futures)
        for future in futures:  # register every started one for teardown, then fail
            if future.exception() is None:
                stack.callback(future.result().stop)
        replica_a, replica_b = (f.result() for f in futures)
        ports = (int(replica_a.base_url.rsplit(":", 1)[1]),
                 int(replica_b.base_url.rsplit(":", 1)[1]))
        failures = []
        for _ in range(START_ATTEMPTS):
            result = _start_nginx(tmp, ports)
            if isinstance(result, Server):
                stack.callback(result.stop)
                break
            failures.append(result)
        else:
            pytest.fail("nginx did not start:\n" + "\n\n".join(failures), pytrace=False)
        print(f"\ntopology up in {time.monotonic() - started:.1f} s: nginx {result.base_url}"
              f" -> A {replica_a.base_url}, B {replica_b.base_url}")
        yield Topology(result, replica_a, replica_b)


# --- requests --------------------------------------------------------------------------

@dataclass
class Outcome:
    index: int
    request_id: str
    started: float
    finished: float
    status: int | None          # None: no HTTP answer (connection error, timeout)
    body: bytes = b""
    error: str = ""
    headers: Mapping[str, str] = field(default_factory=dict)


def post(url: str, body: bytes, request_id: str | None, index: int = 0) -> Outcome:
    headers = {"Content-Type": "application/json"}
    if request_id is not None:
        headers["X-Request-ID"] = request_id
    req = urllib.request.Request(url, data=body, method="POST", headers=headers)
    started = time.monotonic()
    try:
        with OPENER.open(req, timeout=REQUEST_TIMEOUT) as resp:
            return Outcome(index, request_id or "", started, time.monotonic(), resp.status,
                           resp.read(), headers=resp.headers)
    except urllib.error.HTTPError as exc:
        with exc:
            return Outcome(index, request_id or "", started, time.monotonic(), exc.code,
                           exc.read(), headers=exc.headers)
    except (urllib.error.URLError, OSError, http.client.HTTPException) as exc:
        # No (complete) answer: refused, reset, timed out, or cut off after the headers.
        return Outcome(index, request_id or "", started, time.monotonic(), None,
                       error=repr(exc))


def get(url: str) -> tuple[int, str, bytes]:
    try:
        with OPENER.open(url, timeout=REQUEST_TIMEOUT) as resp:
            return resp.status, resp.headers.get_content_type(), resp.read()
    except urllib.error.HTTPError as exc:
        with exc:
            return exc.code, exc.headers.get_content_type(), exc.read()


def served_ids(server: Server) -> dict[str, dict[str, Any]]:
    """Request id -> the replica's own access-log line (JSON lines on its stderr)."""
    return {doc["request_id"]: doc for doc in _json_lines(server.stderr())
            if "request_id" in doc and "endpoint" in doc}


def wait_for_nginx_log(nginx: Server, ids: set[str]) -> dict[str, dict[str, Any]]:
    """nginx writes its access-log line just after the answer: wait (bounded) for all."""
    deadline = time.monotonic() + LOG_WAIT_SECONDS
    while True:
        text = access_log_of(nginx).read_text(errors="replace")
        lines = {doc.get("request_id"): doc for doc in _json_lines(text)}
        if ids <= lines.keys() or time.monotonic() > deadline:
            return lines
        time.sleep(POLL_SECONDS)


def port_of(server: Server) -> str:
    return server.base_url.removeprefix("http://")


# --- tests -----------------------------------------------------------------------------

def test_the_balancer_passes_request_ids_and_answers_its_own_errors_as_problems(
        topology: Topology) -> None:
    # Runs whether or not replica B is still alive (the other test kills it).
    nginx, a, b = topology.nginx, topology.replica_a, topology.replica_b
    body = TABLE_FILE.read_bytes()

    given = post(nginx.base_url + "/v1/fit", body, "edge-given-1")
    assert given.status == 200, given.error or given.body[:300]
    assert given.headers.get("X-Request-ID") == "edge-given-1"

    generated = {}
    for label, sent in (("absent", None), ("invalid", "not a valid id!")):
        answer = post(nginx.base_url + "/v1/fit", body, sent)
        assert answer.status == 200, answer.error or answer.body[:300]
        rid = answer.headers.get("X-Request-ID", "")
        assert re.fullmatch(r"[0-9a-f]{32}", rid), (label, rid)
        generated[label] = rid
    # The id was made by nginx ($request_id, in its access log), not by the replica.
    log = wait_for_nginx_log(nginx, {"edge-given-1", *generated.values()})
    for rid in ("edge-given-1", *generated.values()):
        assert rid in log, f"{rid} not in nginx's access log"
        assert rid in served_ids(a) or rid in served_ids(b), f"{rid} reached no replica"

    # A body over 64 MiB is refused by nginx from its Content-Length, before it is sent.
    conn = http.client.HTTPConnection(HOST, int(nginx.base_url.rsplit(":", 1)[1]),
                                      timeout=REQUEST_TIMEOUT)
    try:
        conn.putrequest("POST", "/v1/fit")
        conn.putheader("Content-Type", "application/json")
        conn.putheader("Content-Length", str(64 * 1024 * 1024 + 1))
        conn.endheaders()
        started = time.monotonic()
        resp = conn.getresponse()
        doc = json.loads(resp.read())
        assert time.monotonic() - started < 5
    finally:
        conn.close()
    assert resp.status == 413
    assert resp.headers.get_content_type() == "application/problem+json"
    assert doc["status"] == 413 and doc["type"].endswith("/content_too_large"), doc
    assert re.fullmatch(r"[0-9a-f]{32}", resp.headers.get("X-Request-ID", ""))

    # Metrics are per replica: not through the balancer, on each replica's own port.
    status, content_type, _ = get(nginx.base_url + "/metrics")
    assert (status, content_type) == (404, "application/problem+json")
    status, _, text = get(a.base_url + "/metrics")
    assert status == 200 and b"linfer_requests_total" in text

    # No body in the balancer's log.
    raw = topology.nginx_access_log.read_text()
    assert "kwh" not in raw and "temp_c" not in raw


def test_two_replicas_share_the_load_and_one_survives_the_other(topology: Topology) -> None:
    nginx, a, b = topology.nginx, topology.replica_a, topology.replica_b
    body = TABLE_FILE.read_bytes()
    direct = post(a.base_url + "/v1/fit", body, "direct-0")
    assert direct.status == 200, direct.error or direct.body[:300]
    expected = json.loads(direct.body)

    answered = 0
    answered_lock = threading.Lock()
    kill_now = threading.Event()
    start = time.monotonic()
    deadline = start + TRAFFIC_BUDGET_SECONDS

    def one(i: int) -> Outcome | None:
        nonlocal answered
        if time.monotonic() > deadline:
            return None  # over budget: not sent (the test fails below)
        outcome = post(nginx.base_url + "/v1/fit", body, f"replicas-{i:03d}", i)
        with answered_lock:
            answered += 1
            if answered == KILL_AFTER:
                kill_now.set()
        return outcome

    pool = concurrent.futures.ThreadPoolExecutor(max_workers=N_THREADS)
    try:
        futures = [pool.submit(one, i) for i in range(N_REQUESTS)]
        assert kill_now.wait(timeout=TRAFFIC_BUDGET_SECONDS), "traffic never reached the kill"
        # Replica B dies like a crashed machine: SIGKILL to its master and its worker.
        kill_started = time.monotonic()
        _signal_group(b.process, signal.SIGKILL)
        b.process.wait(timeout=TERM_GRACE_SECONDS)
        kill_done = time.monotonic()
        outcomes = [f.result(timeout=TRAFFIC_BUDGET_SECONDS + 2 * REQUEST_TIMEOUT)
                    for f in futures]
    finally:
        pool.shutdown(wait=True, cancel_futures=True)
    elapsed = time.monotonic() - start

    not_sent = [i for i, o in enumerate(outcomes) if o is None]
    assert not not_sent, f"{len(not_sent)} requests not sent within {TRAFFIC_BUDGET_SECONDS} s"
    sent: list[Outcome] = [o for o in outcomes if o is not None]
    before = [o for o in sent if o.finished < kill_started]
    in_flight = [o for o in sent if o.started <= kill_done and o.finished >= kill_started]
    after = [o for o in sent if o.started > kill_done]
    failed = [o for o in sent if o.status != 200]

    by_a, by_b = served_ids(a), served_ids(b)
    nginx_log = wait_for_nginx_log(nginx, {o.request_id for o in sent if o.status is not None})
    retried = [rid for rid, doc in nginx_log.items()
               if rid.startswith("replicas-") and "," in doc.get("upstream_addr", "")]
    print(f"\n{len(sent)} requests in {elapsed:.1f} s from {N_THREADS} threads; "
          f"before the kill {len(before)} (A {sum(o.request_id in by_a for o in before)}, "
          f"B {sum(o.request_id in by_b for o in before)}), in flight {len(in_flight)}, "
          f"after {len(after)}; failed {len(failed)}; retried by nginx {len(retried)}; "
          f"kill took {1000 * (kill_done - kill_started):.0f} ms"
          + "".join(f"\n  failed {o.request_id}: {o.status} {o.error[:100]}" for o in failed))

    # Failures only among the few in flight at the kill, never before or after.
    in_flight_ids = {o.request_id for o in in_flight}
    unexpected = [o for o in failed if o.request_id not in in_flight_ids]
    assert not unexpected, [(o.request_id, o.status, o.error or o.body[:200])
                            for o in unexpected[:5]]
    # Each thread has one request at a time, so at most N_THREADS met the kill itself
    # (the window counts everything sent while the kill and reaping took, some ms).
    assert len(failed) <= N_THREADS, [(o.request_id, o.status, o.error) for o in failed]
    assert len(after) >= (N_REQUESTS - KILL_AFTER) // 2, "too few requests after the kill"

    # Every answer is identical, number for number, to the direct one.
    for o in sent:
        if o.status == 200:
            assert json.loads(o.body) == expected, f"{o.request_id} differs from the direct fit"
            assert o.headers.get("X-Request-ID") == o.request_id

    # Both replicas served a fair share before the kill (nginx round-robin); each answer
    # came from the replica nginx logged for it (the last address of its upstream_addr).
    share_a = sum(o.request_id in by_a for o in before)
    share_b = sum(o.request_id in by_b for o in before)
    assert share_a >= len(before) // 4 and share_b >= len(before) // 4, (share_a, share_b)
    for o in sent:
        if o.status != 200:
            continue
        line = nginx_log.get(o.request_id)
        assert line is not None, f"{o.request_id} not in nginx's access log"
        last = line["upstream_addr"].split(", ")[-1]
        server = by_a if last == port_of(a) else by_b if last == port_of(b) else None
        assert server is not None and o.request_id in server, (o.request_id, line)
        assert server[o.request_id]["status"] == 200

    # After the kill, replica A alone answered, and B is gone for good.
    assert all(o.request_id in by_a and o.request_id not in by_b for o in after)
    assert b.process.poll() is not None
    assert _healthy(nginx.base_url) and _healthy(a.base_url) and not _healthy(b.base_url)


# --- the container files, checked without a Docker engine ------------------------------

def dockerfile_instructions() -> list[tuple[str, str]]:
    """(INSTRUCTION, arguments) of docker/Dockerfile, continuation lines joined."""
    logical, current = [], ""
    for line in DOCKERFILE.read_text().splitlines():
        if not current and (not line.strip() or line.lstrip().startswith("#")):
            continue
        current += line.rstrip()
        if current.endswith("\\"):
            current = current[:-1] + " "
            continue
        logical.append(current.strip())
        current = ""
    return [(ins.split(None, 1)[0].upper(), ins.split(None, 1)[1]) for ins in logical]


def healthcheck_command() -> list[str]:
    [args] = [a for ins, a in dockerfile_instructions() if ins == "HEALTHCHECK"]
    match = re.search(r"\bCMD\s+(\[.*\])\s*$", args)
    assert match, f"HEALTHCHECK of {DOCKERFILE} is not in exec form: {args}"
    return json.loads(match.group(1))


def test_compose_dockerfile_and_nginx_config_name_the_same_places() -> None:
    import yaml  # PyYAML comes with openapi-spec-validator (the test extra)

    compose = yaml.safe_load(COMPOSE.read_text())
    services = compose["services"]
    assert {"linfer-a", "linfer-b", "nginx"} <= services.keys()
    for name in ("linfer-a", "linfer-b"):
        build = services[name]["build"]
        assert (COMPOSE.parent / build["context"] / build["dockerfile"]).resolve() == DOCKERFILE
        assert "ports" not in services[name], f"{name} must be reached through nginx only"
    nginx = services["nginx"]
    assert "8080:8080" in nginx["ports"]
    [mount] = [v for v in nginx["volumes"] if v.split(":")[1] == "/etc/nginx/nginx.conf"]
    assert (COMPOSE.parent / mount.split(":")[0]).resolve() == NGINX_CONF
    assert set(nginx["depends_on"]) == {"linfer-a", "linfer-b"}

    instructions = dockerfile_instructions()
    env = " ".join(a for ins, a in instructions if ins == "ENV")
    bind = re.search(r"\bLINFER_BIND=(\S+)", env)
    assert bind and bind.group(1) == "0.0.0.0:8000", env
    assert ("EXPOSE", "8000") in instructions
    assert instructions[0] == ("FROM", "python:3.11-slim")
    [user] = [a for ins, a in instructions if ins == "USER"]
    assert user.split(":")[0] not in ("root", "0"), user
    [cmd] = [json.loads(a) for ins, a in instructions if ins == "CMD"]
    assert cmd[:3] == ["gunicorn", "-c", "python:service.gunicorn_config"], cmd
    assert cmd[-1] == "service.app:create_app()", cmd
    assert any(ins == "RUN" and "pip install ." in a for ins, a in instructions)

    # The upstream lines of nginx.conf are exactly the two replicas, on the image's port;
    # nginx listens on the container side of the published port.
    conf = NGINX_CONF.read_text()
    servers = re.findall(r"^\s*server\s+([^\s;{]+)", conf, flags=re.MULTILINE)
    assert sorted(servers) == ["linfer-a:8000", "linfer-b:8000"], servers
    assert re.findall(r"^\s*listen\s+(\S+);", conf, flags=re.MULTILINE) == ["8080"]
    # The body limit is the service's default (service/settings.py).
    from service.settings import Settings
    size = re.search(r"^\s*client_max_body_size\s+(\d+)m;", conf, flags=re.MULTILINE)
    assert size and int(size.group(1)) * 1024 * 1024 == Settings().max_body_bytes


def test_the_image_healthcheck_command_probes_healthz(served: Server) -> None:
    command = healthcheck_command()
    assert command[:2] == ["python", "-c"] and "/healthz" in command[2], command
    probe = [sys.executable, *command[1:]]
    # A proxy in the environment must not be used for loopback (this one is dead).
    env = {**server_env(), "http_proxy": f"http://{HOST}:9", "HTTP_PROXY": f"http://{HOST}:9"}
    alive = subprocess.run(probe, env={**env, "LINFER_BIND": served.base_url[7:]},
                           capture_output=True, timeout=15, stdin=subprocess.DEVNULL)
    assert alive.returncode == 0, alive.stderr.decode(errors="replace")
    dead = subprocess.run(probe, env={**env, "LINFER_BIND": f"0.0.0.0:{free_port()}"},
                          capture_output=True, timeout=15, stdin=subprocess.DEVNULL)
    assert dead.returncode != 0
