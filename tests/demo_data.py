"""The demo table (client_examples/data, generated from a fixed seed) as arrays for tests."""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

DATA = Path(__file__).resolve().parents[1] / "client_examples" / "data"


@dataclass(frozen=True)
class DemoTable:
    """A table-layout /v1/fit body and its predictors, response and (optional) weights."""

    body: dict
    names: list[str]
    x: np.ndarray
    y: np.ndarray
    w: np.ndarray | None


def demo_table(file: str = "warehouse_energy_table.json",
               weight_seed: int | None = None) -> DemoTable:
    """The table of ``file``; with ``weight_seed``, uniform(0.5, 2) weights from that seed,
    also put into the body."""
    body = json.loads((DATA / file).read_text(encoding="utf-8"))
    table = body["table"]
    names = [c for c in table if c != body["response_column"]]
    x = np.column_stack([table[c] for c in names])
    y = np.asarray(table[body["response_column"]], dtype=float)
    w = None
    if weight_seed is not None:
        w = np.random.default_rng(weight_seed).uniform(0.5, 2.0, y.size)
        body = {**body, "weights": w.tolist()}
    return DemoTable(body, names, x, y, w)
