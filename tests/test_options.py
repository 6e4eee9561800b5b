"""The options grammar: ``key=value; key=value``, case and spaces ignored."""

from __future__ import annotations

import dataclasses

import pytest
from hypothesis import given
from hypothesis import strategies as st

from xlbridge.cells.options import Options, OptionsError, option_keys, options_help, parse_options


def test_defaults_for_blank_text():
    for text in (None, "", "   ", ";", " ; ; "):
        assert parse_options(text) == Options(level=0.95, intercept=True, header=True,
                                              names="auto")


def test_all_keys_case_and_spaces_ignored():
    o = parse_options("  LEVEL = 0.9 ;Intercept=NO; header = No;names=No ; ")
    assert (o.level, o.intercept, o.header, o.names) == (0.9, False, False, "no")


@pytest.mark.parametrize("text, level", [("level=0.99", 0.99), ("level=90%", 0.9),
                                         ("level = 95 %", 0.95), ("level=.5", 0.5)])
def test_level_forms(text, level):
    assert parse_options(text).level == pytest.approx(level, rel=1e-15)


@pytest.mark.parametrize("text", ["level=0", "level=1", "level=1.5", "level=-0.1",
                                  "level=nan", "level=abc", "level=", "level=100%"])
def test_bad_level_lists_the_valid_values(text):
    with pytest.raises(OptionsError, match="between 0 and 1"):
        parse_options(text)


@pytest.mark.parametrize("value, expected", [("yes", True), ("no", False), ("TRUE", True),
                                             ("false", False)])
def test_yes_no(value, expected):
    assert parse_options(f"intercept={value}").intercept is expected


def test_bad_yes_no_value_says_yes_or_no():
    with pytest.raises(OptionsError, match="yes or no"):
        parse_options("header=maybe")


def test_names_values():
    assert parse_options("names=YES").names == "yes"
    with pytest.raises(OptionsError, match="auto or yes or no"):
        parse_options("names=first")


def test_unknown_key_lists_every_valid_key():
    with pytest.raises(OptionsError) as info:
        parse_options("levl=0.9")
    msg = str(info.value)
    assert "'levl'" in msg
    for key in ("level", "intercept", "header", "names"):
        assert key in msg


def test_missing_equals_and_duplicates():
    with pytest.raises(OptionsError, match="not key=value"):
        parse_options("level 0.9")
    with pytest.raises(OptionsError, match="twice"):
        parse_options("level=0.9; LEVEL=0.8")


@pytest.mark.parametrize("value", [0.9, 1, True, ["level=0.9"]])
def test_non_text_options_are_refused(value):
    with pytest.raises(OptionsError, match="must be text"):
        parse_options(value)


def test_options_are_frozen_and_keys_come_from_one_table():
    o = parse_options("level=0.9")
    with pytest.raises(dataclasses.FrozenInstanceError):
        o.level = 0.5  # type: ignore[misc]
    assert option_keys() == tuple(f.name for f in dataclasses.fields(Options))
    assert set(option_keys()) >= {"level", "intercept", "header", "names"}
    for key in option_keys():
        assert key in options_help()


def test_cer_options_list_their_valid_values():
    with pytest.raises(OptionsError, match="log or mupe or zmpe or ols"):
        parse_options("method=least")
    with pytest.raises(OptionsError, match="between 0 and 100"):
        parse_options("levels=10,120")
    with pytest.raises(OptionsError, match="1000 to 9999"):
        parse_options("base_year=24")
    o = parse_options("method=MUPE; levels=10, 50,90; base_year=2025; forms=power,linear")
    assert (o.method, o.levels, o.base_year, o.forms) == ("mupe", (10.0, 50.0, 90.0), 2025,
                                                          ("power", "linear"))
    assert o.fit_kwargs()["method"] == "mupe" and "correction" in o.fit_kwargs()
    assert "correction" not in parse_options("correction=normal").fit_kwargs()


def test_fit_kwargs_only_carry_what_changes_the_fit():
    o = parse_options("level=0.9; intercept=no; header=no; names=no; folds=5; se=hc3")
    assert o.fit_kwargs() == {"level": 0.9, "intercept": False, "log": False, "se": "hc3",
                              "error": "additive"}


option_values = st.fixed_dictionaries({}, optional={
    "level": st.floats(min_value=1e-6, max_value=1 - 1e-6),
    "intercept": st.booleans(),
    "header": st.booleans(),
    "names": st.sampled_from(["auto", "yes", "no"]),
    "method": st.sampled_from([None, "log", "mupe", "zmpe", "ols"]),
    "correction": st.sampled_from(["smearing", "normal", "none"]),
    "levels": st.lists(st.floats(min_value=0.5, max_value=99.5), min_size=1, max_size=5)
    .map(lambda v: tuple(float(f"{x:g}") for x in v)),
    "base_year": st.one_of(st.none(), st.integers(1000, 9999)),
    "forms": st.lists(st.sampled_from(["power", "factor", "exponential", "linear"]),
                      min_size=1, max_size=4, unique=True).map(tuple),
    "max_drivers": st.integers(1, 3),
})


@given(option_values)
def test_to_text_reads_back_to_equal_options(values):
    o = Options(**values)
    assert parse_options(o.to_text()) == o
    assert parse_options(o.to_text(only_changed=False)) == o


@given(st.text(max_size=40))
def test_any_text_gives_options_or_options_error(text):
    try:
        o = parse_options(text)
    except OptionsError as exc:
        assert str(exc)
    else:
        assert isinstance(o, Options)
