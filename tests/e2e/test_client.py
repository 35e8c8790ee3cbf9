"""service.client against the real server (`base_url`), and against tiny local servers
that misbehave on purpose: one that accepts and never answers (Timeout), one that answers
503 before 200 (retries), one that resets every connection, and a closed port.

Only 127.0.0.1 is contacted, and every client here has ``trust_env=False`` (no proxy from
the environment). Every helper server is shut down by its fixture.
"""

from __future__ import annotations

import contextlib
import http.server
import inspect
import json
import math
import socket
import struct
import sys
import threading
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import pytest

from service import client as client_module
from service.client import (ApiError, Client, Coefficient, FitResult, HypothesisResult,
                            LinferError, PredictResult, Timeout, TransportError)

from ._server import HOST, OPENER, REPO, free_port

pytestmark = pytest.mark.e2e

DATA = REPO / "client_examples" / "data"
TABLE = json.loads((DATA / "warehouse_energy_table.json").read_text())
MATRIX = json.loads((DATA / "warehouse_energy_matrix.json").read_text())
PREDICTORS = ["temp_c", "door_openings", "pallets_received"]
NEW_DAYS = {"temp_c": [12.5, -3.0], "door_openings": [240, 180], "pallets_received": [70, 35]}


def post_raw(url: str, body: Any) -> dict:
    """The service's JSON answer, fetched without the client (the reference)."""
    import urllib.request
    req = urllib.request.Request(url, data=json.dumps(body).encode(), method="POST",
                                 headers={"Content-Type": "application/json"})
    with OPENER.open(req, timeout=10) as resp:
        return json.loads(resp.read())


@pytest.fixture(scope="module")
def linfer(base_url: str) -> Client:
    return Client(base_url, timeout=10, trust_env=False)


@pytest.fixture(scope="module")
def demo_fit(linfer: Client) -> FitResult:
    return linfer.fit(**TABLE, return_model=True)


# --- against the real server ------------------------------------------------------------

def test_health(linfer: Client) -> None:
    assert linfer.health() is True
    assert Client(f"http://{HOST}:{free_port()}", timeout=2, trust_env=False).health() is False


def test_fit_returns_typed_results_of_the_service_document(linfer: Client, base_url: str,
                                                           demo_fit: FitResult) -> None:
    raw = post_raw(base_url + "/v1/fit", {**TABLE, "return_model": True})
    assert demo_fit.raw == raw
    assert (demo_fit.n_observations, demo_fit.n_parameters, demo_fit.residual_df) == (40, 4, 36)
    assert demo_fit.names == ["intercept", *PREDICTORS]
    for c, d in zip(demo_fit.coefficients, raw["coefficients"]):
        assert isinstance(c, Coefficient)
        assert (c.name, c.estimable, c.estimate, c.standard_error, c.t_statistic, c.p_value,
                c.vif) == (d["name"], d["estimable"], d["estimate"], d["standard_error"],
                           d["t_statistic"], d["p_value"], d["vif"])
        (iv,) = c.intervals
        assert (iv.level, iv.lower, iv.upper) == (0.95, d["intervals"][0]["lower"],
                                                  d["intervals"][0]["upper"])
        assert c.interval(0.95) == iv
    assert demo_fit.coefficient("intercept").vif is None
    assert demo_fit.fit.r_squared == raw["fit"]["r_squared"]
    assert demo_fit.fit.centered is True
    assert demo_fit.overall_f_test.p_value == raw["overall_f_test"]["p_value"]
    assert demo_fit.conditioning.status == "ok" and demo_fit.conditioning.rank == 4
    assert demo_fit.warnings == ()
    assert demo_fit.numerics.estimated_correct_digits == \
        raw["numerics"]["estimated_correct_digits"]
    assert demo_fit.model == raw["model"]
    with pytest.raises(KeyError, match="no coefficient 'temp' .*temp_c"):
        demo_fit.coefficient("temp")


def test_results_are_frozen(demo_fit: FitResult) -> None:
    with pytest.raises(AttributeError):
        demo_fit.n_observations = 3  # type: ignore[misc]
    with pytest.raises(AttributeError):
        demo_fit.coefficients[0].estimate = 0.0  # type: ignore[misc]


