"""Benchmark: ``xlbridge recalc``, ``pin`` and ``verify`` on a workbook of N data rows and six
XB_ formulas, against the floor: a process that starts the interpreter and reads the same
sheets with python-calamine, nothing else.

Every command runs as a whole process (start-up and imports included), best of REPEATS,
alternating with the floor. Memory is each process's peak resident size (ru_maxrss of that
child, from os.wait4), measured by a small launcher process: Linux carries the peak of the
process that forks over into the child's figure, and this benchmark holds the data.
Targets at 100,000 rows: each command at most 3x the floor's time and at most 2x its peak
memory. Data are invented (fixed seed).

Run: python tests/benchmarks/bench_runner.py [rows ...]   (default 10000 100000 1000000)
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import zipfile
from pathlib import Path

import numpy as np

# An installed package runs from compiled .pyc files; with PYTHONDONTWRITEBYTECODE set (as
# in some sandboxes) every child process would compile the checkout from source again.
os.environ.pop("PYTHONDONTWRITEBYTECODE", None)

SIZES = [int(a) for a in sys.argv[1:]] or [10_000, 100_000, 1_000_000]
TARGET_TIME, TARGET_MEMORY = 3.0, 2.0

FLOOR = """
import sys
import python_calamine
wb = python_calamine.CalamineWorkbook.from_path(sys.argv[1])
n = sum(len(wb.get_sheet_by_name(s).to_python(skip_empty_area=False)) for s in wb.sheet_names)
print(n)
"""

# Runs argv[1:] and prints "seconds peak_kib exit_code"; its own small size is the baseline.
LAUNCHER = """
import os, subprocess, sys, time

t0 = time.perf_counter()
proc = subprocess.Popen(sys.argv[1:], stdout=sys.stdout, stderr=sys.stderr)
_, status, usage = os.wait4(proc.pid, 0)
sys.stderr.write(f"\\n@@ {time.perf_counter() - t0} {usage.ru_maxrss} "
                 f"{os.waitstatus_to_exitcode(status)}\\n")
