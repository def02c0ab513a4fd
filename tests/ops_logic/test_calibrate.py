"""Tests of ops_logic.calibrate: reading observations, scaled models and the least-squares fit.

The recovery tests are self-consistency checks (synthetic observations from a model whose
coefficients are known), not comparisons with an external source; the one-parameter test
compares the fit with an independent closed-form least-squares solution.
"""

from __future__ import annotations

import copy
import json
import math
import re
import tomllib

import numpy as np
import pytest

from ops_logic.calibrate import (
    OPENING_KINDS,
    Observation,
    ObservationError,
    calibrate,
    parse_observations,
    scaled_fishway,
)
from ops_logic.ladder import Ladder
from ops_logic.report_format import format_calibration
from ops_logic.site import Fishway, load_site, parse_site

FT = 0.3048  # the international foot, exactly (1959 definition)
G = 9.80665  # standard gravity [m/s²] (CGPM 1901 definition)
GAUGED = ("P01", "P05", "P10", "P20", "P30", "P36", "P38", "P39", "P40")


@pytest.fixture(scope="module")
def east_cal() -> Ladder:
    return Ladder.from_site(load_site(), "east")


def _conditions(ladder: Ladder, n: int = 8) -> list[Observation]:
    """Invented operating points spread over the demo East ladder's ranges (levels in ft)."""
    out = []
    for i in range(n):
        fb, tw = 252.3 + i * 0.4, 212.5 + (i * 2.9) % 6.5
        gate = (tw - 1.0 - 0.3 * (i % 3)) * FT
        s = ladder.check_settings({"exit_crest_m": (fb - 0.8 - 0.05 * i) * FT,
                                   "entrance_E1_crest_m": gate, "entrance_E2_crest_m": gate,
                                   "aux_G1_opening_pct": 30.0 + 8.0 * i,
                                   "aux_PS1_pumps": float(i % 3)})
        out.append(Observation(i + 2, fb * FT, tw * FT, s, {"P01": 0.0}))
    return out


def _measure(truth: Ladder, conditions: list[Observation], pools=GAUGED) -> list[Observation]:
    out = []
    for c in conditions:
        p = truth.solve(c.forebay_m, c.tailwater_m, c.settings)
        z = {q.id: q.water_level_m for q in p.pools}
        out.append(Observation(c.line, c.forebay_m, c.tailwater_m, c.settings,
                               {k: z[k] for k in pools}))
    return out


# -- the fit ---------------------------------------------------------------------------------
def test_recovers_known_multipliers_kc_site(east_cal):
    # self-consistency: the truth is the site file's own model (Kindsvater–Carter weirs kept,
    # scaled through cd_factor) with known multipliers; the model form does not change, so
    # the fit must find them again to the solver's precision, weirs included.
    cond = _conditions(east_cal)
    true = {"exit": 0.95, "weir": 1.08, "orifice": 0.9, "entrance_gate": 1.1}
    truth = Ladder(scaled_fishway(east_cal.fishway, true))
    assert truth.fishway.baffles[0].weir_cd is None and truth.fishway.exit.cd is None
    result = calibrate(east_cal, _measure(truth, cond))
    assert result.success
    for kind, m in true.items():
        assert result.multipliers[kind] == pytest.approx(m, rel=1e-7)
    assert result.rms_after_m < 1e-8
    assert result.rms_before_m > 1e-3
    assert result.n_observations == 8 and result.n_levels == 8 * len(GAUGED)
    site = result.site_file
    assert set(site) == {"exit.cd_factor", "baffles[*].weir_cd_factor",
                         "baffles[*].orifices[*].cd", "entrance.gates[*].cd_factor"}
    for path, value in [("exit.cd_factor", 0.95), ("baffles[*].weir_cd_factor", 1.08),
                        ("baffles[*].orifices[*].cd", 0.61 * 0.9),
                        ("entrance.gates[*].cd_factor", 1.1)]:
        assert site[path] == pytest.approx(value, rel=1e-7)
    # 39 baffles × 2 merged notches, 39 orifices, 2 gates, 1 exit weir
    assert {k.kind: k.openings for k in result.kinds} == {
        "exit": 1, "weir": 78, "orifice": 39, "entrance_gate": 2}


