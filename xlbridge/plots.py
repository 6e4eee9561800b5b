"""Figures of a fit (matplotlib, no GUI backend): curve with bands, residuals, normal
quantiles, the rows that pull the fit hardest (influence), degree scan, and the contour of
a fitted surface.

Every function returns a ``matplotlib.figure.Figure`` built without pyplot, so nothing
depends on a display; ``save`` writes PNG or SVG.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .cells.prepare import sheet_row
from .cells.tables import point_words
from .engine import FitResult, ModelError, cooks_cutoff, row_diagnostics
from .engine.scan import DegreeScan

SIZE = (7.0, 4.6)  # inches; at 110 dpi a PNG is 770 x 506 pixels
DPI = 110
DATA = "#1f4e79"
CURVE = "#c0392b"
BAND_MEAN = "#f5b7b1"
BAND_NEW = "#fdebd0"

#: How to add matplotlib, the one library the figures need (the ``plots`` extra).
PLOTS_EXTRA = 'in the xlbridge folder, run: python -m pip install ".[plots]"'


class PlotsUnavailable(RuntimeError):
    """matplotlib (the ``plots`` extra) is not installed; the message says how to add it."""


def figure_class() -> type:
    """matplotlib's ``Figure``; :class:`PlotsUnavailable` when matplotlib is missing.
    Called before anything is written, so a run without it leaves no half output."""
    try:
        from matplotlib.figure import Figure
    except ImportError:
        raise PlotsUnavailable("figures and reports need matplotlib, which is not installed; "
                               + PLOTS_EXTRA) from None
    return Figure


def _figure(size=SIZE):
    Figure = figure_class()
    fig = Figure(figsize=size, dpi=DPI, layout="constrained")
    return fig, fig.add_subplot()


def _label(res: FitResult) -> str:
    return f"ln({res.response})" if res.remedy.log else res.response


def curve(res: FitResult, title: str | None = None, points: int = 400):
    """Data, fitted curve, confidence band of the mean and prediction band (1 predictor)."""
    if res.spec.k != 1:
        raise ModelError("the curve plot needs one predictor; use the contour plot")
    fig, ax = _figure()
    x = res.x[:, 0]
    lo, hi = float(res.x_min[0]), float(res.x_max[0])
    grid = np.linspace(lo, hi, points)
    pr = res.predict(grid)
    level = int(round(res.level * 100))
    y = np.exp(res.y) if res.remedy.log else res.y
    ax.fill_between(grid, pr.pi_lower, pr.pi_upper, color=BAND_NEW,
                    label=f"{level}% prediction interval (new job)")
    ax.fill_between(grid, pr.ci_lower, pr.ci_upper, color=BAND_MEAN,
                    label=f"{level}% confidence interval (mean)")
    ax.plot(grid, pr.fitted, color=CURVE, lw=2, label=f"fitted ({res.model_text})")
    ax.scatter(x, y, s=14, color=DATA, zorder=3, label=f"data ({res.stats.n_used} rows)")
    ax.set_xlabel(res.spec.predictors[0])
    ax.set_ylabel(res.response)
    ax.set_title(title or f"{res.response} against {res.spec.predictors[0]}")
    ax.legend(loc="best", fontsize=8, frameon=True)
    ax.grid(alpha=0.3)
    return fig


def residuals(res: FitResult):
    """Residuals against fitted values, with a smooth-free zero line."""
    fig, ax = _figure()
    ax.axhline(0, color="grey", lw=1)
    ax.scatter(res.fitted, res.residuals, s=14, color=DATA)
    ax.set_xlabel(f"fitted {_label(res)}")
    ax.set_ylabel("residual")
    ax.set_title("Residuals against fitted values (look for a funnel or a curve)")
    ax.grid(alpha=0.3)
    return fig


def normal_quantiles(res: FitResult):
    """Standardized residuals against normal quantiles (Blom plotting positions)."""
    from scipy.special import ndtri

    d = row_diagnostics(res)
    r = np.sort(d.std_residual[np.isfinite(d.std_residual)])
    n = len(r)
    q = ndtri((np.arange(1, n + 1) - 0.375) / (n + 0.25))
    fig, ax = _figure()
    lim = float(max(np.max(np.abs(q)), np.max(np.abs(r))) * 1.05)
    ax.plot([-lim, lim], [-lim, lim], color="grey", lw=1, label="normal reference")
    ax.scatter(q, r, s=14, color=DATA, label="standardized residuals")
    ax.set_xlabel("normal quantile")
    ax.set_ylabel("standardized residual")
    ax.set_title("Normal quantile plot of the residuals")
    ax.legend(loc="upper left", fontsize=8)
    ax.grid(alpha=0.3)
    return fig


INFLUENCE_TOP = 15  # rows shown in the influence figure, largest Cook's distance first
CALM = "#7f8c8d"  # bars under the threshold


def row_label(row: int, first_row: int | None = None) -> str:
    """``row N`` for the N-th data row (1-based, as the checks name rows), with the sheet row
    when the row of the first data cell is known."""
    if first_row is None:
        return f"row {row}"
    return f"row {row} (sheet row {sheet_row(row, first_row)})"


def influence(res: FitResult, first_row: int | None = None, top: int = INFLUENCE_TOP):
    """The rows that pull the fit hardest: Cook's distance of the ``top`` largest rows as
    bars, largest first, against the threshold the row flags use (``cooks_cutoff``); each
    bar names its data row (and sheet row, given ``first_row``: the sheet row of data row
    1), and a column beside the bars gives its leverage and studentized residual. The scale
    turns logarithmic when the distances shown span more than a factor of 30."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    from matplotlib.transforms import blended_transform_factory

    d = row_diagnostics(res)
    ok = np.flatnonzero(np.isfinite(d.cooks_d))
    order = ok[np.argsort(-d.cooks_d[ok], kind="stable")][:top]
    cut = cooks_cutoff(res.stats.n_used)
    cooks = d.cooks_d[order]
    over = cooks > cut
    fig, ax = _figure((SIZE[0], max(SIZE[1], 1.6 + 0.26 * len(order))))
    ypos = np.arange(len(order))[::-1]  # the largest at the top
    hi = float(max(np.max(cooks, initial=0.0), cut))
    small = float(min(np.min(cooks[cooks > 0], initial=hi), cut))
    log = hi / small > 30
    left = small / 2 if log else 0.0
    ax.barh(ypos, cooks - left, left=left, color=np.where(over, CURVE, CALM), height=0.7,
            zorder=3)
    if log:
        ax.set_xscale("log")
        ax.set_xlim(left, hi * 4)
    else:
        ax.set_xlim(0, hi * 1.2)
    ax.set_yticks(ypos, [row_label(i + 1, first_row) for i in order], fontsize=8)
    ax.set_ylim(-0.6, len(order) - 0.4)
    ax.axvline(cut, color="k", ls="--", lw=1, zorder=4)
    beside = blended_transform_factory(ax.transAxes, ax.transData)
    ax.text(1.02, -0.7, "leverage,\nstudentized\nresidual", transform=beside, fontsize=7,
            va="top", color="#444")
    for y, i, c in zip(ypos, order, cooks):
        ax.text(c * 1.08 if log else c + hi * 0.01, y, f"{c:.3g}", va="center", fontsize=7,
                zorder=5)
        ax.text(1.02, y, f"{d.leverage[i]:.2f}, {d.studentized[i]:+.2f}", transform=beside,
                va="center", fontsize=7)
    n_over = int(np.sum(d.cooks_d[ok] > cut))
    ax.legend(handles=[Line2D([], [], color="k", ls="--", lw=1,
                              label=f"4/n = {cut:.3g}, the threshold of the row flags"),
                       Patch(color=CURVE, label=f"over it: influential ({n_over} "
                                                 f"row{'' if n_over == 1 else 's'} in all)"),
                       Patch(color=CALM, label="under it")],
              loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=3, fontsize=8)
    shown = (f"the {len(order)} largest of {len(ok)} rows" if len(ok) > len(order)
             else f"all {len(ok)} rows")
    ax.set_xlabel("Cook's distance: how far the fitted values move without the row"
                  + (" (log scale)" if log else ""))
    ax.set_title(f"Rows that pull the fit hardest ({shown})")
    ax.grid(axis="x", alpha=0.3, zorder=0)
    return fig


