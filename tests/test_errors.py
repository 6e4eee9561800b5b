"""Error kinds and note kinds: callers branch on these, never on message words, so each
problem must carry its kind. Also: importing the engine does not load the grouped solver.

The data are invented here.
"""

from __future__ import annotations

import pickle
import subprocess
import sys

import numpy as np
import pytest

from xlbridge.engine import ModelError, ModelErrorKind, check_level, fit, fit_groups
from xlbridge.engine.errors import distinct_shortage
from xlbridge.engine.result import NoteKind

X = [1.0, 2, 3, 4, 5, 6, 7, 8]
Y = [3.1, 4.9, 7.2, 9.8, 13.1, 16.9, 21.2, 25.8]

CASES = [
    (lambda: fit(Y, X, 2, level=95), ModelErrorKind.SPEC),
    (lambda: fit(Y, X, 2, se="robust"), ModelErrorKind.SPEC),
    (lambda: fit(Y, X, "size^2"), ModelErrorKind.SPEC),
    (lambda: fit(Y, X, 11), ModelErrorKind.SPEC),
    (lambda: fit(Y[:-1], X, 2), ModelErrorKind.DATA),
    (lambda: fit(Y[:-1] + [np.inf], X, 2), ModelErrorKind.DATA),
    (lambda: fit(Y, X, 2, weights=[1] * 7 + [-1]), ModelErrorKind.DATA),
    (lambda: fit(Y, [1, 1, 1, 1, 2, 2, 2, 2], 2), ModelErrorKind.SHORTAGE),
    (lambda: fit(Y[:3], X[:3], 2), ModelErrorKind.SHORTAGE),
    (lambda: fit(Y, np.column_stack([X, 2 * np.array(X)]), "linear"), ModelErrorKind.ALIASED),
    (lambda: fit(Y, np.array(X) * 1e200, 2), ModelErrorKind.SCALE),
    (lambda: fit_groups([1] * 8, Y, X, 2, level=0), ModelErrorKind.SPEC),
    (lambda: fit_groups([1] * 7, Y, X, 2), ModelErrorKind.DATA),
    (lambda: fit_groups([[1, 2]] * 8, Y, X, 2), ModelErrorKind.DATA),
]


@pytest.mark.parametrize("call, kind", CASES)
def test_each_problem_carries_its_kind(call, kind):
    with pytest.raises(ModelError) as err:
        call()
    assert err.value.kind is kind, str(err.value)


def test_too_few_distinct_values_message_is_the_one_rule():
    with pytest.raises(ModelError) as err:
        fit(Y, [1, 1, 1, 1, 2, 2, 2, 2], 2)
    assert str(err.value) == distinct_shortage(2, 2)
    res = fit_groups(["a"] * 8, Y, [1, 1, 1, 1, 2, 2, 2, 2], 2)
    assert res.flags[0].endswith(distinct_shortage(2, 2))


def test_kind_survives_pickling():
    """Grouped fits run in worker processes: the kind must travel with the error."""
    err = pickle.loads(pickle.dumps(ModelError("term x2 is aliased", ModelErrorKind.ALIASED)))
    assert err.kind is ModelErrorKind.ALIASED and str(err) == "term x2 is aliased"


@pytest.mark.parametrize("level", [0.5, 0.95, 0.999, 1e-9])
def test_check_level_accepts_numbers_inside_zero_one(level):
    assert check_level(level) == level


@pytest.mark.parametrize("level", [0, 1, 95, -0.5, True, "0.95", None, float("nan")])
def test_check_level_rejects_the_rest(level):
    with pytest.raises(ModelError) as err:
        check_level(level)
    assert err.value.kind is ModelErrorKind.SPEC


def _ill_conditioned(n=50_000, seed=1):
    """Invented: x in [100, 101] and a model without its lower-order terms (so it is not
    centered): too large for exact arithmetic and badly conditioned."""
    rng = np.random.default_rng(seed)
    x = 100 + rng.random(n)
    return x, 1 + 0.5 * x**2 - 1e-3 * x**3 + rng.normal(0, 1, n)


def test_low_accuracy_is_a_note_kind_and_a_group_flag():
    x, y = _ill_conditioned()
    res = fit(y, x, "x^2, x^3")
    kinds = [note.kind for note in res.notes]
    assert NoteKind.ACCURACY in kinds and NoteKind.MODEL in kinds
    accuracy = res.notes[kinds.index(NoteKind.ACCURACY)]
    grouped = fit_groups(np.zeros(len(x)), y, x, "x^2, x^3")
    assert grouped.methods == ("single",)
    assert grouped.flags[0] == "low accuracy: " + accuracy


def test_notes_are_plain_text_with_a_kind():
    res = fit(Y, X, 2)  # 8 rows for 3 coefficients: the rows-per-coefficient note
    assert [note.kind for note in res.notes] == [NoteKind.ROWS]
    note = pickle.loads(pickle.dumps(res.notes[0]))
    assert isinstance(note, str) and note == res.notes[0] and note.kind is NoteKind.ROWS


def test_engine_import_leaves_the_grouped_solver_unloaded():
    code = ("import sys, xlbridge.engine as e; "
            "print('xlbridge.engine.groups' in sys.modules, 'scipy.sparse' in sys.modules); "
            "e.fit_groups; print('xlbridge.engine.groups' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.split()
    assert out == ["False", "False", "True"]
