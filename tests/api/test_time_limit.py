"""The request time limit (LINFER_MAX_REQUEST_SECONDS) through the Flask test client.

The timer is the one gunicorn's workers install after the fork (service/time_limit.py);
here each test installs it on pytest's main thread and gives SIGALRM back afterwards.
A slow computation: the extended-precision path forced on a design of 20,000 rows and
8 columns (about 3 s of mpmath; 3,000 x 3 takes about 0.1 s); a slow upload: a body stream that sleeps before it gives
its bytes.
"""

from __future__ import annotations

import io
import signal
import time

import numpy as np
import pytest

from service import time_limit
from service.app import create_app

LIMIT = 0.3


@pytest.fixture
def timer():
    previous = time_limit.install()
    yield
    time_limit.uninstall(previous)


def _app(**settings):
    return create_app({"max_request_seconds": LIMIT, **settings})


def _extended_fit_body(n: int, k: int) -> dict:
    rng = np.random.default_rng(5)
    x = rng.normal(size=(n, k))
    return {"design_matrix": x.tolist(), "response": (x @ np.arange(1.0, k + 1)).tolist()}


def _problem(response, status: int, kind: str) -> dict:
    assert response.status_code == status, response.get_data(as_text=True)[:300]
    assert response.mimetype == "application/problem+json"
    doc = response.get_json()
    assert doc["type"].endswith("/" + kind) and doc["status"] == status
    assert f"{LIMIT:g} s (LINFER_MAX_REQUEST_SECONDS)" in doc["detail"]
    return doc


# The first expiry may land in a garbage-collector callback (hypothesis registers one in
# this process once its tests have run), which swallows the exception and reports it
# as unraisable; the timer's repeat then stops the request. Either way the answer is
# the 422.
@pytest.mark.filterwarnings("ignore::pytest.PytestUnraisableExceptionWarning")
def test_a_computation_past_the_limit_is_a_422_naming_it(timer):
    # Every fit recomputed in extended precision (digits below 16 always), unbounded work.
    client = _app(extended_below_digits=16.0, extended_max_work=10**9).test_client()
    started = time.monotonic()
    response = client.post("/v1/fit", json=_extended_fit_body(20_000, 8))
    took = time.monotonic() - started
    _problem(response, 422, "time_limit_exceeded")
    assert took < LIMIT + 1.0, took
    assert signal.getitimer(signal.ITIMER_REAL) == (0.0, 0.0)


def test_the_same_computation_within_a_longer_limit_is_answered(timer):
    client = create_app({"max_request_seconds": 60.0, "extended_below_digits": 16.0,
                         "extended_max_work": 10**9}).test_client()
    response = client.post("/v1/fit", json=_extended_fit_body(3000, 3))
    assert response.status_code == 200
    assert response.get_json()["numerics"]["method"] == "extended_precision"
    assert signal.getitimer(signal.ITIMER_REAL) == (0.0, 0.0)


class _Trickle(io.RawIOBase):
    """A request body that arrives only after ``delay`` seconds."""

    def __init__(self, data: bytes, delay: float):
        self._data = io.BytesIO(data)
        self._delay = delay

    def readable(self) -> bool:
        return True

    def read(self, size: int = -1) -> bytes:
        if self._delay:
            time.sleep(self._delay)
            self._delay = 0.0
        return self._data.read(size)


def test_a_body_that_does_not_arrive_in_time_is_a_408(timer):
    client = _app().test_client()
    body = b'{"design_matrix": [[1.0], [2.0], [3.0]], "response": [1.0, 2.5, 2.9]}'
    response = client.post("/v1/fit", content_type="application/json",
                           headers={"Content-Length": str(len(body))},
                           environ_overrides={"wsgi.input": _Trickle(body, 5.0)})
    _problem(response, 408, "request_timeout")


def test_fast_requests_are_unaffected_and_leave_no_timer(timer):
    client = _app().test_client()
    for _ in range(20):
        response = client.post("/v1/fit", json={"design_matrix": [[1.0], [2.0], [3.0]],
                                                "response": [1.0, 2.5, 2.9]})
        assert response.status_code == 200
        assert signal.getitimer(signal.ITIMER_REAL) == (0.0, 0.0)
    # A refused request disarms too.
    assert client.post("/v1/fit", json={"response": [1.0]}).status_code == 422
    assert signal.getitimer(signal.ITIMER_REAL) == (0.0, 0.0)


def test_without_the_timer_installed_no_alarm_is_armed():
    client = _app(extended_below_digits=16.0, extended_max_work=10**9).test_client()
    before = signal.getsignal(signal.SIGALRM)
    response = client.post("/v1/fit", json={"design_matrix": [[1.0], [2.0], [3.0]],
                                            "response": [1.0, 2.5, 2.9]})
    assert response.status_code == 200
    assert signal.getsignal(signal.SIGALRM) is before


def test_an_expiry_swallowed_by_the_running_code_is_repeated(timer, monkeypatch):
    from service.api import routes

    swallowed = []

    def fit_that_swallows_once(design, options):
        try:
            time.sleep(5.0)
        except Exception as caught:  # what careless library code does
            swallowed.append(type(caught).__name__)
        time.sleep(5.0)
        raise AssertionError("not stopped")

    monkeypatch.setattr(routes, "fit", fit_that_swallows_once)
    client = _app().test_client()
    started = time.monotonic()
    response = client.post("/v1/fit", json={"design_matrix": [[1.0], [2.0], [3.0]],
                                            "response": [1.0, 2.5, 2.9]})
    took = time.monotonic() - started
    assert swallowed == ["RequestTimeLimit"]
    _problem(response, 422, "time_limit_exceeded")
    assert LIMIT + 0.05 < took < LIMIT + 1.0, took
    assert signal.getitimer(signal.ITIMER_REAL) == (0.0, 0.0)
