"""Running the service for real: ``linfer serve`` (gunicorn) on a loopback port.

Every server is started as its own process group (``start_new_session=True``) and is
always torn down at the end of the session: SIGTERM to the group, then SIGKILL after
10 s. Only 127.0.0.1 is ever bound or contacted. A server that does not answer
GET /healthz within 30 s fails the tests that need it, with its stderr shown.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Mapping

REPO = Path(__file__).resolve().parents[2]
HOST = "127.0.0.1"
STARTUP_SECONDS = 30.0
POLL_SECONDS = 0.1
TERM_GRACE_SECONDS = 10.0
START_ATTEMPTS = 3  # a free port can be taken between probing it and gunicorn binding it

# A direct opener: no proxy from the environment is ever used for the loopback server.
OPENER = urllib.request.build_opener(urllib.request.ProxyHandler({}))


def free_port() -> int:
    """A port that was free on 127.0.0.1 a moment ago (the OS picks it)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind((HOST, 0))
        return sock.getsockname()[1]


def server_env(extra: Mapping[str, str] | None = None) -> dict[str, str]:
    """The environment of a server: ours without any LINFER_* setting, plus ``extra``."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("LINFER_")}
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(REPO), env.get("PYTHONPATH")) if p)
    env["PYTHONUNBUFFERED"] = "1"
    env.update(extra or {})
    return env


@dataclass
class Server:
    """One running ``linfer serve``; ``base_url`` is ``http://127.0.0.1:<port>``."""

    base_url: str
    process: subprocess.Popen
    stderr_path: Path
    _files: list[IO[bytes]] = field(default_factory=list)

    def stderr(self) -> str:
        try:
            return self.stderr_path.read_text(errors="replace")
        except OSError as err:  # pragma: no cover - diagnostic only
            return f"<stderr unreadable: {err}>"

    def stop(self) -> None:
        """SIGTERM the process group, SIGKILL it after 10 s; close the log files."""
        try:
            if self.process.poll() is None:
                _signal_group(self.process, signal.SIGTERM)
                try:
                    self.process.wait(timeout=TERM_GRACE_SECONDS)
                except subprocess.TimeoutExpired:
                    _signal_group(self.process, signal.SIGKILL)
                    self.process.wait(timeout=TERM_GRACE_SECONDS)
        finally:
            for f in self._files:
                f.close()
            self._files.clear()


def _signal_group(process: subprocess.Popen, sig: int) -> None:
    # Only called while the session leader is not yet reaped, so its pid still names
    # our group and never another process's.
    try:
        os.killpg(process.pid, sig)
    except (ProcessLookupError, PermissionError):
        pass


def _healthy(base_url: str) -> bool:
    try:
        with OPENER.open(base_url + "/healthz", timeout=2) as resp:
            return resp.status == 200
    except (urllib.error.URLError, OSError):
        return False


def start_once(tmp: Path, env_extra: Mapping[str, str] | None, label: str) -> Server | str:
    """Start one server; return it when healthy, or a description of the failure."""
    port = free_port()
    base_url = f"http://{HOST}:{port}"
    stderr_path = tmp / f"{label}-{port}.stderr"
    stdout_path = tmp / f"{label}-{port}.stdout"
    out = open(stdout_path, "wb")
    err = open(stderr_path, "wb")
    # gunicorn's control socket defaults to one path per user ($HOME/.gunicorn/gunicorn.ctl):
    # give each test server its own, so servers never share or remove another's socket.
    runtime_dir = tmp / f"run-{label}-{port}"
    runtime_dir.mkdir(mode=0o700)
    env = server_env({**(env_extra or {}), "XDG_RUNTIME_DIR": str(runtime_dir)})
    cmd = [sys.executable, "-m", "service.cli", "serve",
           "--bind", f"{HOST}:{port}", "--workers", "2"]
    try:
        process = subprocess.Popen(cmd, cwd=REPO, env=env,
                                   stdin=subprocess.DEVNULL, stdout=out, stderr=err,
                                   start_new_session=True)
    except BaseException:
        out.close()
        err.close()
        raise
    server = Server(base_url, process, stderr_path, [out, err])
    deadline = time.monotonic() + STARTUP_SECONDS
    try:
        while time.monotonic() < deadline:
            if process.poll() is not None:
                reason = f"exited with status {process.returncode} before answering"
                break
            if _healthy(base_url):
                return server
            time.sleep(POLL_SECONDS)
        else:
            reason = f"did not answer GET /healthz within {STARTUP_SECONDS:.0f} s"
    except BaseException:
        server.stop()
        raise
    server.stop()
    return (f"{' '.join(cmd)}\n  {reason}\n--- server stderr ---\n{server.stderr()}"
            f"--- end of stderr ---")
