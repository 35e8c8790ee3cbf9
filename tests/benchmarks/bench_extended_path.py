"""The cost of the extended-precision path against the double path, in process.

    python tests/benchmarks/bench_extended_path.py [--max-work 1000000] [--cap 60]

``service.stats.lstsq.solve`` twice on the same design: forced onto the extended path
(``extended_below_digits=100, extended_max_work=10**9``) and kept in double precision
(``extended_below_digits=-1e9``). Problems: NIST StRD Filip (82 x 11, the x^k formed in
float64 as the reference tests post them), then two families with the work n * k^2 from
1e4 to 1e6: degree-10 polynomials in x (k = 11, ill-conditioned like Filip) and a
well-conditioned random design with k = 5. A family stops growing once one extended
solve takes longer than ``--cap`` seconds.

Prints the table and, per family, the largest n * k^2 whose extended solve stays under
a 1 s budget (power-law interpolation between the measured points), to set against the
default LINFER_EXTENDED_MAX_WORK = 200000 and the 60 s request timeout.
"""

from __future__ import annotations

import argparse
import json
import math
import time

from _harness import REPO, median, table, write_results

import numpy as np  # noqa: E402  (after _harness: one BLAS thread)

from service.settings import Settings  # noqa: E402
from service.stats.lstsq import solve  # noqa: E402

BUDGET_S = 1.0
TIMEOUT_S = 60.0
WORKS = [10_000, 30_000, 100_000, 200_000, 300_000, 1_000_000]


def filip() -> tuple[np.ndarray, np.ndarray]:
    entry = json.loads((REPO / "tests" / "reference" / "nist_strd.json").read_text())[
        "datasets"]["Filip"]
    x = np.array(entry["x"], dtype=float)[:, 0]
    return np.column_stack([x ** p for p in range(0, 11)]), np.array(entry["y"], dtype=float)


