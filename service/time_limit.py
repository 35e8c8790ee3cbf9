"""The request time limit (LINFER_MAX_REQUEST_SECONDS): a problem answer, not a killed worker.

A request that runs longer than the limit is stopped and answered with a problem that
names the limit and its value: 408 ``request_timeout`` while its body is still being
received (a slow or stalled client), 422 ``time_limit_exceeded`` once the service is
working on it. The worker stays up and takes the next request.

How: gunicorn's sync workers run each request on the process's main thread, so a
real-time interval timer (``setitimer``, SIGALRM) armed when the request starts
interrupts it there: the signal handler raises :class:`RequestTimeLimit` in the
running Python code (a call into LAPACK finishes first; a socket read is interrupted).
Should the exception land where Python cannot pass it on (a finaliser or a garbage
collector callback swallows it) or where code catches every exception, the timer fires
again every tenth of a second until the answer is on its way. The timer is disarmed
before the answer is written. The handler is installed in each
worker after the fork (:func:`install`, from service/gunicorn_config.py); without it
(the Flask test client, threaded servers) no timer is armed, SIGALRM stays with its
owner, and gunicorn's worker timeout (LINFER_TIMEOUT, the hard stop for a worker
stuck in one computation) is the only limit.
"""

from __future__ import annotations

import signal
import threading

from flask import Flask, Response, current_app, g

from .api.problems import ApiProblem, problem_response

__all__ = ["RequestTimeLimit", "body_received", "init_app", "install", "uninstall"]


class RequestTimeLimit(Exception):
    """Raised in the request's own code when its time is up."""


# Seconds between repeated expiries, should the first be lost.
_REPEAT = 0.1
_installed = False
_answering = False


def _expired(signum: int, frame: object) -> None:
    if not _answering:
        raise RequestTimeLimit()


def install() -> object:
    """Take SIGALRM for the request timer in this process (its main thread); returns
    the handler it replaces, for :func:`uninstall`."""
    global _installed
    if threading.current_thread() is not threading.main_thread():
        raise RuntimeError("the request timer needs the main thread")
    previous = signal.signal(signal.SIGALRM, _expired)
    _installed = True
    return previous


def uninstall(previous: object) -> None:
    """Give SIGALRM back to ``previous`` (what :func:`install` returned)."""
    global _installed
    signal.setitimer(signal.ITIMER_REAL, 0)
    signal.signal(signal.SIGALRM, previous)
    _installed = False


def _arm() -> None:
    global _answering
    if _installed:
        _answering = False
        g.body_received = False
        signal.setitimer(signal.ITIMER_REAL, current_app.config["LINFER_SETTINGS"]
                         .max_request_seconds, _REPEAT)


def _disarm() -> None:
    if _installed:
        signal.setitimer(signal.ITIMER_REAL, 0)


def body_received() -> None:
    """Note that the request body has been read in full (a later expiry is a 422)."""
    g.body_received = True


def _after(response: Response) -> Response:
    _disarm()
    return response


def _teardown(error: BaseException | None) -> None:
    _disarm()


def _answer(error: RequestTimeLimit) -> Response:
    global _answering
    _answering = True
    _disarm()
    seconds = current_app.config["LINFER_SETTINGS"].max_request_seconds
    limit = f"the limit of {seconds:g} s (LINFER_MAX_REQUEST_SECONDS)"
    if not g.get("body_received", True):
        return problem_response(ApiProblem(
            408, "Request Timeout",
            f"The request body did not arrive within {limit}; send it at once, or "
            "through a proxy that buffers slow uploads.", "request_timeout"))
    return problem_response(ApiProblem(
        422, "Time limit exceeded",
        f"The request took longer than {limit} and was stopped; a design with fewer "
        "rows or columns, fewer hypotheses or new rows, or a higher limit lets it "
        "finish.", "time_limit_exceeded"))


def init_app(app: Flask) -> None:
    """Arm the timer before each request and disarm it after, once :func:`install` has
    run (register this after the other hooks: after-request functions run in reverse
    order, so it disarms first)."""
    app.before_request(_arm)
    app.after_request(_after)
    app.teardown_request(_teardown)
    app.register_error_handler(RequestTimeLimit, _answer)