def degree_scan(scan: DegreeScan):
    """Cross-validated RMSE (with one-standard-error bars) and adjusted R^2 per degree."""
    fig, ax = _figure()
    rows = [r for r in scan.rows if np.isfinite(r.cv_rmse)]
    d = [r.degree for r in rows]
    ax.errorbar(d, [r.cv_rmse for r in rows], yerr=[r.cv_se for r in rows], color=DATA,
                marker="o", capsize=4, label="cross-validated RMSE (one SE bars)")
    ax.plot(d, [r.rmse for r in rows], color="grey", marker=".", ls="--",
            label="SEE (in-sample)")
    if scan.chosen is not None:
        sel = next(r for r in rows if r.degree == scan.chosen)
        ax.scatter([sel.degree], [sel.cv_rmse], s=160, facecolors="none", edgecolors=CURVE,
                   lw=2, zorder=4, label=f"recommended: degree {scan.chosen}")
    ax.set_xticks(d)
    ax.set_xlabel("polynomial degree")
    ax.set_ylabel("RMSE")
    ax.set_title("Degree scan: higher degree always fits better in-sample")
    ax2 = ax.twinx()
    ax2.plot(d, [r.adj_r2 for r in rows], color="#7d3c98", marker="s", ms=4, lw=1,
             label="adjusted R²")
    ax2.set_ylabel("adjusted R²", color="#7d3c98")
    h1, l1 = ax.get_legend_handles_labels()
    h2, l2 = ax2.get_legend_handles_labels()
    ax.legend(h1 + h2, l1 + l2, loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=2,
              fontsize=8)
    ax.grid(alpha=0.3)
    return fig


