"""Authentication, CORS, metrics and access logs (all in service/security.py and observability.py)."""

from __future__ import annotations

import json
import logging

import pytest

from service.app import create_app

BODY = {"design_matrix": [[1.5], [2.25], [3.125], [4.0625], [5.03125]],
        "response": [2.718281828, 3.941592653, 6.202718281, 8.114142135, 9.717320508]}


def post(client, path="/v1/fit", body=BODY, **headers):
    return client.post(path, data=json.dumps(body), content_type="application/json",
                       headers=headers)


@pytest.fixture
def secured(clean_env):
    return create_app({"api_tokens": "alpha-token,beta-token"}).test_client()


def test_without_tokens_no_authentication_is_asked(client):
    assert post(client).status_code == 200


def test_missing_token_is_401_with_a_challenge(secured):
    r = post(secured)
    assert r.status_code == 401
    assert r.mimetype == "application/problem+json"
    assert r.headers["WWW-Authenticate"].startswith("Bearer")


def test_wrong_token_is_403(secured):
    r = post(secured, Authorization="Bearer gamma-token")
    assert r.status_code == 403
    assert r.get_json()["status"] == 403


@pytest.mark.parametrize("token", ["alpha-token", "beta-token"])
def test_each_configured_token_is_accepted(secured, token):
    assert post(secured, Authorization=f"Bearer {token}").status_code == 200


def test_a_prefix_of_a_token_is_not_accepted(secured):
    assert post(secured, Authorization="Bearer alpha").status_code == 403


@pytest.mark.parametrize("path", ["/healthz", "/readyz", "/metrics", "/openapi.yaml"])
def test_operational_endpoints_stay_open(secured, path):
    assert secured.get(path).status_code == 200


def test_cors_is_off_by_default(client):
    r = post(client, Origin="https://dashboard.example")
    assert "Access-Control-Allow-Origin" not in r.headers


def test_cors_for_an_allowed_origin(clean_env):
    c = create_app({"cors_origins": "https://dashboard.example"}).test_client()
    r = post(c, Origin="https://dashboard.example")
    assert r.headers["Access-Control-Allow-Origin"] == "https://dashboard.example"
    assert "X-Request-ID" in r.headers["Access-Control-Expose-Headers"]
    other = post(c, Origin="https://elsewhere.example")
    assert "Access-Control-Allow-Origin" not in other.headers


def test_cors_preflight(clean_env):
    c = create_app({"cors_origins": "https://dashboard.example",
                    "api_tokens": "alpha-token"}).test_client()
    r = c.options("/v1/fit", headers={"Origin": "https://dashboard.example",
                                      "Access-Control-Request-Method": "POST"})
    assert r.status_code == 204
    assert "POST" in r.headers["Access-Control-Allow-Methods"]
    assert "Authorization" in r.headers["Access-Control-Allow-Headers"]


def test_metrics_count_requests_by_endpoint_and_status(client):
    post(client)
    post(client, body={"design_matrix": [[1]], "response": [1, 2]})
    text = client.get("/metrics").get_data(as_text=True)
    assert 'linfer_requests_total{endpoint="/v1/fit",status="200"}' in text
    assert 'linfer_requests_total{endpoint="/v1/fit",status="422"}' in text
    assert "linfer_request_seconds_bucket" in text
    assert "linfer_fit_rows_bucket" in text and "linfer_fit_columns_bucket" in text


def test_access_log_is_json_without_request_data(client, caplog):
    with caplog.at_level(logging.INFO, logger="linfer.access"):
        logging.getLogger("linfer.access").propagate = True
        try:
            post(client, **{"X-Request-ID": "trace-42"})
        finally:
            logging.getLogger("linfer.access").propagate = False
    lines = [json.loads(r.getMessage()) for r in caplog.records if r.name == "linfer.access"]
    assert lines, "no access log line"
    line = lines[-1]
    assert line["request_id"] == "trace-42"
    assert line["endpoint"] == "/v1/fit" and line["status"] == 200
    assert line["rows"] == 5 and line["columns"] == 2
    assert line["duration_ms"] >= 0
    text = json.dumps(line)
    # Values of the body that no timing or id can spell by chance.
    for value in ("4.0625", "5.03125", "2.718281828", "9.717320508"):
        assert value not in text
