"""Workbooks for the runner's tests, built with openpyxl in a temporary folder.

All data are invented (fixed seeds) except the NIST StRD sets read from
../shared/reference/nist_strd (see conftest.py).
"""

from __future__ import annotations

import hashlib
import io
import re
import subprocess
import sys
import zipfile
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import openpyxl
from openpyxl.workbook.defined_name import DefinedName
from openpyxl.worksheet.table import Table

from xlbridge.cli import main

REPO = Path(__file__).resolve().parents[1]


def invented_cost_data(n: int = 40, seed: int = 20240611) -> tuple[np.ndarray, np.ndarray]:
    """Invented data: installed cost against rated capacity, curved, with noise."""
    rng = np.random.default_rng(seed)
    size = np.round(rng.uniform(5.0, 120.0, n), 1)
    cost = 40.0 + 3.1 * size + 0.018 * size**2 + rng.normal(0.0, 6.0, n)
    return size, np.round(cost, 3)


def build_book(
    path: Path,
    sheets: Mapping[str, Sequence[Sequence[Any]]],
    *,
    tables: Sequence[tuple[str, str, str]] = (),
    names: Mapping[str, str] | None = None,
    local_names: Sequence[tuple[str, str, str]] = (),
    formulas: Mapping[str, Mapping[str, Any]] | None = None,
    origin: Mapping[str, str] | None = None,
) -> Path:
    """Write a workbook: ``sheets`` rows (from A1 or ``origin[sheet]``), ``tables``
    (sheet, name, ref), workbook ``names`` {name: ref}, ``local_names`` (sheet, name, ref),
    ``formulas`` {sheet: {cell: formula text or openpyxl ArrayFormula}}."""
    wb = openpyxl.Workbook()
    wb.remove(wb.active)
    for title, rows in sheets.items():
        ws = wb.create_sheet(title)
        start = (origin or {}).get(title, "A1")
        col0 = openpyxl.utils.cell.column_index_from_string(re.match(r"[A-Z]+", start)[0])
        row0 = int(re.search(r"\d+", start)[0])
        for i, row in enumerate(rows):
            for j, v in enumerate(row):
                if v is not None:
                    c = ws.cell(row0 + i, col0 + j)
                    c.value = v
                    if isinstance(v, str) and v.startswith("="):
                        c.data_type = "s"  # data text, not a formula
    for sheet, name, ref in tables:
        wb[sheet].add_table(Table(displayName=name, ref=ref))
    for name, ref in (names or {}).items():
        wb.defined_names[name] = DefinedName(name, attr_text=ref)
    for sheet, name, ref in local_names:
        wb[sheet].defined_names[name] = DefinedName(name, attr_text=ref)
    for sheet, cells in (formulas or {}).items():
        ws = wb[sheet] if sheet in wb.sheetnames else wb.create_sheet(sheet)
        for coord, f in cells.items():
            ws[coord] = f
    wb.save(path)
    return path


def cost_book(path: Path, n: int = 40, seed: int = 20240611, blanks: Sequence[int] = (),
              extra_sheets: Mapping[str, Sequence[Sequence[Any]]] | None = None,
              formulas: Mapping[str, Mapping[str, Any]] | None = None) -> Path:
    """Sheet 'Site data': A = size, B = cost (header row), rows ``blanks`` left blank in B."""
    size, cost = invented_cost_data(n, seed)
    rows: list[list[Any]] = [["size", "cost"]]
    for i, (s, c) in enumerate(zip(size, cost)):
        rows.append([float(s), None if i in blanks else float(c)])
    sheets = {"Site data": rows, **(extra_sheets or {})}
    return build_book(path, sheets, formulas=formulas)


def with_cached_values(src: Path, dst: Path, sheet_xml: str, values: Mapping[str, str]
                       ) -> Path:
    """Copy of ``src`` in which formula cells get saved values (as a spreadsheet program
    writes them): ``values`` maps a cell (``D2``) to the value text."""
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w", zipfile.ZIP_DEFLATED) as zout:
        for item in zin.infolist():
            data = zin.read(item.filename)
            if item.filename == sheet_xml:
                text = data.decode()
                for cell, value in values.items():
                    pat = re.compile(r'(<c r="' + cell + r'"[^>]*>)(<f[^>]*>.*?</f>)<v\s*/>')
                    text, n = pat.subn(lambda m, v=value: f"{m.group(1)}{m.group(2)}<v>{v}</v>",
                                       text)
                    assert n == 1, f"no formula cell {cell} without a value in {sheet_xml}"
                data = text.encode()
            zout.writestr(item, data)
    return dst


def replace_part(src: Path, dst: Path, part: str, data: bytes) -> Path:
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w", zipfile.ZIP_DEFLATED) as zout:
        for item in zin.infolist():
            zout.writestr(item, data if item.filename == part else zin.read(item.filename))
    return dst


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def run(argv: Sequence[str], capsys: Any) -> tuple[int, str, str]:
    """Run the command in this process; returns (exit code, stdout, stderr)."""
    try:
        code = main([str(a) for a in argv])
    except SystemExit as exc:  # argparse: --help, usage errors
        code = int(exc.code or 0)
    out, err = capsys.readouterr()
    return code, out, err


def run_process(argv: Sequence[str], cwd: Path | None = None) -> subprocess.CompletedProcess:
    """Run ``python -m xlbridge.cli ...`` as a separate process (start-up included)."""
    return subprocess.run([sys.executable, "-m", "xlbridge.cli", *map(str, argv)],
                          capture_output=True, text=True, cwd=cwd, timeout=120)


def values_openpyxl(path: Path, sheet: str) -> list[list[Any]]:
    """Cell values as openpyxl reads them (an independent reader for the tests)."""
    wb = openpyxl.load_workbook(path, data_only=True)
    try:
        return [list(r) for r in wb[sheet].iter_rows(values_only=True)]
    finally:
        wb.close()


def zip_bytes(entries: Mapping[str, bytes]) -> bytes:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        for name, data in entries.items():
            zf.writestr(name, data)
    return buf.getvalue()