def test_fit_frame_sends_the_table_of_a_dataframe(linfer: Client, demo_fit: FitResult) -> None:
    frame = pd.read_csv(DATA / "warehouse_energy.csv")
    assert list(frame.columns) == ["day", *PREDICTORS, "kwh"]
    result = linfer.fit_frame(frame, "kwh", predictor_columns=PREDICTORS)
    assert result.coefficients == demo_fit.coefficients
    assert result.fit == demo_fit.fit
    with_day = linfer.fit_frame(frame, "kwh")  # every other column is a predictor
    assert with_day.names == ["intercept", "day", *PREDICTORS]


def test_fit_frame_sends_nan_as_null(linfer: Client) -> None:
    frame = pd.read_csv(DATA / "warehouse_energy.csv").drop(columns="day")
    frame.loc[[3, 17], "temp_c"] = np.nan
    frame["door_openings"] = frame["door_openings"].astype("Int64")
    frame.loc[5, "door_openings"] = pd.NA
    with pytest.raises(ApiError) as info:
        linfer.fit_frame(frame, "kwh")
    assert info.value.status == 422
    assert [p for p, _ in info.value.errors] == ["/table/temp_c/3", "/table/temp_c/17",
                                                 "/table/door_openings/5"]
    dropped = linfer.fit_frame(frame, "kwh", missing="drop_rows")
    assert (dropped.rows_dropped, dropped.n_observations) == (3, 37)


def test_fit_frame_refuses_text_columns(linfer: Client) -> None:
    frame = pd.DataFrame({"site": ["a", "b", "c"], "x": [1.0, 2.0, 3.0], "y": [1.0, 2.0, 4.0]})
    with pytest.raises(TypeError, match="column 'site' has dtype"):
        linfer.fit_frame(frame, "y")
    assert linfer.fit_frame(frame, "y", predictor_columns=["x"]).names == ["intercept", "x"]


def test_fit_arrays_sends_the_design_matrix(linfer: Client, base_url: str) -> None:
    x = np.column_stack([np.asarray(TABLE["table"][c], dtype=float) for c in PREDICTORS])
    y = np.asarray(TABLE["table"]["kwh"])
    result = linfer.fit_arrays(x, y, column_names=PREDICTORS)
    assert result.raw == post_raw(base_url + "/v1/fit", MATRIX)
    frame = pd.DataFrame(x, columns=PREDICTORS)
    assert linfer.fit_arrays(frame, pd.Series(y)).raw == result.raw  # names from the frame
    unnamed = linfer.fit_arrays(x[:, 0], y)
    assert unnamed.names == ["intercept", "x1"]


def test_infinities_are_refused_before_sending(linfer: Client) -> None:
    x = np.ones((5, 2))
    x[1, 0] = np.inf
    with pytest.raises(ValueError, match=r"^/design_matrix/1/0: inf cannot be sent"):
        linfer.fit_arrays(x, np.arange(5.0))


def test_predict_from_the_model_summary(linfer: Client, demo_fit: FitResult) -> None:
    answer = linfer.predict(model=demo_fit, new_table=NEW_DAYS, levels=[0.9, 0.95],
                            kind="observation")
    assert isinstance(answer, PredictResult)
    assert answer.kind == "observation" and answer.residual_df == 36
    assert len(answer.predictions) == 2
    beta = demo_fit.model["estimates"]
    for i, p in enumerate(answer.predictions):
        x = [1.0] + [float(NEW_DAYS[c][i]) for c in PREDICTORS]
        assert math.isclose(p.mean, sum(b * v for b, v in zip(beta, x)), rel_tol=1e-12)
        assert [iv.level for iv in p.intervals] == [0.9, 0.95]
        narrow, wide = p.intervals
        assert wide.lower < narrow.lower < p.mean < narrow.upper < wide.upper
    same = linfer.predict(model=demo_fit.model, new_table=NEW_DAYS, levels=[0.9, 0.95],
                          kind="observation")
    assert same.predictions == answer.predictions
    with pytest.raises(ValueError, match="return_model=True"):
        linfer.predict(model=linfer.fit(**TABLE), new_table=NEW_DAYS)


