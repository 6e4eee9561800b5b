"""Grouped fits: equality with the single fit per group, cross-checks against statsmodels and
the exact raw-unit map, flags for groups that cannot be fitted, and group-key handling.

The data are invented here with fixed seeds.
"""

from __future__ import annotations

import datetime as dt
import json
import math
from fractions import Fraction

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st

from xlbridge import GroupsResult, ModelError, fit, fit_groups
from xlbridge.engine import groups
from xlbridge.engine.groups import first as stage_first
from xlbridge.engine.groups import refined as stage_refined
from xlbridge.engine.groups.stacks import make_plan, raw_map
from xlbridge.engine.solve import ACCEPT_ERROR, Basis
from xlbridge.engine.terms import parse_model

DIGITS = 12  # the acceptance: equal to fit to at least 12 significant digits


def _grouped(seed, n_groups, sizes, k=1, shift=0.0, spread=1.0, noise=0.3, weights=False):
    """Invented: one noisy quadratic surface per group, rows shuffled across groups."""
    rng = np.random.default_rng(seed)
    sizes = np.asarray(sizes)
    g = np.repeat(np.arange(n_groups), sizes)
    n = int(sizes.sum())
    x = rng.uniform(-1, 1, (n, k)) * spread + shift
    slope = rng.normal(1, 0.3, n_groups)[g]
    y = 2 + slope * (x - shift).sum(axis=1) + 0.5 * ((x - shift) ** 2).sum(axis=1)
    y = y + rng.normal(0, noise, n)
    w = rng.uniform(0.5, 2.0, n) if weights else None
    perm = rng.permutation(n)
    return g[perm], (x[perm, 0] if k == 1 else x[perm]), y[perm], (None if w is None
                                                                      else w[perm])


def _assert_equal_to_fit(res: GroupsResult, g, y, x, model, w=None, intercept=True):
    """Every group equals fit on its own rows (source of truth: the single-group engine,
    whose own accuracy is checked against NIST StRD in test_nist.py)."""
    assert len(res) == len(np.unique(g))
    tol = 10.0 ** -DIGITS
    for i, key in enumerate(res.groups):
        rows = g == key
        ref = fit(y[rows], x[rows], model, intercept=intercept,
                  weights=None if w is None else w[rows])
        np.testing.assert_allclose(res.estimates[i], ref.estimates, rtol=tol, atol=0)
        np.testing.assert_allclose(res.std_errors[i], ref.std_errors, rtol=tol, atol=0)
        np.testing.assert_allclose([res.r2[i], res.rmse[i]], [ref.stats.r2, ref.stats.rmse],
                                   rtol=tol, atol=0)
        # adjusted R^2 may sit near 0: compare on the scale of 1, where it lives
        assert abs(res.adj_r2[i] - ref.stats.adj_r2) <= tol
        assert res.n_used[i] == ref.stats.n_used


@pytest.mark.parametrize("case", [
    # first: share of the groups the double-precision first stage is expected to answer
    dict(model=2, sizes=lambda r: r.integers(5, 80, 150), first=0.9),
    dict(model=2, sizes=lambda r: np.full(300, 30), first=0.9),
    dict(model=2, sizes=lambda r: np.full(300, 30), weights=True, first=0.9),
    dict(model=2, sizes=lambda r: r.integers(5, 80, 120), weights=True, first=0.9),
    dict(model=2, sizes=lambda r: r.integers(40, 300, 40), first=0.9),
    dict(model=3, sizes=lambda r: r.integers(8, 40, 100), shift=1500.0, spread=20.0),
    dict(model=1, sizes=lambda r: r.integers(3, 40, 100), first=0.9),
    dict(model="surface", k=2, sizes=lambda r: r.integers(8, 60, 80)),
    dict(model="surface", k=3, sizes=lambda r: r.integers(14, 60, 40), weights=True),
    dict(model="x1, x2, x1*x2, x1^2", k=2, sizes=lambda r: r.integers(8, 40, 60)),
    dict(model="x, x^3", sizes=lambda r: r.integers(5, 40, 60)),
])
def test_equal_to_single_fit(case):
    sizes = case["sizes"](np.random.default_rng(5))
    g, x, y, w = _grouped(7, len(sizes), sizes, k=case.get("k", 1),
                          shift=case.get("shift", 0.0), spread=case.get("spread", 1.0),
                          weights=case.get("weights", False))
    res = fit_groups(g, y, x, case["model"], weights=w)
    # the batched stages answered (not the single fit on every group)
    assert res.methods.count("batched") + res.methods.count("refined") >= 0.9 * len(res)
    assert res.methods.count("batched") >= case.get("first", 0.0) * len(res)
    _assert_equal_to_fit(res, g, y, x, case["model"], w)


