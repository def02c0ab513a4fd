"""Each rule fires on the condition it names, and only then (raw conditions, before delays).

The plant of ``conftest.py`` is the recommended, in-criteria state of a small invented SI
ladder, with readings that match it; each case disturbs one thing.
"""

from __future__ import annotations

import pytest

from ops_logic.alarms.config import AlarmSettings
from ops_logic.alarms.rules import evaluate_rules
from ops_logic.water_quality import oxygen_solubility


def judge(site, plant, inputs, now, settings=None):
    s = settings or site.fishways[0].alarms
    conds, skipped = evaluate_rules(site, plant.tags, {"t1": s}, inputs, now,
                                    lambda key: False, {"plant": s})
    return {c.key: c for c in conds}, dict(skipped)


@pytest.fixture
def now(at):
    return at(0)


def test_the_quiet_plant_raises_nothing(alarm_site, plant, now):
    conds, skipped = judge(alarm_site, plant, plant.inputs(now), now)
    assert [k for k, c in conds.items() if c.raw] == []
    assert skipped == {}
    assert len([k for k in conds if k.startswith("stale_tag@")]) == 30


def _cases(plant):
    p = plant
    lvl = p.values["t1.P16.level"]
    fb = p.values["t1.forebay_level"]
    return [
        ("head_drop@t1", {"profile": p.criteria(head_drop__B03=0.5)}),
        ("entrance_head@t1", {"values": {"t1.P16.level": lvl + 0.3,
                                         "t1.P16.level_b": lvl + 0.3}}),
        ("exit_head@t1", {"values": {"t1.exit.crest": fb - 0.5}}),
        ("power_density@t1", {"profile": p.criteria(power_density__P05=350.0)}),
        ("diffuser_velocity@t1.G1", {"profile": p.criteria(diffuser_velocity__G1=0.35)}),
        ("attraction_flow_low@t1", {"profile": p.criteria(attraction_flow=0.4)}),
        ("forebay_range@t1", {"values": {"t1.forebay_level": 101.5}}),
        ("tailwater_range@t1", {"values": {"t1.tailwater_level": 94.0}}),
        ("temp_high@t1", {"temp_7dadm_c": 18.5}),
        ("temp_high_high@t1", {"values": {"t1.water_temp": 21.5}}),
        ("do_low@t1", {"values": {"t1.do": 4.8}}),
        ("do_low_low@t1", {"values": {"t1.do": 3.9}}),
        ("trash_rack_dp_high@t1", {"values": {"t1.trash_rack_dp": 0.2}}),
        ("picket_dp_high@t1", {"values": {"t1.picket_dp": 0.1}}),
        ("actuator_mismatch@t1.E1", {"values": {
            "t1.E1.crest": p.settings["entrance_E1_crest_m"] + 0.05}}),
        ("pump_trip@t1.PS1", {"values": {"t1.PS1.trip": 1.0}}),
        ("sensor_fail@t1.do", {"flags": {"t1.do": 4}}),
        ("sensor_fail@t1.water_temp", {"flags": {"t1.water_temp": 9}}),
        ("sensor_suspect@t1.do", {"flags": {"t1.do": 3}}),
        ("stale_tag@t1.do", {"ages": {"t1.do": 500.0}}),
        ("stale_tag@t1.picket_dp", {"drop": ("t1.picket_dp",)}),  # no reading at all
        ("feed_comms@plant", {"feed_ok": False}),
        ("gauge_disagree@t1.P16", {"values": {"t1.P16.level_b": lvl + 0.05}}),
        ("adjustment_due@t1", {"settings": {**p.settings, "entrance_E1_crest_m":
                                            p.settings["entrance_E1_crest_m"] - 0.1}}),
    ]


def test_every_rule_has_a_case(plant):
    from ops_logic.alarms.config import RULE_NAMES
    covered = {k.split("@")[0] for k, _ in _cases(plant)} | {"do_sat_low", "do_sat_low_low",
                                                             "tdg_high"}
    assert covered == set(RULE_NAMES)


@pytest.mark.parametrize("i", range(24))
def test_rule_fires_on_its_condition(alarm_site, plant, now, i):
    key, change = _cases(plant)[i]
    conds, _ = judge(alarm_site, plant, plant.inputs(now, **change), now)
    assert conds[key].raw, conds[key].message
    assert conds[key].rule == key.split("@")[0]


def test_head_drop_is_one_alarm_naming_the_worst_baffle(alarm_site, plant, now):
    prof = plant.criteria(head_drop__B03=0.45, head_drop__B07=0.52, head_drop__B11=0.41)
    conds, _ = judge(alarm_site, plant, plant.inputs(now, profile=prof), now)
    hd = [c for c in conds.values() if c.rule == "head_drop"]
    assert len(hd) == 1 and hd[0].value == 0.52
    assert "at B07" in hd[0].message and "3 of 15" in hd[0].message


def test_measured_entrance_head_wins_over_the_profile(alarm_site, plant, now):
    prof = plant.criteria(entrance_head=0.1)  # the profile disagrees with the gauges
    conds, _ = judge(alarm_site, plant, plant.inputs(now, profile=prof), now)
    assert not conds["entrance_head@t1"].raw and "(measured)" in conds["entrance_head@t1"].message
    failed = {"t1.P16.level": 4, "t1.P16.level_b": 4}  # gauges failed QC: the profile is used
    conds, _ = judge(alarm_site, plant, plant.inputs(now, profile=prof, flags=failed), now)
    assert conds["entrance_head@t1"].raw and "(profile)" in conds["entrance_head@t1"].message


