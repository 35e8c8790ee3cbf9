"""Apache Arrow IPC streams as /v1/fit bodies (service/api/arrow_io.py)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.ipc

from service.app import create_app

ROOT = Path(__file__).resolve().parents[2]
DEMO = json.loads((ROOT / "client_examples/data/warehouse_energy_table.json").read_text())
ARROW = "application/vnd.apache.arrow.stream"


def stream(table: pa.Table) -> bytes:
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, table.schema) as writer:
        writer.write_table(table)
    return sink.getvalue().to_pybytes()


def post_arrow(client, data: bytes, query: str):
    return client.post(f"/v1/fit?{query}", data=data, content_type=ARROW)


def test_arrow_stream_gives_the_same_fit_as_json(client):
    table = pa.table({"temp_c": pa.array(DEMO["table"]["temp_c"], pa.float64()),
                      "door_openings": pa.array(DEMO["table"]["door_openings"], pa.int32()),
                      "pallets_received": pa.array(DEMO["table"]["pallets_received"],
                                                   pa.int64()),
                      "kwh": pa.array(DEMO["table"]["kwh"], pa.float64())})
    got = post_arrow(client, stream(table), "response_column=kwh&levels=0.9,0.95")
    assert got.status_code == 200, got.get_json()
    want = client.post("/v1/fit", data=json.dumps({**DEMO, "levels": [0.9, 0.95]}),
                       content_type="application/json").get_json()
    assert got.get_json() == want


def test_nulls_are_missing_values(client):
    x = [1.0, 2.0, None, 4.0, 5.0, 6.5]
    table = pa.table({"x": pa.array(x, pa.float64()),
                      "y": pa.array([2.1, 3.9, 6.2, 8.1, 9.7, 13.2], pa.float64())})
    rejected = post_arrow(client, stream(table), "response_column=y")
    assert rejected.status_code == 422
    assert rejected.get_json()["errors"][0]["pointer"] == "/table/x/2"
    dropped = post_arrow(client, stream(table), "response_column=y&missing=drop_rows")
    assert dropped.status_code == 200
    assert dropped.get_json()["rows_dropped"] == 1


def test_a_text_column_is_pointed_at(client):
    table = pa.table({"x": pa.array(["a", "b", "c"]), "y": pa.array([1.0, 2.0, 3.5])})
    r = post_arrow(client, stream(table), "response_column=y")
    assert r.status_code == 422
    assert r.get_json()["errors"][0]["pointer"] == "/table/x"
    assert "string" in r.get_json()["errors"][0]["message"]


def test_bytes_that_are_not_a_stream_are_a_400(client):
    r = post_arrow(client, b"not an arrow stream at all", "response_column=y")
    assert r.status_code == 400
    assert r.mimetype == "application/problem+json"


def test_a_large_arrow_table_goes_straight_to_arrays(clean_env):
    client = create_app().test_client()
    rng = np.random.default_rng(20261202)
    n = 20_000
    x = rng.normal(size=(n, 3))
    y = x @ np.array([1.5, -2.0, 0.5]) + rng.normal(size=n)
    table = pa.table({"a": x[:, 0], "b": x[:, 1], "c": x[:, 2], "y": y})
    r = post_arrow(client, stream(table), "response_column=y")
    assert r.status_code == 200
    est = [c["estimate"] for c in r.get_json()["coefficients"]]
    ref, *_ = np.linalg.lstsq(np.column_stack([np.ones(n), x]), y, rcond=None)
    # Source: numpy.linalg.lstsq on the same rows (well conditioned: agreement to 1e-12).
    assert np.allclose(est, ref, rtol=1e-12, atol=1e-14)