def test_test_answers_one_result_per_hypothesis(linfer: Client, demo_fit: FitResult) -> None:
    hypotheses = [
        {"label": "doors and pallets", "restrictions": [
            {"coefficients": {"door_openings": 1}, "equals": 0},
            {"coefficients": {"pallets_received": 1}, "equals": 0}]},
        {"label": "temp is 38", "restrictions": [{"coefficients": {"temp_c": 1},
                                                  "equals": 38}]}]
    results = linfer.test(model=demo_fit, hypotheses=hypotheses)
    assert isinstance(results, list) and all(isinstance(h, HypothesisResult) for h in results)
    assert [h.label for h in results] == ["doors and pallets", "temp is 38"]
    assert (results[0].numerator_df, results[0].denominator_df) == (2, 36)
    # The same tests made within the fit agree (the fit has the residuals; the model its RSS).
    within = linfer.fit(**TABLE, hypotheses=hypotheses).hypotheses
    for a, b in zip(results, within):
        assert math.isclose(a.statistic, b.statistic, rel_tol=1e-10)
        assert math.isclose(a.p_value, b.p_value, rel_tol=1e-8)
    # temp_c = 38: t^2 = F (one restriction)
    t = (demo_fit.coefficient("temp_c").estimate - 38) / \
        demo_fit.coefficient("temp_c").standard_error
    assert math.isclose(results[1].statistic, t * t, rel_tol=1e-10)


def test_api_error_carries_status_problem_and_pointers(linfer: Client) -> None:
    with pytest.raises(ApiError) as info:
        linfer.fit(design_matrix=[[8.2, 161], [0.6, 126], [-2.3, None]],
                   response=[2399.4, 1797.8])
    err = info.value
    assert err.status == 422 and isinstance(err, LinferError)
    assert err.problem["status"] == 422
    assert err.problem["type"].endswith("/invalid_request")
    assert err.errors == [("/response", "response has 2 values, design_matrix has 3 rows")]
    assert err.detail == "response has 2 values, design_matrix has 3 rows"
    assert err.request_id
    assert err.url.endswith("/v1/fit") and err.method == "POST"
    assert "422 Invalid request: response has 2 values" in str(err)
    assert "  /response: response has 2 values" in str(err)


def test_api_error_for_a_bad_table_value_and_an_unknown_field(linfer: Client) -> None:
    body = json.loads(json.dumps(TABLE))
    body["table"]["temp_c"][5] = "warm"
    with pytest.raises(ApiError) as info:
        linfer.fit(**body)
    assert "/table/temp_c/5" in [p for p, _ in info.value.errors]
    with pytest.raises(ApiError) as info:
        linfer.fit(**TABLE, intercep=True)
    assert info.value.errors == [("/intercep", "is not a field of this request")]


def test_coefficients_frame(demo_fit: FitResult) -> None:
    frame = demo_fit.coefficients_frame()
    assert list(frame.index) == demo_fit.names and frame.index.name == "name"
    assert list(frame.columns) == ["estimable", "estimate", "standard_error", "t_statistic",
                                   "p_value", "lower_0.95", "upper_0.95", "vif"]
    temp = demo_fit.coefficient("temp_c")
    assert frame.loc["temp_c", "estimate"] == temp.estimate
    assert frame.loc["temp_c", "upper_0.95"] == temp.intervals[0].upper
    assert math.isnan(frame.loc["intercept", "vif"])
    assert frame["vif"].dtype == np.float64


