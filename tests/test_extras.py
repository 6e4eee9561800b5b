"""Without the optional extras (``cli``: rich; ``plots``: matplotlib) the command still runs:
progress as a plain line, and figures refused with one ``xlbridge:`` line saying how to add
matplotlib, before anything is written. Each missing library is blocked in a fresh
interpreter (``sys.modules[name] = None`` makes its import fail)."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from tests.bookfactory import REPO, cost_book

NO_PLOTS = "import sys; sys.modules['matplotlib'] = None\n"
CLI = "from xlbridge.cli import main\nsys.exit(main(sys.argv[1:]))\n"


def _run(code: str, *args: str, cwd: Path) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    return subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True,
                          timeout=120, env=env, cwd=cwd)


def test_progress_without_rich_is_one_plain_line(monkeypatch, capsys) -> None:
    from xlbridge.cli.common import Progress

    for name in ("rich", "rich.console", "rich.progress"):
        monkeypatch.setitem(sys.modules, name, None)
    bar = Progress("recalc")
    bar.enabled = True  # as on a terminal
    for done in range(0, 21, 5):
        bar(done, 20, "Model!B4")
    bar.close()
    err = capsys.readouterr().err
    assert "recalc Model!B4 20/20" in err
    assert "\n" not in err  # rewritten in place, then cleared
    assert err.endswith("\r\033[K")


@pytest.mark.parametrize("command", ["plot", "report", "demo"])
def test_figures_without_matplotlib_say_how_to_add_it(tmp_path: Path, command: str) -> None:
    book = cost_book(tmp_path / "cost.xlsx", n=20)
    out = tmp_path / ("out.html" if command == "report" else "out")
    args = ([command, "--out", str(out)] if command == "demo" else
            [command, str(book), "--y", "B:B", "--x", "A:A", "--model", "2", "--out", str(out)])
    proc = _run(NO_PLOTS + CLI, *args, cwd=tmp_path)
    assert proc.returncode == 2
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("xlbridge: "), proc.stderr
    assert 'python -m pip install ".[plots]"' in lines[0]
    assert "Traceback" not in proc.stderr
    assert not out.exists()  # refused before anything was written


def test_a_figure_cell_without_matplotlib_says_how_to_add_it(tmp_path: Path) -> None:
    """The classic add-in's path (the figure built for placement) gives one message cell."""
    code = NO_PLOTS + (
        "from xlbridge.cells import run_guarded\n"
        "from xlbridge.cells.models import plot_figure\n"
        "y = [[float(v)] for v in (3, 5, 9, 15, 24, 33, 47)]\n"
        "x = [[float(v)] for v in range(1, 8)]\n"
        "print(run_guarded(lambda: [[plot_figure(y, x, 2, 'curve').title]]))\n")
    proc = _run(code, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    cell = proc.stdout.strip()
    assert cell.startswith("[['xlbridge: figures and reports need matplotlib")
    assert '.[plots]' in cell and "internal error" not in cell