def _explicit_cd(f: Fishway) -> Fishway:
    """The demo fishway with every weir given a plain cd (no Kindsvater–Carter)."""
    gates = [g.model_copy(update={"cd": 0.61}) for g in f.entrance.gates]
    return f.model_copy(update={
        "exit": f.exit.model_copy(update={"cd": 0.62}),
        "baffles": [b.model_copy(update={"weir_cd": 0.60}) for b in f.baffles],
        "entrance": f.entrance.model_copy(update={"gates": gates})})


@pytest.mark.parametrize("explicit", [False, True], ids=["kindsvater_carter", "explicit_cd"])
def test_recovers_orifice_cd_times_0_9(east_cal, explicit):
    # self-consistency, the case of the issue: the truth has every orifice cd 0.61 × 0.9;
    # the fit must give orifice 0.9 and 1 elsewhere, and say which field to write.
    base = _explicit_cd(east_cal.fishway) if explicit else east_cal.fishway
    truth = Ladder(scaled_fishway(base, {"orifice": 0.9}))
    assert truth.fishway.baffles[0].orifices[0].cd == pytest.approx(0.61 * 0.9)
    result = calibrate(Ladder(base), _measure(truth, _conditions(east_cal)))
    assert result.multipliers == pytest.approx(
        {"exit": 1.0, "weir": 1.0, "orifice": 0.9, "entrance_gate": 1.0}, rel=1e-7)
    orifice = next(k for k in result.kinds if k.kind == "orifice")
    (change,) = orifice.coefficients
    assert change.path == "baffles[*].orifices[*].cd" and len(change.elements) == 39
    assert change.before == 0.61 and change.after == pytest.approx(0.549, rel=1e-7)
    assert change.assignment == "baffles[*].orifices[*].cd = 0.549"
    d = json.loads(json.dumps(result.to_dict(), allow_nan=False))  # strict: the CLI's --json
    assert d["site_file"]["baffles[*].orifices[*].cd"] == pytest.approx(0.549, rel=1e-7)
    text = format_calibration(result, Ladder(base), "us")
    assert "baffles[*].orifices[*].cd = 0.549" in text
    assert "baffles[*].weir_cd_factor = 1" in text  # the weir field, never weir_cd


_BENCH_SITE = """
[site]
name = "Test flume"
units = "si"

[[fishways]]
id = "t"
name = "Two-pool flume"
forebay_range = [10.2, 10.7]
tailwater_range = [4.0, 5.0]

[fishways.exit]
type = "weir"
crest = 10.0
width = 1.0
cd = 0.62
pool = { id = "P1", floor = 8.0, length = 3.0, width = 2.0 }

[[fishways.baffles]]
type = "weir"
crest = 9.0
width = 1.0
cd = 0.62
pool = { id = "P2", floor = 6.0, length = 3.0, width = 2.0 }

[fishways.entrance]
gates = [{ id = "E1", width = 1.0, crest_range = [6.5, 8.0], cd = 0.62 }]

[fishways.targets]
pool_head_drop = { min = 0.1, max = 1.5 }
entrance_head = { min = 0.1, max = 3.0 }
max_power_density = 500.0
max_diffuser_velocity = { wall = 0.3, floor = 0.15 }
min_attraction_flow = 0.0
"""


