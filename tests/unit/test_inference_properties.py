"""Properties of the follow-up inference that must hold for any data (hypothesis).

The data are drawn from a seeded numpy generator whose seed, size and shape hypothesis
picks; every test is bounded (at most 40 examples, derandomized, no deadline) so the
whole file runs in seconds. Each property is a mathematical identity or inequality,
not a number copied from the service:

* t statistics, p values and hypothesis F statistics do not change when a predictor is
  rescaled by a power of ten (the restriction's multiplier on that predictor rescaled
  with it), nor when the predictor columns are reordered;
* the F statistic of one restriction ``beta_j = 0`` is the square of beta_j's t
  statistic (classical and HC3);
* classically, the Wald F equals the partial F from the restricted fit:
  ``RSS_r - RSS = m F s^2`` (Seber and Lee 2003, theorem 4.1), with ``RSS_r`` from a
  second fit of the restricted model;
* Bonferroni and Scheffe intervals contain the one-at-a-time intervals (p >= 2 here);
* band (Working-Hotelling) and observation intervals contain the mean intervals;
* /v1/predict answers the same from the model summary as from the data.
"""

from __future__ import annotations

import json
import math

import numpy as np
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from service.app import create_app

CLIENT = create_app().test_client()
PROPERTY = settings(max_examples=30, deadline=None, derandomize=True, database=None,
                    suppress_health_check=[HealthCheck.too_slow])
FEW = settings(max_examples=25, deadline=None, derandomize=True, database=None,
               suppress_health_check=[HealthCheck.too_slow])

RTOL_T = 1e-8       # t and F statistics under rescaling / reordering
RTOL_P = 1e-6       # p values (their relative error is about t^2 times that of t)


def post(path, body, status=200):
    resp = CLIENT.post(path, data=json.dumps(body), content_type="application/json")
    assert resp.status_code == status, resp.get_data(as_text=True)
    return resp.get_json()


def make_data(seed, n, k, hetero=True):
    """Seeded, well-conditioned data: k predictors of assorted location and spread."""
    rng = np.random.default_rng(seed)
    loc = rng.uniform(-5, 5, k)
    spread = rng.uniform(0.5, 3.0, k)
    x = loc + spread * rng.normal(size=(n, k))
    beta = rng.uniform(-2, 2, k)
    scale = 0.5 + (0.5 * np.abs(x[:, 0] - loc[0]) if hetero else 0.0)
    y = 1.0 + x @ beta + scale * rng.normal(size=n)
    names = [f"x{j + 1}" for j in range(k)]
    return x, y, names


def body_for(x, y, names, **options):
    return {"design_matrix": np.asarray(x).tolist(), "response": np.asarray(y).tolist(),
            "column_names": list(names), **options}


def close(a, b, rtol, atol=0.0):
    if a is None or b is None:
        return a is None and b is None
    return math.isclose(a, b, rel_tol=rtol, abs_tol=atol)


shapes = st.tuples(st.integers(0, 2**32 - 1), st.integers(10, 40), st.integers(1, 4))
covariances = st.sampled_from(["classical", "hc0", "hc1", "hc2", "hc3"])
levels = st.lists(st.sampled_from([0.5, 0.8, 0.9, 0.95, 0.99, 0.999]), min_size=1, max_size=3,
                  unique=True)


def _hypotheses(names, multipliers=None):
    """Two sets: a joint test on the first (and last) predictor, and a contrast."""
    m = multipliers or {}
    first, last = names[0], names[-1]
    sets = [{"label": "joint", "restrictions": [{"coefficients": {first: m.get(first, 1.0)},
                                                 "equals": 0.0}]}]
    if last != first:
        sets[0]["restrictions"].append({"coefficients": {last: m.get(last, 1.0)}, "equals": 0.0})
        sets.append({"label": "contrast", "restrictions": [{"coefficients": {
            first: m.get(first, 1.0), last: -2.0 * m.get(last, 1.0)}, "equals": 0.25}]})
    else:
        sets.append({"label": "contrast", "restrictions": [{"coefficients": {
            first: m.get(first, 1.0), "intercept": -1.0}, "equals": 0.25}]})
    return sets


# ---------------------------------------------------------------------- invariance


@PROPERTY
@given(shape=shapes, exponent=st.integers(-6, 6).filter(lambda e: e != 0),
       which=st.integers(0, 3), covariance=covariances)
