"""Figures of a cost-estimating relationship (matplotlib, no GUI backend), in units:
the fitted CER with the data and the interval of a new estimate, and the percentage errors
against the estimate. Same size, resolution and colours as ``plots``."""

from __future__ import annotations

import numpy as np

from . import plots
from .engine import CerResult

KINDS = ("cer", "percent_errors")
CAPTIONS = {
    "cer": "The CER in units with the data; the band holds a new estimate at the fit's level "
           "(following its error model)",
    "percent_errors": "Percentage errors (cost - estimate) / estimate against the estimate",
}


def _axes():
    fig = plots.figure_class()(figsize=plots.SIZE, dpi=plots.DPI, layout="constrained")
    return fig, fig.add_subplot()


def cer_curve(res: CerResult):
    """One driver: the fitted curve and its band over the relevant range with the data;
    several drivers: cost against the estimate, with the line of equality."""
    fig, ax = _axes()
    if len(res.drivers) == 1:
        x = res.x[:, 0]
        grid = np.linspace(x.min(), x.max(), 200)
        pred = res.predict(grid)
        ax.fill_between(grid, pred.pi_lower, pred.pi_upper, color=plots.BAND_NEW,
                        label=f"new estimate, {res.level:.0%}")
        ax.plot(grid, pred.fitted, color=plots.CURVE, label="CER")
        ax.scatter(x, res.y, s=18, color=plots.DATA, zorder=3, label="data")
        ax.set_xlabel(res.drivers[0])
    else:
        ax.scatter(res.fitted, res.y, s=18, color=plots.DATA, zorder=3, label="data")
        lo, hi = float(min(res.fitted.min(), res.y.min())), float(max(res.fitted.max(),
                                                                      res.y.max()))
        ax.plot([lo, hi], [lo, hi], color=plots.CURVE, label="cost = estimate")
        ax.set_xlabel(f"estimate of {res.response}")
    ax.set_ylabel(res.response)
    ax.set_title(f"{res.form} CER by {res.method}")
    ax.legend(loc="best", fontsize="small")
    return fig


def percent_errors(res: CerResult):
    """(y - estimate) / estimate in percent against the estimate."""
    fig, ax = _axes()
    pct = 100 * (res.y - res.fitted) / res.fitted
    ax.axhline(0, color=plots.CURVE, linewidth=1)
    ax.scatter(res.fitted, pct, s=18, color=plots.DATA)
    ax.set_xlabel(f"estimate of {res.response}")
    ax.set_ylabel("percentage error (%)")
    return fig


def cer_pngs(res: CerResult) -> dict[str, bytes]:
    """Every CER figure as PNG bytes, by kind."""
    return {"cer": plots.png_bytes(cer_curve(res)),
            "percent_errors": plots.png_bytes(percent_errors(res))}