def test_one_parameter_fit_matches_closed_form_least_squares():
    # Independent check. All three weirs flow free (each pool stays below the crest above
    # it), so the flow is fixed by the exit alone, Q = (2/3)·0.62·√(2g)·b·(F − 10)^1.5, and the
    # entrance pool level is z = c + (Q/(m·K))^(2/3), K = (2/3)·0.62·√(2g)·b. In u = m^(−2/3)
    # the model is linear, z = c + a·u with a = (Q/K)^(2/3), so the least-squares optimum is
    # u* = Σ a(z − c) / Σ a² and m* = u*^(−3/2) (monotone reparametrisation).
    ladder = Ladder(parse_site(tomllib.loads(_BENCH_SITE)).fishways[0])
    k = (2.0 / 3.0) * 0.62 * math.sqrt(2.0 * G) * 1.0
    points = [(10.25, 6.6), (10.35, 6.9), (10.45, 7.2), (10.55, 7.5), (10.65, 7.8)]
    noise = [0.004, -0.006, 0.002, 0.005, -0.003]  # invented gauge errors [m]
    m_true = 0.87
    obs, a_i, d_i = [], [], []
    for i, ((fb, crest), e) in enumerate(zip(points, noise, strict=True)):
        q = k * (fb - 10.0) ** 1.5
        a = (q / k) ** (2.0 / 3.0)
        z = crest + a * m_true ** (-2.0 / 3.0) + e
        assert z < 9.0 and crest + a < 10.0  # free flow at every control, as assumed
        a_i.append(a)
        d_i.append(z - crest)
        obs.append(Observation(i + 2, fb, 4.5, ladder.check_settings(
            {"entrance_E1_crest_m": crest}), {"P2": z}))
    u = float(np.dot(a_i, d_i) / np.dot(a_i, a_i))
    m_closed = u ** -1.5
    result = calibrate(ladder, obs, kinds=["entrance_gate"])
    assert result.multipliers["entrance_gate"] == pytest.approx(m_closed, rel=1e-5)
    assert result.multipliers["exit"] == 1.0 and result.multipliers["weir"] == 1.0
    resid = [ai * u - di for ai, di in zip(a_i, d_i, strict=True)]
    assert result.rms_after_m == pytest.approx(math.sqrt(np.mean(np.square(resid))), rel=1e-4)


def test_kind_that_never_flows_is_not_fitted_and_warned(east_cal):
    # low exit heads and a low tailwater: every pool stays below the weir crests, so the
    # weirs carry nothing and the data say nothing about them
    cond = []
    for i, (fb, ex, tw) in enumerate([(252.3, 251.9, 212.0), (252.3, 252.0, 212.5),
                                      (252.5, 252.2, 212.2), (253.0, 252.7, 212.1)]):
        s = east_cal.check_settings({"exit_crest_m": ex * FT, "aux_G1_opening_pct": 0.0,
                                     "entrance_E1_crest_m": 206 * FT,
                                     "entrance_E2_crest_m": 206 * FT})
        cond.append(Observation(i + 2, fb * FT, tw * FT, s, {}))
    truth = Ladder(scaled_fishway(east_cal.fishway, {"orifice": 0.95}))
    result = calibrate(east_cal, _measure(truth, cond, ("P01", "P20", "P40")))
    weir = next(k for k in result.kinds if k.kind == "weir")
    assert not weir.fitted and weir.multiplier == 1.0
    assert any(w.startswith("weir: no weir opening flows") for w in result.warnings)


@pytest.mark.parametrize("kwargs, match", [
    ({"bounds": (1.0, 1.5)}, "bounds"),
    ({"kinds": ["slot"]}, "no slot openings"),
    ({"kinds": ["sluice"]}, "unknown opening kind"),
])
def test_calibrate_rejects_bad_arguments(east_cal, kwargs, match):
    obs = _measure(east_cal, _conditions(east_cal, 2), ("P01",))
    with pytest.raises(ValueError, match=match):
        calibrate(east_cal, obs, **kwargs)


def test_calibrate_needs_observations(east_cal):
    with pytest.raises(ValueError, match="no observations"):
        calibrate(east_cal, [])


def test_scaled_fishway_leaves_unscaled_kinds_and_kc_untouched(east_cal):
    f = east_cal.fishway
    scaled = scaled_fishway(f, {"weir": 1.1, "exit": 0.9})
    b = scaled.baffles[0]
    assert b.weir_cd is None and b.weir_cd_factor == pytest.approx(1.1)  # still KC
    assert scaled.exit.cd is None and scaled.exit.cd_factor == pytest.approx(0.9)
    assert b.orifices == f.baffles[0].orifices and scaled.entrance == f.entrance
    twice = scaled_fishway(scaled, {"weir": 1.1})  # an existing factor is multiplied
    assert twice.baffles[0].weir_cd_factor == pytest.approx(1.21)
    with pytest.raises(ValueError, match="unknown opening kind"):
        scaled_fishway(f, {"sluice": 1.0})


