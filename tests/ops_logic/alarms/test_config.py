"""Alarm settings: the defaults are the cited values, and a typo in the site file raises."""

from __future__ import annotations

import pytest

from ops_logic.alarms.config import RULE_NAMES, TEMPERATURE_7DADM_C, AlarmSettings
from ops_logic.site import SiteConfigError, load_site, parse_site

D = AlarmSettings()


@pytest.mark.parametrize(("value", "expected"), [
    # US EPA (1986) Quality Criteria for Water, EPA 440/5-86-003, coldwater, other life
    # stages: 7-day mean minimum 5.0 mg/L, 1-day minimum 4.0 mg/L (from memory)
    (D.do_low.limit_mg_l, 5.0),
    (D.do_low_low.limit_mg_l, 4.0),
    # US EPA Region 10 (2003), EPA 910-B-03-002, 7DADM for migration plus non-core rearing
    # 18 °C (from memory): the default use
    (D.temp_high_limit_c, 18.0),
    # McCullough (1999), EPA 910-R-99-010: adult migration blocked near 21–22 °C (from
    # memory); the low end
    (D.temp_high_high.limit_c, 21.0),
    # total dissolved gas 110 % saturation in most water-quality standards (seen)
    (D.tdg_high.limit_pct, 110.0),
])
def test_defaults_are_the_cited_values(value, expected):
    assert value == expected


@pytest.mark.parametrize(("use", "expected_c"), [
    # US EPA Region 10 (2003) 7DADM criteria by use (from memory)
    ("spawning", 13.0),
    ("core_juvenile_rearing", 16.0),
    ("migration_non_core_rearing", 18.0),
    ("migration_corridor", 20.0),
])
def test_temperature_use_picks_the_7dadm_criterion(use, expected_c):
    s = AlarmSettings(temperature_use=use)
    assert s.temp_high_limit_c == expected_c == TEMPERATURE_7DADM_C[use]
    assert s.temp_high.basis == "7dadm"


def test_an_explicit_limit_wins_over_the_use():
    s = AlarmSettings.model_validate({"temperature_use": "spawning",
                                      "temp_high": {"limit_c": 17.5}})
    assert s.temp_high_limit_c == 17.5


def test_high_priority_is_kept_for_harm_to_fish():
    # ISA-18.2 / EEMUA 191 aim at about 5 % high-priority alarms (from memory): only the
    # two rules for water that harms or blocks fish are high by default
    high = [n for n in RULE_NAMES if D.rule(n).priority == 1]
    assert high == ["temp_high_high", "do_low_low"]


def test_tdg_is_optional():
    assert D.tdg_high.enabled is False


def test_suppression_by_design_defaults():
    # temperature alarms are meaningless in a dewatered fishway; entrance alarms while it is
    # out of service (the task's examples)
    assert "maintenance" in D.temp_high.suppress_in
    assert "out_of_service" not in D.temp_high.suppress_in
    assert {"maintenance", "out_of_service"} <= set(D.entrance_head.suppress_in)
    assert D.feed_comms.suppress_in == ()


def _site(site_dict, alarms):
    d = site_dict()
    d["fishways"][0]["alarms"] = alarms
    return d


@pytest.mark.parametrize(("alarms", "path"), [
    ({"do_lwo": {"limit_mg_l": 5.5}}, "fishways[0].alarms.do_lwo"),
    ({"do_low": {"limit_mgl": 5.5}}, "fishways[0].alarms.do_low.limit_mgl"),
    ({"temprature_use": "spawning"}, "fishways[0].alarms.temprature_use"),
])
def test_misspelled_rule_or_parameter_raises(site_dict, alarms, path):
    with pytest.raises(SiteConfigError) as info:
        parse_site(_site(site_dict, alarms), "site.toml")
    assert (path, "unknown field (check the spelling)") in info.value.errors


@pytest.mark.parametrize(("alarms", "path"), [
    ({"do_low": {"priority": 4}}, "fishways[0].alarms.do_low.priority"),
    ({"head_drop": {"on_delay_s": -1}}, "fishways[0].alarms.head_drop.on_delay_s"),
    ({"head_drop": {"suppress_in": ["maintnance"]}},
     "fishways[0].alarms.head_drop.suppress_in[0]"),
])
def test_bad_values_raise_with_their_path(site_dict, alarms, path):
    with pytest.raises(SiteConfigError) as info:
        parse_site(_site(site_dict, alarms), "site.toml")
    assert path in [p for p, _ in info.value.errors]


def test_quantity_strings_are_converted(site_dict):
    site = parse_site(_site(site_dict, {"head_drop": {"deadband_m": "0.1 ft"},
                                        "attraction_flow_low": {"deadband_m3s": "2 cfs"}}))
    a = site.fishways[0].alarms
    assert a.head_drop.deadband_m == pytest.approx(0.03048, rel=1e-12)  # 1 ft = 0.3048 m exactly
    assert a.attraction_flow_low.deadband_m3s == pytest.approx(2 * 0.3048**3, rel=1e-12)


def test_the_demo_site_loads_its_alarm_section():
    site = load_site()
    east, west = site.fishway("east").alarms, site.fishway("west").alarms
    assert west == AlarmSettings()
    assert east != AlarmSettings()  # the commented example section sets a few values


def test_with_parameter_validates():
    s = D.with_parameter("do_low", "limit_mg_l", 5.5)
    assert s.do_low.limit_mg_l == 5.5 and D.do_low.limit_mg_l == 5.0
    with pytest.raises(ValueError, match="has no parameter 'limit'"):
        D.with_parameter("do_low", "limit", 5.5)
    with pytest.raises(ValueError, match="unknown alarm rule 'do_lo'"):
        D.with_parameter("do_lo", "limit_mg_l", 5.5)
    with pytest.raises(ValueError):
        D.with_parameter("do_low", "limit_mg_l", -1.0)
