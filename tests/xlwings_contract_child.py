"""Child process of tests/test_xlwings_contract.py (not collected by pytest).

Runs the real xlwings UDF machinery on Linux: stubs the Windows-only modules it imports,
binds ``xlwings.func/arg/ret`` to the real ``xlwings.udfs.xlfunc/xlarg/xlret``, imports
``xlbridge.worksheet``, generates the VBA wrapper, runs ``import_udfs`` against a fake
workbook to capture the function descriptions, and pushes raw COM-style values through
``xlwings.conversion.read`` -> worksheet function -> ``xlwings.conversion.write`` with an
"excel" engine whose value cleaning is the real code of ``xlwings/_xlwindows.py``.
Prints one JSON document (``allow_nan=False``: a NaN reaching a cell fails here).
"""

from __future__ import annotations

import ast
import datetime as dt
import io
import json
import os
import sys
import tempfile
import types

import numpy as np

# --- Windows-only modules xlwings.udfs imports ----------------------------------------------


class _ComError(Exception):
    pass


class _TimeType(dt.datetime):
    """pywin32 hands dates as a datetime subclass with a timezone."""


pywintypes = types.ModuleType("pywintypes")
pywintypes.com_error = _ComError
pywintypes.TimeType = _TimeType
pywintypes.IID = lambda s: s
pythoncom = types.ModuleType("pythoncom")
pythoncom.CoInitialize = lambda: None
pythoncom.IID_IDispatch = "IDispatch"
win32com = types.ModuleType("win32com")
win32com_client = types.ModuleType("win32com.client")
win32com_client.Dispatch = lambda *a, **k: None
win32com.client = win32com_client
sys.modules.update({"pywintypes": pywintypes, "pythoncom": pythoncom, "win32com": win32com,
                    "win32com.client": win32com_client})

import xlwings  # noqa: E402
import xlwings.main  # noqa: E402
import xlwings.udfs as udfs  # noqa: E402
import xlwings.utils  # noqa: E402
from xlwings import conversion  # noqa: E402

# --- an "excel" engine built from the real _xlwindows value-cleaning code -------------------

_WANTED = {"cell_errors", "_com_time_to_datetime", "_datetime_to_com_time",
           "_clean_value_data_element", "Engine"}


def _stub_xlwindows() -> types.ModuleType:
    path = os.path.join(os.path.dirname(xlwings.__file__), "_xlwindows.py")
    with open(path, encoding="utf-8") as fh:
        tree = ast.parse(fh.read())
    keep = []
    for node in tree.body:
        if isinstance(node, (ast.FunctionDef, ast.ClassDef)) and node.name in _WANTED:
            keep.append(node)
        elif isinstance(node, ast.Assign) and any(
                isinstance(t, ast.Name) and t.id in _WANTED for t in node.targets):
            keep.append(node)
    found = {getattr(n, "name", None) or n.targets[0].id for n in keep}
    assert found == _WANTED, f"xlwings/_xlwindows.py changed: found {sorted(found)}"
    mod = types.ModuleType("xlwings._xlwindows")
    utc = types.SimpleNamespace(TimeZoneInfo=types.SimpleNamespace(utc=lambda: dt.timezone.utc))
    mod.__dict__.update(
        dt=dt, np=np, pd=None, pywintypes=pywintypes, win32timezone=utc,
        np_datetime_to_datetime=xlwings.utils.np_datetime_to_datetime,
        time_types=(dt.date, dt.datetime, pywintypes.TimeType, np.datetime64),
        Apps=lambda: None,
    )
    exec(compile(ast.Module(body=keep, type_ignores=[]), path, "exec"), mod.__dict__)
    mod.engine = mod.Engine()
    mod.is_range_instance = lambda obj: False
    return mod


xlwindows = _stub_xlwindows()
sys.modules["xlwings._xlwindows"] = xlwindows
xlwings._xlwindows = xlwindows
xlwings.engines.add(xlwings.main.Engine(impl=xlwindows.engine))

# --- the real decorators, then the module under test ----------------------------------------

xlwings.func, xlwings.arg, xlwings.ret = udfs.xlfunc, udfs.xlarg, udfs.xlret
os.environ["XLBRIDGE_XLWINGS"] = "real"
import xlbridge.worksheet as ws  # noqa: E402

MODULE = "xlbridge.worksheet"


