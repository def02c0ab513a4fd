"""The forebay a ladder sees (ops_logic/ladder.py: exit_forebay_m, ladder_forebay).

The rule is the energy equation between the forebay and the exit side of the trash rack with
the rack's loss taken as measured by a differential gauge from the forebay to the exit side
(common practice for a differential gauge across a rack): z_exit = z_forebay − max(Δh, 0).
Every expected value below is a hand calculation of that subtraction; the 1 m limit is the
module's documented operating choice (no publication), checked at its edge.
"""

from __future__ import annotations

import doctest
import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

import ops_logic.ladder as ladder_module
from ops_logic.ladder import (
    MAX_TRASH_RACK_LOSS_M,
    NO_USABLE_LOSS,
    ExitForebay,
    Ladder,
    exit_forebay_m,
    ladder_forebay,
)


def test_doctests():
    result = doctest.testmod(ladder_module, optionflags=doctest.ELLIPSIS)
    assert result.attempted >= 8 and result.failed == 0


@pytest.mark.parametrize(("forebay_m", "loss_m", "want_m"), [
    (77.30, 0.10, 77.20),   # hand calculation: 77.30 − 0.10
    (77.30, 0.0, 77.30),    # a clean rack loses nothing
    (77.30, None, 77.30),   # no usable reading: the forebay itself
    (77.30, -0.02, 77.30),  # a gauge offset below zero counts as no loss
    (253.5 * 0.3048, 0.4 * 0.3048, 253.1 * 0.3048),  # 253.5 ft − 0.4 ft = 253.1 ft, by hand
    (77.30, 1.0, 76.30),    # the limit itself is accepted (inclusive)
])
def test_the_forebay_less_the_positive_loss(forebay_m, loss_m, want_m):
    assert exit_forebay_m(forebay_m, loss_m) == pytest.approx(want_m, abs=1e-12)


@pytest.mark.parametrize(("forebay_m", "loss_m", "match"), [
    (math.nan, 0.1, "forebay level must be a finite number"),
    (math.inf, None, "forebay level must be a finite number"),
    (77.3, math.nan, "trash-rack head loss must be a finite number"),
    (77.3, math.inf, "trash-rack head loss must be a finite number"),
    (77.3, 1.0 + 1e-9, "above the 1 m taken as real"),  # just past the inclusive limit
    (77.3, 4.0, "above the 1 m taken as real"),
])
def test_out_of_range_inputs_raise(forebay_m, loss_m, match):
    with pytest.raises(ValueError, match=match):
        exit_forebay_m(forebay_m, loss_m)


def test_the_limit_is_a_parameter():
    assert exit_forebay_m(77.3, 1.5, max_loss_m=2.0) == pytest.approx(75.8, abs=1e-12)
    for bad in (0.0, -1.0, math.nan):
        with pytest.raises(ValueError, match="max_loss_m"):
            exit_forebay_m(77.3, 0.1, max_loss_m=bad)
    assert MAX_TRASH_RACK_LOSS_M == 1.0  # the documented operating choice


@given(forebay=st.floats(-500.0, 5000.0), loss=st.floats(-0.5, MAX_TRASH_RACK_LOSS_M))
def test_the_ladder_never_sees_more_than_the_forebay(forebay, loss):
    level = exit_forebay_m(forebay, loss)
    assert level <= forebay
    assert forebay - level == pytest.approx(max(loss, 0.0), abs=1e-9)


# -- the rule with its fallback and its words ----------------------------------------------------
def test_a_usable_loss_is_subtracted_and_said():
    e = ladder_forebay(77.30, 0.10)
    assert e == ExitForebay(pytest.approx(77.20, abs=1e-12), 0.10)
    assert e.source == "forebay − trash-rack head loss"
    assert e.less("crest") == "forebay − trash-rack head loss − crest"
    neg = ladder_forebay(77.30, -0.03)
    assert (neg.level_m, neg.loss_m, neg.source) == (77.30, 0.0, e.source)


@pytest.mark.parametrize(("loss_m", "note"), [
    (None, NO_USABLE_LOSS),
    (2.5, "trash-rack head loss 2.5 m refused: above the 1 m taken as real"),
    (math.nan, "trash-rack head loss nan m refused: not a number"),
])
def test_an_unusable_or_refused_loss_falls_back_to_the_forebay_and_says_why(loss_m, note):
    e = ladder_forebay(77.30, loss_m)
    assert (e.level_m, e.loss_m) == (77.30, None)
    assert e.note.startswith(note)
    assert e.source == f"forebay ({e.note})"
    assert e.less("crest") == f"forebay − crest ({e.note})"


def test_a_forebay_that_is_not_a_number_is_never_a_fallback():
    with pytest.raises(ValueError, match="forebay level"):
        ladder_forebay(math.nan, 0.1)
    with pytest.raises(ValueError, match="forebay level"):
        ladder_forebay(math.nan, None)


def test_the_solver_at_the_ladder_forebay_judges_the_exit_head_from_it(make_ladder):
    # the solved profile starts at the level it is given, and its exit head is that level less
    # the crest (hand calculation: 100.30 − 0.10 − crest)
    lad: Ladder = make_ladder()
    s = lad.default_settings()
    e = ladder_forebay(100.30, 0.10)
    p = lad.solve(e.level_m, lad.fishway.tailwater_range[0] + 1.0, s)
    assert p.forebay_m == pytest.approx(100.20, abs=1e-12)
    head = next(c for c in p.criteria if c.name == "exit_head")
    assert head.value == pytest.approx(100.20 - s["exit_crest_m"], abs=1e-12)
