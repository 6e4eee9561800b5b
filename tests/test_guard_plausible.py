"""Guard rail: a y that looks like a driver (a few distinct whole numbers) against a
continuous x gets a question, never a refusal; a y that looks like a response does not.
Reference for the numbers: numpy.polyfit on the same values (computed here)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from xlbridge import cells

from .bookfactory import build_book, run

QUESTION = ("y holds only 6 distinct whole numbers while x varies continuously: are y and "
            "x the right way round?")


def _crews_and_costs(n: int = 40, seed: int = 5) -> tuple[np.ndarray, np.ndarray]:
    """Invented: crew size (1-6 people) and the job's cost, a money-like amount."""
    rng = np.random.default_rng(seed)
    crews = np.resize(np.arange(1.0, 7.0), n)
    cost = np.round(1500.0 * crews + rng.normal(0.0, 400.0, n), 2)
    return crews, cost


def test_swapped_y_and_x_get_a_question() -> None:
    crews, cost = _crews_and_costs()
    res, _ = cells.fit_cells(crews.tolist(), cost.tolist(), 1)
    assert QUESTION in res.notes
    # never a refusal: the fit is the one asked for (numpy.polyfit as the outside check)
    np.testing.assert_allclose(res.estimates[::-1], np.polyfit(cost, crews, 1), rtol=1e-9)


def test_the_right_way_round_gets_no_question() -> None:
    crews, cost = _crews_and_costs()
    res, _ = cells.fit_cells(cost.tolist(), crews.tolist(), 1)
    assert not any("right way round" in n for n in res.notes)
    # a count response against a count driver is no sign of a swap either
    res, _ = cells.fit_cells(crews.tolist(), (crews * 2 + 1).tolist(), 1)
    assert not any("right way round" in n for n in res.notes)


def test_command_line_warns(tmp_path: Path, capsys) -> None:
    crews, cost = _crews_and_costs()
    rows = [["crew", "cost"]] + [[float(a), float(b)] for a, b in zip(crews, cost)]
    book = build_book(tmp_path / "crews.xlsx", {"Data": rows})
    code, _, err = run(["fit", book, "--y", "Data!A:A", "--x", "Data!B:B", "--model", "1"],
                       capsys)
    assert code == 0
    assert f"xlbridge: warning: {QUESTION}" in err
