"""XB_GROUPS and `xlbridge groups`: the same numbers as `fit` on each group's rows (the
single fit is itself checked against NIST StRD and statsmodels), aligned with the cells,
with error cells in the group column left out and said so."""

from __future__ import annotations

import json

import numpy as np
import pytest

from xlbridge import fit
from xlbridge import worksheet as ws

from .bookfactory import run, sha256


def _data(seed=1):
    """Invented: unit price against order size for three product families."""
    rng = np.random.default_rng(seed)
    fam = np.repeat(["valves", "pumps", "seals"], 20)
    size = np.round(rng.uniform(10, 500, 60), 1)  # as typed: survives a file round trip
    price = np.round(80 - 0.09 * size + 0.0001 * size**2 + rng.normal(0, 2, 60), 2)
    return fam, size, price


def test_groups_function_matches_fit_per_group():
    fam, size, price = _data()
    G = [["family"]] + [[f] for f in fam]
    G[5] = ["#N/A"]  # error cell: that row is left out
    Y = [["price"]] + [[float(v)] for v in price]
    X = [["size"]] + [[float(v)] for v in size]
    t = ws.XB_GROUPS(G, Y, X, 2.0)
    head, *rows = t
    assert head == ["group", "rows used", "R²", "adjusted R²", "SEE", "intercept",
                    "intercept: standard error", "size", "size: standard error", "size^2",
                    "size^2: standard error", "flag"]
    body = {r[0]: dict(zip(head, r)) for r in rows if not str(r[0]).startswith("note:")}
    assert set(body) == {"pumps", "seals", "valves"}
    assert any("group cell holds an error" in str(r[0]) for r in rows)
    for name in body:
        keep = fam == name
        if name == "valves":
            keep[4] = False  # data row 5 (cell row 6) had the error
        ref = fit(price[keep], size[keep], 2)
        got = body[name]
        assert got["rows used"] == keep.sum()
        for term, c in zip(("intercept", "size", "size^2"), ref.coefficients):
            assert got[term] == pytest.approx(c.estimate, rel=1e-12)
            assert got[f"{term}: standard error"] == pytest.approx(c.std_error, rel=1e-12)
        assert got["SEE"] == pytest.approx(ref.stats.rmse, rel=1e-12)
        assert got["R²"] == pytest.approx(ref.stats.r2, rel=1e-10)
        assert got["adjusted R²"] == pytest.approx(ref.stats.adj_r2, rel=1e-10)


def test_groups_function_messages():
    fam, size, price = _data()
    G = [[f] for f in fam]
    Y = [[float(v)] for v in price]
    X = [[float(v)] for v in size]
    assert "same height" in ws.XB_GROUPS(G[:-3], Y, X, 2.0)[0][0]
    assert "not available for grouped fits" in ws.XB_GROUPS(G, Y, X, 2.0, "log=yes")[0][0]
    # a CER form is named as such, with what to use instead (not "unknown model")
    cer = ws.XB_GROUPS(G, Y, X, "Power", "method=log")[0][0]
    assert cer.startswith("xlbridge: grouped fits take polynomial and surface models; a power")
    assert "XB_COEFS" in cer and "unknown model" not in cer


def test_groups_cli_json_equals_api(tmp_path, capsys):
    from openpyxl import Workbook

    fam, size, price = _data(2)
    wb = Workbook()
    ws_ = wb.active
    ws_.title = "Data"
    ws_.append(["family", "size", "price"])
    for f, s, p in zip(fam, size, price):
        ws_.append([str(f), float(s), float(p)])
    book = tmp_path / "sales.xlsx"
    wb.save(book)
    before = sha256(book)
    code, out, err = run(["groups", book, "--group", "Data!A:A", "--y", "Data!C:C", "--x",
                          "Data!B:B", "--model", "2", "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    from xlbridge import fit_groups

    api = fit_groups(fam, price, size, 2, names=("size",))
    assert doc.pop("notes") == []  # the cell rules dropped nothing
    assert doc == json.loads(json.dumps(api.to_dict()))
    assert sha256(book) == before
    code, out, err = run(["groups", book, "--group", "Data!A:A", "--y", "Data!C:C", "--x",
                          "Data!B:B", "--model", "2"], capsys)
    assert code == 0 and "valves" in out and "flag" in out


def test_groups_cli_dask_engine_equals_local(tmp_path, capsys):
    pytest.importorskip("dask.dataframe", reason="the dask extra is not installed")
    import pandas as pd

    fam, size, price = _data(3)
    path = tmp_path / "sales.csv"
    pd.DataFrame({"family": fam, "size": size, "price": price}).to_csv(path, index=False)
    code, out, err = run(["groups", path, "--engine", "dask", "--group", "family", "--y",
                          "price", "--x", "size", "--model", "2", "--format", "json"], capsys)
    assert code == 0, err
    from xlbridge import fit_groups

    api = fit_groups(fam, price, size, 2, names=("size",))
    got = json.loads(out)
    want = json.loads(json.dumps(api.to_dict()))
    assert [g["group"] for g in got["groups"]] == [g["group"] for g in want["groups"]]
    for a, b in zip(got["groups"], want["groups"]):
        for ca, cb in zip(a["coefficients"], b["coefficients"]):
            assert ca["estimate"] == pytest.approx(cb["estimate"], rel=1e-12)