def _stage_data(seed, model, kinds):
    """Invented: groups of some of these kinds for ``model`` ('linear' on two predictors,
    or a degree): "good" (well conditioned), "far" (x clustered far from 0: the raw
    coefficients are small differences of large terms), "exact" (y almost exactly on the
    curve: the residuals are small differences of large numbers) and "near" (nearly
    aliased: two almost equal predictors, or x in d tight clusters, one fewer than a
    degree-d polynomial needs)."""
    rng = np.random.default_rng(seed)
    k = 2 if model == "linear" else 1
    keys, xs, ys = [], [], []

    def curve(x):
        if k == 2:
            return 3 + x[:, 0] + 2 * x[:, 1]
        return 3 + x - 0.5 * x**2 + (0.3 * x**3 if model == 3 else 0.0)

    def near(n):
        if k == 2:
            x1 = rng.uniform(0, 1, n)
            return np.column_stack([x1, x1 + 1e-7 * rng.normal(size=n)])
        return rng.choice(np.arange(float(model)), n) + 1e-6 * rng.normal(size=n)

    shape = (lambda n: (n, 2)) if k == 2 else (lambda n: n)
    make = {"good": (40, lambda n: rng.uniform(-2, 2, shape(n)), 0.5),
            "far": (8, lambda n: 100 + rng.uniform(-1, 1, shape(n)), 0.5),
            "exact": (8, lambda n: rng.uniform(-2, 2, shape(n)), 1e-4),
            "near": (3, near, 0.5)}
    for kind in kinds:
        count, make_x, noise = make[kind]
        for i in range(count):
            n = int(rng.integers(12, 40))
            x = make_x(n)
            keys.extend([f"{kind} {i}"] * n)
            xs.append(x)
            ys.append(curve(x) + rng.normal(0, noise, n))
    perm = rng.permutation(len(keys))
    return np.array(keys)[perm], np.concatenate(xs)[perm], np.concatenate(ys)[perm]


_STAGE = {"good": "batched", "far": "refined", "exact": "refined", "near": "single"}


@pytest.mark.parametrize("model, kinds", [
    ("linear", ("good", "exact", "near")),
    (2, ("good", "far", "exact", "near")),
    (3, ("far", "exact", "near")),
])
def test_each_stage_equal_to_single_fit(model, kinds):
    """Groups answered by each stage (well-conditioned ones by the double-precision stage,
    harder ones by the double-double stage, the hardest by the single fit) all equal fit
    on their own rows."""
    g, x, y = _stage_data(13, model, kinds)
    res = fit_groups(g, y, x, model)
    for key, method, flag in zip(res.groups, res.methods, res.flags):
        assert method == _STAGE[key.split()[0]], key
        assert flag == "" or flag.startswith("extrapolation-prone"), key
    _assert_equal_to_fit(res, g, y, x, model)


@pytest.mark.parametrize("model, k, weights, shift, spread, noise", [
    (2, 1, False, 20.0, 10.0, 2.0), (2, 1, True, 20.0, 10.0, 2.0),
    ("surface", 2, False, 0.0, 1.0, 0.3), (1, 1, True, 0.0, 1.0, 0.3)])
def test_first_stage_within_its_threshold(model, k, weights, shift, spread, noise):
    """Groups the double-precision stage answers are within its acceptance threshold of fit
    (plus fit's own: source of truth the single-group engine, checked against NIST StRD),
    far inside the 12 digits promised."""
    sizes = np.random.default_rng(3).integers(20, 60, 60)
    g, x, y, w = _grouped(17, len(sizes), sizes, k=k, shift=shift, spread=spread, noise=noise,
                          weights=weights)
    res = fit_groups(g, y, x, model, weights=w)
    assert res.methods.count("batched") >= 5
    tol = groups.BATCH_ACCEPT + ACCEPT_ERROR
    for i, key in enumerate(res.groups):
        if res.methods[i] != "batched":
            continue
        rows = g == key
        ref = fit(y[rows], x[rows], model, weights=None if w is None else w[rows])
        for got, want in ((res.estimates[i], ref.estimates), (res.std_errors[i], ref.std_errors),
                          (res.rmse[i], ref.stats.rmse), (res.r2[i], ref.stats.r2)):
            np.testing.assert_allclose(got, want, rtol=tol, atol=0)


