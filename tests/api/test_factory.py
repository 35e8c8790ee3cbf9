"""The application factory honours its settings; request ids; liveness and readiness."""

from __future__ import annotations

import json
import re

import pytest

from service import settings as settings_module
from service.app import create_app
from service.settings import Settings, SettingsError

PROBLEM = "application/problem+json"
SMALL_BODY = {"design_matrix": [[1.0], [2.0], [4.0], [3.0]], "response": [1.0, 2.0, 2.5, 4.0]}


def _post(client, body, **kwargs):
    return client.post("/v1/fit", data=json.dumps(body), content_type="application/json",
                       **kwargs)


# --- settings -------------------------------------------------------------------------

def test_factory_applies_the_settings_mapping(app):
    resolved = app.config["LINFER_SETTINGS"]
    assert isinstance(resolved, Settings)
    assert resolved.max_rows == 5000
    assert resolved.max_columns == Settings().max_columns  # untouched fields keep defaults
    assert app.config["MAX_CONTENT_LENGTH"] == resolved.max_body_bytes


def test_factory_accepts_a_settings_object(clean_env):
    given = Settings(max_rows=7)
    app = create_app(given)
    assert app.config["LINFER_SETTINGS"] is given


def test_factory_rejects_unknown_setting_names(clean_env):
    with pytest.raises(SettingsError, match="max_rowz"):
        create_app({"max_rowz": 10})


def test_small_max_body_bytes_gives_413_naming_the_limit(clean_env):
    app = create_app({"max_body_bytes": 200})
    body = {"design_matrix": [[float(i)] for i in range(50)],
            "response": [float(i) for i in range(50)]}
    raw = json.dumps(body)
    assert len(raw) > 200
    resp = app.test_client().post("/v1/fit", data=raw, content_type="application/json")
    assert resp.status_code == 413
    assert resp.mimetype == PROBLEM
    doc = resp.get_json(force=True)
    assert doc["status"] == 413
    assert {"type", "title", "status", "detail", "errors"} <= set(doc)
    assert "200 bytes" in doc["detail"]
    assert "LINFER_MAX_BODY_BYTES" in doc["detail"]


def test_body_under_max_body_bytes_is_served(clean_env):
    raw = json.dumps(SMALL_BODY)
    app = create_app({"max_body_bytes": len(raw)})
    resp = app.test_client().post("/v1/fit", data=raw, content_type="application/json")
    assert resp.status_code == 200, resp.get_data(as_text=True)


def test_factory_reads_linfer_environment(clean_env):
    clean_env.setenv("LINFER_MAX_ROWS", "3")
    app = create_app()
    assert app.config["LINFER_SETTINGS"].max_rows == 3
    resp = _post(app.test_client(), SMALL_BODY)  # 4 rows
    assert resp.status_code == 422
    doc = resp.get_json(force=True)
    assert any("LINFER_MAX_ROWS" in e["message"] and "4 rows" in e["message"]
               for e in doc["errors"])


def test_mapping_overlays_the_environment(clean_env):
    clean_env.setenv("LINFER_MAX_ROWS", "3")
    clean_env.setenv("LINFER_MAX_LEVELS", "4")
    resolved = create_app({"max_rows": 99}).config["LINFER_SETTINGS"]
    assert resolved.max_rows == 99
    assert resolved.max_levels == 4


def test_load_reads_every_field():
    environ = {"LINFER_MAX_BODY_BYTES": "1000", "LINFER_MAX_ROWS": "10",
               "LINFER_MAX_COLUMNS": "3", "LINFER_MAX_CELLS": "30", "LINFER_MAX_LEVELS": "2",
               "LINFER_EXTENDED_MAX_WORK": "50", "LINFER_EXTENDED_BELOW_DIGITS": "9.5"}
    s = settings_module.load(environ)
    assert s == Settings(max_body_bytes=1000, max_rows=10, max_columns=3, max_cells=30,
                         max_levels=2, extended_max_work=50, extended_below_digits=9.5)


def test_load_ignores_unset_and_empty_variables():
    assert settings_module.load({"LINFER_MAX_ROWS": "", "OTHER": "x"}) == Settings()


