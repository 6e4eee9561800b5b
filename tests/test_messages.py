"""Messages that say what to type: an unknown model word, option key or option value names
the valid ones and the nearest match, and options separated by commas get a hint about ';'.

Reference for the nearest word: difflib's similarity ratio from the standard library,
computed here independently of xlbridge's own code.
"""

from __future__ import annotations

import difflib
from pathlib import Path

import numpy as np
import pytest

from xlbridge.cells import OptionsError, parse_options
from xlbridge.cells.options import option_keys
from xlbridge.engine import ModelError, parse_model
from xlbridge.engine.cer import FORMS
from xlbridge.engine.errors import ModelErrorKind

from .bookfactory import build_book, run


def _nearest(word: str, valid) -> str:
    return difflib.get_close_matches(word, list(valid), n=1, cutoff=0.6)[0]


@pytest.mark.parametrize(("typed", "k"), [("surfce", 2), ("lineer", 2), ("interract", 3),
                                          ("Surfase", 2), ("powr", 1)])
def test_misspelled_model_word_names_the_keyword(typed, k):
    with pytest.raises(ModelError) as info:
        parse_model(typed, k, forms=FORMS)
    msg = str(info.value)
    meant = _nearest(typed.lower(), ("surface", "linear", "interact") + FORMS)
    assert info.value.kind is ModelErrorKind.SPEC
    assert msg.startswith(f"unknown model {typed!r}; did you mean {meant!r}?"), msg
    assert all(repr(w) in msg for w in ("surface", "linear", "interact", "power"))
    assert "unknown predictor" not in msg


def test_word_far_from_every_keyword_lists_them_without_a_guess():
    with pytest.raises(ModelError) as info:
        parse_model("zzz", 2)
    msg = str(info.value)
    assert "did you mean" not in msg and "'surface'" in msg and "(x1, x2)" in msg


def test_misspelled_predictor_in_a_term_list_names_the_predictor():
    with pytest.raises(ModelError) as info:
        parse_model("size, sise^2", 1, ("size",))
    assert "unknown predictor 'sise^2' in term 'sise^2'; did you mean 'size'?" in str(info.value)
    # a predictor named like a keyword is still a predictor
    assert parse_model("linear", 1, ("linear",)).kind == "linear"
    assert parse_model("cost", 1, ("cost",)).terms == ("intercept", "cost")


@pytest.mark.parametrize(("text", "key"), [("levl=0.9", "level"), ("interecpt=no", "intercept"),
                                           ("methd=mupe", "method")])
def test_misspelled_option_key_names_the_nearest_and_lists_all(text, key):
    with pytest.raises(OptionsError) as info:
        parse_options(text)
    msg = str(info.value)
    typed = text.split("=")[0]
    assert _nearest(typed, option_keys()) == key  # the reference agrees
    assert msg.startswith(f"unknown option {typed!r}; did you mean {key!r}?"), msg
    assert all(f"{k}=<" in msg for k in option_keys())


@pytest.mark.parametrize(("text", "meant"), [("se=hc4", "hc3"), ("error=percnt", "percent"),
                                             ("method=mup", "mupe"),
                                             ("forms=power,lineer", "linear")])
def test_misspelled_option_value_names_the_nearest(text, meant):
    with pytest.raises(OptionsError) as info:
        parse_options(text)
    msg = str(info.value)
    assert f"did you mean {meant!r}?" in msg, msg
    assert msg.startswith(f"option {text.split('=')[0]}=")


@pytest.mark.parametrize("text", ["level=0.9, se=hc3", "level=0.9,se=hc3", "se=hc3 level=0.9",
                                  "forms=power,linear, methods=log"])
def test_options_separated_by_commas_get_the_semicolon_hint(text):
    with pytest.raises(OptionsError) as info:
        parse_options(text)
    assert "separate options with ';'" in str(info.value)
    fixed = parse_options(text.replace(", ", "; ").replace(",se", "; se")
                          .replace(" level", "; level"))
    assert fixed != parse_options("")  # the hint's form reads


def test_list_options_keep_their_commas():
    assert parse_options("forms=power, linear; level=0.9").forms == ("power", "linear")


def test_command_line_and_cell_show_the_hints(tmp_path: Path, capsys):
    from xlbridge.worksheet import XB_COEFS

    rng = np.random.default_rng(17)
    a, b = rng.uniform(1, 9, 30), rng.uniform(1, 9, 30)
    y = 5 + a - b + 0.3 * a * b + rng.normal(0, 0.5, 30)
    book = build_book(tmp_path / "s.xlsx", {"S": [["a", "b", "y"]]
                                            + [[float(p), float(q), float(r)]
                                               for p, q, r in zip(a, b, y)]})
    base = ["fit", book, "--y", "C:C", "--x", "A:B"]
    code, out, err = run(base + ["--model", "surfce"], capsys)
    assert code == 2 and out == ""
    assert "xlbridge: unknown model 'surfce'; did you mean 'surface'?" in err
    code, _, err = run(base + ["--model", "surface", "--options", "level=0.9, se=hc3"], capsys)
    assert code == 2 and "separate options with ';'" in err and "internal error" not in err
    code, _, err = run(base + ["--model", "surface", "--options", "level=0.9; se=hc3"], capsys)
    assert code == 0
    cell = XB_COEFS(y.reshape(-1, 1).tolist(), np.column_stack([a, b]).tolist(), "surfce")
    assert cell[0][0].startswith("xlbridge: unknown model 'surfce'; did you mean 'surface'?")


def test_log_fit_with_a_huge_log_spread_is_no_internal_error():
    """Found by fuzzing the cells: y spanning 300 decades fitted with log=yes overflowed
    exp(rmse²) in the percent spread (100·sqrt(e^(s²) − 1) of the lognormal); the
    spread beyond the double range is shown as no figure, the fit's numbers still are."""
    from xlbridge.worksheet import XB_STATS

    y = [[1e-300], [5.0], [7.0], [1e-290], [9.0], [11.0], [2.0]]
    x = [[1.0], [2.0], [3.0], [4.0], [5.0], [6.0], [7.0]]
    table = XB_STATS(y, x, 1, "log=yes")
    text = " ".join(str(c) for r in table for c in r)
    assert "internal error" not in text and not str(table[0][0]).startswith("xlbridge:")
    lny = np.log([r[0] for r in y])
    slope = np.polyfit(np.arange(1, 8), lny, 1)[0]  # numpy's least squares on ln y
    res = __import__("xlbridge").fit([r[0] for r in y], [r[0] for r in x], 1, log=True)
    assert res.coefficients[1].estimate == pytest.approx(slope, rel=1e-9)