def test_many_small_blocks_equal_to_single_fit(monkeypatch):
    """Chunks and row blocks of a few groups each (mixed sizes, padding, weights) give the
    same answers as one block."""
    monkeypatch.setattr(stage_first, "_FIRST_CHUNK_ROWS", 200)
    monkeypatch.setattr(stage_first, "_FIRST_BLOCK_ROWS", 64)
    monkeypatch.setattr(stage_refined, "_BLOCK_ROWS", 64)
    sizes = np.random.default_rng(4).integers(5, 70, 60)
    g, x, y, w = _grouped(9, len(sizes), sizes, weights=True)
    res = fit_groups(g, y, x, 2, weights=w)
    assert res.methods.count("batched") >= 0.9 * len(res)
    _assert_equal_to_fit(res, g, y, x, 2, w)


def test_no_intercept_equal_to_single_fit():
    g, x, y, _ = _grouped(8, 60, np.random.default_rng(1).integers(5, 50, 60))
    res = fit_groups(g, y, x, 2, intercept=False)
    assert res.methods.count("batched") >= 0.9 * len(res)
    _assert_equal_to_fit(res, g, y, x, 2, intercept=False)


def test_against_statsmodels_ols_per_group():
    """Estimates, standard errors, R^2, adjusted R^2 and residual SD (source: statsmodels OLS
    on the raw design, computed independently per group)."""
    g, x, y, _ = _grouped(11, 40, np.random.default_rng(2).integers(10, 60, 40), shift=50.0,
                          spread=30.0)
    res = fit_groups(g, y, x, 2)
    for i, key in enumerate(res.groups):
        rows = g == key
        xr = x[rows]
        ref = sm.OLS(y[rows], np.column_stack([np.ones(len(xr)), xr, xr**2])).fit()
        np.testing.assert_allclose(res.estimates[i], ref.params, rtol=1e-8)
        np.testing.assert_allclose(res.std_errors[i], ref.bse, rtol=1e-8)
        np.testing.assert_allclose([res.r2[i], res.adj_r2[i], res.rmse[i]],
                                   [ref.rsquared, ref.rsquared_adj, np.sqrt(ref.scale)],
                                   rtol=1e-8)
        np.testing.assert_allclose(res.p_values[i], ref.pvalues, rtol=1e-6, atol=1e-300)
        ci = ref.conf_int(alpha=0.05)
        np.testing.assert_allclose(res.ci_lower[i], ci[:, 0], rtol=1e-8)
        np.testing.assert_allclose(res.ci_upper[i], ci[:, 1], rtol=1e-8)


def test_weighted_against_statsmodels_wls():
    """Weighted groups (source: statsmodels WLS)."""
    g, x, y, w = _grouped(12, 30, np.full(30, 25), weights=True)
    res = fit_groups(g, y, x, 2, weights=w)
    for i, key in enumerate(res.groups):
        rows = g == key
        xr = x[rows]
        ref = sm.WLS(y[rows], np.column_stack([np.ones(len(xr)), xr, xr**2]),
                     weights=w[rows]).fit()
        np.testing.assert_allclose(res.estimates[i], ref.params, rtol=1e-8)
        np.testing.assert_allclose(res.std_errors[i], ref.bse, rtol=1e-8)
        np.testing.assert_allclose(res.r2[i], ref.rsquared, rtol=1e-8)


def test_ill_conditioned_group_takes_the_single_fit():
    """A group too ill conditioned for the batched path (two nearly collinear predictors:
    x2 = x1 + 1e-7 noise) is answered by fit itself; its numbers are fit's exactly, and the
    well-conditioned groups beside it stay batched."""
    rng = np.random.default_rng(3)
    g, x, y, _ = _grouped(4, 20, np.full(20, 15), k=2)
    x1 = rng.uniform(0, 1, 12)
    xg = np.column_stack([x1, x1 + 1e-7 * rng.normal(size=12)])
    yg = 1 + xg @ [1.0, 2.0] + rng.normal(0, 0.1, 12)
    g = np.concatenate([g, np.full(12, 99)])
    x = np.vstack([x, xg])
    y = np.concatenate([y, yg])
    res = fit_groups(g, y, x, "linear")
    i = res.index(99)
    assert res.methods[i] == "single"
    assert res.methods.count("batched") == 20
    ref = fit(yg, xg, "linear")
    np.testing.assert_array_equal(res.estimates[i], ref.estimates)
    np.testing.assert_array_equal(res.std_errors[i], ref.std_errors)


