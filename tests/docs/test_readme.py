"""The README's responses are real: each example marked in it is replayed and compared."""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import pytest

from service.app import create_app

ROOT = Path(__file__).resolve().parents[2]
README = (ROOT / "README.md").read_text()
MARKER = re.compile(r"<!-- readme-example: (\S+) -->(.*?)```json\n(.*?)\n```", re.S)


def _close(expected, actual, path="$"):
    if isinstance(expected, dict):
        assert isinstance(actual, dict) and expected.keys() == actual.keys(), path
        for k in expected:
            _close(expected[k], actual[k], f"{path}.{k}")
    elif isinstance(expected, list):
        assert isinstance(actual, list) and len(expected) == len(actual), path
        for i, (e, a) in enumerate(zip(expected, actual)):
            _close(e, a, f"{path}[{i}]")
    elif isinstance(expected, float) and not isinstance(expected, bool):
        # The last bits may differ between BLAS builds and thread counts.
        assert isinstance(actual, (int, float)), path
        assert math.isclose(expected, actual, rel_tol=1e-11, abs_tol=1e-300), path
    else:
        assert expected == actual, path


EXAMPLES = MARKER.findall(README)


def test_readme_has_examples():
    assert EXAMPLES, "README lost its marked examples"


@pytest.mark.parametrize("body_path,_,shown", EXAMPLES, ids=[e[0] for e in EXAMPLES])
def test_readme_response_is_what_the_service_answers(body_path, _, shown):
    body = json.loads((ROOT / body_path).read_text())
    # Flask's test client sorts keys when given json=; send the bytes to keep column order.
    answer = create_app().test_client().post("/v1/fit", data=json.dumps(body),
                                             content_type="application/json")
    assert answer.status_code == 200
    _close(json.loads(shown), answer.get_json())
