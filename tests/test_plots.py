"""The influence figure: rows ranked by Cook's distance (statsmodels OLSInfluence, computed
independently) as bars, largest first, the threshold of the row flags (4/n, common
practice) as a vertical line, bars coloured by the side of it they fall on, each labelled
by its data row and sheet row. Invented data, fixed seed."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from matplotlib.colors import to_rgba
from matplotlib.patches import Rectangle

from xlbridge import plots
from xlbridge.engine import fit


def _data(n: int, seed: int = 7):
    rng = np.random.default_rng(seed)
    x = rng.uniform(10, 200, n)
    y = 500 - 6 * x + 0.025 * x**2 + rng.normal(0, 8, n)
    y[5] += 60  # a row that pulls
    return x, y


def _bars(ax):
    return [p for p in ax.patches if isinstance(p, Rectangle) and p.get_height() > 0]


@pytest.mark.parametrize("n", [30, 9])
def test_influence_ranks_rows_by_cooks_distance(n):
    x, y = _data(n)
    x[2] = np.nan  # a left-out row keeps its place in the numbering
    res = fit(y, x, 2)
    keep = np.isfinite(x)
    X = np.column_stack([np.ones(keep.sum()), x[keep], x[keep] ** 2])
    cooks = sm.OLS(y[keep], X).fit().get_influence().cooks_distance[0]
    data_rows = np.flatnonzero(keep) + 1
    order = np.argsort(-cooks, kind="stable")[:plots.INFLUENCE_TOP]
    fig = plots.influence(res, first_row=4)
    ax = fig.axes[0]
    bars = sorted(_bars(ax), key=lambda b: -b.get_y())  # top of the chart first
    assert len(bars) == min(plots.INFLUENCE_TOP, keep.sum())
    left = bars[0].get_x()
    np.testing.assert_allclose([b.get_x() + b.get_width() for b in bars], cooks[order],
                               rtol=1e-8, atol=abs(left) * 1e-12)
    labels = [t.get_text() for t in ax.get_yticklabels()]
    ticks = list(ax.get_yticks())
    by_height = [labels[ticks.index(round(b.get_y() + b.get_height() / 2))] for b in bars]
    assert by_height == [f"row {r} (sheet row {r + 3})" for r in data_rows[order]]
    cut = 4 / keep.sum()
    assert any(np.allclose(line.get_xdata(), cut) for line in ax.get_lines())
    over, under = to_rgba(plots.CURVE), to_rgba(plots.CALM)
    assert [b.get_facecolor() for b in bars] == [over if c > cut else under
                                                 for c in cooks[order]]
    assert "leverage" not in ax.get_xlabel() and "Cook's distance" in ax.get_xlabel()


def test_influence_without_sheet_rows_names_data_rows():
    x, y = _data(12)
    fig = plots.influence(fit(y, x, 1))
    labels = {t.get_text() for t in fig.axes[0].get_yticklabels()}
    assert labels == {f"row {i}" for i in range(1, 13)}
