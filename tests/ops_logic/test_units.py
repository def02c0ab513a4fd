"""The level text of messages (:func:`ops_logic.units.level_text`), and its two users: the
ladder's messages (``Ladder.length_text``) and the site-file check of baffle order.

Outside reference: the international foot, 1 ft = 0.3048 m exactly (NIST SP 811; from memory).
The expected texts are written out from that conversion, not computed by the code under test.
"""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from ops_logic.units import level_text, to_si

FT = 0.3048  # m, exact (NIST SP 811; from memory)


@pytest.mark.parametrize(("feet", "text"), [
    (254.0, "254.00 ft (77.419 m)"),  # 254 × 0.3048 = 77.4192 m
    (215.0, "215.00 ft (65.532 m)"),  # 215 × 0.3048 = 65.532 m
    (1.0, "1.00 ft (0.305 m)"),  # 0.3048 m
    (0.5, "0.50 ft (0.152 m)"),  # 0.1524 m
    (99.85, "99.85 ft (30.434 m)"),  # 30.43428 m
    (-2.0, "-2.00 ft (-0.610 m)"),  # a negative length (a drop below a datum): −0.6096 m
])
def test_us_text_gives_feet_then_metres(feet, text):
    assert level_text(feet * FT, "us") == text


@pytest.mark.parametrize(("metres", "text"), [
    (77.4192, "77.419 m"), (65.532, "65.532 m"), (0.0, "0.000 m"), (0.1525, "0.152 m"),
])
def test_si_text_gives_metres_only(metres, text):
    # 0.1525 is stored as 0.15249999… so it rounds down (IEEE 754 double; common practice)
    assert level_text(metres, "si") == text


@given(st.integers(min_value=-100_000, max_value=100_000))
def test_feet_read_from_a_us_site_file_come_back_as_written(hundredths):
    # a level written with two decimals in ft shows the same two decimals in the message
    feet = hundredths / 100
    assert level_text(to_si(feet, "length", "us"), "us").startswith(f"{feet:.2f} ft (")


@pytest.mark.parametrize("feet", [0.005, 0.125, 252.125, 213.375])
def test_half_hundredths_of_a_foot_round_as_the_written_number(feet):
    # regression value (a choice, not a publication): the text uses the conversion of
    # to_si/from_si, so a half-hundredth written in the site file rounds as Python rounds the
    # written number; dividing by the literal 0.3048 instead (the former site-check text)
    # rounded some of these the other way
    assert level_text(to_si(feet, "length", "us"), "us").startswith(f"{feet:.2f} ft (")


@pytest.mark.parametrize("system", ["imperial", "SI", ""])
def test_unknown_unit_system_is_refused(system):
    with pytest.raises(ValueError, match="unknown unit system"):
        level_text(1.0, system)  # type: ignore[arg-type]


@pytest.mark.parametrize("units", ["us", "si"])
def test_ladder_messages_use_the_level_text(site_dict, units):
    from ops_logic.ladder import Ladder
    from ops_logic.site import parse_site

    raw = site_dict()
    raw["site"]["units"] = units
    ladder = Ladder.from_site(parse_site(raw), "t1")
    for value in (77.4192, 65.532, 0.3048):
        want = f"{value:.3f} m" if units == "si" else f"{value / FT:.2f} ft ({value:.3f} m)"
        assert ladder.length_text(value) == want


@pytest.mark.parametrize(("units", "below", "above"), [
    ("us", "99.85 ft (30.434 m)", "99.70 ft (30.389 m)"),  # 99.85 and 99.7 ft × 0.3048
    ("si", "99.850 m", "99.700 m"),
])
def test_site_check_names_both_baffle_levels(site_dict, units, below, above):
    from ops_logic.site import parse_site

    raw = site_dict()  # crests 99.7, 99.4, … (exit range up to 100.5): baffle 1 raised
    raw["site"]["units"] = units
    raw["fishways"][0]["baffles"][1]["crest"] = 99.85
    with pytest.raises(ValueError) as err:
        parse_site(raw)
    assert (f"control at {below} lies above the one upstream of it ({above}): list baffles "
            "in order from the exit downstream") in str(err.value)
