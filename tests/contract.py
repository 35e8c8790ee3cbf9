"""Every response the tests see is checked against openapi/linfer.yaml (openapi-core).

``ContractClient`` is a Flask test client that validates each request/response pair
it carries; ``check_http`` does the same for answers read over real HTTP.
"""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path

from flask.testing import FlaskClient
import json

from openapi_core import Config, OpenAPI
from openapi_core.contrib.werkzeug import WerkzeugOpenAPIRequest, WerkzeugOpenAPIResponse
from werkzeug.test import EnvironBuilder
from werkzeug.wrappers import Request, Response

SPEC = Path(__file__).resolve().parents[1] / "openapi" / "linfer.yaml"
SERVER = "http://127.0.0.1:8000"


@lru_cache(maxsize=1)
def spec() -> OpenAPI:
    config = Config(extra_media_type_deserializers={
        "application/problem+json": json.loads,
        "application/yaml": lambda data: data.decode() if isinstance(data, bytes) else data,
    })
    return OpenAPI.from_file_path(str(SPEC), config=config)


def _known(path: str) -> bool:
    return path in {"/v1/fit", "/v1/predict", "/v1/test", "/healthz", "/readyz", "/openapi.yaml"}


def check_pair(request: Request, response: Response) -> None:
    """Validate the response (status, content type, body) against the contract."""
    if not _known(request.path):
        return
    if response.status_code == 405 or request.method == "OPTIONS":
        return  # not in the contract by definition (a 405), or CORS machinery (preflight)
    spec().validate_response(WerkzeugOpenAPIRequest(request), WerkzeugOpenAPIResponse(response))


def check_http(method: str, path: str, status: int, content_type: str, body: bytes,
               query: str = "") -> None:
    """Validate an answer read over real HTTP."""
    builder = EnvironBuilder(path=path, base_url=SERVER, method=method, query_string=query,
                             content_type="application/json", data=b"{}")
    request = Request(builder.get_environ())
    response = Response(body, status=status, content_type=content_type)
    check_pair(request, response)


class ContractClient(FlaskClient):
    """A test client that checks every response against the OpenAPI description."""

    def open(self, *args, **kwargs):
        response = super().open(*args, **kwargs)
        sent = response.request
        # The app has read the body; the check needs only the method and the path.
        builder = EnvironBuilder(path=sent.path, base_url=SERVER, method=sent.method,
                                 query_string=sent.query_string.decode("latin-1"),
                                 content_type="application/json", data=b"{}")
        check_pair(Request(builder.get_environ()), response)
        return response
