"""The ``linfer`` command line, as a subprocess (bounded by a timeout)."""

from __future__ import annotations

import subprocess
import sys

import pytest

from ._server import REPO, server_env

pytestmark = pytest.mark.e2e


def test_serve_help_lists_bind_workers_and_timeout() -> None:
    done = subprocess.run([sys.executable, "-m", "service.cli", "serve", "--help"],
                          cwd=REPO, env=server_env(), capture_output=True, text=True,
                          timeout=30, stdin=subprocess.DEVNULL)
    assert done.returncode == 0, done.stderr
    for flag in ("--bind", "--workers", "--timeout"):
        assert flag in done.stdout, done.stdout