def test_rescaling_a_predictor_leaves_t_p_and_f_alone(shape, exponent, which, covariance):
    seed, n, k = shape
    j = which % k
    x, y, names = make_data(seed, n, k)
    c = 10.0 ** exponent
    x2 = x.copy()
    x2[:, j] = x[:, j] * c
    a = post("/v1/fit", body_for(x, y, names, covariance=covariance,
                                 hypotheses=_hypotheses(names)))
    # beta_j becomes beta_j / c, so a multiplier m on it becomes m c.
    b = post("/v1/fit", body_for(x2, y, names, covariance=covariance,
                                 hypotheses=_hypotheses(names, {names[j]: c})))
    for ca, cb in zip(a["coefficients"], b["coefficients"]):
        assert close(ca["t_statistic"], cb["t_statistic"], RTOL_T), (ca, cb)
        assert close(ca["p_value"], cb["p_value"], RTOL_P, 1e-300), (ca, cb)
    jb = b["coefficients"][j + 1]
    ja = a["coefficients"][j + 1]
    assert close(jb["estimate"] * c, ja["estimate"], 1e-8)
    assert close(jb["standard_error"] * c, ja["standard_error"], 1e-8)
    for ha, hb in zip(a["hypotheses"], b["hypotheses"]):
        assert close(ha["statistic"], hb["statistic"], RTOL_T), (ha, hb)
        assert close(ha["p_value"], hb["p_value"], RTOL_P, 1e-300), (ha, hb)
    assert close(a["overall_f_test"]["statistic"], b["overall_f_test"]["statistic"], RTOL_T)


@PROPERTY
@given(shape=shapes, order=st.permutations(range(4)), covariance=covariances)
def test_reordering_the_predictors_leaves_t_p_and_f_alone(shape, order, covariance):
    seed, n, k = shape
    x, y, names = make_data(seed, n, k)
    perm = [i for i in order if i < k]
    hyps = _hypotheses(names)
    a = post("/v1/fit", body_for(x, y, names, covariance=covariance, hypotheses=hyps))
    b = post("/v1/fit", body_for(x[:, perm], y, [names[i] for i in perm],
                                 covariance=covariance, hypotheses=hyps))
    by_name = {c["name"]: c for c in b["coefficients"]}
    for ca in a["coefficients"]:
        cb = by_name[ca["name"]]
        assert close(ca["estimate"], cb["estimate"], 1e-9, 1e-12 * abs(ca["standard_error"]))
        assert close(ca["t_statistic"], cb["t_statistic"], RTOL_T, 1e-9), (ca, cb)
        assert close(ca["p_value"], cb["p_value"], RTOL_P, 1e-300), (ca, cb)
    for ha, hb in zip(a["hypotheses"], b["hypotheses"]):
        assert close(ha["statistic"], hb["statistic"], RTOL_T), (ha, hb)
        assert close(ha["p_value"], hb["p_value"], RTOL_P, 1e-300), (ha, hb)
    assert close(a["residual_checks"]["breusch_pagan"]["statistic"],
                 b["residual_checks"]["breusch_pagan"]["statistic"], 1e-8, 1e-12)


@PROPERTY
@given(shape=shapes.filter(lambda s: s[2] >= 2), up=st.integers(0, 6), down=st.integers(0, 6),
       covariance=st.sampled_from(["classical", "hc3"]))
@example(shape=(1, 20, 2), up=6, down=6, covariance="classical")
@example(shape=(1, 20, 2), up=6, down=5, covariance="hc3")
def test_rescaling_two_predictors_leaves_joint_tests_alone(shape, up, down, covariance):
    """Two predictors rescaled in opposite directions (each by at most 1e6): a set that ties
    them in one restriction is the same hypothesis, so it gets the same F."""
    seed, n, k = shape
    x, y, names = make_data(seed, n, k)
    a, b = names[0], names[1]
    ca, cb = 10.0 ** up, 10.0 ** -down
    x2 = x.copy()
    x2[:, 0] *= ca
    x2[:, 1] *= cb

    def hyps(ma, mb):
        # beta_a = 0 and beta_a = beta_b (that is, both are zero): in the original units a
        # well-conditioned set; in the rescaled ones its second row is (ma, -mb) with
        # mb / ma as small as 1e-12, which must not make it look like a repeat of the first.
        return [{"label": "tied", "restrictions": [
                    {"coefficients": {a: ma}, "equals": 0.0},
                    {"coefficients": {a: ma, b: -mb}, "equals": 0.0}]},
                {"label": "tied, other order", "restrictions": [
                    {"coefficients": {a: ma, b: mb}, "equals": 0.0},
                    {"coefficients": {b: mb}, "equals": 0.0}]}]

    one = post("/v1/fit", body_for(x, y, names, covariance=covariance, hypotheses=hyps(1.0, 1.0)))
    resp = CLIENT.post("/v1/fit", data=json.dumps(body_for(
        x2, y, names, covariance=covariance, hypotheses=hyps(ca, cb))),
        content_type="application/json")
    assert resp.status_code == 200, resp.get_json()
    two = resp.get_json()
    for ha, hb in zip(one["hypotheses"], two["hypotheses"]):
        assert close(ha["statistic"], hb["statistic"], RTOL_T), (ha, hb)
        assert close(ha["p_value"], hb["p_value"], RTOL_P, 1e-300), (ha, hb)


