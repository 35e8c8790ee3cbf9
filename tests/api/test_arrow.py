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


def _table_stream(x, y, x_type=None, **writer) -> bytes:
    table = pa.table({"x": pa.array(x, x_type), "y": pa.array(y, pa.float64())})
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, table.schema, **writer) as w:
        w.write_table(table)
    return sink.getvalue().to_pybytes()


Y12 = [2.1, 3.9, 6.2, 8.1, 9.7, 13.2, 13.9, 16.4, 18.0, 20.3, 22.8, 23.9]


def test_integers_beyond_2_to_the_53_are_the_nearest_doubles_as_in_json(client):
    # Was a 500: pyarrow's safe cast refuses integers that a double cannot hold exactly.
    for values, kind in (([2**53 + 1 + 2 * i + 2**40 * i * i for i in range(12)], pa.int64()),
                         ([2**63 + 1 + 3 * i + 2**40 * i * i for i in range(12)], pa.uint64())):
        got = post_arrow(client, _table_stream(values, Y12, kind), "response_column=y")
        assert got.status_code == 200, got.get_json()
        # Source: the same integers posted as JSON (numpy's nearest-double conversion).
        want = client.post("/v1/fit", data=json.dumps({"table": {"x": values, "y": Y12},
                                                        "response_column": "y"}),
                           content_type="application/json")
        assert want.status_code == 200
        assert got.get_json()["coefficients"] == want.get_json()["coefficients"]


def test_bytes_after_the_end_of_the_stream_are_a_400(client):
    # Was a 200 that fitted the first stream only, the rest ignored.
    one = _table_stream([1.0, 2.0, 3.0, 4.5], [2.0, 4.1, 5.9, 9.2])
    two = post_arrow(client, one + one, "response_column=y")
    assert two.status_code == 400
    assert two.get_json()["type"].endswith("/malformed_arrow")
    assert f"{len(one)} bytes follow the end of the Arrow stream at byte {len(one)}" \
        in two.get_json()["detail"]
    assert "another stream" in two.get_json()["detail"]
    tail = post_arrow(client, one + b"tail", "response_column=y")
    assert tail.status_code == 400
    assert "4 bytes follow the end" in tail.get_json()["detail"]
    # A stream that simply ends without its end-of-stream marker is whole: read.
    assert post_arrow(client, one[:-8], "response_column=y").status_code == 200


def test_the_arrow_file_format_is_a_400_that_names_it(client):
    table = pa.table({"x": [1.0, 2.0, 3.0, 4.5], "y": [2.0, 4.1, 5.9, 9.2]})
    sink = pa.BufferOutputStream()
    with pa.ipc.new_file(sink, table.schema) as writer:
        writer.write_table(table)
    r = post_arrow(client, sink.getvalue().to_pybytes(), "response_column=y")
    assert r.status_code == 400
    assert "is an Arrow file" in r.get_json()["detail"]


def test_compressed_buffers_count_against_the_body_limit_before_they_are_decoded(clean_env):
    # Was 24 kB of ZSTD decompressing to 800 MB (peak memory) before the row limit
    # answered; now the declared sizes are read from the metadata and compared first.
    client = create_app({"max_body_bytes": 1_000_000}).test_client()
    n = 100_000
    options = pa.ipc.IpcWriteOptions(compression="zstd")
    data = _table_stream(np.zeros(n), np.zeros(n), options=options)
    assert len(data) < 20_000
    r = post_arrow(client, data, "response_column=y")
    assert r.status_code == 413
    problem = r.get_json()
    assert problem["errors"][0]["pointer"] == "/table"
    # 2 columns x 100,000 float64 values: 1,600,000 bytes once decompressed.
    assert "decompresses to 1600000 bytes, more than the limit of 1000000 bytes " \
        "(LINFER_MAX_BODY_BYTES)" in problem["detail"]
    small = _table_stream([1.0, 2.0, 3.0, 4.5], [2.0, 4.1, 5.9, 9.2], options=options)
    assert post_arrow(client, small, "response_column=y").status_code == 200