# A fishway with every kind of control and coefficient field: a fixed weir-with-orifice exit
# (existing weir_cd_factor, two orifices of different cd), a weir with a given cd and a
# cd_factor, a Kindsvater–Carter weir, an orifice baffle, a vertical slot, a two-notch
# weir-with-orifice baffle and two entrance gates (one with a cd_factor). Invented.
_MIXED_SITE = """
[site]
name = "Mixed flume"
units = "si"

[[fishways]]
id = "mix"
name = "Mixed flume"
forebay_range = [10.1, 10.6]
tailwater_range = [4.0, 5.5]

[fishways.exit]
type = "weir_orifice"
crest = 10.0
weir_width = 0.8
weir_count = 2
weir_cd_factor = 0.95
orifices = [{ invert = 9.0, width = 0.3, height = 0.3, cd = 0.6 },
            { invert = 9.2, width = 0.3, height = 0.3, cd = 0.65 }]
pool = { id = "P1", floor = 8.0, length = 3.0, width = 2.0 }

[[fishways.baffles]]
type = "weir"
id = "B1"
crest = 9.5
width = 0.8
cd = 0.62
cd_factor = 1.1
pool = { id = "P2", floor = 7.5, length = 3.0, width = 2.0 }

[[fishways.baffles]]
type = "weir"
id = "B2"
crest = 9.0
width = 0.8
pool = { id = "P3", floor = 7.0, length = 3.0, width = 2.0 }

[[fishways.baffles]]
type = "orifice"
id = "B3"
orifices = [{ invert = 7.2, width = 0.8, height = 0.5 }]
pool = { id = "P4", floor = 6.5, length = 3.0, width = 2.0 }

[[fishways.baffles]]
type = "vertical_slot"
id = "B4"
invert = 6.8
slot_width = 0.5
cd = 0.8
pool = { id = "P5", floor = 6.0, length = 3.0, width = 2.0 }

[[fishways.baffles]]
type = "weir_orifice"
id = "B5"
crest = 6.6
weir_width = 0.5
weir_count = 2
orifices = [{ invert = 6.0, width = 0.3, height = 0.3 }]
pool = { id = "P6", floor = 5.0, length = 4.0, width = 2.0 }

[fishways.entrance]
gates = [{ id = "E1", width = 0.6, crest_range = [5.2, 6.5], cd_factor = 0.9 },
         { id = "E2", width = 0.6, crest_range = [5.2, 6.5] }]

[fishways.targets]
pool_head_drop = { min = 0.05, max = 2.0 }
entrance_head = { min = 0.05, max = 3.0 }
max_power_density = 5000.0
max_diffuser_velocity = { wall = 0.3, floor = 0.15 }
min_attraction_flow = 0.0
"""


def _mixed() -> Ladder:
    return Ladder(parse_site(tomllib.loads(_MIXED_SITE)).fishways[0])


def _fishway(name: str) -> Fishway:
    if name == "mixed":
        return _mixed().fishway
    if name == "bench":
        return parse_site(tomllib.loads(_BENCH_SITE)).fishways[0]
    return load_site().fishway(name)


_ALL_ONE = dict.fromkeys(OPENING_KINDS, 1.0)
_SOME = {"exit": 1.21, "weir": 1.07, "orifice": 0.91, "slot": 1.13, "entrance_gate": 0.88}


def _points(ladder: Ladder, n: int = 4) -> list[tuple[float, float, dict[str, float]]]:
    """Operating points spread over the forebay and tailwater ranges, gates mid-range."""
    f = ladder.fishway
    out = []
    for i in range(n):
        t = (i + 0.5) / n
        fb = f.forebay_range[0] + t * (f.forebay_range[1] - f.forebay_range[0])
        tw = f.tailwater_range[0] + (1 - t) * (f.tailwater_range[1] - f.tailwater_range[0])
        out.append((fb, tw, ladder.default_settings()))
    return out


