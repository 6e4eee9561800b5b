"""Benchmark: ``xlbridge fit`` as a whole process on workbooks of 10^4, 10^5 and 10^6 rows,
against the floor of the same run: a fresh process that starts the interpreter, imports
numpy and reads the same cells with python-calamine into a numpy array.

Both are timed as separate processes (start-up and imports included), alternating, best of
REPEATS; the script prints both times and the ratio per size.  Targets: ratio <= 2 at 10^4
rows and <= 1.3 at 10^6 rows.  The workbooks hold invented data (fixed seed), are written
here as sheet XML directly and cached in the temporary folder between runs.

Run: python tests/benchmarks/bench_cli_fit.py [rows ...]
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
import zipfile
from pathlib import Path

import numpy as np

# An installed package runs from compiled .pyc files; with PYTHONDONTWRITEBYTECODE set (as
# in some sandboxes) every child process would compile the checkout from source again.
os.environ.pop("PYTHONDONTWRITEBYTECODE", None)

SIZES = [int(a) for a in sys.argv[1:]] or [10_000, 100_000, 1_000_000]
REPEATS = 5
TARGETS = {10_000: 2.0, 1_000_000: 1.3}
SHEET = "Site data"
CACHE = Path(tempfile.gettempdir()) / "xlbridge-bench-cli-fit"

FLOOR = """
import sys
import numpy as np
from python_calamine import CalamineWorkbook

rows = CalamineWorkbook.from_path(sys.argv[1]).get_sheet_by_name(sys.argv[2]).to_python()
data = np.array(rows[1:], dtype=float)
print(data.shape[0])
"""

_PARTS = {
    "[Content_Types].xml": (
        '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
        '<Types xmlns="http://schemas.openxmlformats.org/package/2006/content-types">'
        '<Default Extension="rels" '
        'ContentType="application/vnd.openxmlformats-package.relationships+xml"/>'
        '<Default Extension="xml" ContentType="application/xml"/>'
        '<Override PartName="/xl/workbook.xml" ContentType="application/'
        'vnd.openxmlformats-officedocument.spreadsheetml.sheet.main+xml"/>'
        '<Override PartName="/xl/worksheets/sheet1.xml" ContentType="application/'
        'vnd.openxmlformats-officedocument.spreadsheetml.worksheet+xml"/>'
        '</Types>'),
    "_rels/.rels": (
        '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
        '<Relationships xmlns="http://schemas.openxmlformats.org/package/2006/relationships">'
        '<Relationship Id="rId1" Type="http://schemas.openxmlformats.org/officeDocument/2006/'
        'relationships/officeDocument" Target="xl/workbook.xml"/></Relationships>'),
    "xl/workbook.xml": (
        '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
        '<workbook xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main" '
        'xmlns:r="http://schemas.openxmlformats.org/officeDocument/2006/relationships">'
        f'<sheets><sheet name="{SHEET}" sheetId="1" r:id="rId1"/></sheets></workbook>'),
    "xl/_rels/workbook.xml.rels": (
        '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
        '<Relationships xmlns="http://schemas.openxmlformats.org/package/2006/relationships">'
        '<Relationship Id="rId1" Type="http://schemas.openxmlformats.org/officeDocument/2006/'
        'relationships/worksheet" Target="worksheets/sheet1.xml"/></Relationships>'),
}


def make_book(path: Path, rows: int) -> None:
    """size (A) and cost (B) with a header row; the sheet XML written in chunks."""
    rng = np.random.default_rng(7)
    size = rng.uniform(5.0, 120.0, rows)
    cost = 40.0 + 3.1 * size + 0.018 * size**2 + rng.normal(0.0, 6.0, rows)
    tmp = path.with_suffix(".part")
    with zipfile.ZipFile(tmp, "w", zipfile.ZIP_DEFLATED) as zf:
        for name, text in _PARTS.items():
            zf.writestr(name, text)
        with zf.open("xl/worksheets/sheet1.xml", "w", force_zip64=True) as f:
            f.write(b'<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
                    b'<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/'
                    b'2006/main">'
                    + f'<dimension ref="A1:B{rows + 1}"/>'.encode()
                    + b'<sheetData><row r="1"><c r="A1" t="inlineStr"><is><t>size</t></is>'
                      b'</c><c r="B1" t="inlineStr"><is><t>cost</t></is></c></row>')
            for start in range(0, rows, 50_000):
                chunk = "".join(
                    f'<row r="{i + 2}"><c r="A{i + 2}"><v>{a!r}</v></c>'
                    f'<c r="B{i + 2}"><v>{b!r}</v></c></row>'
                    for i, a, b in zip(range(start, start + 50_000),
                                       size[start:start + 50_000].tolist(),
                                       cost[start:start + 50_000].tolist()))
                f.write(chunk.encode())
            f.write(b"</sheetData></worksheet>")
    os.replace(tmp, path)


def book_of(rows: int) -> Path:
    CACHE.mkdir(exist_ok=True)
    path = CACHE / f"fit-{rows}.xlsx"
    if not path.exists():
        make_book(path, rows)
    return path


def timed(cmd: list[str]) -> tuple[float, str]:
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True, check=False)
    elapsed = time.perf_counter() - t0
    if proc.returncode != 0:
        raise SystemExit(f"command failed ({proc.returncode}): {' '.join(cmd)}\n{proc.stderr}")
    return elapsed, proc.stdout


def main() -> None:
    print(f"xlbridge fit vs floor (interpreter + import numpy + python-calamine read), "
          f"whole processes, best of {REPEATS}")
    print(f"{'rows':>10}  {'MB':>6}  {'fit s':>7}  {'floor s':>7}  {'ratio':>5}  target")
    for rows in SIZES:
        book = book_of(rows)
        fit_cmd = [sys.executable, "-m", "xlbridge.cli", "fit", str(book), "--y",
                   f"'{SHEET}'!B:B", "--x", f"'{SHEET}'!A:A", "--model", "2",
                   "--format", "json"]
        floor_cmd = [sys.executable, "-c", FLOOR, str(book), SHEET]
        timed(fit_cmd)  # warm the file cache and .pyc files for both
        timed(floor_cmd)
        fit_t, floor_t = [], []
        for _ in range(REPEATS):
            t, out = timed(fit_cmd)
            fit_t.append(t)
            t, out2 = timed(floor_cmd)
            floor_t.append(t)
        assert f'"n_used": {rows}' in out, "the fit did not use every row"
        assert int(out2) == rows
        f, r = min(fit_t), min(floor_t)
        target = TARGETS.get(rows)
        verdict = "" if target is None else (
            f"<= {target:g} " + ("met" if f / r <= target else "MISSED"))
        print(f"{rows:>10,}  {book.stat().st_size / 1e6:>6.1f}  {f:>7.3f}  {r:>7.3f}  "
              f"{f / r:>5.2f}  {verdict}", flush=True)


if __name__ == "__main__":
    main()
