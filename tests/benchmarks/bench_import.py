"""Benchmark: the import time of the worksheet functions against importing numpy alone.

``import xlbridge.worksheet`` is what every runtime pays before the first function call
(the in-browser Python on every workbook load). Each import runs in a fresh interpreter;
the best of 5 is kept for both, in this run, and the ratio printed. numpy is the floor:
the functions cannot load faster than the one library they need.
Run: python tests/benchmarks/bench_import.py
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

# An installed package runs from compiled .pyc files; with PYTHONDONTWRITEBYTECODE set (as
# in some sandboxes) every child process would compile the checkout from source again.
os.environ.pop("PYTHONDONTWRITEBYTECODE", None)

ROOT = Path(__file__).resolve().parents[2]
RUNS = 5
TIMER = "import time; t = time.perf_counter(); import {m}; print(time.perf_counter() - t)"


def best(module: str) -> float:
    env = dict(os.environ, PYTHONPATH=str(ROOT), XLBRIDGE_XLWINGS="auto")
    times = []
    for _ in range(RUNS):
        out = subprocess.run([sys.executable, "-c", TIMER.format(m=module)], env=env,
                             capture_output=True, text=True, check=True)
        times.append(float(out.stdout))
    return min(times)


def main() -> None:
    ours, floor = best("xlbridge.worksheet"), best("numpy")
    print(f"import xlbridge.worksheet: {ours * 1000:.0f} ms (best of {RUNS})")
    print(f"import numpy (baseline):   {floor * 1000:.0f} ms (best of {RUNS})")
    print(f"ratio: {ours / floor:.2f}")


if __name__ == "__main__":
    main()