@pytest.mark.parametrize("name", ["east", "west", "bench", "mixed"])
def test_multiplier_one_for_every_kind_gives_the_original_profile(name):
    # the model form is kept: at multiplier 1 the calibrated fishway IS the site file's model
    f = _fishway(name)
    same = scaled_fishway(f, _ALL_ONE)
    base, calibrated = Ladder(f), Ladder(same)
    for fb, tw, s in _points(base):
        p0, p1 = base.solve(fb, tw, s), calibrated.solve(fb, tw, s)
        assert p1.ladder_flow_m3s == pytest.approx(p0.ladder_flow_m3s, abs=1e-12)
        for a, b in zip(p0.pools, p1.pools, strict=True):
            assert abs(a.water_level_m - b.water_level_m) <= 1e-12


@pytest.mark.parametrize("name", ["east", "west", "bench", "mixed"])
def test_every_opening_flow_scales_by_its_kind_multiplier(name):
    # every equation of openings.py (Kindsvater–Carter × Villemonte, orifice, slot) is
    # proportional to its coefficient, so scaling the fields must scale each opening's flow,
    # free or drowned, by exactly the multiplier of its kind (the form is kept)
    f = _fishway(name)
    base, scaled = Ladder(f), Ladder(scaled_fishway(f, _SOME))
    s = base.default_settings()
    pairs = [(ctrl0, ctrl1, "exit" if j == 0 else None) for j, (ctrl0, ctrl1) in
             enumerate(zip(base.controls(s), scaled.controls(s), strict=True))]
    pairs.append((base.gates(s), scaled.gates(s), "entrance_gate"))
    checked = 0
    for ctrl0, ctrl1, kind in pairs:
        for o0, o1 in zip(ctrl0, ctrl1, strict=True):
            m = _SOME[kind or o0.kind]
            for dz_up, dz_down in [(0.05, -1.0), (0.3, -1.0), (0.6, 0.2), (1.2, 0.9)]:
                zu, zd = o0.low_m + dz_up, o0.low_m + dz_down
                q0, q1 = o0.flow(zu, zd)[0], o1.flow(zu, zd)[0]
                assert q0 > 0.0 and q1 == pytest.approx(m * q0, rel=1e-12)
                checked += 1
    assert checked >= 4 * (len(f.baffles) + 1 + len(f.entrance.gates))


def test_mixed_site_paths_name_every_field():
    # the reported site-file paths of each kind (an expected listing, by construction; the
    # multipliers themselves are not determined here, see the next test)
    f = _mixed().fishway
    ladder = _mixed()
    obs = _measure(Ladder(scaled_fishway(f, _SOME)),
                   [Observation(i + 2, fb, tw, st, {}) for i, (fb, tw, st)
                    in enumerate(_points(ladder, 6))], ("P1", "P2", "P3", "P4", "P5", "P6"))
    result = calibrate(ladder, obs)
    paths = {k.kind: [(c.path, c.before) for c in k.coefficients] for k in result.kinds}
    assert paths == {
        "exit": [("exit.weir_cd_factor", 0.95), ("exit.orifices[0].cd", 0.6),
                 ("exit.orifices[1].cd", 0.65)],
        "weir": [("baffles[B1].cd_factor", 1.1), ("baffles[B2].cd_factor", 1.0),
                 ("baffles[B5].weir_cd_factor", 1.0)],
        "orifice": [("baffles[B3, B5].orifices[*].cd", 0.61)],
        "slot": [("baffles[B4].cd", 0.8)],
        "entrance_gate": [("entrance.gates[E1].cd_factor", 0.9),
                          ("entrance.gates[E2].cd_factor", 1.0)],
    }
    for k in result.kinds:
        for c in k.coefficients:
            assert c.after == pytest.approx(k.multiplier * c.before, rel=1e-15)


_PATH = re.compile(r"(exit|baffles|entrance\.gates)(?:\[([^\]]+)\])?\."
                   r"(?:orifices\[(\*|\d+)\]\.)?(\w+)")


