"""What the xlwings runtimes read from xlbridge.worksheet, checked without any runtime:
the names `from xlbridge.worksheet import *` brings into a main.py, the signatures their
decorators accept, no import of xlwings' separately licensed parts, and a light import."""

from __future__ import annotations

import ast
import inspect
import json
import subprocess
import sys
from pathlib import Path

import xlbridge.worksheet as ws

ROOT = Path(__file__).resolve().parents[1]
XB = {"XB_COEFS", "XB_STATS", "XB_PREDICT", "XB_EQUATION", "XB_DEGREESCAN", "XB_CHECKS",
      "XB_ROWDIAG", "XB_OPTIMUM", "XB_MARGINAL", "XB_PLOT", "XB_GROUPS", "XB_VERSIONS",
      "XB_PLEVELS", "XB_CANDIDATES", "XB_LEARNING", "XB_BASEYEAR", "XB_CERCARD"}
RANGES = {"y", "x", "new_x", "at_x", "group", "drivers", "units", "costs", "at", "years",
          "index"}
# never needed by the worksheet functions: plots, rich output, the fast reader, workbook I/O
HEAVY = ("matplotlib", "rich", "python_calamine", "openpyxl", "pandas", "defusedxml",
         "xlwings")
# needed by some calls only (grouped fits, CER fits in units), so loaded on first use
LAZY = ("scipy", "scipy.stats", "scipy.special")


def test_star_import_brings_exactly_the_worksheet_functions():
    namespace: dict = {}
    exec("from xlbridge.worksheet import *", namespace)  # the one line of a main.py
    assert set(namespace) - {"__builtins__"} == XB == set(ws.FUNCTIONS)


def test_signatures_are_ones_every_runtime_registers():
    for name, f in ws.FUNCTIONS.items():
        params = inspect.signature(f).parameters.values()
        # positional parameters only (keyword-only or **kwargs are refused at registration);
        # optional ones last; no parameter a runtime fills behind the user's back
        assert all(p.kind is p.POSITIONAL_OR_KEYWORD for p in params), name
        assert "caller" not in [p.name for p in params], name
        meta = f.__xlbridge_udf__
        ranges = {a for a, o in meta["args"].items() if o.get("ndim") == 2}
        assert ranges == RANGES & {p.name for p in params}
        assert all(o.get("err_to_str") for o in meta["args"].values()), name


def test_no_module_imports_xlwings_licensed_parts():
    found = []
    for path in [*ROOT.joinpath("xlbridge").rglob("*.py"), *ROOT.joinpath("tests").rglob("*.py")]:
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module:
                names = [node.module] + [f"{node.module}.{a.name}" for a in node.names]
            found += [(path.name, n) for n in names
                      if n.startswith(("xlwings.pro", "xlwings.server"))]
    assert found == []


def test_importing_the_worksheet_functions_loads_no_optional_library():
    code = ("import sys, json, xlbridge.worksheet; "
            "print(json.dumps(sorted(m for m in sys.modules)))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=ROOT, env={"PATH": "", "PYTHONPATH": str(ROOT),
                                                    "XLBRIDGE_XLWINGS": "auto"})
    loaded = set(json.loads(out.stdout))
    assert "xlbridge.worksheet" in loaded and "numpy" in loaded
    assert sorted(m for m in HEAVY + LAZY if m in loaded) == []


CALL_ALL = """
import json, sys
import xlbridge.worksheet as ws
x = list(range(1, 21)); y = [3 + 2 * v - 0.05 * v * v + (v * 7 % 5) / 10 for v in x]
xx = [[a, a * 3 % 7] for a in x]
calls = {"XB_COEFS": (y, x, 2), "XB_STATS": (y, x, 2), "XB_PREDICT": (y, x, 2, [3, 4]),
         "XB_EQUATION": (y, x, 2), "XB_DEGREESCAN": (y, x, 4), "XB_CHECKS": (y, xx, "surface"),
         "XB_ROWDIAG": (y, x, 2), "XB_OPTIMUM": (y, x, 2), "XB_MARGINAL": (y, x, 2, [3]),
         "XB_PLOT": (y, x, 2, "curve"), "XB_GROUPS": (["a", "b"] * 10, y, x, 1),
         "XB_VERSIONS": (), "XB_PLEVELS": (y, x, "power", [3, 4], "method=mupe"),
         "XB_CANDIDATES": (y, xx, "forms=power,linear"),
         "XB_LEARNING": (x[:8], [100 * n ** -0.2 for n in x[:8]], [[30]]),
         "XB_BASEYEAR": ([1.5, 2], [2020, 2021], [[2020, 100], [2021, 104]], "base_year=2021"),
         "XB_CERCARD": (y, x, "power", "method=log")}
first = {name: ws.FUNCTIONS[name](*args)[0][0] for name, args in calls.items()}
print(json.dumps({"first": first, "modules": sorted(sys.modules)}))
"""


def test_calling_every_function_loads_no_optional_library():
    """The worksheet path needs numpy and scipy only; plots, rich output, the fast reader
    and workbook I/O stay unloaded (XB_PLOT outside the classic add-in builds no figure).
    p-values, quantiles and the normality test are the engine's own: no scipy.special or
    scipy.stats."""
    out = subprocess.run([sys.executable, "-c", CALL_ALL], capture_output=True, text=True,
                         check=True, cwd=ROOT, env={"PATH": "", "PYTHONPATH": str(ROOT),
                                                    "XLBRIDGE_XLWINGS": "auto"})
    doc = json.loads(out.stdout)
    assert set(doc["first"]) == XB
    # each call gave its table (XB_PLOT: the message saying how to get the figure)
    assert all(not str(v).startswith("xlbridge:") for k, v in doc["first"].items()
               if k != "XB_PLOT")
    assert "xlbridge plot" in doc["first"]["XB_PLOT"]
    loaded = set(doc["modules"])
    assert sorted(m for m in HEAVY + ("scipy.special", "scipy.stats") if m in loaded) == []
