"""RFC 6901 JSON Pointers resolved against a request document, for the tests."""

from __future__ import annotations

import re


def resolve(document, ptr):
    """Resolve an RFC 6901 JSON Pointer in ``document``; KeyError/IndexError if it does not."""
    assert isinstance(ptr, str)
    if ptr == "":
        return document
    assert ptr.startswith("/"), f"{ptr!r} is not a JSON Pointer"
    node = document
    for token in ptr[1:].split("/"):
        assert not re.search(r"~[^01]|~$", token), f"bad escape in {ptr!r}"
        token = token.replace("~1", "/").replace("~0", "~")
        if isinstance(node, dict):
            if token not in node:
                raise KeyError(f"{ptr!r}: no member {token!r}")
            node = node[token]
        elif isinstance(node, list):
            assert re.fullmatch(r"0|[1-9][0-9]*", token), f"{ptr!r}: {token!r} is no index"
            index = int(token)
            if index >= len(node):
                raise IndexError(f"{ptr!r}: index {index} beyond {len(node)}")
            node = node[index]
        else:
            raise KeyError(f"{ptr!r}: {token!r} into a scalar")
    return node