def contour(res: FitResult, stationary=None, points: int = 120, margin: float = 0.05):
    """Contours of a fitted surface over the first two predictors (others at their means)
    on axes that cover the data with a ``margin`` (a share of each range), the data, and
    the stationary point when given (an ``Optimum``): a point beyond the axes is marked at
    their edge, with its coordinates in the legend."""
    if res.spec.k < 2:
        raise ModelError("the contour plot needs two or more predictors")
    fig, ax = _figure((7.0, 5.4))
    lo, hi = np.asarray(res.x_min[:2], float), np.asarray(res.x_max[:2], float)
    pad = margin * np.where(hi > lo, hi - lo, np.maximum(np.abs(lo), 1.0))
    lo, hi = lo - pad, hi + pad
    a = np.linspace(lo[0], hi[0], points)
    b = np.linspace(lo[1], hi[1], points)
    aa, bb = np.meshgrid(a, b)
    grid = np.tile(res.x.mean(axis=0), (aa.size, 1))
    grid[:, 0], grid[:, 1] = aa.ravel(), bb.ravel()
    zz = res.predict(grid).fitted.reshape(aa.shape)
    cs = ax.contourf(aa, bb, zz, levels=14, cmap="RdYlBu_r", alpha=0.85)
    lines = ax.contour(aa, bb, zz, levels=14, colors="k", linewidths=0.4)
    ax.clabel(lines, fontsize=7, fmt="%.4g")
    fig.colorbar(cs, ax=ax, label=f"fitted {res.response}")
    ax.scatter(res.x[:, 0], res.x[:, 1], s=10, color="k", alpha=0.6, label="data")
    if stationary is not None and stationary.points:
        pt = stationary.points[0]
        words = point_words(pt, res.spec.predictors)
        at = np.clip(np.asarray(pt.x[:2], float), lo, hi)
        if np.array_equal(at, np.asarray(pt.x[:2], float)):
            ax.scatter([at[0]], [at[1]], marker="*", s=260, color="white", edgecolors="k",
                       zorder=5, label=f"stationary point: {words}")
        else:
            ax.scatter([at[0]], [at[1]], marker="D", s=70, color="white", edgecolors="k",
                       zorder=5, clip_on=False,
                       label=f"stationary point {words}, marked at the edge")
    ax.set_xlim(lo[0], hi[0])
    ax.set_ylim(lo[1], hi[1])
    ax.set_xlabel(res.spec.predictors[0])
    ax.set_ylabel(res.spec.predictors[1])
    ax.set_title(f"Fitted {res.response} ({res.model_text})")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.1), ncol=1, fontsize=8)
    return fig