@FEW
@given(shape=shapes, exponent=st.integers(-120, 120), covariance=covariances)
@example(shape=(3, 20, 2), exponent=100, covariance="classical")
@example(shape=(3, 20, 2), exponent=-100, covariance="classical")
def test_rescaling_the_response_leaves_t_p_f_and_residual_checks_alone(shape, exponent,
                                                                       covariance):
    """y times 10^e: estimates and residuals scale, every test statistic and the scale-free
    residual checks (skewness, kurtosis, Durbin-Watson, Jarque-Bera, Breusch-Pagan) do not.
    The solver equilibrates y by a power of two, so this holds far beyond 1e+-77."""
    seed, n, k = shape
    x, y, names = make_data(seed, n, k)
    c = 10.0 ** exponent
    hyps = _hypotheses(names)
    scaled = json.loads(json.dumps(hyps))  # beta scales with y, and so must q
    for h in scaled:
        for r in h["restrictions"]:
            r["equals"] *= c
    a = post("/v1/fit", body_for(x, y, names, covariance=covariance, hypotheses=hyps))
    resp = CLIENT.post("/v1/fit", data=json.dumps(body_for(
        x, y * c, names, covariance=covariance, hypotheses=scaled)),
        content_type="application/json")
    assert resp.status_code == 200, resp.get_json()
    b = resp.get_json()
    for ca, cb in zip(a["coefficients"], b["coefficients"]):
        assert close(ca["t_statistic"], cb["t_statistic"], RTOL_T), (ca, cb)
        assert close(ca["p_value"], cb["p_value"], RTOL_P, 1e-300)
        assert close(ca["estimate"] * c, cb["estimate"], 1e-9, 1e-9 * c * ca["standard_error"])
    for ha, hb in zip(a["hypotheses"], b["hypotheses"]):
        assert close(ha["statistic"], hb["statistic"], RTOL_T), (ha, hb)
    ra, rb = a["residual_checks"], b["residual_checks"]
    for key in ("skewness", "kurtosis", "durbin_watson"):
        assert close(ra[key], rb[key], 1e-8, 1e-10), (key, ra[key], rb[key])
    for test in ("jarque_bera", "breusch_pagan"):
        assert close(ra[test]["statistic"], rb[test]["statistic"], 1e-8, 1e-10), test
        assert close(ra[test]["p_value"], rb[test]["p_value"], 1e-6, 1e-12), test
    for qa, qb in zip(ra["quantiles"], rb["quantiles"]):
        assert close(qa["value"] * c, qb["value"], 1e-8, 1e-8 * c * abs(ra["quantiles"][0]["value"]))


# ------------------------------------------------------------------ F versus t, RSS


@PROPERTY
@given(shape=shapes, which=st.integers(0, 4), covariance=st.sampled_from(["classical", "hc3"]))
def test_one_restriction_f_is_t_squared(shape, which, covariance):
    seed, n, k = shape
    x, y, names = make_data(seed, n, k)
    all_names = ["intercept"] + names
    name = all_names[which % len(all_names)]
    doc = post("/v1/fit", body_for(x, y, names, covariance=covariance, hypotheses=[
        {"label": name, "restrictions": [{"coefficients": {name: 1.0}, "equals": 0.0}]},
        {"label": "scaled", "restrictions": [{"coefficients": {name: -3.5}, "equals": 0.0}]}]))
    t = next(c["t_statistic"] for c in doc["coefficients"] if c["name"] == name)
    p = next(c["p_value"] for c in doc["coefficients"] if c["name"] == name)
    for h in doc["hypotheses"]:
        assert close(h["statistic"], t * t, 1e-10), (h, t)
        assert close(h["p_value"], p, 1e-8, 1e-300), (h, p)
        assert h["numerator_df"] == 1 and h["denominator_df"] == doc["residual_df"]