@pytest.mark.parametrize("name, raw", [
    ("LINFER_MAX_ROWS", "many"),
    ("LINFER_MAX_ROWS", "1.5"),
    ("LINFER_MAX_ROWS", "1e6"),
    ("LINFER_MAX_ROWS", "0"),
    ("LINFER_MAX_ROWS", "-5"),
    ("LINFER_MAX_BODY_BYTES", "64MB"),
    ("LINFER_MAX_COLUMNS", "-1"),
    ("LINFER_MAX_CELLS", "0"),
    ("LINFER_MAX_LEVELS", "ten"),
    ("LINFER_EXTENDED_MAX_WORK", "-1"),
    ("LINFER_EXTENDED_BELOW_DIGITS", "fourteen"),
    ("LINFER_EXTENDED_BELOW_DIGITS", "-2"),
    ("LINFER_EXTENDED_BELOW_DIGITS", "0"),
    ("LINFER_EXTENDED_BELOW_DIGITS", "nan"),
])
def test_load_rejects_bad_values(name, raw):
    with pytest.raises(SettingsError) as info:
        settings_module.load({name: raw})
    assert name in str(info.value)


def test_factory_fails_on_a_bad_environment(clean_env):
    clean_env.setenv("LINFER_MAX_COLUMNS", "lots")
    with pytest.raises(SettingsError, match="LINFER_MAX_COLUMNS"):
        create_app()


# --- X-Request-ID ---------------------------------------------------------------------

def test_request_id_is_echoed(client):
    resp = client.get("/healthz", headers={"X-Request-ID": "abc-123.def:9_Z"})
    assert resp.headers["X-Request-ID"] == "abc-123.def:9_Z"


def test_request_id_is_echoed_on_errors(client):
    resp = client.post("/v1/fit", data="{", content_type="application/json",
                       headers={"X-Request-ID": "req-42"})
    assert resp.status_code == 400
    assert resp.headers["X-Request-ID"] == "req-42"
    resp = client.get("/no/such/path", headers={"X-Request-ID": "req-43"})
    assert resp.status_code == 404
    assert resp.headers["X-Request-ID"] == "req-43"


def test_request_id_is_generated_when_absent(client):
    first = client.get("/healthz").headers.get("X-Request-ID")
    second = client.get("/healthz").headers.get("X-Request-ID")
    assert first and second
    assert re.fullmatch(r"[A-Za-z0-9._:-]{8,128}", first)
    assert first != second


@pytest.mark.parametrize("given", ["has space", "x" * 129, "semi;colon", "new\u00e9"])
def test_unusable_request_id_is_replaced(client, given):
    got = client.get("/healthz", headers={"X-Request-ID": given}).headers["X-Request-ID"]
    assert got != given
    assert re.fullmatch(r"[A-Za-z0-9._:-]{8,128}", got)


def test_fit_answer_carries_a_request_id(client, demo_table):
    resp = _post(client, demo_table, headers={"X-Request-ID": "fit-1"})
    assert resp.status_code == 200
    assert resp.headers["X-Request-ID"] == "fit-1"


# --- operations -----------------------------------------------------------------------

def test_healthz(client):
    resp = client.get("/healthz")
    assert resp.status_code == 200
    assert resp.mimetype == "application/json"
    assert resp.get_json() == {"status": "ok"}


def test_readyz(client):
    resp = client.get("/readyz")
    assert resp.status_code == 200
    assert resp.mimetype == "application/json"
    assert resp.get_json() == {"status": "ready"}


def test_unknown_path_is_a_problem(client):
    resp = client.get("/v1/nothing")
    assert resp.status_code == 404
    assert resp.mimetype == PROBLEM
    assert resp.get_json(force=True)["status"] == 404


def test_wrong_method_is_a_problem(client):
    resp = client.get("/v1/fit")
    assert resp.status_code == 405
    assert resp.mimetype == PROBLEM
    assert resp.get_json(force=True)["status"] == 405


def test_demo_table_fits(client, demo_table):
    resp = _post(client, demo_table)
    assert resp.status_code == 200
    doc = resp.get_json()
    assert doc["n_observations"] == 40
    assert doc["n_parameters"] == 4
    assert doc["residual_df"] == 36
    names = [c["name"] for c in doc["coefficients"]]
    assert names == ["intercept", "temp_c", "door_openings", "pallets_received"]
    # The generating model (client_examples/data/README.md): 1200 + 38 t + 2.1 d + 4.5 p.
    est = {c["name"]: c for c in doc["coefficients"]}
    for name, truth in [("temp_c", 38.0), ("door_openings", 2.1), ("pallets_received", 4.5)]:
        c = est[name]
        lo, hi = c["intervals"][0]["lower"], c["intervals"][0]["upper"]
        assert lo < c["estimate"] < hi
        assert abs(c["estimate"] - truth) < 4 * c["standard_error"]
