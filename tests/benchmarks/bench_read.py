"""Benchmark: reading two whole columns of a 1,000,000-row sheet through xlbridge's reader
(the one scan of the sheet's XML, the value reader, whole-column trimming, the values as
xlwings passes them) against a plain python-calamine read of the same cells.

Both run in this process, alternating, best of REPEATS. The baseline is the floor of what
the reader does: calamine alone, no look at the XML. Data are invented (fixed seed).
Run: python tests/benchmarks/bench_read.py [rows]
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import openpyxl
import python_calamine

from xlbridge.book.reader import open_book

ROWS = int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000
REPEATS = 3
SHEET = "Site data"


def make_book(path: Path) -> None:
    rng = np.random.default_rng(7)
    size = rng.uniform(5.0, 120.0, ROWS)
    cost = 40.0 + 3.1 * size + 0.018 * size**2 + rng.normal(0.0, 6.0, ROWS)
    wb = openpyxl.Workbook(write_only=True)
    ws = wb.create_sheet(SHEET)
    ws.append(["size", "cost"])
    for a, b in zip(size.tolist(), cost.tolist()):
        ws.append([a, b])
    wb.save(path)


def plain_read(path: Path) -> list[list]:
    """The baseline: calamine's values of the sheet, split into the two columns."""
    wb = python_calamine.CalamineWorkbook.from_path(str(path))
    grid = wb.get_sheet_by_name(SHEET).to_python(skip_empty_area=False)
    wb.close()
    return [[row[0] for row in grid], [row[1] for row in grid]]


def our_read(path: Path) -> list[list]:
    book = open_book(path)
    areas = book.resolve_together([f"'{SHEET}'!A:A", f"'{SHEET}'!B:B"])
    out = [book.xlwings_value(a) for a in areas]
    book.close()
    return out


def best(fn, path: Path) -> tuple[float, list[list]]:
    t0 = time.perf_counter()
    out = fn(path)
    return time.perf_counter() - t0, out


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bench.xlsx"
        t0 = time.perf_counter()
        make_book(path)
        print(f"rows: {ROWS:,} x 2 columns ({path.stat().st_size / 1e6:.1f} MB, "
              f"written in {time.perf_counter() - t0:.0f} s)")
        ours, plain = [], []
        for _ in range(REPEATS):
            t, a = best(our_read, path)
            ours.append(t)
            t, b = best(plain_read, path)
            plain.append(t)
        assert len(a[0]) == len(b[0]) == ROWS + 1
        assert a[1][1:] == b[1][1:], "the two reads differ"
        o, p = min(ours), min(plain)
        print(f"xlbridge read (scan + values + trimming), best of {REPEATS}: {o:.3f} s")
        print(f"plain python-calamine read, best of {REPEATS}:               {p:.3f} s")
        print(f"ratio: xlbridge / calamine = {o / p:.2f}")


if __name__ == "__main__":
    main()
