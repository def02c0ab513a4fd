"""Tests of ops_logic.calibrate: reading observations, scaled models and the least-squares fit.

The recovery tests are self-consistency checks (synthetic observations from a model whose
coefficients are known), not comparisons with an external source; the one-parameter test
compares the fit with an independent closed-form least-squares solution.
"""

from __future__ import annotations

import json
import math
import tomllib

import numpy as np
import pytest

from ops_logic.calibrate import (
    Observation,
    ObservationError,
    calibrate,
    kc_equivalent_cd,
    parse_observations,
    scaled_fishway,
)
from ops_logic.ladder import Ladder
from ops_logic.site import load_site, parse_site

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
    # self-consistency: the truth is the fit's own model family (Kindsvater–Carter weirs as
    # the simple form with Ce_eq) with known multipliers; the fit must find them again.
    cond = _conditions(east_cal)
    kc = kc_equivalent_cd(east_cal, cond)
    assert set(kc) == {"exit", "weir", "entrance_gate"}
    true = {"exit": 0.95, "weir": 1.08, "orifice": 0.9, "entrance_gate": 1.1}
    truth = Ladder(scaled_fishway(east_cal.fishway, true, kc))
    result = calibrate(east_cal, _measure(truth, cond))
    assert result.success
    for kind, m in true.items():
        assert result.multipliers[kind] == pytest.approx(m, abs=1e-4)
    assert result.rms_after_m < 1e-6
    assert result.rms_before_m > 1e-3
    assert result.n_observations == 8 and result.n_levels == 8 * len(GAUGED)


def test_recovers_orifice_cd_times_0_9_on_explicit_cd_site(east_cal):
    # self-consistency, the case of the issue: every coefficient explicit (no KC), the truth
    # has every orifice cd 0.61 × 0.9; the fit must give orifice 0.9 and 1 elsewhere.
    base = scaled_fishway(east_cal.fishway, {"exit": 1.0, "weir": 1.0, "entrance_gate": 1.0},
                          {"exit": 0.62, "weir": 0.60, "entrance_gate": 0.61})
    assert all(b.weir_cd == 0.60 for b in base.baffles)
    truth = Ladder(scaled_fishway(base, {"orifice": 0.9}))
    assert truth.fishway.baffles[0].orifices[0].cd == pytest.approx(0.61 * 0.9)
    cond = _conditions(east_cal)
    result = calibrate(Ladder(base), _measure(truth, cond))
    assert result.multipliers == pytest.approx(
        {"exit": 1.0, "weir": 1.0, "orifice": 0.9, "entrance_gate": 1.0}, abs=1e-4)
    orifice = next(k for k in result.kinds if k.kind == "orifice")
    (change,) = orifice.coefficients
    assert change.cd_before == 0.61 and change.cd_after == pytest.approx(0.549, abs=1e-4)
    json.dumps(result.to_dict(), allow_nan=False)  # the CLI's --json payload must be strict


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
    same = scaled_fishway(f, {"orifice": 1.0})
    assert same.baffles[0].weir_cd is None and same.exit.cd is None  # still Kindsvater–Carter
    p0 = east_cal.solve(254 * FT, 215 * FT)
    p1 = Ladder(same).solve(254 * FT, 215 * FT)
    assert [q.water_level_m for q in p1.pools] == [q.water_level_m for q in p0.pools]
    with pytest.raises(ValueError, match="unknown opening kind"):
        scaled_fishway(f, {"sluice": 1.0})


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
