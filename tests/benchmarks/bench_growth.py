"""Fit time against rows (1e3 to 1e6) and columns (2 to 200), in process.

    python tests/benchmarks/bench_growth.py [--max-rows 1000000] [--repeat 3]

Each point is the median of a few calls of ``service.stats.fit.fit`` (solve, infer,
conditioning, residual checks: everything after decoding) on a seeded, well-conditioned
design with an intercept. Rows grow at 10 columns; columns grow at 5,000 rows. The
log-log slope against rows should be about 1 (linear growth: the QR is O(n k^2) and
everything else O(n k)); against columns, between 1 and 2.

Writes tests/benchmarks/results/growth.{json,md} and growth.png (matplotlib; the plot
is skipped, with a message, when it is not installed).
"""

from __future__ import annotations

import argparse
import time

from _harness import RESULTS, median, table, write_results

import numpy as np  # noqa: E402  (after _harness: one BLAS thread)

from service.stats.design import build_design  # noqa: E402
from service.stats.fit import FitOptions, fit  # noqa: E402

ROW_COLUMNS = 10
COLUMN_ROWS = 5_000
SEED = 3


def time_fit(n: int, k: int, repeat: int) -> float:
    rng = np.random.default_rng(SEED + n + k)
    x = rng.normal(size=(n, k - 1))
    y = 1.0 + x @ rng.normal(size=k - 1) + rng.normal(size=n)
    design = build_design(x, y, tuple(f"x{j + 1}" for j in range(k - 1)), intercept=True)
    options = FitOptions()
    fit(design, options)  # warm-up (lazy imports, caches)
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        result = fit(design, options)
        times.append(time.perf_counter() - start)
    assert result.numerics.method == "householder_qr"
    return median(times)


def slope(xs: list[float], ys: list[float]) -> float:
    """Least-squares slope of log(y) on log(x) (the growth exponent)."""
    return float(np.polyfit(np.log(xs), np.log(ys), 1)[0])


def plot(by_rows: list[tuple[int, float]], by_columns: list[tuple[int, float]]) -> str:
    try:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        return "matplotlib is not installed: no plot (pip install matplotlib)"
    fig, (left, right) = plt.subplots(1, 2, figsize=(11, 4.5))
    n, t = zip(*by_rows)
    left.loglog(n, t, "o-", label="fit")
    left.loglog(n, [t[0] * v / n[0] for v in n], "--", color="grey", label="linear")
    left.set(xlabel="rows", ylabel="seconds", title=f"fit time vs rows ({ROW_COLUMNS} columns)")
    left.legend()
    k, t = zip(*by_columns)
    right.loglog(k, t, "o-", label="fit")
    right.loglog(k, [t[-1] * (v / k[-1]) for v in k], "--", color="grey", label="linear")
    right.loglog(k, [t[-1] * (v / k[-1]) ** 2 for v in k], ":", color="grey",
                 label="quadratic")
    right.set(xlabel="design columns", ylabel="seconds",
              title=f"fit time vs columns ({COLUMN_ROWS} rows)")
    right.legend()
    fig.tight_layout()
    RESULTS.mkdir(exist_ok=True)
    path = RESULTS / "growth.png"
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return f"plot: {path}"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--max-rows", type=int, default=1_000_000)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    rows = [n for n in (1_000, 3_000, 10_000, 30_000, 100_000, 300_000, 1_000_000)
            if n <= args.max_rows]
    columns = [2, 5, 10, 20, 50, 100, 200]
    by_rows = []
    for n in rows:
        by_rows.append((n, time_fit(n, ROW_COLUMNS, args.repeat)))
        print(f"rows {n:>9}: {by_rows[-1][1] * 1e3:9.2f} ms")
    by_columns = []
    for k in columns:
        by_columns.append((k, time_fit(COLUMN_ROWS, k, args.repeat)))
        print(f"columns {k:>4}: {by_columns[-1][1] * 1e3:9.2f} ms")
    # Growth exponents over the upper part, where fixed per-call costs no longer dominate.
    row_slope = slope(*zip(*[p for p in by_rows if p[0] >= 10_000]))
    column_slope = slope(*zip(*[p for p in by_columns if p[0] >= 20]))
    per_million = [t / (n * ROW_COLUMNS) * 1e6 for n, t in by_rows]
    plot_note = plot(by_rows, by_columns)
    md = "\n".join([
        "# Fit time growth (in process, service.stats.fit)",
        "",
        f"## Rows ({ROW_COLUMNS} columns, intercept included)",
        "",
        table(["rows", "ms", "s per million cells"],
              [[n, f"{t * 1e3:.2f}", f"{c:.3f}"] for (n, t), c in zip(by_rows, per_million)]),
        "",
        f"Growth exponent (log-log slope, rows >= 10,000): **{row_slope:.2f}** "
        "(1 = linear).",
        "",
        f"## Columns ({COLUMN_ROWS} rows)",
        "",
        table(["columns", "ms"], [[k, f"{t * 1e3:.2f}"] for k, t in by_columns]),
        "",
        f"Growth exponent (columns >= 20): **{column_slope:.2f}** (QR is O(n k^2)).",
        "",
        plot_note,
    ])
    print("\n" + md)
    write_results("growth", {"by_rows": by_rows, "by_columns": by_columns,
                             "row_columns": ROW_COLUMNS, "column_rows": COLUMN_ROWS,
                             "row_exponent": row_slope, "column_exponent": column_slope}, md)


if __name__ == "__main__":
    main()
