"""A self-contained HTML report of one model: data used, equation, coefficients, statistics,
checks, degree scan, figures (embedded PNG), cautions and versions. No network access and
no external references, so the file can be archived with an estimate and printed."""

from __future__ import annotations

import base64
import hashlib
import html
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import __version__, cells, plots
from .cells.tables import split_notes
from .engine import FitResult, ModelError
from .engine.scan import DegreeScan

CAUTIONS = (
    "These are statistical estimates from the rows listed above, not guarantees. Intervals "
    "assume the model form is right and the errors are independent, of constant spread (or "
    "the remedy chosen) and roughly normal; the checks section says how well that holds.",
    "Predictions outside the range of the data (flagged as extrapolation) rest on the "
    "model's shape alone; a polynomial can turn sharply just beyond the data.",
    "Small samples give wide intervals and unstable curvature; fewer than 10 rows per "
    "coefficient is a common warning sign.",
    "Where an estimate feeds safety-related or structural decisions, follow the applicable "
    "codes and standards and have it reviewed by a licensed professional.",
)

CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; margin: 2rem auto;
       max-width: 60rem; color: #1b1b1b; line-height: 1.4; padding: 0 1rem; }
h1 { font-size: 1.6rem; border-bottom: 2px solid #1f4e79; padding-bottom: .3rem; }
h2 { font-size: 1.2rem; color: #1f4e79; margin-top: 2rem; border-bottom: 1px solid #ccd; }
table { border-collapse: collapse; margin: .5rem 0; font-size: .85rem; }
th, td { border: 1px solid #ccd; padding: .2rem .5rem; text-align: right; }
td { white-space: nowrap; } td.t { white-space: normal; }
th { background: #eef2f7; } th.q { background: #dfe7f1; color: #1f4e79; }
td.t, th.t { text-align: left; }
code.eq { display: block; white-space: pre-wrap; word-break: break-all; background: #f6f6f6;
          padding: .6rem; font-size: .85rem; }
.ok { background: #e3f4e1; } .watch { background: #fff3cd; } .problem { background: #f8d7da; }
figure { margin: 1rem 0; page-break-inside: avoid; }
figure img { max-width: 100%; height: auto; border: 1px solid #ddd; }
figcaption { font-size: .8rem; color: #555; }
.grid { display: grid; grid-template-columns: 1fr 1fr; gap: 1rem; }
.small { font-size: .8rem; color: #444; }
@media print { body { margin: 0; max-width: none; } h2 { page-break-after: avoid; }
               .grid { grid-template-columns: 1fr 1fr; } }
"""


@dataclass(frozen=True)
class Source:
    """Where the data came from, as the user gave it."""

    file: str = ""
    y_ref: str = ""
    x_ref: str = ""
    options: str = ""
    first_row: int | None = None  # sheet row of data row 1, for the influence figure


def data_hash(res: FitResult) -> str:
    """SHA-256 of the rows used (y then x, float64 little-endian) and the used-row mask."""
    h = hashlib.sha256()
    for a in (np.asarray(res.y, "<f8"), np.asarray(res.x, "<f8"),
              np.asarray(res.used, dtype=np.uint8)):
        h.update(np.ascontiguousarray(a).tobytes())
    return h.hexdigest()


def _num(v, digits: int = 6) -> str:
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        if not math.isfinite(float(v)):
            return "n/a" if math.isnan(float(v)) else ("inf" if v > 0 else "-inf")
        return f"{float(v):.{digits}g}"
    return html.escape(str(v))


def _table(head: list[str], rows: list[list], text=(0,), classes=None) -> str:
    """HTML table; columns in ``text`` are left-aligned text, the others numbers."""
    out = ["<table><tr>"]
    out += [f'<th class="{"t" if i in text else ""}">{html.escape(h)}</th>'
            for i, h in enumerate(head)]
    out.append("</tr>")
    for r_i, row in enumerate(rows):
        cls = f' class="{classes[r_i]}"' if classes else ""
        out.append(f"<tr{cls}>")
        for i, v in enumerate(row):
            cell = html.escape(str(v)) if i in text else _num(v)
            out.append(f'<td class="{"t" if i in text else ""}">{cell}</td>')
        out.append("</tr>")
    out.append("</table>")
    return "".join(out)


def _notes(notes: list[str]) -> str:
    return ("<ul class='small'>" + "".join(f"<li>{html.escape(n)}</li>" for n in notes)
            + "</ul>") if notes else ""


def _cells_table(table: list[list], text=(0,), classes=None) -> str:
    """A cells table (header row first) as HTML, its note rows as a list below it."""
    body, notes = split_notes(table)
    return _table(body[0], body[1:], text, classes) + _notes(notes)


def _questions_table(table: list[list]) -> str:
    """The statistics block (question, measure, value): one heading row per question."""
    body, notes = split_notes(table)
    out, current = ["<table>"], None
    for question, measure, value in body[1:]:
        if question != current:
            out.append(f"<tr><th class='t q' colspan='2'>{html.escape(question)}</th></tr>")
            current = question
        out.append(f"<tr><td class='t'>{html.escape(measure)}</td><td>{_num(value)}</td></tr>")
    out.append("</table>")
    return "".join(out) + _notes(notes)


#: The degree-scan columns the report shows (the worksheet table has them all).
REPORT_DEGREE_FIELDS = ("degree", "choice", "adj_r2", "rmse", "cv_rmse", "pred_r2", "aicc",
                        "bic", "top_term_p_value", "note")

CAPTIONS = {
    "curve": "Fitted curve with confidence band of the mean and prediction band of a new "
             "observation",
    "contour": "Contours of the fitted surface",
    "residuals": "Residuals against fitted values",
    "quantiles": "Normal quantile plot",
    "influence": "Rows that pull the fit hardest: Cook's distance, largest first, against "
                 "the threshold of the row flags",
    "degrees": "Degree scan",
}


def _figure(png: bytes, caption: str) -> str:
    data = base64.b64encode(png).decode("ascii")
    return (f'<figure><img alt="{html.escape(caption)}" src="data:image/png;base64,{data}">'
            f"<figcaption>{html.escape(caption)}</figcaption></figure>")


def _versions() -> list[list[str]]:
    import platform

    import matplotlib
    import scipy

    return [["xlbridge", __version__], ["python", platform.python_version()],
            ["numpy", np.__version__], ["scipy", scipy.__version__],
            ["matplotlib", matplotlib.__version__]]


def provenance() -> list[list[str]]:
    """When and with what a report was made (UTC date and time; the versions the numbers
    depend on), shown beside its fingerprint so a reader can tell two reports apart."""
    import datetime

    import scipy

    made = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    return [["made on", made],
            ["made with", f"xlbridge {__version__}, numpy {np.__version__}, "
                          f"scipy {scipy.__version__}"]]


def build_report(res: FitResult, *, scan: DegreeScan | None = None,
                 source: Source | None = None, title: str | None = None,
                 pngs: dict[str, bytes] | None = None) -> str:
    """The whole report as one HTML string (``pngs``: figures already drawn, by kind)."""
    src = source or Source()
    title = title or f"Model report: {res.response} ({res.model_text})"
    s = res.stats
    parts = [f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
             f"<title>{html.escape(title)}</title><style>{CSS}</style></head><body>",
             f"<h1>{html.escape(title)}</h1>"]

    parts.append("<h2 id='data'>Data</h2>")
    rows = [["file", src.file or "(given directly)"], ["y", src.y_ref or res.response],
            ["x", src.x_ref or ", ".join(res.spec.predictors)],
            ["options", src.options or "(defaults)"], ["rows used", s.n_used],
            ["rows dropped", res.n_dropped], ["SHA-256 of the rows used", data_hash(res)],
            *provenance()]
    for nm, lo, hi in zip(res.spec.predictors, res.x_min, res.x_max):
        rows.append([f"range of {nm}", f"{lo:.6g} to {hi:.6g}"])
    parts.append(_table(["item", "value"], rows, text=(0, 1)))

    parts.append("<h2 id='equation'>Equation</h2>")
    parts.append(f"<code class='eq'>{html.escape(res.equation())}</code>")
    parts.append(f"<p class='small'>Model {html.escape(res.model_text)}; coefficients in raw "
                 f"units with full precision; solved by the {html.escape(res.method)} path "
                 "in a centered, scaled basis.</p>")

    parts.append("<h2 id='coefficients'>Coefficients</h2>")
    parts.append(_cells_table(cells.coef_table(res)))

    parts.append("<h2 id='statistics'>Statistics, by the question they answer</h2>")
    parts.append(_questions_table(cells.stats_table(res)))

    parts.append("<h2 id='checks'>Checks of the assumptions</h2>")
    cks = cells.checks_table(res, None, src.first_row)
    verdict = cells.CHECK_COLUMNS.index("verdict")
    parts.append(_cells_table(cks, text=(0, verdict, len(cks[0]) - 1),
                              classes=[r[verdict] if r[verdict] in ("ok", "watch", "problem")
                                       else "" for r in cks[1:]]))

    parts.append("<h2 id='degrees'>Degree scan</h2>")
    if scan is not None:
        full, notes = split_notes(cells.degrees_table(scan))
        at = [cells.DEGREE_COLUMNS.index(f) for f in REPORT_DEGREE_FIELDS]
        rows = [[r[i] for i in at] for r in full]
        for r in rows[1:]:
            r[0] = f"{r[0]:g}"  # a degree, not a measurement
        parts.append(_table(rows[0], rows[1:], text=(0, 1, len(at) - 1)) + _notes(notes))
    else:
        parts.append("<p class='small'>Not run for this model (the scan applies to one "
                     "predictor).</p>")

    parts.append("<h2 id='plots'>Plots</h2><div class='grid'>")
    pngs = dict(pngs or {})
    for kind in plots.applicable(res, scan):
        if kind not in pngs:
            pngs[kind] = plots.png_bytes(plots.figure(res, kind, scan, src.first_row))
        parts.append(_figure(pngs[kind], CAPTIONS[kind]))
    parts.append("</div>")

    if res.spec.k >= 2 or (res.spec.degree or 0) >= 2:
        try:
            table = cells.optimum_table(res)
            parts.append("<h2 id='optimum'>Stationary point</h2>")
            parts.append(_cells_table(table, text=(0, len(table[0]) - 1)))
        except ModelError as exc:
            parts.append(f"<p class='small'>{html.escape(str(exc))}</p>")

    parts.append("<h2 id='cautions'>Cautions</h2><ul>")
    parts += [f"<li>{html.escape(c)}</li>" for c in CAUTIONS]
    parts.append("</ul>")
    parts.append("<h2 id='versions'>Versions</h2>")
    parts.append(_table(["component", "version"], _versions(), text=(0, 1)))
    parts.append("</body></html>")
    return "\n".join(parts)


def write_report(path: str | Path, res: FitResult, **kwargs) -> Path:
    """Write the report to ``path`` (UTF-8)."""
    path = Path(path)
    path.write_text(build_report(res, **kwargs), encoding="utf-8")
    return path


# --- cost-estimating relationships: the card on top, then the fit -------------------------

CER_CSS = """
section.card { border: 2px solid #1f4e79; border-radius: 6px; padding: .2rem 1rem 1rem;
               background: #fbfcfe; }
section.card td, section.card th { text-align: left; white-space: normal; }
section.card h2 { margin-top: .6rem; }
ul.cautions li { color: #7a4a00; }
"""


def build_cer_report(res, facts, *, source: Source | None = None, title: str | None = None,
                     options=None, candidates: list[list] | None = None,
                     pngs: dict[str, bytes] | None = None) -> str:
    """The report of a CER (``CerResult``) as one HTML string: its card (``CardFacts`` from
    ``cells.cer.card_facts``) at the top, then the data, coefficients, statistics, figures,
    the candidate comparison (a ``cells.cer.candidates_table``, when given), cautions and
    versions."""
    from . import cells, cerplots
    from .cells.cer import card_caption

    src = source or Source()
    opts = options or cells.Options()
    title = title or f"CER report: {res.response} ({res.form} CER by {res.method})"
    parts = [f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
             f"<title>{html.escape(title)}</title><style>{CSS}{CER_CSS}</style></head><body>",
             f"<h1>{html.escape(title)}</h1>",
             "<section class='card' id='card'><h2>CER card</h2>",
             _table(["item", "value"], [[card_caption(k), v] for k, v in facts.items],
                    text=(0,)),
             "<h3>Cautions</h3><ul class='cautions'>",
             *[f"<li>{html.escape(c)}</li>" for c in facts.cautions], "</ul></section>"]

    parts.append("<h2 id='data'>Data</h2>")
    rows = [["file", src.file or "(given directly)"], ["y", src.y_ref or res.response],
            ["x", src.x_ref or ", ".join(res.drivers)],
            ["options", src.options or "(defaults)"], *provenance()]
    parts.append(_table(["item", "value"], rows, text=(0, 1)))

    parts.append("<h2 id='coefficients'>Coefficients</h2>")
    parts.append(_cells_table(cells.coef_table(res, opts.replace(header=True))))
    parts.append("<h2 id='statistics'>Statistics, by the question they answer</h2>")
    parts.append(_questions_table(cells.stats_table(res, opts.replace(header=True))))

    parts.append("<h2 id='plots'>Plots</h2><div class='grid'>")
    pngs = dict(pngs or cerplots.cer_pngs(res))
    for kind in cerplots.KINDS:
        parts.append(_figure(pngs[kind], cerplots.CAPTIONS[kind]))
    parts.append("</div>")

    if candidates is not None:
        parts.append("<h2 id='candidates'>Candidate CERs</h2>")
        parts.append(_cells_table(candidates, text=(1, 2, 3, len(candidates[0]) - 1)))

    parts.append("<h2 id='cautions'>Cautions</h2><ul>")
    parts += [f"<li>{html.escape(c)}</li>" for i, c in enumerate(CAUTIONS) if i != 1]
    parts.append("</ul>")
    parts.append("<h2 id='versions'>Versions</h2>")
    parts.append(_table(["component", "version"], _versions(), text=(0, 1)))
    parts.append("</body></html>")
    return "\n".join(parts)
