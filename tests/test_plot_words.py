"""Words and axes of the optimum table, the contour figure and the report: "maximum" /
"minimum" only for a stationary point inside the data, otherwise "outside the data at
(...)"; the contour's axes cover the data (with a margin), a far stationary point marked
at the edge with its coordinates in the legend.

Data invented (fixed seed). Reference for the stationary point: the least-squares
quadratic from numpy.linalg.lstsq on the raw terms, and the zero of its gradient solved
with numpy.linalg.solve (the textbook canonical analysis), computed here.
"""

from __future__ import annotations

import re

import numpy as np
import pytest

import xlbridge
from xlbridge.cells import optimum_table
from xlbridge.report import build_report


def _surface(peak: tuple[float, float], seed: int = 7):
    rng = np.random.default_rng(seed)
    a, b = rng.uniform(10, 20, 40), rng.uniform(1, 3, 40)
    y = (500 - 0.5 * (a - peak[0]) ** 2 - 20 * (b - peak[1]) ** 2
         + 0.3 * (a - peak[0]) * (b - peak[1]) + rng.normal(0, 2, 40))
    return a, b, y


def _reference_point(a, b, y) -> np.ndarray:
    X = np.column_stack([np.ones_like(a), a, b, a * a, b * b, a * b])
    c = np.linalg.lstsq(X, y, rcond=None)[0]
    hess = np.array([[2 * c[3], c[5]], [c[5], 2 * c[4]]])
    return np.linalg.solve(hess, -c[1:3])


def _fit(a, b, y):
    return xlbridge.fit(y, np.column_stack([a, b]), "surface", names=("price", "disc"))


def test_point_outside_the_data_is_not_called_a_maximum():
    a, b, y = _surface((40.0, 8.0))
    ref = _reference_point(a, b, y)
    assert not (10 <= ref[0] <= 20)  # the reference agrees it lies beyond the data
    table = optimum_table(_fit(a, b, y))
    kind = next(r for r in table if r[0] == "kind of point")
    assert kind[1] == f"outside the data at (price={ref[0]:.4g}, disc={ref[1]:.4g})"
    assert "extrapolation" in kind[-1]
    assert not any(w in str(c) for r in table if not str(r[0]).startswith("note")
                   for c in r for w in ("maximum", "minimum"))


def test_point_inside_the_data_keeps_its_kind():
    a, b, y = _surface((15.0, 2.0))
    ref = _reference_point(a, b, y)
    assert 10 <= ref[0] <= 20 and 1 <= ref[1] <= 3
    table = optimum_table(_fit(a, b, y))
    kind = next(r for r in table if r[0] == "kind of point")
    assert kind[1] == "maximum" and kind[-1] == "inside the data"
    row = next(r for r in table if r[0] == "price")
    assert row[1] == pytest.approx(ref[0], rel=1e-7)


def test_contour_axes_cover_the_data_and_mark_a_far_point_at_the_edge():
    from xlbridge import plots
    from xlbridge.engine import optimum

    a, b, y = _surface((40.0, 8.0))
    res = _fit(a, b, y)
    fig = plots.contour(res, optimum(res))
    ax = fig.axes[0]
    (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
    for lo, hi, v in ((x0, x1, a), (y0, y1, b)):
        span = v.max() - v.min()
        assert lo < v.min() and hi > v.max()  # every data point inside the axes
        assert hi - lo <= 1.2 * span  # and the data fill them (no stretch to the point)
    labels = ax.get_legend_handles_labels()[1]
    ref = _reference_point(a, b, y)
    assert any(f"outside the data at (price={ref[0]:.4g}, disc={ref[1]:.4g})" in t
               and "marked at the edge" in t for t in labels), labels
    assert not any("maximum" in t for t in labels)


def test_report_names_the_point_outside_the_data():
    a, b, y = _surface((40.0, 8.0))
    text = build_report(_fit(a, b, y))
    section = text[text.index("id='optimum'"):text.index("id='cautions'")]
    assert "outside the data at (price=" in section
    assert not re.search(r"<td[^>]*>\s*maximum\s*</td>", section)
