"""Large tables as Apache Arrow IPC streams against the same data as JSON, end to end.

    python tests/benchmarks/bench_arrow.py [--rows 1000000] [--repeat 3]

For a rows x 10 table, POST /v1/fit to `linfer serve --workers 2` on 127.0.0.1 with
the table as JSON (table layout) and as an Arrow IPC stream (options in the query),
from the first byte sent to the last byte of the answer read; and the Arrow floor in
this process: ``pyarrow`` stream read, the columns as numpy float64, the intercept
column and one ``scipy.linalg.qr(mode="economic")``.

Also the peak memory growth of the serving worker per Arrow request (VmHWM after minus
VmRSS before, reset first) over the stream's size.

Goals from the issue "Serving for real": Arrow at least 5 x faster end to end than
JSON at 1,000,000 x 10, within 1.5 x of the Arrow floor, and a worker's peak growth at
most 3 x the body.
"""

from __future__ import annotations

import argparse
import time

from _harness import linfer_server, median, served_request, table, write_results

import numpy as np  # noqa: E402  (after _harness: one BLAS thread)
import orjson  # noqa: E402
import pyarrow as pa  # noqa: E402
import pyarrow.ipc  # noqa: E402
import scipy.linalg  # noqa: E402


PREDICTORS, SEED = 10, 11
ARROW = "application/vnd.apache.arrow.stream"


def columns(rows: int) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(SEED)
    x = rng.normal(size=(rows, PREDICTORS)) * np.linspace(1.0, 50.0, PREDICTORS)
    y = 10.0 + x @ np.linspace(-2.0, 2.0, PREDICTORS) + rng.normal(scale=5.0, size=rows)
    out = {f"x{j + 1}": x[:, j].copy() for j in range(PREDICTORS)}
    out["y"] = y
    return out


def arrow_body(cols: dict[str, np.ndarray]) -> bytes:
    table_ = pa.table(cols)
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, table_.schema) as writer:
        writer.write_table(table_)
    return sink.getvalue().to_pybytes()


def arrow_floor(body: bytes) -> float:
    start = time.perf_counter()
    read = pa.ipc.open_stream(pa.py_buffer(body)).read_all()
    arrays = [read.column(n).to_numpy() for n in read.column_names]
    x = np.column_stack([np.ones(arrays[0].shape[0])] + arrays[:-1])
    scipy.linalg.qr(x, mode="economic")
    return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    cols = columns(args.rows)
    json_body = orjson.dumps({"table": {k: v.tolist() for k, v in cols.items()},
                              "response_column": "y"})
    arrow = arrow_body(cols)
    env = {"LINFER_MAX_BODY_BYTES": str(2 * len(json_body)),
           "LINFER_MAX_ROWS": str(args.rows), "LINFER_MAX_CELLS": str(args.rows * 12),
           "LINFER_TIMEOUT": "600"}
    arrow_path = "/v1/fit?response_column=y"
    with linfer_server(env=env, label="arrow") as server:
        for _ in range(2):  # warm both workers
            served_request(server, arrow_path, arrow, ARROW)
        json_s = median([served_request(server, "/v1/fit", json_body, "application/json")[0]
                         for _ in range(args.repeat)])
        arrow_runs = [served_request(server, arrow_path, arrow, ARROW)
                      for _ in range(args.repeat)]
    arrow_s = median([seconds for seconds, _, _ in arrow_runs])
    growth = median([grown for _, grown, _ in arrow_runs]) / len(arrow)
    reset = all(r for _, _, r in arrow_runs)
    floor_s = median([arrow_floor(arrow) for _ in range(args.repeat)])
    rows = [[f"{args.rows} x {PREDICTORS}", f"{len(json_body) / 1e6:.1f}",
             f"{len(arrow) / 1e6:.1f}", f"{json_s:.3f}", f"{arrow_s:.3f}",
             f"{floor_s:.3f}", f"{json_s / arrow_s:.2f}", f"{arrow_s / floor_s:.2f}",
             f"{growth:.2f}"]]
    md = ("# Arrow IPC stream against JSON, end to end\n\n"
          + table(["design", "JSON MB", "Arrow MB", "JSON s", "Arrow s", "Arrow floor s",
                   "JSON / Arrow", "Arrow / floor", "Arrow growth / body"], rows)
          + f"\n\nGoals: JSON / Arrow >= 5 ({'meets' if json_s / arrow_s >= 5 else 'misses'})"
          f"; Arrow / floor <= 1.5 ({'meets' if arrow_s / floor_s <= 1.5 else 'misses'})"
          f"; worker peak growth per Arrow request <= 3 x body "
          f"({'meets' if growth <= 3 else 'misses'}"
          + ("" if reset else "; VmHWM not resettable: growth counted from the older peak")
          + ").\n")
    print(md)
    write_results("arrow", {"rows": args.rows, "json_seconds": json_s,
                            "arrow_seconds": arrow_s, "arrow_floor_seconds": floor_s,
                            "arrow_peak_growth_over_body": growth, "hwm_reset": reset,
                            "json_bytes": len(json_body), "arrow_bytes": len(arrow)}, md)


if __name__ == "__main__":
    main()