def test_raw_map_equals_exact_basis_map():
    """The vectorised double-double raw-unit map equals Basis.raw_map (exact fractions)."""
    rng = np.random.default_rng(9)
    for model, k in ((4, 1), ("surface", 3), ("x1, x1^2, x2, x1*x2", 2)):
        spec = parse_model(model, k)
        plan = make_plan(spec)
        centers = rng.normal(0, 1000, (5, k)) * np.array(spec.centrable(), dtype=float)
        scales = np.ldexp(1.0, rng.integers(-3, 12, (5, k)))
        mh, ml = raw_map(plan, centers.T, scales.T)  # (p, p, groups)
        for gi in range(5):
            exact = Basis(centers[gi], scales[gi], spec.all_powers).raw_map()
            for i, row in enumerate(exact):
                for j, v in enumerate(row):
                    got = Fraction(float(mh[i, j, gi])) + Fraction(float(ml[i, j, gi]))
                    if v == 0:
                        assert got == 0
                    else:
                        assert abs((got - v) / v) < Fraction(1, 10**29)


# --- flags: groups that cannot be fitted never stop the others -----------------------------

def _problem_data():
    rng = np.random.default_rng(21)
    keys, xs, ys = [], [], []

    def add(key, x, y):
        keys.extend([key] * len(x))
        xs.extend(x)
        ys.extend(y)

    x = np.linspace(0, 10, 15)
    add("good", x, 1 + x + 0.1 * x**2 + rng.normal(0, 0.1, 15))
    add("one row", [1.0], [2.0])
    add("two rows", [1.0, 2.0], [2.0, 3.0])
    add("constant x", [4.0] * 6, [1.0, 2.0, 3.0, 4.0, 5.0, 6.0])
    add("two values", [1.0, 1.0, 1.0, 2.0, 2.0, 2.0], [1.0, 2.0, 3.0, 4.0, 5.0, 6.0])
    add("with nan", [1, 2, 3, np.nan, 5, 6, 7, 8], [1, 4, 9, 16, np.nan, 36, 49, 64.5])
    add("narrow", np.linspace(4, 4.5, 10), np.linspace(4, 4.5, 10) ** 2 + rng.normal(0, .01, 10))
    add("infinite", [1, 2, 3, np.inf, 5, 6], [1.0, 2, 3, 4, 5, 6])
    add("good too", x, 3 - x + rng.normal(0, 0.1, 15))
    return np.array(keys, dtype=object), np.array(ys, float), np.array(xs, float)


def test_flags_and_other_groups_unaffected():
    g, y, x = _problem_data()
    res = fit_groups(g, y, x, 2)
    flag = {key: res.flags[res.index(key)] for key in res.groups}
    assert flag["good"] == flag["good too"] == ""
    assert flag["one row"].startswith("too few rows: 1 with numbers")
    assert flag["two rows"].startswith("too few rows: 2 with numbers")
    assert flag["constant x"].startswith("rank deficient (term x):")
    assert "found 1" in flag["constant x"]
    assert flag["two values"].startswith("rank deficient (term x^2):")
    assert flag["infinite"] == "not fitted: x has an infinite value"
    assert flag["narrow"].startswith("extrapolation-prone: x covers 5% of the range")
    assert flag["with nan"] == ""
    i = res.index("with nan")
    assert (res.n_used[i], res.n_dropped[i]) == (6, 2)
    for key in ("one row", "two rows", "constant x", "two values", "infinite"):
        i = res.index(key)
        assert np.all(np.isnan(res.estimates[i])) and math.isnan(res.r2[i])
        assert res.methods[i] == ""
    # groups with problems do not change the others (source: fit on those rows alone)
    good = np.isin(g, ["good", "good too", "with nan", "narrow"])
    _assert_equal_to_fit(fit_groups(g[good], y[good], x[good], 2), g[good], y[good], x[good],
                         2)
    for key in ("good", "with nan", "narrow"):
        i = res.index(key)
        rows = g == key
        np.testing.assert_allclose(res.estimates[i], fit(y[rows], x[rows], 2).estimates,
                                   rtol=1e-12)


