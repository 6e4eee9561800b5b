"""Shared test helpers: the NIST StRD reference folder and an LRE scorer."""

from __future__ import annotations

import json
import math
import os
from decimal import Decimal
from pathlib import Path

import pytest
from hypothesis import HealthCheck, settings

# Property tests are reproducible and bounded: the same examples on every run (derandomize),
# no example database carried between runs, and a deadline per example, so the suite's time
# never depends on the luck of a random seed or a long shrink. XB_HYPOTHESIS=explore turns
# randomisation back on for a local bug hunt.
settings.register_profile(
    "ci", derandomize=True, database=None, deadline=5000, print_blob=True,
    suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("explore", deadline=5000, suppress_health_check=[HealthCheck.too_slow])
settings.load_profile("explore" if os.environ.get("XB_HYPOTHESIS") == "explore"
                      else "ci")

REPO = Path(__file__).resolve().parents[1]
NIST_DIR = REPO.parent / "shared" / "reference" / "nist_strd"


def nist_sets() -> list[dict]:
    """All NIST StRD linear regression sets, with numbers as Decimal (every printed digit)."""
    if not NIST_DIR.is_dir():
        return []
    return [json.loads(p.read_text(), parse_float=Decimal) for p in sorted(NIST_DIR.glob("*.json"))]


def nist_set(name: str) -> dict:
    path = NIST_DIR / f"{name}.json"
    if not path.exists():
        pytest.skip(f"NIST StRD reference data not found at {NIST_DIR}")
    return json.loads(path.read_text(), parse_float=Decimal)


def lre(value: float, certified: str | Decimal) -> float:
    """Log relative error (correct significant digits), capped at 15; absolute error where the
    certified value is 0 (the NIST StRD scoring convention)."""
    if value is None or not math.isfinite(float(value)):
        return 0.0
    c, v = Decimal(str(certified)), Decimal(repr(float(value)))
    err = abs(v - c) if c == 0 else abs(v - c) / abs(c)
    return 15.0 if err == 0 else max(0.0, min(15.0, -float(err.log10())))
