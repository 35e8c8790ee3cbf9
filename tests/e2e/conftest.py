"""Session fixtures: real ``linfer serve`` processes on loopback ports (see _server.py)."""

from __future__ import annotations

from typing import Callable, Iterator, Mapping

import pytest

from ._server import START_ATTEMPTS, Server, start_once


@pytest.fixture(scope="session")
def start_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Callable[..., Server]]:
    """A factory: ``start_server(env={...})`` runs one more server, torn down at session end."""
    started: list[Server] = []
    tmp = tmp_path_factory.mktemp("linfer-servers")

    def start(env: Mapping[str, str] | None = None, label: str = "server") -> Server:
        failures = []
        for _ in range(START_ATTEMPTS):
            result = start_once(tmp, env, label)
            if isinstance(result, Server):
                started.append(result)
                return result
            failures.append(result)
        pytest.fail("linfer serve did not start:\n" + "\n\n".join(failures), pytrace=False)

    try:
        yield start
    finally:
        for server in reversed(started):
            server.stop()


@pytest.fixture(scope="session")
def served(start_server: Callable[..., Server]) -> Server:
    """The default server: `linfer serve --bind 127.0.0.1:<free port> --workers 2`."""
    return start_server(label="default")


@pytest.fixture(scope="session")
def base_url(served: Server) -> str:
    """Base URL of the default server, e.g. ``http://127.0.0.1:40123``."""
    return served.base_url


@pytest.fixture(scope="session")
def small_body_server(start_server: Callable[..., Server]) -> Server:
    """A second server with LINFER_MAX_BODY_BYTES=1000."""
    return start_server(env={"LINFER_MAX_BODY_BYTES": "1000"}, label="small-body")