def save(fig, path: str | Path, fmt: str | None = None) -> Path:
    """Write a figure as PNG or SVG (``fmt``, or the file's suffix)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    path = Path(path)
    fmt = (fmt or path.suffix.lstrip(".")).lower()
    if fmt not in ("png", "svg"):
        raise ValueError(f"plots are written as png or svg, not {fmt!r}")
    FigureCanvasAgg(fig)
    fig.savefig(path, dpi=DPI, format=fmt)
    return path


KINDS = ("curve", "residuals", "quantiles", "influence", "degrees", "contour")


def applicable(res: FitResult, scan: DegreeScan | None = None) -> list[str]:
    """The figure kinds that apply to a fit (curve and degrees for one predictor, contour
    for two or more)."""
    one = res.spec.k == 1
    kinds = [k for k in KINDS if (k != "contour" if one else k not in ("curve", "degrees"))]
    return [k for k in kinds if k != "degrees" or scan is not None]


def figure(res: FitResult, kind: str, scan: DegreeScan | None = None,
           first_row: int | None = None):
    """One figure of the fit by kind (``first_row``: the sheet row of data row 1, for the
    influence figure's labels)."""
    if kind == "degrees":
        if scan is None:
            raise ModelError("the degrees figure needs a degree scan")
        return degree_scan(scan)
    if kind == "contour":
        from .engine import optimum

        try:
            opt = optimum(res)
        except ModelError:
            opt = None
        return contour(res, opt)
    makers = {"curve": curve, "residuals": residuals, "quantiles": normal_quantiles,
              "influence": influence}
    if kind not in makers:
        raise ModelError(f"figure kind must be one of {', '.join(KINDS)}; got {kind!r}")
    if kind == "influence":
        return influence(res, first_row)
    return makers[kind](res)


def png_bytes(fig) -> bytes:
    """The figure as PNG bytes."""
    import io

    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI)
    return buf.getvalue()


def write_figures(res: FitResult, out: str | Path, kinds=None, *, svg: bool = False,
                  force: bool = False, scan: DegreeScan | None = None,
                  prefix: str = "", first_row: int | None = None) -> dict[str, bytes]:
    """Write the figures of one fit into folder ``out`` as ``<prefix><kind>.png`` (and .svg),
    each atomically, an existing file only with ``force``; default: every kind that applies.
    Returns the PNG bytes by kind (the report embeds them without drawing again)."""
    from .book.safety import write_atomically

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    pngs = {}
    for kind in list(kinds) if kinds else applicable(res, scan):
        fig = figure(res, kind, scan, first_row)
        pngs[kind] = data = png_bytes(fig)
        write_atomically(out / f"{prefix}{kind}.png", lambda tmp, d=data: tmp.write_bytes(d),
                         force=force)
        if svg:
            write_atomically(out / f"{prefix}{kind}.svg",
                             lambda tmp, f=fig: save(f, tmp, "svg"), force=force)
    return pngs
