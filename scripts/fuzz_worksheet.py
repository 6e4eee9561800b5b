"""Fuzz the worksheet functions: N seeded random calls (default 20,000) in every value
shape, reporting calls per function, the slowest call and every rule broken (an internal
error, a NaN or infinite cell, an answer that is not a 2-D list, a call over the limit).

    python scripts/fuzz_worksheet.py [N] [--seed S]

Exit status 1 when any rule was broken."""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tests.fuzzcases import CALL_LIMIT, run  # noqa: E402


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("calls", nargs="?", type=int, default=20_000)
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args()
    start = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        tally = run(args.calls, seed=args.seed)
    took = time.perf_counter() - start
    for name, count in sorted(tally.calls.items()):
        print(f"{name:16} {count:7d} calls")
    print(f"{args.calls} calls in {took:.1f} s; slowest call {tally.slowest:.2f} s "
          f"(limit {CALL_LIMIT:g} s); {len(tally.problems)} problems")
    for p in tally.problems:
        print("problem:", p)
    return 1 if tally.problems else 0


if __name__ == "__main__":
    sys.exit(main())
