"""Shared fixtures: the app built by the factory, its test client, and the demo request body."""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

from service.app import create_app

REPO_ROOT = Path(__file__).resolve().parents[1]
DEMO_TABLE = REPO_ROOT / "client_examples" / "data" / "warehouse_energy_table.json"

# Settings the api tests run under: the defaults, with a row limit low enough to reach.
TEST_SETTINGS = {"max_rows": 5000}


@pytest.fixture
def clean_env(monkeypatch):
    """No LINFER_* variable of the developer's shell leaks into the app under test."""
    for name in list(os.environ):
        if name.startswith("LINFER_"):
            monkeypatch.delenv(name)
    return monkeypatch


@pytest.fixture
def app(clean_env):
    """The app from the factory, with :data:`TEST_SETTINGS` overlaid on the defaults."""
    application = create_app(dict(TEST_SETTINGS))
    application.config["TESTING"] = True
    return application


@pytest.fixture
def client(app):
    return app.test_client()


@pytest.fixture
def demo_table():
    """client_examples/data/warehouse_energy_table.json: a /v1/fit body in the table layout."""
    with DEMO_TABLE.open(encoding="utf-8") as fh:
        return json.load(fh)


@pytest.fixture(autouse=True)
def contract_checked_clients(monkeypatch):
    """Every Flask test client in the suite validates its responses against the contract."""
    from flask import Flask

    from contract import ContractClient

    monkeypatch.setattr(Flask, "test_client_class", ContractClient)
