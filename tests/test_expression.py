"""The safe unit-cost expression language."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from mainspan.errors import InputError
from mainspan.ground.expression import compile_expression

NAMES = ["base", "wetland", "slope"]
ENV = {"base": np.array([40.0, 40.0, 90.0, 10.0]),
       "wetland": np.array([0.0, 1.0, 0.0, 2.0]),
       "slope": np.array([1.0, 5.0, 12.0, 0.0])}


def ev(text, env=ENV):
    return compile_expression(text, names=NAMES).evaluate(env)


@pytest.mark.parametrize("text, expected", [
    ("1 + 2 * 3", 7.0),
    ("(1 + 2) * 3", 9.0),
    ("2 - 3 - 4", -5.0),          # left associative
    ("12 / 4 / 3", 1.0),
    ("-2 * 3 + 1", -5.0),
    ("--2", 2.0),
    ("2 × 3 − 1 ÷ 2", 5.5),       # the typographic signs
    ("1 < 2 < 3", 1.0),
    ("3 > 2 > 2", 0.0),
    ("1 and 0 or 1", 1.0),
    ("not 0 + 1 == 1", 0.0),      # not binds looser than ==
    ("1e2 + .5", 100.5),
])
def test_arithmetic_and_precedence_agree_with_python(text, expected):
    # Python's own evaluation of the same (plain) expression is the independent reference
    py = text.replace("×", "*").replace("−", "-").replace("÷", "/")
    assert float(eval(py)) == expected  # noqa: S307 - reference only, constants
    assert compile_expression(text, names=[]).evaluate({}) == pytest.approx(expected)


def test_functions_and_rasters():
    np.testing.assert_allclose(ev("base + where(wetland > 0, 200, 0)"), [40, 240, 90, 210])
    np.testing.assert_allclose(ev("max(base, 50)"), [50, 50, 90, 50])
    np.testing.assert_allclose(ev("min(base, slope * 10, 60)"), [10, 40, 60, 0])
    np.testing.assert_allclose(ev("abs(slope - 5)"), [4, 0, 7, 5])
    np.testing.assert_allclose(ev("clip(slope, 2, 10)"), [2, 5, 10, 2])
    np.testing.assert_allclose(ev("base * (1 + (slope > 4 and wetland == 0))"), [40, 40, 180, 10])
    e = compile_expression("wetland + base + wetland", names=NAMES)
    assert e.names_used == ("wetland", "base")


def test_nodata_and_non_finite_give_nan():
    env = dict(ENV, wetland=np.array([0.0, np.nan, 0.0, 1.0]))
    out = ev("where(wetland > 0, 1, base)", env)
    assert np.isnan(out[1]) and out[0] == 40.0
    out = ev("base / slope")
    assert np.isnan(out[3]) and out[0] == 40.0


def test_unknown_raster_with_suggestion():
    with pytest.raises(InputError, match=r"unknown raster 'wetlnd' at position 8.*'wetland'"):
        compile_expression("base + wetlnd", names=NAMES)
    with pytest.raises(InputError, match="unknown raster 'xyz'.*named rasters are: base"):
        compile_expression("xyz", names=NAMES)


@pytest.mark.parametrize("text, token, pos", [
    ("base + $3", "$", 8),
    ("base ** 2", "**", 6),
    ("base // 2", "//", 6),
    ("base % 2", "%", 6),
    ("base.real", ".", 5),
    ("base[0]", "[", 5),
    ("base # note", "#", 6),
    ("base @ base", "@", 6),
])
def test_bad_token_names_token_and_position(text, token, pos):
    with pytest.raises(InputError, match=rf"unexpected '{__import__('re').escape(token)}' "
                                         rf"at position {pos}"):
        compile_expression(text, names=NAMES)


def test_structure_errors():
    with pytest.raises(InputError, match="ends after '\\+' at position 6"):
        compile_expression("base +", names=NAMES)
    with pytest.raises(InputError, match="'\\(' at position 4 is never closed"):
        compile_expression("max(base, 2", names=NAMES)
    with pytest.raises(InputError, match="unmatched '\\)' at position 5"):
        compile_expression("base) + 1", names=NAMES)
    with pytest.raises(InputError, match="where\\(\\) at position 1 takes 3 arguments, got 2"):
        compile_expression("where(base, 1)", names=NAMES)
    with pytest.raises(InputError, match="non-empty"):
        compile_expression("  ", names=NAMES)


@pytest.mark.parametrize("text", [
    "__import__(base)",
    "open(base)",
    "eval(base)",
    "base(1)",
    "max(base, key=1)",
    "base if slope else wetland",
    "lambda: base",
    "(base for base in wetland)",
    "base := 3",
    "max",
    "True + base",
    "'os' + base",
    "base; base",
])
def test_dangerous_or_unlisted_constructs_are_rejected(text):
    with pytest.raises(InputError, match="not allowed|unexpected|unknown raster"):
        compile_expression(text, names=NAMES)


@settings(max_examples=80, deadline=None)
@given(st.lists(st.floats(-1e3, 1e3, allow_nan=False), min_size=3, max_size=3),
       st.sampled_from(["a + b * c", "(a - b) / (abs(c) + 1)", "max(a, b) - min(b, c)",
                        "where(a > b, c, -c)", "clip(a, -abs(b), abs(b))", "-a * -b"]))
def test_matches_numpy_formula(vals, text):
    a, b, c = (np.array([v]) for v in vals)
    ref = {"a + b * c": a + b * c,
           "(a - b) / (abs(c) + 1)": (a - b) / (np.abs(c) + 1),
           "max(a, b) - min(b, c)": np.maximum(a, b) - np.minimum(b, c),
           "where(a > b, c, -c)": np.where(a > b, c, -c),
           "clip(a, -abs(b), abs(b))": np.clip(a, -np.abs(b), np.abs(b)),
           "-a * -b": -a * -b}[text]
    out = compile_expression(text, names=["a", "b", "c"]).evaluate({"a": a, "b": b, "c": c})
    np.testing.assert_allclose(out, ref, rtol=1e-12, atol=1e-12)
