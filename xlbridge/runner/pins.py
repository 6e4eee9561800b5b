"""Pin files: every XB_ result of a workbook, recorded so that CI can prove it still holds.

Format (JSON, ``"format": "xlbridge-pins"``, ``"version": 1``)::

    {"format": "xlbridge-pins", "version": 1, "xlbridge": "0.1.0",
     "workbook": "prices.xlsx", "workbook_sha256": "...",
     "cells": {"Model!A1": {"function": "XB_COEFS", "formula": "=XB_COEFS(...)",
                            "status": "ok", "values": [["term", ...], ...]},
               "Model!K1": {"function": "XB_STATS", "formula": "...",
                            "status": "error", "message": "xlbridge: ..."}}}

Numbers are written with ``repr`` (they read back bit for bit). No time stamps, keys
sorted: pinning the same workbook twice gives the same file, which diffs well in review.
"""

from __future__ import annotations

import hashlib
import json
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from xlbridge.book.safety import BookError
from xlbridge.runner.recalc import Evaluation, XbCell

__all__ = ["Drift", "PIN_FORMAT", "compare", "load_pins", "pins_document"]

PIN_FORMAT = "xlbridge-pins"
PIN_VERSION = 1


def file_sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _cell_record(x: XbCell) -> dict[str, Any]:
    rec: dict[str, Any] = {"function": x.function, "formula": x.formula.text}
    if x.ok:
        rec["status"] = "ok"
        rec["values"] = [list(r) for r in x.result or []]
    else:
        rec["status"] = "error"
        rec["message"] = x.message or ""
    return rec


def pins_document(evaluation: Evaluation, version: str) -> dict[str, Any]:
    path = evaluation.book.path
    return {
        "format": PIN_FORMAT,
        "version": PIN_VERSION,
        "xlbridge": version,
        "workbook": path.name,
        "workbook_sha256": file_sha256(path),
        "cells": {x.label: _cell_record(x) for x in evaluation.cells},
    }


def load_pins(path: Path) -> dict[str, Any]:
    """Read and check a pin file; raises BookError with a message."""
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise BookError(f"pin file {path} not found; create it with xlbridge pin") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise BookError(f"cannot read pin file {path}: {exc}") from None
    except json.JSONDecodeError as exc:
        raise BookError(f"{path.name} is not valid JSON ({exc}); recreate it with "
                        "xlbridge pin") from None
    if not isinstance(doc, dict) or doc.get("format") != PIN_FORMAT:
        raise BookError(f"{path.name} is not an xlbridge pin file (no \"format\": "
                        f"\"{PIN_FORMAT}\")")
    if doc.get("version") != PIN_VERSION:
        raise BookError(f"{path.name} has pin format version {doc.get('version')!r}; this "
                        f"xlbridge reads version {PIN_VERSION}")
    cells = doc.get("cells")
    if not isinstance(cells, dict):
        raise BookError(f"{path.name}: \"cells\" must be an object")
    for key, rec in cells.items():
        if not isinstance(rec, dict) or rec.get("status") not in ("ok", "error"):
            raise BookError(f"{path.name}: entry {key!r} is damaged; recreate the file")
        if rec["status"] == "ok" and not (
            isinstance(rec.get("values"), list)
            and all(isinstance(r, list) for r in rec["values"])
        ):
            raise BookError(f"{path.name}: entry {key!r} has no table of values")
    return doc


@dataclass
class Drift:
    """What changed between a pin file and a fresh evaluation."""

    lines: list[str] = field(default_factory=list)
    cells_checked: int = 0
    cells_drifted: int = 0
    values_checked: int = 0
    records: list[dict[str, Any]] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return self.cells_drifted == 0


def _short(text: str, n: int = 40) -> str:
    return text if len(text) <= n else text[: n - 3] + "..."


def _where(table: list[list[Any]], i: int, j: int) -> str:
    """``row 2 (intercept), column 2 (estimate)``; nothing for a one-cell result."""
    if len(table) == 1 and len(table[0]) == 1:
        return ""
    first = table[i][0] if table[i] else ""
    row = f"row {i + 1}" + (f" ({_short(first)})" if isinstance(first, str) and first else "")
    head = table[0] if table else []
    name = head[j] if j < len(head) else None
    textual = bool(head) and all(isinstance(v, str) for v in head)
    col = f"column {j + 1}" + (f" ({_short(name)})" if textual and name else "")
    return f" {row}, {col}"


_NUMBER_IN_TEXT = re.compile(r"(?<![\w.])(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?")


def _text_close(a: str, b: str, rtol: float, atol: float) -> bool:
    """Equal text, or text that differs only in numbers within tolerance (an equation)."""
    if a == b:
        return True
    if _NUMBER_IN_TEXT.sub("#", a) != _NUMBER_IN_TEXT.sub("#", b):
        return False
    na = [float(t) for t in _NUMBER_IN_TEXT.findall(a)]
    nb = [float(t) for t in _NUMBER_IN_TEXT.findall(b)]
    return len(na) == len(nb) and all(_close(x, y, rtol, atol) for x, y in zip(na, nb))


