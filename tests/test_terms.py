"""Model specifications: term lists, labels, hierarchy notes, errors."""

from __future__ import annotations

import numpy as np
import pytest

from xlbridge import ModelError, fit
from xlbridge.engine.terms import parse_model


def test_polynomial_labels():
    s = parse_model(3, 1)
    assert s.terms == ("intercept", "x", "x^2", "x^3") and s.degree == 3
    assert parse_model("2", 1).terms == ("intercept", "x", "x^2")
    assert parse_model(2.0, 1, names=("size",)).terms == ("intercept", "size", "size^2")
    assert parse_model(1, 1, intercept=False).terms == ("x",)


def test_surface_and_friends():
    s = parse_model("surface", 3)
    assert s.terms == ("intercept", "x1", "x2", "x3", "x1^2", "x2^2", "x3^2", "x1*x2",
                       "x1*x3", "x2*x3")
    assert parse_model("Linear", 2).terms == ("intercept", "x1", "x2")
    assert parse_model("interact", 3).terms == ("intercept", "x1", "x2", "x3", "x1*x2",
                                                "x1*x3", "x2*x3")


def test_term_list_with_names():
    s = parse_model("size, size^2, depth, Size*Depth", 2, names=("size", "depth"))
    assert s.terms == ("intercept", "size", "size^2", "depth", "size*depth")
    assert s.notes == ()


def test_hierarchy_is_noted_not_changed():
    s = parse_model("size^2, depth", 2, names=("size", "depth"))
    assert s.terms == ("intercept", "size^2", "depth")
    assert len(s.notes) == 1 and "size" in s.notes[0] and "hierarchical" in s.notes[0]


@pytest.mark.parametrize("model, k, message", [
    (0, 1, "degree must be 1 to 10"),
    (3, 2, "needs one predictor column"),
    ("surface", 1, "needs 2 to 6"),
    ("surface", 7, "needs 2 to 6"),
    ("interact", 1, "at least 2"),
    ("size, weight", 1, "unknown predictor"),
    ("x, x", 1, "appears twice"),
    ("x, , x^2", 1, "empty term"),
    (2.5, 1, "whole-number"),
    (None, 1, "model must be"),
    (True, 1, "model must be"),
])
def test_bad_specs(model, k, message):
    with pytest.raises(ModelError, match=message):
        parse_model(model, k)


def test_non_hierarchical_model_fits_in_raw_terms():
    """y = b0 + b2 x^2 (no linear term): the basis is not shifted, so the model is the one
    asked for (source: numpy lstsq on the same two columns)."""
    rng = np.random.default_rng(0)
    x = rng.uniform(1, 5, 30)
    y = 2 + 0.5 * x**2 + rng.normal(0, 0.1, 30)
    r = fit(y, x, "x^2")
    ref = np.linalg.lstsq(np.column_stack([np.ones(30), x**2]), y, rcond=None)[0]
    np.testing.assert_allclose(r.estimates, ref, rtol=1e-10)
    assert r.centered.centers == (0.0,)
    assert any("hierarchical" in n for n in r.notes)
