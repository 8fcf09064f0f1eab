"""IEC 60063 preferred values and R/C suggestions."""

from __future__ import annotations

from fractions import Fraction

import pytest

from gapforge.analog import network_from_options
from gapforge.errors import GapforgeError
from gapforge.preferred import E12, E24, E96, nearest, series_values, suggest
from gapforge.tolerance import typical


def test_e24_differs_from_the_rounding_formula_in_eight_places() -> None:
    # IEC 60063:2015 (reference-facts): 2.7 3.0 3.3 3.6 3.9 4.3 4.7 8.2 against computed
    # 2.6 2.9 3.2 3.5 3.8 4.2 4.6 8.3
    formula = [round(10 * 10 ** (i / 24)) for i in range(24)]
    diffs = [(a, b) for a, b in zip(E24, formula, strict=True) if a != b]
    assert diffs == [(27, 26), (30, 29), (33, 32), (36, 35), (39, 38), (43, 42), (47, 46),
                     (82, 83)]


def test_e96_equals_its_formula_and_e12_is_every_other_e24() -> None:
    # reference-facts: E96 = round(100 * 10^(i/96)), i = 0..95, with no exceptions
    assert list(E96) == [round(100 * 10 ** (i / 96)) for i in range(96)]
    assert E24[::2] == E12
    assert len(E12) == 12 and len(E24) == 24 and len(E96) == 96


def test_series_values_and_nearest() -> None:
    values = series_values("E12", Fraction(1000), Fraction(10000))
    assert values[0] == 1000 and values[-1] == 10000 and Fraction(4700) in values
    assert nearest("E24", Fraction(5000)) == (Fraction(4700), Fraction(5100))
    assert nearest("E96", Fraction(4750)) == (Fraction(4750), Fraction(4750))
    with pytest.raises(GapforgeError):
        series_values("E7", Fraction(1), Fraction(10))


def test_suggestions_hit_the_target_and_are_ranked_by_error() -> None:
    net = network_from_options({"r": "4.7k", "c": "100p"})
    target = Fraction(150, 10**9)
    pairs = suggest(net, target)
    assert pairs
    errors = [abs(p.error) for p in pairs]
    assert errors == sorted(errors)
    assert errors[0] < 0.01
    for p in pairs:
        # the reported typical value is the model's, for that pair
        from dataclasses import replace

        assert typical(replace(net, r=p.r, c=p.c))["to_high"] == pytest.approx(p.typ_s)
        assert p.ranges["to_high"].min_s <= Fraction(p.typ_s) <= p.ranges["to_high"].max_s
        assert p.r in series_values("E96", p.r, p.r) and p.c in series_values("E12", p.c, p.c)


def test_unreachable_target_is_a_user_error() -> None:
    net = network_from_options({"r": "4.7k", "c": "100p"})
    with pytest.raises(GapforgeError):
        suggest(net, Fraction(1, 10**15))