def polynomial(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Degree 10 in x over Filip's range (-9 to -3): k = 11 with the intercept."""
    rng = np.random.default_rng(n)
    x = rng.uniform(-9.0, -3.0, size=n)
    design = np.column_stack([x ** p for p in range(0, 11)])
    y = 0.8 + 0.01 * np.sin(x) + rng.normal(scale=0.003, size=n)
    return design, y


def random_design(n: int, k: int = 5) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(n + k)
    design = np.column_stack([np.ones(n), rng.normal(size=(n, k - 1))])
    return design, design @ rng.normal(size=k) + rng.normal(size=n)


def run(x: np.ndarray, y: np.ndarray, repeat: int) -> dict:
    def timed(**kwargs) -> tuple[float, object]:
        start = time.perf_counter()
        result = solve(x, y, centered=True, drop_aliased=True, **kwargs)
        return time.perf_counter() - start, result

    double = [timed(extended_below_digits=-1e9)[0] for _ in range(repeat)]
    t_ext, ext = timed(extended_below_digits=100, extended_max_work=10**9)
    extended = [t_ext]
    if t_ext < 0.5:
        extended += [timed(extended_below_digits=100, extended_max_work=10**9)[0]
                     for _ in range(repeat - 1)]
    _, dbl = timed(extended_below_digits=-1e9)
    assert ext.method == "extended_precision" and dbl.method == "householder_qr"
    n, k = x.shape
    return {"n": n, "k": k, "work": n * k * k, "double_s": median(double),
            "extended_s": median(extended), "ratio": median(extended) / median(double),
            "kappa": ext.condition_number, "working_digits": ext.working_digits,
            "double_digits": dbl.estimated_correct_digits}


def budget_work(points: list[dict], budget: float) -> tuple[float | None, str]:
    """The n k^2 at which the extended time reaches ``budget`` (log-log interpolation)."""
    pts = sorted((p["work"], p["extended_s"]) for p in points)
    for (w0, t0), (w1, t1) in zip(pts, pts[1:]):
        if t0 <= budget < t1:
            e = math.log(t1 / t0) / math.log(w1 / w0)
            return w0 * (budget / t0) ** (1 / e), "interpolated"
    if len(pts) < 2:
        return None, "not enough points"
    # Every point is under (or over) the budget: extrapolate from the nearest two.
    (w0, t0), (w1, t1) = pts[-2:] if pts[-1][1] <= budget else pts[:2]
    e = math.log(t1 / t0) / math.log(w1 / w0)
    return w0 * (budget / t0) ** (1 / e), "extrapolated"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--max-work", type=int, default=1_000_000)
    parser.add_argument("--cap", type=float, default=60.0,
                        help="stop a family after an extended solve longer than this (s)")
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()

    families = {
        "Filip (NIST StRD)": [filip()],
        "polynomial, k = 11": [polynomial(max(11, round(w / 121))) for w in WORKS
                               if w <= args.max_work],
        "random, k = 5": [random_design(round(w / 25)) for w in WORKS if w <= args.max_work],
        # The fewest columns give the most rows for a given n k^2: the path's per-cell
        # costs (conversions to mpf, fitted values, residuals) then weigh most.
        "random, k = 2": [random_design(round(w / 4), 2) for w in WORKS
                          if w <= args.max_work],
    }
    results: dict[str, list[dict]] = {}
    for family, problems in families.items():
        results[family] = []
        for x, y in problems:
            r = run(x, y, args.repeat)
            results[family].append(r)
            print(f"{family:20s} n={r['n']:>6} k={r['k']:>2} n*k^2={r['work']:>8}: double "
                  f"{r['double_s'] * 1e3:8.2f} ms, extended {r['extended_s'] * 1e3:10.1f} ms "
                  f"(x{r['ratio']:.0f}, {r['working_digits']:.0f} digits)")
            if r["extended_s"] > args.cap:
                print(f"  (stopping {family}: over {args.cap:g} s)")
                break

    default = Settings().extended_max_work
    rows = [[family, r["n"], r["k"], r["work"], f"{r['double_s'] * 1e3:.2f}",
             f"{r['extended_s'] * 1e3:.1f}", f"{r['ratio']:.0f}", f"{r['kappa']:.2g}",
             f"{r['working_digits']:.0f}", f"{r['double_digits']:.1f}"]
            for family, rs in results.items() for r in rs]
    budget_lines, at_budget, at_timeout, at_default = [], [], [], []
    for family, rs in results.items():
        if len(rs) < 2:
            continue
        work, how = budget_work(rs, BUDGET_S)
        timeout_work, timeout_how = budget_work(rs, TIMEOUT_S)
        t_default = _time_at(rs, default)
        at_default.append(t_default)
        at_budget.append(work)
        at_timeout.append(timeout_work)
        budget_lines.append(
            f"- {family}: largest n*k^2 under {BUDGET_S:g} s: **{work:,.0f}** ({how}); "
            f"extended time at the default {default:,}: ~{t_default:.2f} s; one solve "
            f"reaches the {TIMEOUT_S:g} s timeout near n*k^2 = {timeout_work:,.0f} "
            f"({timeout_how})")
    conclusion = (
        f"The default LINFER_EXTENDED_MAX_WORK = {default:,} costs at most "
        f"~{max(at_default):.2f} s on the extended path here (worst family); the {BUDGET_S:g} s "
        f"budget is reached at n*k^2 ~ {min(at_budget):,.0f} in the worst family, and the "
        f"{TIMEOUT_S:g} s request timeout only near {min(at_timeout):,.0f} "
        f"({min(at_timeout) / default:.0f} x the default). The cost follows n*k (per-cell "
        "conversions) as much as n*k^2: at equal n*k^2 the fewest columns cost most.")
    md = "\n".join([
        "# Extended-precision path vs double path (service.stats.lstsq.solve, in process)",
        "",
        table(["problem", "n", "k", "n*k^2", "double ms", "extended ms", "x", "kappa",
               "ext digits", "double digits"], rows),
        "",
        *budget_lines,
        "",
        conclusion,
    ])
    print("\n" + md)
    write_results("extended_path", {"families": results, "budget_s": BUDGET_S,
                                    "default_extended_max_work": default}, md)


def _time_at(points: list[dict], work: float) -> float:
    """The extended time at ``work``, by log-log interpolation (or the nearest segment)."""
    pts = sorted((p["work"], p["extended_s"]) for p in points)
    for (w0, t0), (w1, t1) in zip(pts, pts[1:]):
        if w0 <= work <= w1 or (w1, t1) == pts[-1]:
            e = math.log(t1 / t0) / math.log(w1 / w0)
            return t0 * (work / w0) ** e
    return pts[-1][1]


if __name__ == "__main__":
    main()