def _write(doc: dict, changes) -> dict:
    """Apply reported changes to a parsed site-file document, reading only their paths."""
    doc = copy.deepcopy(doc)
    f = doc["fishways"][0]
    for c in changes:
        section, sel, orifice, key = _PATH.fullmatch(c.path).groups()
        if section == "exit":
            targets = [f["exit"]]
        else:
            items = f["baffles"] if section == "baffles" else f["entrance"]["gates"]
            targets = items if sel == "*" else [x for x in items if x["id"] in sel.split(", ")]
        assert len(targets) == len(c.elements)
        for t in targets:
            if orifice is None:
                t[key] = c.after
            else:
                for o in t["orifices"] if orifice == "*" else [t["orifices"][int(orifice)]]:
                    o[key] = c.after
    return doc


def test_writing_the_reported_fields_reproduces_the_fitted_model():
    # the report must say exactly what to write: apply its paths to the site file, reload it
    # and the profile must be that of the fitted model. Without auxiliary water, scaling every
    # coefficient alike scales every flow and leaves every level unchanged, so levels fix only
    # ratios: the exit (which then sets the flow) is held at its true value of 1.
    ladder = _mixed()
    true = {**_SOME, "exit": 1.0}
    truth = Ladder(scaled_fishway(ladder.fishway, true))
    points = _points(ladder, 6)
    obs = _measure(truth, [Observation(i + 2, fb, tw, st, {})
                           for i, (fb, tw, st) in enumerate(points)],
                   ("P1", "P2", "P3", "P4", "P5", "P6"))
    result = calibrate(ladder, obs, kinds=["weir", "orifice", "slot", "entrance_gate"])
    assert result.success and result.rms_after_m < 1e-8
    assert result.multipliers == pytest.approx(true, rel=1e-7)  # self-consistency
    doc = _write(tomllib.loads(_MIXED_SITE), [c for k in result.kinds for c in k.coefficients])
    written = Ladder(parse_site(doc).fishways[0])
    fitted = Ladder(result.fishway)
    for fb, tw, s in points:
        p0, p1 = fitted.solve(fb, tw, s), written.solve(fb, tw, s)
        for a, b in zip(p0.pools, p1.pools, strict=True):
            assert abs(a.water_level_m - b.water_level_m) <= 1e-12


def test_id_ranges_and_out_of_schema_values(east_cal):
    # B39 given a different factor: the 38 repeated baffles are named as a range; a fit that
    # would push a factor above the site file's 2.0 is warned about
    f = east_cal.fishway
    b39 = f.baffles[-1].model_copy(update={"weir_cd_factor": 1.6})
    odd = f.model_copy(update={"baffles": [*f.baffles[:-1], b39]})
    truth = Ladder(scaled_fishway(odd, {"weir": 1.3}))
    result = calibrate(Ladder(odd), _measure(truth, _conditions(east_cal)), kinds=["weir"])
    weir = next(k for k in result.kinds if k.kind == "weir")
    assert weir.multiplier == pytest.approx(1.3, rel=1e-6)
    assert [c.path for c in weir.coefficients] == ["baffles[B01 … B38].weir_cd_factor",
                                                   "baffles[B39].weir_cd_factor"]
    assert weir.coefficients[1].assignment == "baffles[B39].weir_cd_factor = 2.08"
    assert any("baffles[B39].weir_cd_factor = 2.08: the site file would reject it" in w
               for w in result.warnings), result.warnings
    assert "named by id as loaded" in format_calibration(result, Ladder(odd), "si")


# -- reading observations --------------------------------------------------------------------
_HEADER = ("forebay,tailwater_m,exit_crest,entrance_E1_crest_m,entrance_E2_crest_ft,"
           "aux_G1_opening_pct,aux_PS1_pumps,level_P01_ft,level_P40,note")


