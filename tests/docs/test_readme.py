"""The README's responses are real: every example marked in it is replayed and compared.

Two markers:

- ``<!-- readme-example: PATH -->`` then a ```json block: the answer of /v1/fit to the
  body in the file PATH, shown whole;
- ``<!-- readme-request: ENDPOINT -->`` then a ```json request block, then
  ``<!-- readme-response -->`` and a ```json block: the answer to that request; it may
  be trimmed (objects may show fewer members than the answer has, never others).

A body may say ``"table": "@client_examples/data/FILE.json"`` to stand for the table
of that demo file, so the README need not print 40 rows.
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import pytest

from service.app import create_app

ROOT = Path(__file__).resolve().parents[2]
README = (ROOT / "README.md").read_text()
WHOLE = re.compile(r"<!-- readme-example: (\S+) -->(.*?)```json\n(.*?)\n```", re.S)
PAIR = re.compile(r"<!-- readme-request: (\S+) -->\s*```json\n(.*?)\n```\s*"
                  r"<!-- readme-response -->\s*```json\n(.*?)\n```", re.S)


def _close(expected, actual, path="$", trimmed=False):
    if isinstance(expected, dict):
        assert isinstance(actual, dict), path
        if trimmed:
            assert expected.keys() <= actual.keys(), (path, expected.keys() - actual.keys())
        else:
            assert expected.keys() == actual.keys(), path
        for k in expected:
            _close(expected[k], actual[k], f"{path}.{k}", trimmed)
    elif isinstance(expected, list):
        assert isinstance(actual, list) and len(expected) == len(actual), path
        for i, (e, a) in enumerate(zip(expected, actual)):
            _close(e, a, f"{path}[{i}]", trimmed)
    elif isinstance(expected, float) and not isinstance(expected, bool):
        # The last bits may differ between BLAS builds and thread counts; README
        # numbers may be rounded to 6 significant digits when trimmed.
        assert isinstance(actual, (int, float)), path
        tol = 5e-6 if trimmed else 1e-11
        assert math.isclose(expected, actual, rel_tol=tol, abs_tol=1e-300), (path, actual)
    else:
        assert expected == actual, path


def _expand(body):
    if isinstance(body.get("table"), str) and body["table"].startswith("@"):
        body["table"] = json.loads((ROOT / body["table"][1:]).read_text())["table"]
    return body


def _post(path, body):
    # Flask's test client sorts keys when given json=; send the bytes to keep column order.
    return create_app().test_client().post(path, data=json.dumps(body),
                                           content_type="application/json")


WHOLE_EXAMPLES = WHOLE.findall(README)
PAIRS = PAIR.findall(README)


def test_readme_has_examples():
    assert WHOLE_EXAMPLES and PAIRS, "README lost its marked examples"


@pytest.mark.parametrize("body_path,_,shown", WHOLE_EXAMPLES, ids=[e[0] for e in WHOLE_EXAMPLES])
def test_readme_response_is_what_the_service_answers(body_path, _, shown):
    answer = _post("/v1/fit", json.loads((ROOT / body_path).read_text()))
    assert answer.status_code == 200
    _close(json.loads(shown), answer.get_json())


@pytest.mark.parametrize("endpoint,request_text,shown", PAIRS,
                         ids=[f"{p[0]}-{i}" for i, p in enumerate(PAIRS)])
def test_readme_request_gets_the_response_shown(endpoint, request_text, shown):
    answer = _post(endpoint, _expand(json.loads(request_text)))
    _close(json.loads(shown), answer.get_json(), trimmed=True)