@pytest.mark.parametrize(("do_mg_l", "key", "fires"), [
    (7.0, "do_sat_low@t1", True),  # 7.0 / 9.092 = 77.0 % < 80 %
    (7.5, "do_sat_low@t1", False),  # 82.5 %
    (5.2, "do_sat_low_low@t1", True),  # 57.2 % < 60 %
    (5.6, "do_sat_low_low@t1", False),  # 61.6 %
])
def test_percent_saturation_rules(alarm_site, plant, now, do_mg_l, key, fires):
    # Benson & Krause (1984): 9.092 mg/L at 20 °C and 1 atm (REFERENCES.md; the test site lies
    # at elevation 0, where the standard atmosphere gives 101.325 kPa)
    assert oxygen_solubility(20.0) == pytest.approx(9.092, abs=5e-4)
    conds, _ = judge(alarm_site, plant,
                     plant.inputs(now, values={"t1.do": do_mg_l, "t1.water_temp": 20.0}), now)
    assert conds[key].raw is fires
    assert conds[key].value == pytest.approx(100 * do_mg_l / 9.092, rel=1e-4)


def test_total_dissolved_gas_when_enabled(alarm_site, plant, now):
    s = AlarmSettings.model_validate({"tdg_high": {"enabled": True}})
    inputs = plant.inputs(now, values={"t1.tdg": 112.0})
    conds, _ = judge(alarm_site, plant, inputs, now, settings=s)
    assert conds["tdg_high@t1"].raw  # above 110 % (seen, REFERENCES.md)
    conds, _ = judge(alarm_site, plant, plant.inputs(now, values={"t1.tdg": 109.0}), now,
                     settings=s)
    assert not conds["tdg_high@t1"].raw
    conds, skipped = judge(alarm_site, plant, plant.inputs(now), now, settings=s)
    assert "tdg_high@t1" in skipped and "tdg_high@t1" not in conds


def test_instantaneous_temperature_basis(alarm_site, plant, now):
    s = AlarmSettings.model_validate({"temp_high": {"basis": "instantaneous"}})
    conds, _ = judge(alarm_site, plant, plant.inputs(now, values={"t1.water_temp": 18.2},
                                                     temp_7dadm_c=None), now, settings=s)
    assert conds["temp_high@t1"].raw


@pytest.mark.parametrize(("change", "key", "reason"), [
    ({"flags": {"t1.do": 4}}, "do_low@t1", "no usable dissolved-oxygen reading"),
    ({"ages": {"t1.do": 500.0}}, "do_low_low@t1", "no usable dissolved-oxygen reading"),
    ({"temp_7dadm_c": None}, "temp_high@t1", "no 7DADM given"),
    ({"values": {"t1.water_temp": 45.0}, "flags": {"t1.water_temp": 2}}, "do_sat_low@t1",
     "% saturation not computed"),
])
def test_unjudged_rules_say_why(alarm_site, plant, now, change, key, reason):
    conds, skipped = judge(alarm_site, plant, plant.inputs(now, **change), now)
    assert key not in conds and skipped[key].startswith(reason)


@pytest.mark.parametrize(("change", "loss_m", "words"), [
    # hand calculation: the ladder sees the forebay less the trash-rack loss (forebay to exit)
    ({"values": {"t1.trash_rack_dp": 0.10}}, 0.10, "forebay − trash-rack head loss − crest"),
    ({"values": {"t1.trash_rack_dp": 0.0}}, 0.0, "forebay − trash-rack head loss − crest"),
    ({"values": {"t1.trash_rack_dp": -0.03}}, 0.0, "forebay − trash-rack head loss − crest"),
    ({"flags": {"t1.trash_rack_dp": 4}}, 0.0, "forebay − crest (no usable trash-rack head"),
    ({"values": {"t1.trash_rack_dp": 1.7}}, 0.0,
     "forebay − crest (trash-rack head loss 1.7 m refused"),
])
def test_measured_exit_head_is_taken_from_the_forebay_the_ladder_sees(alarm_site, plant, now,
                                                                      change, loss_m, words):
    fb, crest = plant.values["t1.forebay_level"], plant.values["t1.exit.crest"]
    conds, _ = judge(alarm_site, plant, plant.inputs(now, **change), now)
    c = conds["exit_head@t1"]
    assert c.value == pytest.approx(fb - loss_m - crest, abs=1e-12)
    assert f"(measured: {words}" in c.message


def test_a_trash_rack_loss_can_take_the_exit_head_out_of_its_band(alarm_site, plant, now):
    # the quiet plant's measured exit head less 0.10 m lies below the band's minimum (the band
    # of the test site, conftest.py): the alarm judges the lowered head
    band = alarm_site.fishways[0].targets.exit_head
    head = plant.values["t1.forebay_level"] - plant.values["t1.exit.crest"]
    loss = head - band.min + 0.01
    conds, _ = judge(alarm_site, plant,
                     plant.inputs(now, values={"t1.trash_rack_dp": loss}), now)
    assert conds["exit_head@t1"].raw
    assert conds["exit_head@t1"].value == pytest.approx(band.min - 0.01, abs=1e-12)