@PROPERTY
@given(shape=shapes.filter(lambda s: s[2] >= 2), weighted=st.booleans())
def test_partial_f_equals_wald_f(shape, weighted):
    seed, n, k = shape
    x, y, names = make_data(seed, n, k)
    w = np.random.default_rng(seed + 1).uniform(0.3, 3.0, n) if weighted else None
    extra = {"weights": w.tolist()} if weighted else {}
    # Set 1: the last two slopes are zero (drop them). Set 2: the first two slopes are
    # equal (replace them by their sum). Set 3: the first slope is 0.5 (move it to y).
    a, b = names[-2], names[-1]
    hyps = [{"label": "drop", "restrictions": [{"coefficients": {a: 1}, "equals": 0},
                                               {"coefficients": {b: 1}, "equals": 0}]},
            {"label": "equal", "restrictions": [{"coefficients": {names[0]: 1, names[1]: -1},
                                                 "equals": 0}]},
            {"label": "offset", "restrictions": [{"coefficients": {names[0]: 1},
                                                  "equals": 0.5}]}]
    full = post("/v1/fit", body_for(x, y, names, hypotheses=hyps, **extra))
    rss = full["fit"]["residual_sum_of_squares"]
    s2 = full["fit"]["residual_standard_deviation"] ** 2
    assert close(rss / full["residual_df"], s2, 1e-12)

    def restricted_rss(xr, yr, nr):
        if xr.shape[1] == 0:
            xr = np.empty((n, 0))
        doc = post("/v1/fit", body_for(xr, yr, nr, **extra)) if nr else None
        if doc is None:  # intercept only
            yy = np.asarray(yr)
            ww = np.ones(n) if w is None else w
            mean = np.sum(ww * yy) / np.sum(ww)
            return float(np.sum(ww * (yy - mean) ** 2))
        return doc["fit"]["residual_sum_of_squares"]

    keep = [j for j in range(k) if names[j] not in (a, b)]
    rss_drop = restricted_rss(x[:, keep], y, [names[j] for j in keep])
    merged = np.column_stack([x[:, 0] + x[:, 1], x[:, 2:]])
    rss_equal = restricted_rss(merged, y, ["sum"] + names[2:])
    rss_offset = restricted_rss(x[:, 1:], y - 0.5 * x[:, 0], names[1:])
    for h, rss_r in zip(full["hypotheses"], [rss_drop, rss_equal, rss_offset]):
        m = h["numerator_df"]
        partial = (rss_r - rss) / (m * s2)
        assert close(h["statistic"], partial, 1e-7, 1e-9), (h, partial)
        assert close(h["restricted_residual_sum_of_squares"], rss_r, 1e-9), (h, rss_r)
        assert close(h["unrestricted_residual_sum_of_squares"], rss, 1e-12)
        assert close(h["restricted_residual_sum_of_squares"] - rss, m * h["statistic"] * s2,
                     1e-9, 1e-12 * rss)


# ---------------------------------------------------------------- interval ordering


def _contains(outer, inner):
    return outer["lower"] <= inner["lower"] and inner["upper"] <= outer["upper"]


@PROPERTY
@given(shape=shapes, lv=levels, covariance=covariances)
def test_simultaneous_intervals_contain_one_at_a_time_intervals(shape, lv, covariance):
    seed, n, k = shape
    x, y, names = make_data(seed, n, k)
    for method in ("bonferroni", "scheffe"):
        doc = post("/v1/fit", body_for(x, y, names, covariance=covariance, levels=lv,
                                       simultaneous=method))
        assert doc["simultaneous"]["family_size"] == k + 1 >= 2
        for c in doc["coefficients"]:
            assert len(c["simultaneous_intervals"]) == len(lv)
            for single, joint in zip(c["intervals"], c["simultaneous_intervals"]):
                assert single["level"] == joint["level"]
                assert _contains(joint, single), (method, c)
                # strictly wider: p >= 2 coefficients share the error rate
                assert joint["upper"] - joint["lower"] > single["upper"] - single["lower"]


