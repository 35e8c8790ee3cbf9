"""Fit rows that stay in Dask: post the triangular summary (R of [1 X y]) instead of the rows.

A dask.array of 2,000,000 invented warehouse days in 8 chunks (each chunk drawn from its
own fixed seed, so the data are the same on every run and every scheduler) is reduced
to the 5 x 5 R factor of ``[1 temp_c door_openings pallets_received kwh]`` by
``dask.array.linalg.tsqr``: every chunk is factored where it lives, the chunk R factors
are stacked and factored again. Only those 25 numbers travel to linfer, through the
Python client (``service.client.summary_from_dask`` and ``Client.fit_summary``).

Run from the repository root with a service running (its row limits must allow the
summary's n_observations; see client_examples/cluster/README.md)::

    pip install "dask[array]"
    LINFER_URL=http://127.0.0.1:8000 python client_examples/cluster/dask_summary.py

Options: ``--rows N``, ``--chunks K``, ``--seed S``, ``--scheduler threads|synchronous``,
``--check`` (also compute the arrays and fit them with numpy.linalg.lstsq on this
machine; exits 1 when estimates or standard errors differ by more than 1e-10
relative), ``--json`` (print one JSON document: the summary, the answer and the check).
Exits 1 after printing the problem document when the service answers with an error.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path
from typing import Any

import dask
import dask.array as da
import numpy as np

try:
    from service.client import ApiError, Client, LinferError, summary_from_dask
except ImportError:  # run from a checkout without `pip install -e .`
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
    from service.client import ApiError, Client, LinferError, summary_from_dask

PREDICTORS = ["temp_c", "door_openings", "pallets_received"]
RESPONSE = "kwh"
ROWS = 2_000_000
CHUNKS = 8
SEED = 20261202
CHECK_RTOL = 1e-10
# The data are drawn with 2.1 kWh per door opening: a test that should not reject.
HYPOTHESES = [{"label": "2.1 kWh per door opening",
               "restrictions": [{"coefficients": {"door_openings": 1}, "equals": 2.1}]}]


def _chunk(seed: int, block_info: dict | None = None) -> np.ndarray:
    """One chunk of days: temp_c, door_openings, pallets_received, kwh (seeded by its index)."""
    info = block_info[None]
    rows = info["chunk-shape"][0]
    rng = np.random.default_rng([seed, info["chunk-location"][0]])
    temp = np.round(rng.normal(8.0, 9.0, rows), 1)
    doors = rng.integers(80, 420, rows).astype(float)
    pallets = rng.integers(10, 130, rows).astype(float)
    kwh = 1200.0 + 38.0 * temp + 2.1 * doors + 4.5 * pallets + rng.normal(0.0, 60.0, rows)
    return np.column_stack([temp, doors, pallets, np.round(kwh, 1)])


def make_data(rows: int = ROWS, chunks: int = CHUNKS, seed: int = SEED) -> tuple[Any, Any]:
    """The predictors (rows x 3) and the response (rows) as lazy dask arrays, ``chunks`` chunks."""
    sizes = [rows // chunks + (1 if i < rows % chunks else 0) for i in range(chunks)]
    days = da.map_blocks(_chunk, seed, dtype=float, chunks=(tuple(sizes), (4,)))
    return days[:, :3], days[:, 3]


def numpy_fit(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Estimates (numpy.linalg.lstsq) and classical standard errors on one machine."""
    design = np.column_stack([np.ones(len(y)), x])
    beta, rss, rank, _ = np.linalg.lstsq(design, y, rcond=None)
    n, p = design.shape
    r = np.linalg.qr(design, mode="r")
    r_inv = np.linalg.solve(r, np.eye(p))         # triangular: (X'X)^-1 = R^-1 R^-T
    sigma2 = float(rss[0]) / (n - p)
    return beta, np.sqrt(sigma2 * np.sum(r_inv * r_inv, axis=1))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rows", type=int, default=ROWS)
    parser.add_argument("--chunks", type=int, default=CHUNKS)
    parser.add_argument("--seed", type=int, default=SEED)
    parser.add_argument("--scheduler", choices=["threads", "synchronous"], default="threads")
    parser.add_argument("--check", action="store_true")
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args(argv)

    client = Client(os.environ.get("LINFER_URL", "http://127.0.0.1:8000"), timeout=30)
    x, y = make_data(args.rows, args.chunks, args.seed)
    with dask.config.set(scheduler=args.scheduler):
        started = time.perf_counter()
        summary = summary_from_dask(x, y, PREDICTORS, intercept=True)
        summary_seconds = time.perf_counter() - started
        try:
            result = client.fit_summary(summary, hypotheses=HYPOTHESES, return_model=True)
        except ApiError as err:
            print(json.dumps(err.problem, indent=2), file=sys.stderr)
            return 1
        except LinferError as err:
            print(f"error: {err}", file=sys.stderr)
            return 1
        check: dict[str, Any] | None = None
        if args.check:
            xs, ys = dask.compute(x, y)
            beta, se = numpy_fit(xs, ys)
            got_b = np.array([c.estimate for c in result.coefficients])
            got_se = np.array([c.standard_error for c in result.coefficients])
            check = {"max_relative_difference_estimates": float(np.max(abs(got_b - beta)
                                                                       / abs(beta))),
                     "max_relative_difference_standard_errors": float(np.max(abs(got_se - se)
                                                                             / se)),
                     "numpy_estimates": beta.tolist(), "numpy_standard_errors": se.tolist()}

    if args.json:
        print(json.dumps({"rows": args.rows, "chunks": args.chunks, "seed": args.seed,
                          "summary_seconds": summary_seconds, "summary": summary,
                          "fit": result.raw, "check": check}))
    else:
        print(f"{args.rows} rows in {args.chunks} chunks -> R factor "
              f"{len(summary['r_factor'])} x {len(summary['r_factor'])} in "
              f"{summary_seconds:.2f} s ({args.scheduler} scheduler); fitted by linfer:")
        print(f"{'name':<18}{'estimate':>14}{'std. error':>14}{'t':>10}")
        for c in result.coefficients:
            print(f"{c.name:<18}{c.estimate:>14.6f}{c.standard_error:>14.6f}"
                  f"{c.t_statistic:>10.1f}")
        print(f"R^2 {result.fit.r_squared:.6f}, residual SD "
              f"{result.fit.residual_standard_deviation:.4f}, "
              f"digits {result.numerics.estimated_correct_digits}")
        for h in result.hypotheses:
            print(f"test {h.label!r}: F {h.statistic:.3f} on {h.numerator_df:g} and "
                  f"{h.denominator_df:g} df, p {h.p_value:.3g}")
        for w in result.warnings:
            print(f"warning {w.code}: {w.message}")
        if check is not None:
            print(f"numpy.linalg.lstsq on the same {args.rows} rows: estimates differ by at most "
                  f"{check['max_relative_difference_estimates']:.2g}, standard errors by "
                  f"{check['max_relative_difference_standard_errors']:.2g} (relative)")
    if check is not None and max(check["max_relative_difference_estimates"],
                                 check["max_relative_difference_standard_errors"]) > CHECK_RTOL:
        print(f"error: the summary fit differs from numpy by more than {CHECK_RTOL}",
              file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
