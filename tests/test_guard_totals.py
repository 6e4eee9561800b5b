"""Guard rail: rows that are totals or subtotals are left out with a note (totals=keep
keeps them). The realistic case: whole-column references over 20 jobs with a TOTAL row
under them. Reference: statsmodels OLS on the 20 jobs alone (computed here)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm

from xlbridge import cells
from xlbridge.cells.guards import find_totals

from .bookfactory import build_book, run


def _jobs(n: int = 20, seed: int = 17) -> tuple[np.ndarray, np.ndarray]:
    """Invented jobs: cost against size, straight line with noise."""
    rng = np.random.default_rng(seed)
    size = np.round(rng.uniform(5.0, 50.0, n), 1)
    cost = np.round(12.0 + 4.5 * size + rng.normal(0.0, 3.0, n), 2)
    return size, cost


def _book(tmp_path: Path, label: str = "TOTAL", total: str = "sum") -> Path:
    size, cost = _jobs()
    agg = np.sum if total == "sum" else np.mean
    rows = [["job", "size", "cost"]]
    rows += [[f"job {i + 1}", float(s), float(c)] for i, (s, c) in enumerate(zip(size, cost))]
    rows.append([label, float(agg(size)), float(agg(cost))])
    return build_book(tmp_path / "jobs.xlsx", {"Data": rows})


def _reference() -> np.ndarray:
    size, cost = _jobs()
    return sm.OLS(cost, sm.add_constant(size)).fit().params


@pytest.mark.parametrize("label", ["TOTAL", ""])
def test_total_row_under_whole_columns_is_left_out(tmp_path: Path, capsys, label) -> None:
    # with the word TOTAL beside it, and found from the numbers alone
    book = _book(tmp_path, label)
    code, out, err = run(["fit", book, "--y", "Data!C:C", "--x", "Data!B:B", "--model", "1",
                          "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    got = [c["estimate"] for c in doc["coefficients"]]
    np.testing.assert_allclose(got, _reference(), rtol=1e-10)  # statsmodels, 20 jobs only
    assert doc["model"]["n_used"] == 20
    assert "xlbridge: warning: sheet row 22 looked like a total" in err
    assert "totals=keep" in err
    code, out, _ = run(["fit", book, "--y", "Data!C:C", "--x", "Data!B:B", "--model", "1"],
                       capsys)
    assert code == 0 and "note: sheet row 22 looked like a total" in out


def test_totals_keep_fits_the_row(tmp_path: Path, capsys) -> None:
    book = _book(tmp_path)
    code, out, err = run(["fit", book, "--y", "Data!C:C", "--x", "Data!B:B", "--model", "1",
                          "--options", "totals=keep", "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    size, cost = _jobs()
    want = sm.OLS(np.r_[cost, cost.sum()], sm.add_constant(np.r_[size, size.sum()])).fit()
    np.testing.assert_allclose([c["estimate"] for c in doc["coefficients"]], want.params,
                               rtol=1e-9)
    assert "looked like a total" not in err


def test_mean_row_and_subtotals_in_cells() -> None:
    size, cost = _jobs()
    y = np.r_[cost[:10], cost[:10].sum(), cost[10:], cost[10:].sum(), cost.mean()]
    x = np.r_[size[:10], size[:10].sum(), size[10:], size[10:].sum(), size.mean()]
    assert find_totals(y, x[:, None], np.ones(len(y), bool)) == [
        (10, "sum"), (21, "sum"), (22, "mean")]
    res, _ = cells.fit_cells(y.tolist(), x.tolist(), 1)
    np.testing.assert_allclose(res.estimates, _reference(), rtol=1e-10)
    assert any("data rows 11, 22 and 23 looked like a total" in n for n in res.notes)


def test_label_words_mark_a_total() -> None:
    size, cost = _jobs()
    inp = cells.prepare_fit(cost.tolist() + [1.0], size.tolist() + [2.0], 1,
                            labels=[f"job {i}" for i in range(20)] + ["Grand Total"])
    assert inp.drops == (("total", 1),) and "its label reads like a total" in inp.notes[0]


def test_ordinary_data_are_not_totals() -> None:
    # x = 1, 2, 3 with y = 2x: row 3 is the sum of rows 1-2, but two rows are no total
    x = np.arange(1.0, 30.0)
    assert find_totals(2 * x, x[:, None], np.ones(len(x), bool)) == []
    # constant y: every row is the mean of those above, but nothing varies
    assert find_totals(np.full(12, 5.0), x[:12, None], np.ones(12, bool)) == []
