"""The shipped workbooks (workbook_templates/ and the package copies in xlbridge/data/) are
exactly what scripts/make_templates.py builds, cell for cell, and every model cell in them
evaluates headlessly without an error."""

from __future__ import annotations

import importlib.util
import sys

import pytest

from .conftest import REPO

SCRIPT = REPO / "scripts" / "make_templates.py"


def _script():
    spec = importlib.util.spec_from_file_location("make_templates", SCRIPT)
    mod = importlib.util.module_from_spec(spec)
    sys.modules["make_templates"] = mod  # dataclasses look their module up there
    spec.loader.exec_module(mod)
    return mod


def test_shipped_templates_match_the_script(tmp_path):
    mt = _script()
    fresh = mt.write_all((tmp_path,))
    assert len(fresh) >= 2
    for f in fresh:
        for d in mt.OUT_DIRS:
            shipped = d / f.name
            assert shipped.exists(), f"{shipped} is missing: run scripts/make_templates.py"
            assert mt.cells_of(shipped) == mt.cells_of(f), f"{shipped} differs from the script"


SHEETS = {"equipment_cost.xlsx": {"Data", "Model", "Diagnostics", "xlwings.conf", "Notes"},
          "margin_surface.xlsx": {"Data", "Model", "Diagnostics", "xlwings.conf", "Notes"},
          "steel_cer.xlsx": {"Data", "Index", "Model", "Lots", "xlwings.conf", "Notes"}}


@pytest.mark.parametrize("name", sorted(SHEETS))
def test_template_has_the_expected_sheets(name):
    from openpyxl import load_workbook

    wb = load_workbook(REPO / "workbook_templates" / name)
    assert SHEETS[name] <= set(wb.sheetnames)
    conf = wb["xlwings.conf"]
    assert (conf["A1"].value, conf["B1"].value) == ("UDF Modules", "xlbridge.worksheet")
    notes = " ".join(str(c.value) for c in wb["Notes"]["A"] if c.value)
    assert "Invented data" in notes and "licensed professional" in notes


@pytest.mark.parametrize("name", sorted(SHEETS))
def test_recalc_fills_every_model_cell_without_error(name, tmp_path, capsys):
    """Headless recalc of each template: every XB_ cell evaluated, no message cells; the
    copy read back with python-calamine (an independent reader)."""
    import python_calamine

    from xlbridge.cli import main

    out = tmp_path / f"calc-{name}"
    code = main(["recalc", str(REPO / "workbook_templates" / name), "--out", str(out)])
    text = capsys.readouterr().out
    assert code == 0, text
    assert "errors: 0" in text
    wb = python_calamine.CalamineWorkbook.from_path(str(out))
    values = [v for sheet in wb.sheet_names for row in wb.get_sheet_by_name(sheet).to_python()
              for v in row]
    assert not any(isinstance(v, str) and v.startswith("xlbridge:") for v in values)
    assert any(v == "recommended" for v in values) or name != "equipment_cost.xlsx"
    assert any(v == "maximum" for v in values) or name != "margin_surface.xlsx"
    # the CER workbook: its card, a best candidate and the learning curve's slope
    if name == "steel_cer.xlsx":
        assert {"CER card", "best", "slope, %", "cost_k_2025"} <= set(values)