def test_aliased_surface_term_is_named():
    """x2 equal to x1 / 2 in one group: the flag names the aliased term (from fit's check)."""
    rng = np.random.default_rng(4)
    x1 = rng.uniform(0, 1, 40)
    x = np.column_stack([x1, rng.uniform(0, 1, 40)])
    x[:20, 1] = 0.5 * x1[:20]
    y = x.sum(axis=1) + rng.normal(0, 0.1, 40)
    g = np.repeat(["aliased", "fine"], 20)
    res = fit_groups(g, y, x, "interact")
    assert res.flags[res.index("aliased")].startswith("rank deficient: term x2 is aliased")
    assert res.flags[res.index("fine")] == ""


def test_nonpositive_weights_flag_only_their_group():
    g = np.repeat(["a", "b"], 6)
    x = np.tile(np.arange(6.0), 2)
    y = 1 + 2 * x + np.tile([0.1, -0.1, 0.05, 0.0, -0.05, 0.02], 2)
    w = np.ones(12)
    w[8] = 0.0
    res = fit_groups(g, y, x, 1, weights=w)
    assert res.flags[res.index("b")] == "not fitted: weights must be positive numbers"
    np.testing.assert_allclose(res.estimates[res.index("a")], fit(y[:6], x[:6], 1).estimates,
                               rtol=1e-12)


# --- group keys ---------------------------------------------------------------------------

def test_mixed_keys_order_and_merging():
    """Numbers (1 and 1.0 one group), dates, text (case-insensitive order, exact keys),
    false/true, then the blank group (None, NaN, empty text, spaces)."""
    raw = [3, "b", None, 1.0, "B", True, dt.date(2024, 5, 1), "", float("nan"), 1, "a",
           False, -2.5, "  ", np.int64(3)]
    codes, keys = groups.group_codes(raw)
    assert keys == [-2.5, 1.0, 3, dt.date(2024, 5, 1), "a", "B", "b", False, True, None]
    got = [keys[c] for c in codes]
    assert got == [3, "b", None, 1.0, "B", True, dt.date(2024, 5, 1), None, None, 1.0, "a",
                   False, -2.5, None, 3]


def test_keys_from_numpy_arrays():
    codes, keys = groups.group_codes(np.array([2.0, np.nan, 7.0, 2.0]))
    assert keys == [2.0, 7.0, None] and codes.tolist() == [0, 2, 1, 0]
    codes, keys = groups.group_codes(np.array(["x", "A", "x"]))
    assert keys == ["A", "x"] and codes.tolist() == [1, 0, 1]
    codes, keys = groups.group_codes(np.array([10**12, 5, 10**12]))
    assert keys == [5, 10**12] and codes.tolist() == [1, 0, 1]
    codes, keys = groups.group_codes(np.array(["2024-01-02", "NaT", "2023-06-01"],
                                             dtype="datetime64[ns]"))
    assert keys == [dt.datetime(2023, 6, 1), dt.datetime(2024, 1, 2), None]


def test_bad_key_type_message():
    with pytest.raises(ModelError, match="group keys must be numbers, text, dates"):
        groups.group_codes([1, [2, 3]])
    with pytest.raises(ModelError, match="group keys must be"):
        groups.group_codes([1, (2, 3)])


_KEY = st.one_of(
    st.integers(-5, 5), st.sampled_from([0.5, -1.25, float("nan"), 2.0, 1.0]),
    st.sampled_from(["a", "A", "b", " b", "", "  ", "x y"]), st.none(), st.booleans(),
    st.sampled_from([dt.date(2020, 1, 1), dt.datetime(2021, 3, 4, 5, 6)]))


def _normal(v):
    if v is None or (isinstance(v, float) and math.isnan(v)) or (isinstance(v, str)
                                                                  and not v.strip()):
        return ("blank",)
    if isinstance(v, bool):
        return ("bool", v)
    if isinstance(v, (int, float)):
        return ("num", float(v))
    return (type(v).__name__, v)


