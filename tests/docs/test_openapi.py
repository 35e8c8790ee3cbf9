"""The contract, the code and the README stay in step."""

from __future__ import annotations

import re
from dataclasses import fields
from pathlib import Path

import yaml
from openapi_spec_validator import validate

from service.app import create_app
from service.settings import Settings

ROOT = Path(__file__).resolve().parents[2]
SPEC_TEXT = (ROOT / "openapi" / "linfer.yaml").read_text()
SPEC = yaml.safe_load(SPEC_TEXT)
README = (ROOT / "README.md").read_text()


def test_the_description_is_valid_openapi_3_1():
    # Source: the OpenAPI 3.1 specification, as openapi-spec-validator checks it.
    assert SPEC["openapi"].startswith("3.1")
    validate(SPEC)


def test_the_service_serves_the_description_it_ships():
    served = create_app().test_client().get("/openapi.yaml")
    assert served.status_code == 200
    assert served.get_data(as_text=True) == SPEC_TEXT


def test_every_route_is_in_the_description_and_back():
    app = create_app()
    routes = {r.rule for r in app.url_map.iter_rules() if r.endpoint != "static"}
    assert routes == set(SPEC["paths"])


def test_every_warning_code_the_code_emits_is_documented():
    codes = set()
    for path in (ROOT / "service").rglob("*.py"):
        text = path.read_text()
        codes |= set(re.findall(r'Notice\(\s*"([a-z_]+)"', text))
        codes |= set(re.findall(r'"code": "([a-z_]+)"', text))
    documented = SPEC["components"]["schemas"]["Warning"]["properties"]["code"]["description"]
    missing = sorted(c for c in codes if c not in documented)
    assert codes and not missing, missing


def test_every_setting_is_in_the_readme_table():
    for f in fields(Settings):
        assert f"`LINFER_{f.name.upper()}`" in README, f.name


def test_every_environment_variable_read_is_in_the_readme_table():
    # The service's settings and the server's (gunicorn_config.py) alike.
    read = set()
    for path in (ROOT / "service").rglob("*.py"):
        read |= set(re.findall(r'environ(?:\.get)?\(\s*"(LINFER_[A-Z_]+)"', path.read_text()))
        read |= set(re.findall(r'environ\[\s*"(LINFER_[A-Z_]+)"\s*\]', path.read_text()))
    table = set(re.findall(r"^\| `(LINFER_[A-Z_]+)` \|", README, re.MULTILINE))
    assert {"LINFER_BIND", "LINFER_WORKERS", "LINFER_TIMEOUT"} <= read
    assert read <= table, sorted(read - table)