def test_coefficients_frame_without_pandas_says_so(demo_fit: FitResult,
                                                   monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setitem(sys.modules, "pandas", None)  # import pandas now raises ImportError
    with pytest.raises(ImportError, match=r"coefficients_frame\(\) needs pandas, which is not "
                                          r"installed here; install it \(pip install pandas\)"):
        demo_fit.coefficients_frame()


# --- the public surface -----------------------------------------------------------------

def test_all_is_complete_and_resolves() -> None:
    public = {name for name, obj in vars(client_module).items()
              if not name.startswith("_") and (inspect.isclass(obj) or inspect.isfunction(obj))
              and obj.__module__ == client_module.__name__}
    assert public <= set(client_module.__all__)
    for name in client_module.__all__:
        assert hasattr(client_module, name), name


def test_exception_tree() -> None:
    assert issubclass(Timeout, TransportError)
    assert issubclass(TransportError, LinferError) and issubclass(ApiError, LinferError)
    assert not issubclass(ApiError, TransportError)
    for cls in (LinferError, TransportError, Timeout, ApiError):
        assert cls.__doc__ and "\n" not in cls.__doc__.strip()
    for name in ("LinferError", "TransportError", "Timeout", "ApiError"):
        assert name in client_module.__doc__


@pytest.mark.parametrize("kwargs, message", [
    ({"base_url": "127.0.0.1:8000"}, "base_url must be an http"),
    ({"timeout": 0}, "timeout must be a positive number"),
    ({"retries": -1}, "retries must be a non-negative integer"),
    ({"backoff": -0.5}, "backoff must be a non-negative"),
])
def test_bad_client_settings_are_refused(kwargs, message) -> None:
    with pytest.raises(ValueError, match=message):
        Client(**kwargs)


# --- tiny local servers that misbehave ---------------------------------------------------

@dataclass
class Hanging:
    """Accepts connections and never answers."""

    url: str
    accepted: list[socket.socket] = field(default_factory=list)


@contextlib.contextmanager
def _accepting(handle: Callable[[socket.socket], None]) -> Iterator[str]:
    """A listener on 127.0.0.1 whose thread passes each accepted connection to ``handle``;
    yields its URL and stops (thread joined, listener closed) on exit."""
    listener = socket.create_server((HOST, 0))
    listener.settimeout(0.1)
    stop = threading.Event()

    def accept() -> None:
        while not stop.is_set():
            try:
                conn, _ = listener.accept()
            except (TimeoutError, OSError):
                continue
            handle(conn)

    thread = threading.Thread(target=accept, daemon=True)
    thread.start()
    try:
        yield f"http://{HOST}:{listener.getsockname()[1]}"
    finally:
        stop.set()
        thread.join(timeout=5)
        listener.close()


@pytest.fixture
def hanging() -> Iterator[Hanging]:
    accepted: list[socket.socket] = []
    try:
        with _accepting(accepted.append) as url:
            yield Hanging(url, accepted)
    finally:  # after the accepting thread has stopped: no connection comes in late
        for conn in accepted:
            conn.close()


@pytest.fixture
def resetting() -> Iterator[tuple[str, list[int]]]:
    """Accepts each connection and resets it at once (RST: SO_LINGER with timeout 0)."""
    count = [0]

    def reset(conn: socket.socket) -> None:
        count[0] += 1
        conn.setsockopt(socket.SOL_SOCKET, socket.SO_LINGER, struct.pack("ii", 1, 0))
        conn.close()

    with _accepting(reset) as url:
        yield url, count


class Scripted:
    """An HTTP server on 127.0.0.1:0 answering from a script of (status, headers, body)."""

    def __init__(self, script: list[tuple[int, dict[str, str], bytes]]):
        self.script = list(script)
        self.requests: list[tuple[str, str, bytes]] = []
        owner = self

        class Handler(http.server.BaseHTTPRequestHandler):
            def _answer(self) -> None:
                length = int(self.headers.get("Content-Length") or 0)
                owner.requests.append((self.command, self.path, self.rfile.read(length)))
                status, headers, body = owner.script.pop(0) if owner.script else \
                    (500, {}, b"script exhausted")
                self.send_response(status)
                for name, value in {"Content-Type": "application/json", **headers}.items():
                    self.send_header(name, value)
                self.send_header("Content-Length", str(len(body)))
                self.end_headers()
                self.wfile.write(body)

            do_GET = do_POST = _answer

            def log_message(self, *args: Any) -> None:
                pass

        self.httpd = http.server.ThreadingHTTPServer((HOST, 0), Handler)
        self.url = f"http://{HOST}:{self.httpd.server_address[1]}"
        self.thread = threading.Thread(target=self.httpd.serve_forever,
                                       kwargs={"poll_interval": 0.05}, daemon=True)

    def __enter__(self) -> Scripted:
        self.thread.start()
        return self

    def __exit__(self, *exc: Any) -> None:
        self.httpd.shutdown()
        self.httpd.server_close()
        self.thread.join(timeout=5)


PROBLEM_422 = json.dumps({"type": "https://linfer.invalid/problems/invalid_request",
                          "title": "Invalid request", "status": 422, "detail": "bad",
                          "errors": [{"pointer": "/response/3", "message": "bad"}]}).encode()
UNAVAILABLE = (503, {"Content-Type": "application/problem+json"},
               b'{"status": 503, "title": "Service Unavailable", "detail": "busy", "errors": []}')


def test_timeout_when_the_server_never_answers(hanging: Hanging) -> None:
    c = Client(hanging.url, timeout=0.5, retries=2, backoff=0.01, trust_env=False)
    start = time.monotonic()
    with pytest.raises(Timeout) as info:
        c.fit(**TABLE)
    elapsed = time.monotonic() - start
    assert isinstance(info.value, TransportError)
    assert 0.4 < elapsed < 3.0, elapsed
    assert len(hanging.accepted) == 1, "a timeout is not retried"
    assert "no answer within 0.5 s" in str(info.value)


def test_503_is_retried_with_backoff_then_succeeds(demo_fit: FitResult) -> None:
    ok = (200, {}, json.dumps(demo_fit.raw).encode())
    with Scripted([UNAVAILABLE, UNAVAILABLE, ok]) as server:
        c = Client(server.url, timeout=5, retries=2, backoff=0.05, trust_env=False)
        start = time.monotonic()
        result = c.fit(**TABLE)
        elapsed = time.monotonic() - start
    assert result.raw == demo_fit.raw
    assert len(server.requests) == 3
    assert len({r for r in server.requests}) == 1, "every attempt sends the same request"
    assert elapsed >= 0.05 + 0.10  # backoff, then twice as long


def test_503_retries_run_out_into_an_api_error() -> None:
    with Scripted([UNAVAILABLE] * 3) as server:
        c = Client(server.url, timeout=5, retries=1, backoff=0.01, trust_env=False)
        with pytest.raises(ApiError) as info:
            c.fit(**TABLE)
    assert info.value.status == 503 and info.value.detail == "busy"
    assert len(server.requests) == 2


def test_retry_after_of_a_503_is_honoured() -> None:
    with Scripted([(503, {"Retry-After": "1"}, b"{}"), (200, {}, b'{"status": "ok"}')]) as s:
        c = Client(s.url, timeout=5, retries=1, backoff=0.01, trust_env=False)
        start = time.monotonic()
        c._call("GET", "/healthz", None)
        assert time.monotonic() - start >= 1.0
    assert len(s.requests) == 2


@pytest.mark.parametrize("status, body", [
    (422, PROBLEM_422), (400, b'{"status": 400, "title": "Malformed JSON"}'),
    (500, b'{"status": 500}'), (502, b"<html>Bad Gateway</html>"), (504, b""),
])
def test_other_errors_are_not_retried(status: int, body: bytes) -> None:
    with Scripted([(status, {}, body), (200, {}, b"{}")]) as server:
        c = Client(server.url, timeout=5, retries=2, backoff=0.01, trust_env=False)
        with pytest.raises(ApiError) as info:
            c.fit(**TABLE)
    assert info.value.status == status
    assert len(server.requests) == 1
    if status == 422:
        assert info.value.errors == [("/response/3", "bad")]
    if status == 502:  # not a problem document: one is made up, keeping the text
        assert info.value.problem["title"] == "Bad Gateway"
        assert info.value.detail == "<html>Bad Gateway</html>"


def test_transport_error_on_a_closed_port() -> None:
    c = Client(f"http://{HOST}:{free_port()}", timeout=2, retries=2, backoff=0.01,
               trust_env=False)
    start = time.monotonic()
    with pytest.raises(TransportError) as info:
        c.fit(**TABLE)
    assert not isinstance(info.value, Timeout)
    assert "connection refused" in str(info.value)
    assert "(after 3 attempts)" in str(info.value)
    assert time.monotonic() - start < 2.0


def test_connection_resets_are_retried(resetting: tuple[str, list[int]]) -> None:
    url, count = resetting
    c = Client(url, timeout=2, retries=2, backoff=0.01, trust_env=False)
    with pytest.raises(TransportError) as info:
        c.fit(**TABLE)
    assert not isinstance(info.value, Timeout)
    assert count[0] == 3
    assert "(after 3 attempts)" in str(info.value)