def test_parse_observations_units_and_empty_cells(east_cal):
    text = "\n".join([
        "# gauge readings, invented", _HEADER,
        "254.0,65.5,253.0,64.4,211.0,40,1,251.9,215.2,first",
        "",
        '254.2,"215.5 ft",253.2,64.5,211.5,45%,0,251.95,,second',
    ])
    a, b = parse_observations(text, east_cal, "us", "obs.csv")
    assert (a.line, b.line) == (3, 5)  # physical line numbers, comments and blanks counted
    assert a.forebay_m == pytest.approx(254.0 * FT)       # bare: display units (ft)
    assert a.tailwater_m == 65.5                          # _m suffix
    assert a.settings["exit_crest_m"] == pytest.approx(253.0 * FT)  # no suffix: display
    assert a.settings["entrance_E1_crest_m"] == 64.4      # the setting's own unit, m
    assert a.settings["entrance_E2_crest_m"] == pytest.approx(211.0 * FT)  # _ft
    assert a.levels_m == pytest.approx({"P01": 251.9 * FT, "P40": 215.2 * FT})
    assert b.tailwater_m == pytest.approx(215.5 * FT)     # a cell with its unit
    assert b.settings["aux_G1_opening_pct"] == 45.0
    assert b.levels_m == pytest.approx({"P01": 251.95 * FT})  # empty cell: not measured


_GOOD = "254.0,65.5,253.0,64.4,211.0,40,1,251.9,215.2,x"


@pytest.mark.parametrize("lines, line, column, reason", [
    ([_HEADER.replace("level_P40", "level_P99")], 1, "level_P99", "unknown column"),
    ([_HEADER.replace("aux_PS1_pumps", "aux_PS1_pump")], 1, "aux_PS1_pump", "unknown column"),
    ([_HEADER.replace("aux_PS1_pumps", "note2").replace(",note", ",comment")], 1,
     "aux_PS1_pumps", "missing column"),
    ([_HEADER, _GOOD, _GOOD.replace("253.0", "abc")], 3, "exit_crest", "cannot read"),
    ([_HEADER, _GOOD.replace(",1,", ",1.5,")], 2, "", "whole number of pumps"),
    ([_HEADER, _GOOD.replace("253.0", "260.0")], 2, "", "outside its range"),
    ([_HEADER, _GOOD.replace("251.9", "100")], 2, "level_P01_ft", "at or below the floor"),
    ([_HEADER, _GOOD + ",extra"], 2, "", "11 fields, the header has 10"),
    ([_HEADER, _GOOD.replace("65.5", "80.0")], 2, "tailwater", "at or above the forebay"),
    ([_HEADER, _GOOD.replace(",40,", ",,")], 2, "aux_G1_opening_pct", "empty (required)"),
    ([_HEADER, _GOOD.replace("251.9", "3 cfs")], 2, "level_P01_ft", "is not a length"),
])
def test_bad_observation_rows_name_line_and_column(east_cal, lines, line, column, reason):
    with pytest.raises(ObservationError) as info:
        parse_observations("\n".join(lines), east_cal, "us", "obs.csv")
    errors = info.value.errors
    assert any(ln == line and column in ("", col) and reason in why
               for ln, col, why in errors), errors
    assert all(text.startswith("obs.csv: ") for text in info.value.lines())


@pytest.mark.parametrize("text", ["", "# only a comment\n", _HEADER + "\n"])
def test_empty_observation_files(east_cal, text):
    with pytest.raises(ObservationError, match=r"empty|no observation rows"):
        parse_observations(text, east_cal, "us", "obs.csv")


def test_without_auxiliary_water_a_common_factor_is_flagged(make_ladder):
    # Self-consistency (no published source): with no auxiliary water, multiplying every
    # coefficient by one factor multiplies every flow and leaves every level as it was, so
    # only the ratios between kinds are determined; the fit must say so.
    ladder = make_ladder(n_baffles=4, kind="weir_orifice")
    obs = []
    for i, (head, tw) in enumerate([(0.25, 0.6), (0.35, 0.9), (0.45, 1.2)]):
        s = {"exit_crest_m": 99.5, "entrance_E1_crest_m": ladder.pool_floor_m[-1] + 0.4}
        tail = ladder.pool_floor_m[-1] + tw
        p = ladder.solve(99.5 + head, tail, s)
        obs.append(Observation(i + 2, 99.5 + head, tail, s,
                               {q.id: q.water_level_m for q in p.pools}))
    result = calibrate(ladder, obs)
    assert any("only the ratios" in w for w in result.warnings)