"""

_NS = 'xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main"'
_R = 'xmlns:r="http://schemas.openxmlformats.org/officeDocument/2006/relationships"'
_Y, _X = "Data!$B:$B", "Data!$A:$A"
FORMULAS = [  # (cell, array range or None, formula)
    ("A1", "A1:I4", f"XB_COEFS({_Y},{_X},2)"),
    ("A8", "A8:B30", f"XB_STATS({_Y},{_X},2)"),
    ("D8", None, f"XB_EQUATION({_Y},{_X},2)"),
    ("D10", "D10:H20", f"XB_CHECKS({_Y},{_X},2)"),
    ("A40", "A40:G43", f"XB_PREDICT({_Y},{_X},2,{{20;60;100}})"),
    ("A50", "A50:E53", f"XB_MARGINAL({_Y},{_X},2,{{20;60;100}})"),
]


def make_book(path: Path, rows: int) -> None:
    """A workbook written part by part: sheet Data (size, cost) and sheet Model (formulas
    without saved values, as a program that does not calculate writes them)."""
    rng = np.random.default_rng(7)
    size = rng.uniform(5.0, 120.0, rows)
    cost = 40.0 + 3.1 * size + 0.018 * size**2 + rng.normal(0.0, 6.0, rows)
    body = ['<row r="1"><c r="A1" t="inlineStr"><is><t>size</t></is></c>'
            '<c r="B1" t="inlineStr"><is><t>cost</t></is></c></row>']
    body += [f'<row r="{i}"><c r="A{i}"><v>{a!r}</v></c><c r="B{i}"><v>{b!r}</v></c></row>'
             for i, a, b in zip(range(2, rows + 2), size.tolist(), cost.tolist())]
    data = (f'<worksheet {_NS}><dimension ref="A1:B{rows + 1}"/><sheetData>'
            + "".join(body) + "</sheetData></worksheet>")
    cells = []
    for ref, arr, text in FORMULAS:
        f = f'<f t="array" ref="{arr}">{text}</f>' if arr else f"<f>{text}</f>"
        cells.append((int(ref[1:]), f'<c r="{ref}">{f}</c>'))
    by_row: dict[int, list[str]] = {}
    for r, c in cells:
        by_row.setdefault(r, []).append(c)
    model = (f"<worksheet {_NS}><sheetData>"
             + "".join(f'<row r="{r}">{"".join(cs)}</row>' for r, cs in sorted(by_row.items()))
             + "</sheetData></worksheet>")
    sheet_type = "application/vnd.openxmlformats-officedocument.spreadsheetml.worksheet+xml"
    rel = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
    parts = {
        "[Content_Types].xml": (
            '<Types xmlns="http://schemas.openxmlformats.org/package/2006/content-types">'
            '<Default Extension="rels" ContentType="application/vnd.openxmlformats-package.'
            'relationships+xml"/><Default Extension="xml" ContentType="application/xml"/>'
            '<Override PartName="/xl/workbook.xml" ContentType="application/vnd.openxml'
            'formats-officedocument.spreadsheetml.sheet.main+xml"/>'
            f'<Override PartName="/xl/worksheets/sheet1.xml" ContentType="{sheet_type}"/>'
            f'<Override PartName="/xl/worksheets/sheet2.xml" ContentType="{sheet_type}"/>'
            "</Types>"),
        "_rels/.rels": (
            '<Relationships xmlns="http://schemas.openxmlformats.org/package/2006/'
            f'relationships"><Relationship Id="rId1" Type="{rel}/officeDocument" '
            'Target="xl/workbook.xml"/></Relationships>'),
        "xl/workbook.xml": (
            f'<workbook {_NS} {_R}><sheets><sheet name="Data" sheetId="1" r:id="rId1"/>'
            '<sheet name="Model" sheetId="2" r:id="rId2"/></sheets></workbook>'),
        "xl/_rels/workbook.xml.rels": (
            '<Relationships xmlns="http://schemas.openxmlformats.org/package/2006/'
            f'relationships"><Relationship Id="rId1" Type="{rel}/worksheet" '
            f'Target="worksheets/sheet1.xml"/><Relationship Id="rId2" Type="{rel}/worksheet" '
            'Target="worksheets/sheet2.xml"/></Relationships>'),
        "xl/worksheets/sheet1.xml": data,
        "xl/worksheets/sheet2.xml": model,
    }
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        for name, text in parts.items():
            zf.writestr(name, text)


def measured(cmd: list[str]) -> tuple[float, float, str]:
    """(seconds, peak resident MiB, stdout) of one process."""
    proc = subprocess.run([sys.executable, "-c", LAUNCHER, *cmd], capture_output=True,
                          text=True, check=False)
    tail = proc.stderr.rsplit("@@ ", 1)[-1].split()
    if proc.returncode != 0 or len(tail) != 3 or tail[2] != "0":
        raise SystemExit(f"command failed: {' '.join(cmd)}\n{proc.stdout}{proc.stderr}")
    return float(tail[0]), int(tail[1]) / 1024, proc.stdout  # ru_maxrss: KiB on Linux


def run_size(rows: int, tmp: Path) -> None:
    book = tmp / f"bench-{rows}.xlsx"
    make_book(book, rows)
    cli = [sys.executable, "-m", "xlbridge.cli"]
    pins = tmp / f"bench-{rows}.pins.json"
    copy = tmp / f"bench-{rows}-copy.xlsx"
    commands = {
        "recalc": cli + ["recalc", str(book), "--out", str(copy), "--force"],
        "pin": cli + ["pin", str(book), "--out", str(pins), "--force"],
        "verify": cli + ["verify", str(book), "--pins", str(pins)],
    }
    floor_cmd = [sys.executable, "-c", FLOOR, str(book)]
    repeats = 3 if rows <= 100_000 else 2
    measured(floor_cmd)  # warm the file cache and the .pyc files
    for cmd in commands.values():
        measured(cmd)
    best: dict[str, tuple[float, float]] = {}
    for _ in range(repeats):
        for name, cmd in [("floor", floor_cmd), *commands.items()]:
            t, mem, out = measured(cmd)
            if name == "floor":
                assert int(out) >= rows + 1, "the floor did not read every row"
            old = best.get(name, (float("inf"), float("inf")))
            best[name] = (min(old[0], t), min(old[1], mem))
    ft, fm = best["floor"]
    print(f"\n{rows:,} data rows, six XB_ formulas ({book.stat().st_size / 1e6:.1f} MB), "
          f"best of {repeats}")
    print(f"  {'floor (start + calamine read)':32s} {ft:7.3f} s {fm:8.1f} MiB")
    for name in commands:
        t, m = best[name]
        ok = "meets" if t <= TARGET_TIME * ft and m <= TARGET_MEMORY * fm else "misses"
        print(f"  {name:32s} {t:7.3f} s {m:8.1f} MiB   time {t / ft:4.1f}x, memory "
              f"{m / fm:4.1f}x the floor" + (f"  ({ok} the targets)" if rows == 100_000
                                              else ""))


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        for rows in SIZES:
            run_size(rows, Path(tmp))


if __name__ == "__main__":
    main()
