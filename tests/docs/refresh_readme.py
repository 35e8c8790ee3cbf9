"""Rewrite the README's example responses from a fresh in-process run.

    python tests/docs/refresh_readme.py

Whole examples (``readme-example``) are rewritten whole; trimmed ones
(``readme-request`` / ``readme-response``) keep the members they show, with numbers
rounded to 6 significant digits. tests/docs/test_readme.py checks the result.
"""

from __future__ import annotations

import json
import re
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from service.app import create_app  # noqa: E402

WHOLE = re.compile(r"(<!-- readme-example: (\S+) -->.*?```json\n)(.*?)(\n```)", re.S)
PAIR = re.compile(r"(<!-- readme-request: (\S+) -->\s*```json\n(.*?)\n```\s*"
                  r"<!-- readme-response -->\s*```json\n)(.*?)(\n```)", re.S)


def dumps(x, indent=0):
    flat = json.dumps(x)
    if len(flat) + indent <= 88 or not isinstance(x, (dict, list)):
        return flat
    pad = " " * (indent + 2)
    if isinstance(x, dict):
        items = [f"{pad}{json.dumps(k)}: {dumps(v, indent + 2)}" for k, v in x.items()]
        return "{\n" + ",\n".join(items) + "\n" + " " * indent + "}"
    return "[\n" + ",\n".join(pad + dumps(v, indent + 2) for v in x) + "\n" + " " * indent + "]"


def trimmed(shown, actual):
    if isinstance(shown, dict):
        return {k: trimmed(v, actual[k]) for k, v in shown.items()}
    if isinstance(shown, list):
        return [trimmed(s, a) for s, a in zip(shown, actual)]
    if isinstance(actual, float):
        return float(f"{actual:.6g}")
    return actual


def post(client, path, body):
    if isinstance(body.get("table"), str) and body["table"].startswith("@"):
        body["table"] = json.loads((ROOT / body["table"][1:]).read_text())["table"]
    return client.post(path, data=json.dumps(body), content_type="application/json").get_json()


def main() -> None:
    readme = ROOT / "README.md"
    text = readme.read_text()
    client = create_app().test_client()
    text = WHOLE.sub(lambda m: m.group(1) + json.dumps(
        post(client, "/v1/fit", json.loads((ROOT / m.group(2)).read_text())), indent=2)
        + m.group(4), text)
    text = PAIR.sub(lambda m: m.group(1) + dumps(trimmed(
        json.loads(m.group(4)), post(client, m.group(2), json.loads(m.group(3)))))
        + m.group(5), text)
    readme.write_text(text)


if __name__ == "__main__":
    main()