def _close(a: float, b: float, rtol: float, atol: float) -> bool:
    if a == b:
        return True
    if not (math.isfinite(a) and math.isfinite(b)):
        return False
    return abs(a - b) <= atol + rtol * max(abs(a), abs(b))


def _fmt(v: Any) -> str:
    return repr(v) if isinstance(v, float) else json.dumps(v, ensure_ascii=False)


def _dated_rows(func: str) -> frozenset[str]:
    """First cells of the rows of ``func``'s table that record when it was made (the CER
    card's date): a day later they differ without any result having changed."""
    from xlbridge.cells.cer import CARD_DATE

    return frozenset({CARD_DATE}) if func == "XB_CERCARD" else frozenset()


def _compare_tables(label: str, func: str, old: list[list[Any]], new: list[list[Any]],
                    rtol: float, atol: float, drift: Drift) -> tuple[int, int]:
    """Lines for every differing value (not of a dated row); returns (values checked,
    differences)."""
    shape_old = (len(old), max((len(r) for r in old), default=0))
    shape_new = (len(new), max((len(r) for r in new), default=0))
    n_diff = 0
    checked = 0
    if shape_old != shape_new:
        drift.lines.append(f"  {label} {func}: the table changed shape from "
                           f"{shape_old[0]}x{shape_old[1]} to {shape_new[0]}x{shape_new[1]}")
        n_diff += 1
    verdict_cols = {j for j, v in enumerate(new[0] if new else [])
                    if isinstance(v, str) and v.strip().lower() == "verdict"}
    dated = _dated_rows(func)
    for i in range(min(len(old), len(new))):
        if dated and new[i] and new[i][0] in dated and old[i][:1] == new[i][:1]:
            continue
        for j in range(min(len(old[i]), len(new[i]))):
            a, b = old[i][j], new[i][j]
            checked += 1
            where = _where(new, i, j)
            num_a = isinstance(a, (int, float)) and not isinstance(a, bool)
            num_b = isinstance(b, (int, float)) and not isinstance(b, bool)
            if num_a and num_b:
                if not _close(float(a), float(b), rtol, atol):
                    rel = abs(a - b) / max(abs(a), abs(b)) if max(abs(a), abs(b)) else 0.0
                    drift.lines.append(
                        f"  {label} {func}{where}: pinned {_fmt(float(a))}, now "
                        f"{_fmt(float(b))} (relative difference {rel:.2e})"
                    )
                    n_diff += 1
            elif a != b and not (isinstance(a, str) and isinstance(b, str)
                                 and j not in verdict_cols and _text_close(a, b, rtol, atol)):
                what = "verdict changed" if j in verdict_cols else "changed"
                drift.lines.append(f"  {label} {func}{where}: {what}: {_fmt(a)} -> {_fmt(b)}")
                n_diff += 1
            if n_diff > 50:
                drift.lines.append(f"  {label} {func}: more differences not shown")
                return checked, n_diff
    return checked, n_diff


def compare(pins: dict[str, Any], evaluation: Evaluation, *, rtol: float = 1e-9,
            atol: float = 0.0) -> Drift:
    """Compare a pin file with a fresh evaluation of the same workbook."""
    drift = Drift()
    now = {x.label: x for x in evaluation.cells}
    pinned: dict[str, Any] = pins["cells"]
    for label in sorted(set(pinned) | set(now), key=_sort_key):
        drift.cells_checked += 1
        old = pinned.get(label)
        x = now.get(label)
        status = "same"
        if old is None:
            assert x is not None
            drift.lines.append(f"  {label} {x.function}: new XB_ cell, not in the pin file "
                               "(pin again once it is reviewed)")
            status = "new"
        elif x is None:
            drift.lines.append(f"  {label} {old.get('function', '')}: pinned XB_ cell is gone "
                               f"(was {old.get('formula', '')})")
            status = "gone"
        else:
            func = x.function
            if old.get("formula") != x.formula.text:
                drift.lines.append(f"  {label} {func}: formula changed: "
                                   f"{old.get('formula')} -> {x.formula.text}")
                status = "drift"
            new_status = "ok" if x.ok else "error"
            if old["status"] != new_status:
                if new_status == "error":
                    drift.lines.append(f"  {label} {func}: pinned a result, now {x.message}")
                else:
                    drift.lines.append(f"  {label} {func}: pinned an error "
                                       f"({old.get('message', '')}), now gives a result")
                status = "drift"
            elif new_status == "error":
                if old.get("message") != x.message:
                    drift.lines.append(f"  {label} {func}: message changed: "
                                       f"{old.get('message')} -> {x.message}")
                    status = "drift"
            else:
                checked, n_diff = _compare_tables(label, func, old["values"], x.result or [],
                                                  rtol, atol, drift)
                drift.values_checked += checked
                if n_diff:
                    status = "drift"
        if status != "same":
            drift.cells_drifted += 1
        drift.records.append({"cell": label, "status": status})
    return drift


def _sort_key(label: str) -> tuple[str, int, str]:
    sheet, _, cell = label.rpartition("!")
    digits = "".join(ch for ch in cell if ch.isdigit())
    letters = "".join(ch for ch in cell if ch.isalpha())
    return (sheet, int(digits or 0), f"{len(letters):02d}{letters}")
