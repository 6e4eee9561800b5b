"""Benchmark: ``xlbridge fit`` on a 100,000-row x 2-column workbook, as a whole process,
against a process that only reads the same cells with openpyxl in read-only mode.

Both are timed in this run as separate processes (start-up and imports included), best of
REPEATS, alternating. Target: xlbridge fit at least 3x faster than the openpyxl read alone.
Data are invented (fixed seed). Run: python tests/benchmarks/bench_cli_read.py [rows]
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import openpyxl

# An installed package runs from compiled .pyc files; with PYTHONDONTWRITEBYTECODE set (as
# in some sandboxes) every child process would compile the checkout from source again.
os.environ.pop("PYTHONDONTWRITEBYTECODE", None)

ROWS = int(sys.argv[1]) if len(sys.argv) > 1 else 100_000
REPEATS = 5
TARGET = 3.0

OPENPYXL_READ = """
import sys
import openpyxl

wb = openpyxl.load_workbook(sys.argv[1], read_only=True, data_only=True)
ws = wb["Site data"]
cells = [row for row in ws.iter_rows(min_row=1, max_col=2, values_only=True)]
wb.close()
print(len(cells))
"""


def make_book(path: Path) -> None:
    rng = np.random.default_rng(7)
    size = rng.uniform(5.0, 120.0, ROWS)
    cost = 40.0 + 3.1 * size + 0.018 * size**2 + rng.normal(0.0, 6.0, ROWS)
    wb = openpyxl.Workbook(write_only=True)
    ws = wb.create_sheet("Site data")
    ws.append(["size", "cost"])
    for a, b in zip(size.tolist(), cost.tolist()):
        ws.append([a, b])
    wb.save(path)


def timed(cmd: list[str]) -> tuple[float, str]:
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True, check=False)
    elapsed = time.perf_counter() - t0
    if proc.returncode != 0:
        raise SystemExit(f"command failed ({proc.returncode}): {' '.join(cmd)}\n{proc.stderr}")
    return elapsed, proc.stdout


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        book = Path(tmp) / "bench.xlsx"
        make_book(book)
        fit_cmd = [sys.executable, "-m", "xlbridge.cli", "fit", str(book), "--y",
                   "'Site data'!B:B", "--x", "'Site data'!A:A", "--model", "2",
                   "--format", "json"]
        read_cmd = [sys.executable, "-c", OPENPYXL_READ, str(book)]
        timed(fit_cmd)  # warm the file cache and .pyc files for both
        timed(read_cmd)
        fit_t, read_t = [], []
        for _ in range(REPEATS):
            t, out = timed(fit_cmd)
            fit_t.append(t)
            t, out2 = timed(read_cmd)
            read_t.append(t)
        assert f'"n_used": {ROWS}' in out, "the fit did not use every row"
        assert int(out2) == ROWS + 1
        f, r = min(fit_t), min(read_t)
        print(f"rows: {ROWS:,} x 2 columns ({book.stat().st_size / 1e6:.1f} MB)")
        print(f"xlbridge fit (whole process, best of {REPEATS}):       {f:.3f} s")
        print(f"openpyxl read-only read (whole process, best of {REPEATS}): {r:.3f} s")
        ratio = r / f
        verdict = "meets" if ratio >= TARGET else "MISSES"
        print(f"ratio: xlbridge fit is {ratio:.1f}x faster ({verdict} the {TARGET:g}x target)")


if __name__ == "__main__":
    main()
