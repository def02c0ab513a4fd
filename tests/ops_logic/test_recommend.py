"""The recommender: its settings, fed back into the solver, do what it claims."""

import pytest

from ops_logic.advisory import ADVISORY_CAUTION
from ops_logic.recommend import ATTRACTION_MARGIN

FT = 0.3048
GRID = [(254.0, 215.0), (252.2, 212.0), (255.5, 219.0), (253.0, 217.0), (252.6, 218.5)]


@pytest.mark.parametrize("fishway", ["east", "west"])
@pytest.mark.parametrize(("fb_ft", "tw_ft"), GRID)
def test_recommended_settings_fed_back_meet_the_claimed_criteria(request, fishway, fb_ft, tw_ft):
    ladder = request.getfixturevalue(fishway)
    rec = ladder.recommend(fb_ft * FT, tw_ft * FT)
    again = ladder.solve(fb_ft * FT, tw_ft * FT, rec.settings)
    assert rec.feasible, rec.reason
    assert again.in_criteria
    for a, b in zip(rec.profile.criteria, again.criteria, strict=True):
        assert a.name == b.name
        assert a.ok == b.ok
        assert a.value == pytest.approx(b.value, rel=1e-6, abs=1e-9)
    assert rec.caution == ADVISORY_CAUTION
    assert set(rec.settings) == set(ladder.settings)


def test_exit_crest_holds_the_exit_head_aim(east):
    aim = east.fishway.targets.exit_head.aim
    for fb_ft in (252.5, 254.0, 255.5):
        rec = east.recommend(fb_ft * FT, 215.0 * FT)
        assert fb_ft * FT - rec.settings["exit_crest_m"] == pytest.approx(aim, abs=1e-9)


def test_entrance_head_and_attraction_flow_are_at_their_aims(east):
    t = east.fishway.targets
    rec = east.recommend(254.0 * FT, 215.0 * FT)
    assert rec.profile.entrance_head_m == pytest.approx(t.entrance_head.aim, abs=2e-3)
    aim = t.min_attraction_flow * (1 + ATTRACTION_MARGIN)
    assert rec.profile.entrance_flow_m3s == pytest.approx(aim, rel=0.01)


def test_rate_limits_hold_each_change(east):
    current = {"exit_crest_m": 250.0 * FT, "entrance_E1_crest_m": 205.0 * FT,
               "entrance_E2_crest_m": 205.0 * FT, "aux_G1_opening_pct": 0.0,
               "aux_PS1_pumps": 0.0}
    rec = east.recommend(254.5 * FT, 216.0 * FT, current)
    for name, spec in east.settings.items():
        assert abs(rec.settings[name] - current[name]) <= spec.rate_limit + 1e-9, name
    limited = {c.name for c in rec.changes if c.limited_by == "rate limit"}
    assert "exit_crest_m" in limited  # 3.5 ft wanted, 0.5 ft allowed
    assert not rec.feasible  # so the exit head stays out of its band this adjustment
    assert "rate limit" in rec.reason


def test_pumps_make_up_what_gravity_cannot(east):
    # with the gravity valve held nearly shut by its rate limit, the pumps must run
    current = {**east.default_settings(), "aux_G1_opening_pct": 0.0,
               "exit_crest_m": 253.0 * FT}
    rec = east.recommend(254.0 * FT, 215.0 * FT, current)
    assert rec.settings["aux_G1_opening_pct"] == pytest.approx(25.0)
    assert rec.settings["aux_PS1_pumps"] == 1.0  # rate limit: one pump per adjustment
    # without rate limits: gravity alone is capped by its diffuser velocity limit below the
    # aim, so the fewest pumps that close the gap run (one), and every diffuser stays in limit
    free = east.recommend(254.0 * FT, 215.0 * FT)
    t = east.fishway.targets
    g1 = east.fishway.aux[0]
    gravity_cap = t.max_diffuser_velocity.wall * g1.diffuser_area
    needed = t.min_attraction_flow - free.profile.ladder_flow_m3s
    assert gravity_cap < needed
    assert free.settings["aux_PS1_pumps"] == 1.0
    assert all(free.profile.criterion(f"diffuser_velocity:{a}").ok for a in ("G1", "PS1"))


def test_forebay_too_low_for_the_exit_weir_range_is_infeasible_with_a_reason(east):
    rec = east.recommend(250.5 * FT, 214.0 * FT)
    assert not rec.feasible
    assert rec.binding == "exit_head"
    assert "forebay too low for the exit weir range" in rec.reason


def test_forebay_below_the_exit_crest_range_gives_no_flow(east):
    rec = east.recommend(249.0 * FT, 213.0 * FT)
    assert not rec.feasible
    assert rec.profile.state == "no_flow"
    assert rec.profile.ladder_flow_m3s == 0.0


def test_binding_names_a_criterion(east):
    rec = east.recommend(254.0 * FT, 215.0 * FT)
    names = {c.name for c in rec.profile.criteria}
    assert rec.binding in names
    assert rec.binding not in ("forebay_level", "tailwater_level")


def test_recommendation_to_dict_round_trips_into_solve(east):
    d = east.recommend(254.0 * FT, 215.0 * FT).to_dict()
    for key in ("forebay_m", "tailwater_m", "ladder_flow_m3s", "entrance_flow_m3s",
                "entrance_head_m", "pools", "criteria", "settings", "feasible", "binding"):
        assert key in d
    again = east.solve(d["forebay_m"], d["tailwater_m"], d["settings"])
    assert again.entrance_head_m == pytest.approx(d["entrance_head_m"], abs=1e-9)