def test_a_declared_length_beyond_the_row_limit_is_refused_before_decoding(client):
    import struct

    data = bytearray(_table_stream([1.0, 2.0, 3.0, 4.5], [2.0, 4.1, 5.9, 9.2]))
    reader = pa.ipc.MessageReader.open_stream(pa.py_buffer(bytes(data)))
    reader.read_next_message()  # the schema
    metadata = reader.read_next_message().metadata.to_pybytes()
    at = bytes(data).find(metadata)
    # RecordBatch.length: Message.header (field 2) -> RecordBatch, its field 0.
    root = struct.unpack_from("<I", metadata, 0)[0]
    vtable = root - struct.unpack_from("<i", metadata, root)[0]
    header = root + struct.unpack_from("<H", metadata, vtable + 8)[0]
    batch = header + struct.unpack_from("<I", metadata, header)[0]
    batch_vtable = batch - struct.unpack_from("<i", metadata, batch)[0]
    length_at = batch + struct.unpack_from("<H", metadata, batch_vtable + 4)[0]
    assert struct.unpack_from("<q", metadata, length_at)[0] == 4
    struct.pack_into("<q", data, at + length_at, 2**40)
    r = post_arrow(client, bytes(data), "response_column=y")
    assert r.status_code == 422
    assert r.get_json()["errors"][0] == {
        "pointer": "/table",
        "message": f"has {2**40} rows, more than the limit of 5000 (LINFER_MAX_ROWS)"}


def test_names_in_the_query_are_checked_before_the_column_types(client):
    # Was: the text column answered first, for a response column the stream lacks.
    table = pa.table({"x": [1.0, 2.0, 3.0], "s": ["a", "b", "c"], "y": [1.0, 2.0, 3.5]})
    r = post_arrow(client, stream(table), "response_column=kwh")
    assert r.status_code == 422
    assert r.get_json()["errors"][0] == {
        "pointer": "/response_column",
        "message": "'kwh' names no column of the Arrow stream (columns: x, s, y)"}
    r = post_arrow(client, stream(table), "response_column=y&predictor_columns=x&weights=w")
    assert r.get_json()["errors"][0]["pointer"] == "/weights"


def test_columns_left_out_by_predictor_columns_may_be_of_any_type(client):
    x, y = [1.0, 2.0, 3.0, 4.5, 6.0], [2.0, 4.1, 5.9, 9.2, 11.8]
    table = pa.table({"x": x, "nested": pa.array([{"a": [1]}] * 5), "when": pa.array(
        [0, 1, 2, 3, 4], pa.timestamp("s")), "y": y})
    r = post_arrow(client, stream(table), "response_column=y&predictor_columns=x")
    assert r.status_code == 200, r.get_json()
    ref, *_ = np.linalg.lstsq(np.column_stack([np.ones(5), x]), y, rcond=None)
    # Source: numpy.linalg.lstsq on the same rows.
    assert np.allclose([c["estimate"] for c in r.get_json()["coefficients"]], ref,
                       rtol=1e-12)
    r = post_arrow(client, stream(table), "response_column=y")
    assert r.status_code == 422
    assert r.get_json()["errors"][0]["pointer"] == "/table/nested"


def test_a_schema_wider_than_the_column_limit_is_refused_from_the_schema(client):
    table = pa.table({**{f"c{j}": [1.0, 2.0] for j in range(250)}, "y": [1.0, 2.0]})
    r = post_arrow(client, stream(table), "response_column=y")
    assert r.status_code == 422
    # 250 predictors and the intercept; the same words as the fit's own limit check.
    assert r.get_json()["errors"][0] == {
        "pointer": "/table",
        "message": "has 251 design columns, more than the limit of 200 (LINFER_MAX_COLUMNS)"}