@settings(max_examples=150)
@given(st.lists(_KEY, min_size=0, max_size=40), st.randoms(use_true_random=False))
def test_group_codes_property(values, rnd):
    """Rows share a code exactly when their keys are the same group (reference: a plain
    normalisation written here); the keys come out in the documented order; shuffling the
    rows does not change any row's group."""
    codes, keys = groups.group_codes(values)
    assert len(codes) == len(values)
    assert sorted(set(codes.tolist())) == list(range(len(keys)))
    for i in range(len(values)):
        for j in range(len(values)):
            assert (codes[i] == codes[j]) == (_normal(values[i]) == _normal(values[j]))
    order = [groups.group_sort_key(k) for k in keys]
    assert order == sorted(order) and len(set(order)) == len(order)
    if None in keys:
        assert keys[-1] is None
    perm = list(range(len(values)))
    rnd.shuffle(perm)
    codes2, keys2 = groups.group_codes([values[i] for i in perm])
    assert keys2 == keys
    assert [keys2[c] for c in codes2] == [keys[codes[i]] for i in perm]


@settings(max_examples=40)
@given(st.lists(st.tuples(_KEY, st.floats(-10, 10), st.floats(-10, 10)), max_size=30))
def test_fit_groups_never_raises_on_any_keys(rows):
    """Any mix of keys and values: a table with one row per group, never an exception."""
    g = [r[0] for r in rows]
    x = [r[1] for r in rows]
    y = [r[2] for r in rows]
    res = fit_groups(g, y, x, 1)
    table = res.table()
    assert len(table) == 1 + len(res) == 1 + len(groups.group_codes(g)[1])
    assert all(len(r) == len(res.columns) for r in table)
    json.dumps(res.to_dict())


# --- output and input checks ----------------------------------------------------------------

def test_table_and_dict_layout():
    g, x, y, _ = _grouped(1, 3, [10, 12, 14])
    res = fit_groups(g, y, x, 2)
    table = res.table()
    assert table[0] == ["group", "n_used", "intercept", "intercept_se", "x", "x_se", "x^2",
                        "x^2_se", "r2", "adj_r2", "rmse", "flag"]
    assert [r[0] for r in table[1:]] == [0, 1, 2]
    assert table[2][2] == res.estimates[1, 0] and table[2][9] == res.adj_r2[1]
    assert res.table(header=False) == table[1:]
    d = json.loads(json.dumps(res.to_dict()))
    assert d["model"]["terms"] == ["intercept", "x", "x^2"]
    assert d["groups"][0]["coefficients"][1]["term"] == "x"
    assert d["groups"][2]["n_used"] == 14


def test_names_from_dataframe_and_column_clash():
    pd = pytest.importorskip("pandas")
    g, x, y, _ = _grouped(2, 4, [9, 9, 9, 9], k=2)
    frame = pd.DataFrame(x, columns=["size", "depth"])
    res = fit_groups(pd.Series(g), y, frame, "linear")
    assert res.columns[2:8] == ("intercept", "intercept_se", "size", "size_se", "depth",
                                "depth_se")
    with pytest.raises(ModelError, match="appear twice"):
        fit_groups(g, y, x, "linear", names=["r2", "depth"])


@pytest.mark.parametrize("kwargs, message", [
    (dict(level=1.5), "level must be between 0 and 1"),
    (dict(weights=[1.0, 2.0]), "weights has 2 rows but y has 4"),
])
def test_whole_input_errors(kwargs, message):
    with pytest.raises(ModelError, match=message):
        fit_groups([1, 1, 2, 2], [1.0, 2, 3, 4], [1.0, 2, 3, 4], 1, **kwargs)


def test_length_mismatch_errors():
    with pytest.raises(ModelError, match="group has 3 rows but y has 4"):
        fit_groups([1, 1, 2], [1.0, 2, 3, 4], [1.0, 2, 3, 4], 1)
    with pytest.raises(ModelError, match="y has 4 rows but x has 3 rows"):
        fit_groups([1, 1, 2, 2], [1.0, 2, 3, 4], [1.0, 2, 3], 1)


def test_combine_parts_equals_whole_and_refuses_split_groups():
    g, x, y, _ = _grouped(6, 30, np.full(30, 12))
    whole = fit_groups(g, y, x, 2)
    rng = finite = groups.finite_range(y, x)
    a, b = g < 15, g >= 15
    parts = [fit_groups(g[m], y[m], x[m], 2, x_range=rng) for m in (b, a)]
    both = GroupsResult.combine(parts)
    assert both.groups == whole.groups and both.flags == whole.flags
    np.testing.assert_allclose(both.estimates, whole.estimates, rtol=1e-15)
    assert finite[0] == x.min()
    with pytest.raises(ModelError, match="appears in two parts"):
        GroupsResult.combine([parts[0], parts[0]])
