"""The static security lint (ruff's flake8-bandit rules, "S") finds nothing in service/."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


def test_no_security_findings_in_the_service():
    ruff = shutil.which("ruff") or str(Path(sys.executable).parent / "ruff")
    if not Path(ruff).exists():
        pytest.skip("ruff is not installed (pip install -e '.[test]' installs it)")
    done = subprocess.run([ruff, "check", "--select", "S", "--no-cache", "service"],
                          cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stdout + done.stderr