@PROPERTY
@given(shape=shapes, lv=levels, covariance=covariances, m=st.integers(1, 5))
def test_band_and_observation_intervals_contain_mean_intervals(shape, lv, covariance, m):
    seed, n, k = shape
    x, y, names = make_data(seed, n, k)
    rng = np.random.default_rng(seed ^ 0x5EED)
    new = (x.mean(axis=0) + x.std(axis=0) * rng.normal(0, 2, (m, k))).tolist()
    model = post("/v1/fit", body_for(x, y, names, covariance=covariance,
                                     return_model=True))["model"]
    out = {kind: post("/v1/predict", {"model": model, "new_rows": new, "levels": lv,
                                      "kind": kind})["predictions"]
           for kind in ("mean", "observation", "band")}
    weighted = post("/v1/predict", {"model": model, "new_rows": new, "levels": lv,
                                    "kind": "observation",
                                    "new_weights": rng.uniform(0.1, 10, m).tolist()})
    for i in range(m):
        mean = out["mean"][i]
        for kind in ("observation", "band"):
            other = out[kind][i]
            assert other["mean"] == mean["mean"]
            assert other["standard_error"] == mean["standard_error"]
            for iv_m, iv_o in zip(mean["intervals"], other["intervals"]):
                assert _contains(iv_o, iv_m), (kind, iv_m, iv_o)
        for iv_m, iv_o in zip(mean["intervals"], weighted["predictions"][i]["intervals"]):
            assert _contains(iv_o, iv_m)
        # and every interval widens with the level
        for kind in out:
            ivs = sorted(out[kind][i]["intervals"], key=lambda iv: iv["level"])
            for lo, hi in zip(ivs, ivs[1:]):
                assert _contains(hi, lo)


# ------------------------------------------------------------- model == data answers


@FEW
@given(shape=shapes, covariance=covariances, kind=st.sampled_from(["mean", "observation", "band"]),
       weighted=st.booleans(), table=st.booleans())
def test_predict_from_model_equals_predict_from_data(shape, covariance, kind, weighted, table):
    seed, n, k = shape
    x, y, names = make_data(seed, n, k)
    rng = np.random.default_rng(seed + 7)
    data = body_for(x, y, names, covariance=covariance)
    if weighted:
        data["weights"] = rng.uniform(0.2, 5.0, n).tolist()
    new = (x[:3] + rng.normal(0, 1, (3, k))).tolist()
    if table:
        rows = {"new_table": {name: [r[j] for r in new] for j, name in enumerate(names)}}
    else:
        rows = {"new_rows": new}
    query = {"levels": [0.9, 0.99], "kind": kind, **rows}
    if kind == "observation":
        query["new_weights"] = [0.5, 1.0, 2.0]
    model = post("/v1/fit", {**data, "return_model": True})["model"]
    from_model = post("/v1/predict", {"model": model, **query})
    from_data = post("/v1/predict", {**data, **query})
    assert from_model == from_data
    assert from_model["covariance_kind"] == covariance
    # and /v1/test answers the same both ways
    hyps = _hypotheses(names)
    t_model = post("/v1/test", {"model": model, "hypotheses": hyps})
    t_data = post("/v1/test", {**data, "hypotheses": hyps})
    t_fit = post("/v1/fit", {**data, "hypotheses": hyps})
    for a, b, c in zip(t_model["hypotheses"], t_data["hypotheses"], t_fit["hypotheses"]):
        assert a["statistic"] == b["statistic"] == c["statistic"]
        assert a["p_value"] == b["p_value"] == c["p_value"]
        assert b == c
        if covariance == "classical":
            assert close(a["restricted_residual_sum_of_squares"],
                         b["restricted_residual_sum_of_squares"], 1e-12)


def test_responses_near_1e200_are_answered():
    """README/DESIGN: norms, not sums of squares, so a response near 1e200 (or 1e-200)
    neither overflows nor underflows; t statistics and residual checks are scale-free."""
    x, y, names = make_data(11, 25, 2)
    base = post("/v1/fit", body_for(x, y, names))
    for exponent in (160, 200, -160, -200):
        c = 10.0 ** exponent
        resp = CLIENT.post("/v1/fit", data=json.dumps(body_for(x, y * c, names)),
                           content_type="application/json")
        assert resp.status_code == 200, (exponent, resp.get_json())
        doc = resp.get_json()
        for ca, cb in zip(base["coefficients"], doc["coefficients"]):
            assert close(ca["t_statistic"], cb["t_statistic"], RTOL_T), (exponent, ca, cb)
        assert close(base["fit"]["r_squared"], doc["fit"]["r_squared"], 1e-10), exponent
        for key in ("skewness", "kurtosis", "durbin_watson"):
            assert close(base["residual_checks"][key], doc["residual_checks"][key], 1e-8, 1e-10)
