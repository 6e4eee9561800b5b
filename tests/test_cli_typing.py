"""What a person can mistype at the command line: every slip gives one ``xlbridge:`` line
naming what was typed and the nearest valid word, exit 2, never "internal error"; and
exit codes follow the error's class and kind.

Reference for the nearest word: difflib's similarity ratio from the standard library,
computed here independently of the command's own code.
"""

from __future__ import annotations

import difflib
from pathlib import Path

import pytest

from xlbridge.cli import COMMANDS
from xlbridge.cli.figures import PLOT_KINDS

from .bookfactory import build_book, cost_book, run

Y, X = "'Site data'!B:B", "'Site data'!A:A"


@pytest.fixture()
def book(tmp_path: Path) -> Path:
    return cost_book(tmp_path / "costs.xlsx", blanks=(3,))


def _last_line(err: str) -> str:
    return err.strip().splitlines()[-1]


@pytest.mark.parametrize(("typed", "meant"), [("--modle", "--model"), ("--mdoel", "--model"),
                                              ("--fromat", "--format"), ("--yy", "--y")])
def test_misspelled_flag_names_the_flag_not_a_missing_one(book, capsys, typed, meant):
    args = ["fit", book, "--y", Y, "--x", X, "--model", "2", "--format", "json"]
    args[args.index(meant)] = typed
    code, out, err = run(args, capsys)
    line = _last_line(err)
    assert code == 2 and out == ""
    assert line.startswith(f"xlbridge: unknown option {typed}; did you mean {meant}?"), line
    assert "required" not in line and "internal error" not in err
    assert difflib.get_close_matches(typed, [meant]) == [meant]  # the reference agrees


def test_abbreviated_flag_is_not_taken_for_the_whole_one(book, capsys):
    code, _, err = run(["fit", book, "--y", Y, "--x", X, "--mod", "2"], capsys)
    assert code == 2 and "unknown option --mod; did you mean --model?" in err


def test_unknown_command_lists_the_commands(capsys):
    code, out, err = run(["fitt", "book.xlsx"], capsys)
    line = _last_line(err)
    names = [c.name for c in COMMANDS]
    assert code == 2 and out == ""
    assert line.startswith("xlbridge: unknown command 'fitt'; did you mean fit?"), line
    assert all(n in line for n in names)
    code, _, err = run(["zzzz"], capsys)
    assert code == 2 and "did you mean" not in err and "commands: fit," in err


def test_unknown_plot_kind_and_format_name_the_nearest(book, tmp_path, capsys):
    code, _, err = run(["plot", book, "--y", Y, "--x", X, "--model", "2", "--out",
                        tmp_path / "figs", "--kind", "curv"], capsys)
    line = _last_line(err)
    assert code == 2 and "unknown figure kind 'curv'; did you mean curve?" in line
    assert all(k in line for k in PLOT_KINDS)
    assert not (tmp_path / "figs").exists()
    code, _, err = run(["fit", book, "--y", Y, "--x", X, "--model", "2", "--format", "jsn"],
                       capsys)
    assert code == 2 and "unknown format 'jsn'; did you mean json?" in err


def test_figure_kind_that_does_not_apply_is_refused_before_any_folder(tmp_path, capsys):
    rows = [["a", "b", "y"]] + [[float(i % 7), float(i // 7), float(i * i % 11)]
                                for i in range(40)]
    book = build_book(tmp_path / "surface.xlsx", {"S": rows})
    out = tmp_path / "figs"
    code, _, err = run(["plot", book, "--y", "C:C", "--x", "A:B", "--model", "surface",
                        "--out", out, "--kind", "degrees"], capsys)
    assert code == 2 and "internal error" not in err
    assert err.startswith("xlbridge: --kind degrees does not apply") and "contour" in err
    assert not out.exists()


def test_values_starting_with_dashes_after_the_separator_are_not_options(book, capsys):
    code, _, err = run(["fit", book, "--y", Y, "--x", X, "--model", "2", "--",
                        "--extra"], capsys)
    assert code == 2 and "unknown option" not in err  # argparse's own message about it


def test_exit_codes_follow_error_classes_and_kinds():
    from xlbridge.book.refs import RefError
    from xlbridge.book.safety import BookError
    from xlbridge.cells import CellError, CellErrorKind, OptionsError
    from xlbridge.cli.common import EXIT_FAIL, EXIT_USAGE, Failure, UsageError, exit_code
    from xlbridge.engine import ModelError, ModelErrorKind

    # the same words under different kinds: the kind decides, the words never do
    words = "too few rows"
    assert exit_code(ModelError(words, ModelErrorKind.SHORTAGE)) == EXIT_FAIL
    assert exit_code(ModelError(words, ModelErrorKind.ALIASED)) == EXIT_FAIL
    assert exit_code(ModelError(words, ModelErrorKind.SPEC)) == EXIT_USAGE
    assert exit_code(CellError(words, CellErrorKind.MODEL)) == EXIT_FAIL
    assert exit_code(CellError(words, CellErrorKind.SHAPE)) == EXIT_USAGE
    for exc in (BookError(words), RefError(words), OptionsError(words), UsageError(words)):
        assert exit_code(exc) == EXIT_USAGE
    assert exit_code(Failure(words)) == EXIT_FAIL
    assert exit_code(FileNotFoundError(2, "No such file or directory", "/x")) == EXIT_USAGE
    assert exit_code(RuntimeError(words)) is None  # a fault of ours: "internal error"


def test_an_unusable_output_folder_is_named(tmp_path, capsys):
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    code, _, err = run(["demo", "--out", blocker / "demo"], capsys)
    assert code == 2 and "internal error" not in err
    assert err.startswith("xlbridge: cannot use ") and str(blocker) in err