class _Workbook:
    """Just enough of a COM Workbook for generate_vba_wrapper and import_udfs."""

    def __init__(self) -> None:
        self.Name = "Estimates.xlsm"
        self.imported: list[str] = []
        self.macro_options: list[dict] = []
        outer = self

        class _Components:
            def __call__(self, name):
                return name

            def Remove(self, component):  # noqa: N802 - COM name
                raise _ComError("no such component")

            def Import(self, filename):  # noqa: N802
                with open(filename, encoding="utf-8") as fh:
                    outer.imported.append(fh.read())

        class _App:
            Version = "16.0"

            def MacroOptions(self, macro, **kwargs):  # noqa: N802
                outer.macro_options.append(dict(kwargs, Macro=macro))

        self.VBProject = types.SimpleNamespace(VBComponents=_Components())
        self.Application = _App()


def _vba() -> str:
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "xlwings_udfs.bas")
        with open(path, "w", encoding="utf-8") as fh:
            udfs.generate_vba_wrapper(MODULE, ws, fh, _Workbook())
        with open(path, encoding="utf-8") as fh:
            return fh.read()


def _import_udfs() -> _Workbook:
    wb = _Workbook()
    # registered up front so get_udf_module does not open the workbook over COM
    udfs.udf_modules[MODULE] = {"filename": ws.__file__, "filetime": None, "module": ws}
    stdout, sys.stdout = sys.stdout, io.StringIO()
    try:
        udfs.import_udfs(MODULE, wb)
    finally:
        sys.stdout = stdout
    return wb


MISSING = -2147352572  # what COM passes for an omitted Optional argument


def call_like_com(name: str, raw_args: list) -> object:
    """The argument and result conversion of xlwings.udfs.call_udf for non-Range values."""
    func = getattr(ws, name)
    info = func.__xlfunc__
    args = list(raw_args)
    for i, a in enumerate(args):
        arg_info = info["args"][min(i, len(info["args"]) - 1)]
        if isinstance(a, int) and a == MISSING:
            args[i] = arg_info.get("optional", None)
        else:
            args[i] = conversion.read(None, a, arg_info["options"])
    ret = func(*args)
    return conversion.write(ret, None, info["ret"]["options"])


def _jsonable(v):
    if isinstance(v, (list, tuple)):
        return [_jsonable(e) for e in v]
    if isinstance(v, dt.datetime):
        return {"datetime": v.isoformat()}
    return v


def _metadata() -> dict:
    out = {}
    for name, f in ws.FUNCTIONS.items():
        xf = f.__xlfunc__
        out[name] = {
            "category": xf["category"], "volatile": xf["volatile"], "doc": xf["ret"]["doc"],
            "args": [{"name": a["name"], "doc": a["doc"], "optional": "optional" in a,
                      "err_to_str": a["options"].get("err_to_str", False),
                      "ndim": a["options"].get("ndim")}
                     for a in xf["args"]],
            "shim": f.__xlbridge_udf__ if hasattr(f, "__xlbridge_udf__") else None,
        }
    return out


def main() -> None:
    cases = json.loads(sys.stdin.read())
    tz = dt.timezone.utc
    results = {}
    reads = {}
    for case in cases:
        raw = [_decode(a, tz) for a in case["args"]]
        if case.get("read_only"):
            info = getattr(ws, case["function"]).__xlfunc__["args"][0]["options"]
            reads[case["id"]] = _jsonable(conversion.read(None, raw[0], info))
            continue
        results[case["id"]] = call_like_com(case["function"], raw)
    wb = _import_udfs()
    doc = {
        "decorators": ws.DECORATORS,
        "fills_caller": ws.FILLS_CALLER,
        "vba": _vba(),
        "imported_vba": wb.imported,
        "macro_options": wb.macro_options,
        "metadata": _metadata(),
        "results": results,
        "reads": reads,
    }
    print(json.dumps(doc, allow_nan=False, default=repr))


def _decode(a, tz):
    """JSON stand-ins for COM values: {"date": iso} -> pywintypes time, lists -> tuples."""
    if isinstance(a, dict) and "date" in a:
        return _TimeType.fromisoformat(a["date"]).replace(tzinfo=tz)
    if isinstance(a, list):
        return tuple(_decode(e, tz) for e in a)
    return a


if __name__ == "__main__":
    main()
