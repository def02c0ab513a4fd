"""Tests of the ``fishway`` command line (ops_logic.cli through dashboard.cli.main), in-process
with capsys, plus one subprocess run of the installed entry point."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

import ops_logic.cli
from dashboard.cli import main
from ops_logic.advisory import ADVISORY_CAUTION
from ops_logic.cli import InputError, parse_level, parse_level_range
from ops_logic.ladder import Ladder
from ops_logic.site import demo_site_path, load_site

FT = 0.3048  # the international foot, exactly (1959 definition)
EAST = ["--fishway", "east"]
LEVELS = ["--forebay", "254", "--tailwater", "215"]


def _strict_json(text: str):
    def refuse(name: str):
        raise AssertionError(f"non-standard JSON constant {name}")

    return json.loads(text, parse_constant=refuse)


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture(scope="module")
def east_cli() -> Ladder:
    return Ladder.from_site(load_site(), "east")


# -- entry point and help --------------------------------------------------------------------
def test_installed_entry_point_help():
    exe = Path(sys.executable).with_name("fishway")
    done = subprocess.run([str(exe), "--help"], capture_output=True, text=True, timeout=60,
                          check=False)
    assert done.returncode == 0, done.stderr
    for cmd in ("check-config", "solve", "recommend", "table", "calibrate", "demo"):
        assert cmd in done.stdout


@pytest.mark.parametrize("cmd", ["check-config", "solve", "recommend", "table", "calibrate",
                                 "demo"])
def test_every_command_has_help(capsys, cmd):
    code, out, _ = run(capsys, cmd, "--help")
    assert code == 0 and f"usage: fishway {cmd}" in out


def test_usage_error_exits_2(capsys):
    code, _, err = run(capsys, "solve", "--fishway", "east", "--forebay", "254")
    assert code == 2 and "--tailwater" in err
    assert run(capsys, "no-such-command")[0] == 2


# -- solve -----------------------------------------------------------------------------------
def test_solve_json_keys_and_pool_order(capsys, east_cli):
    code, out, _ = run(capsys, "solve", *EAST, *LEVELS, "--json")
    assert code == 0
    d = _strict_json(out)
    for key in ("forebay_m", "tailwater_m", "ladder_flow_m3s", "entrance_flow_m3s",
                "entrance_head_m", "pools", "criteria", "settings"):
        assert key in d
    assert d["forebay_m"] == pytest.approx(254 * FT) and d["tailwater_m"] == pytest.approx(
        215 * FT)
    ids = [p["id"] for p in d["pools"]]
    assert ids == list(east_cli.pool_ids) and ids[0] == "P01" and ids[-1] == "P40"
    floors = [p["floor_m"] for p in d["pools"]]
    assert floors == sorted(floors, reverse=True)  # upstream (high) to downstream (low)
    for p in d["pools"]:
        assert {"id", "water_level_m", "head_drop_m", "power_density_w_m3"} <= set(p)
    for c in d["criteria"]:
        assert {"name", "value", "min", "max", "ok"} <= set(c)
    assert set(d["settings"]) == set(east_cli.settings)


def test_solve_human_report(capsys):
    code, out, _ = run(capsys, "solve", *EAST, *LEVELS)
    assert code == 0
    assert "254.00 ft (77.419 m)" in out and "215.00 ft (65.532 m)" in out
    for heading in ("Pools (upstream to downstream", "Entrance gates", "Auxiliary water",
                    "Criteria", "OK/OUT", "power ft·lbf/s/ft³", "diffuser velocity ft/s"):
        assert heading in out
    assert out.index("\n  P01 ") < out.index("\n  P40 ")


@pytest.mark.parametrize("forebay", ["77.4192 m", "77.4192m", "254ft", "254 ft", "254",
                                     "3048 in"])
def test_levels_with_units_equal_the_same_level_in_ft(capsys, forebay):
    # 254 ft = 77.4192 m and 3048 in = 254 ft, exactly (definition of the international foot)
    code, out, _ = run(capsys, "solve", *EAST, "--forebay", forebay, "--tailwater", "215",
                       "--json")
    assert code == 0
    d = _strict_json(out)
    assert d["forebay_m"] == pytest.approx(77.4192, abs=1e-9)
    code, ref, _ = run(capsys, "solve", *EAST, *LEVELS, "--json")
    assert d["ladder_flow_m3s"] == pytest.approx(_strict_json(ref)["ladder_flow_m3s"],
                                                 rel=1e-9)


@pytest.mark.parametrize("item", ["exit_crest=253", "exit_crest_m=77.1144",
                                  'exit_crest_m=253 ft', "exit_crest=77.1144 m"])
def test_set_accepts_si_name_display_name_and_units(capsys, item):
    code, out, _ = run(capsys, "solve", *EAST, *LEVELS, "--set", item, "--json")
    assert code == 0
    assert _strict_json(out)["settings"]["exit_crest_m"] == pytest.approx(253 * FT, abs=1e-9)


def test_set_pct_and_pumps(capsys):
    code, out, _ = run(capsys, "solve", *EAST, *LEVELS, "--set", "aux_G1_opening_pct=35%",
                       "--set", "aux_PS1_pumps=2", "--json")
    assert code == 0
    s = _strict_json(out)["settings"]
    assert s["aux_G1_opening_pct"] == 35.0 and s["aux_PS1_pumps"] == 2.0


@pytest.mark.parametrize("item, message", [
    ("exit_height_m=253", "unknown setting 'exit_height_m'"),
    ("exit_crest=260", "exit_crest_m (Exit weir crest) = 260.00 ft"),
    ("exit_crest=260", "outside its range 250.00–255.00 ft (76.200–77.724 m)"),
    ("aux_G1_opening_pct=120", "outside its range 0–100 %"),
    ("aux_PS1_pumps=4", "outside its range 0–3 pumps"),
    ("aux_PS1_pumps=1.5", "must be whole"),
    ("exit_crest=abc", "cannot read 'abc'"),
    ("exit_crest_m=3 cfs", "is not a length"),
    ("exit_crest", "expected NAME=VALUE"),
])
def test_bad_set_exits_2_naming_the_setting(capsys, item, message):
    code, out, err = run(capsys, "solve", *EAST, *LEVELS, "--set", item)
    assert code == 2 and out == ""
    assert err.startswith(f"fishway solve: --set {item}: ") and message in err, err
    assert len(err.strip().splitlines()) == 1


def test_several_bad_settings_give_one_line_each(capsys):
    code, _, err = run(capsys, "solve", *EAST, *LEVELS, "--set", "nope=1", "--set",
                       "aux_PS1_pumps=9", "--set", "exit_crest=253", "--set",
                       "exit_crest_m=77.1")
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 3 and "given twice" in lines[2]


@pytest.mark.parametrize("args, message", [
    (["--forebay", "abc", "--tailwater", "215"], "--forebay: cannot read 'abc'"),
    (["--forebay", "3 cfs", "--tailwater", "215"], "--forebay: '3 cfs' is not a length"),
    (["--forebay", "254", "--tailwater", "5 m/s"], "--tailwater: '5 m/s' is not a length"),
    (["--forebay", "215", "--tailwater", "254"], "--tailwater: 254.00 ft (77.419 m) is at or "
     "above the forebay"),
])
def test_bad_levels_exit_2(capsys, args, message):
    code, out, err = run(capsys, "solve", *EAST, *args)
    assert code == 2 and out == "" and message in err, err


def test_level_outside_the_range_is_flagged_not_refused(capsys):
    code, out, err = run(capsys, "solve", *EAST, "--forebay", "256", "--tailwater", "215",
                         "--json")
    assert code == 0 and "outside the fishway's forebay range" in err
    crit = {c["name"]: c for c in _strict_json(out)["criteria"]}
    assert crit["forebay_level"]["ok"] is False


@pytest.mark.parametrize("args, message", [
    (["--fishway", "north"], "no fishway 'north' at this site (have: east, west)"),
    ([], "--fishway: required, this site has several fishways (east, west)"),
])
def test_fishway_choice(capsys, args, message):
    code, _, err = run(capsys, "solve", *args, *LEVELS)
    assert code == 2 and message in err


# -- recommend -------------------------------------------------------------------------------
@pytest.mark.parametrize("fishway, forebay, tailwater", [
    ("east", "254", "215"), ("east", "253", "217.5"), ("west", "254.5", "214"),
])
def test_recommendation_fed_back_into_solve_reproduces_its_criteria(capsys, fishway, forebay,
                                                                    tailwater):
    levels = ["--fishway", fishway, "--forebay", forebay, "--tailwater", tailwater]
    code, out, _ = run(capsys, "recommend", *levels, "--json")
    assert code == 0
    rec = _strict_json(out)
    for key in ("settings", "feasible", "binding", "criteria", "pools", "caution"):
        assert key in rec
    assert rec["caution"] == ADVISORY_CAUTION
    sets = [f"--set={k}={v!r}" for k, v in rec["settings"].items()]
    code, out, _ = run(capsys, "solve", *levels, *sets, "--json")
    assert code == 0
    solved = _strict_json(out)
    assert solved["settings"] == pytest.approx(rec["settings"], abs=1e-12)
    want = {c["name"]: c for c in rec["criteria"]}
    got = {c["name"]: c for c in solved["criteria"]}
    assert want.keys() == got.keys()
    for name, c in want.items():
        assert got[name]["value"] == pytest.approx(c["value"], rel=1e-6, abs=1e-7), name
        assert got[name]["ok"] == c["ok"], name


def test_recommend_human_output_carries_the_caution(capsys):
    code, out, _ = run(capsys, "recommend", *EAST, *LEVELS, "--set", "exit_crest=253")
    assert code == 0
    assert "Recommendation for East ladder (east)" in out
    assert out.rstrip().endswith(f"CAUTION: {ADVISORY_CAUTION}")
    assert "limited by" in out and "recommended" in out


def test_recommend_with_current_settings_respects_rate_limits(capsys, east_cli):
    # the site allows the entrance crests to move 1.0 ft per adjustment
    code, out, _ = run(capsys, "recommend", *EAST, *LEVELS, "--set", "entrance_E1_crest=205",
                       "--set", "entrance_E2_crest=205", "--json")
    assert code == 0
    s = _strict_json(out)["settings"]
    assert s["entrance_E1_crest_m"] <= 206 * FT + 1e-9


# -- check-config ----------------------------------------------------------------------------
def test_check_config_json(capsys, east_cli):
    code, out, _ = run(capsys, "check-config", "--json")
    assert code == 0
    d = _strict_json(out)
    assert d["valid"] is True and [f["id"] for f in d["fishways"]] == ["east", "west"]
    east = d["fishways"][0]
    # demo file: forebay_range = [252.0, 255.5] ft, tailwater_range = [212.0, 219.0] ft
    assert east["forebay_range_m"] == pytest.approx([252.0 * FT, 255.5 * FT])
    assert east["tailwater_range_m"] == pytest.approx([212.0 * FT, 219.0 * FT])
    names = [s["name"] for s in east["settings"]]
    assert names == list(east_cli.settings)
    for s in east["settings"]:
        assert {"name", "label", "unit", "min", "max", "rate_limit"} <= set(s)
    crest = east["settings"][0]
    # demo file: crest_range = [250.0, 255.0] ft, rate limit exit_crest = 0.5 ft
    assert crest["min"] == pytest.approx(250 * FT) and crest["max"] == pytest.approx(255 * FT)
    assert crest["rate_limit"] == pytest.approx(0.5 * FT) and crest["unit"] == "m"


def test_check_config_human(capsys):
    code, out, _ = run(capsys, "check-config")
    assert code == 0
    assert "valid" in out and "Fishway east: East ladder" in out and "39 × weir_orifice" in out
    assert "250.00–255.00 ft, at most 0.50 ft per adjustment" in out


# -- table -----------------------------------------------------------------------------------
def test_table_writes_csv_and_html(capsys, tmp_path):
    csv_path, html_path = tmp_path / "t.csv", tmp_path / "t.html"
    # forebay 251 ft lies below the fishway's range: its cells must come out infeasible
    code, out, err = run(capsys, "table", *EAST, "--forebay", "251:254:3", "--tailwater",
                         "214:216:2", "-o", str(csv_path), "-o", str(html_path))
    assert code == 0, err
    assert ADVISORY_CAUTION in out and "4 cells" in out
    df = pd.read_csv(csv_path, comment="#")
    assert len(df) == 4
    assert df["forebay_m"].tolist() == pytest.approx([251 * FT] * 2 + [254 * FT] * 2)
    assert not df.loc[df["forebay_m"] < 252 * FT, "feasible"].any()
    page = html_path.read_text(encoding="utf-8")
    assert "class='bad'" in page and "<script" not in page


def test_table_grid_with_a_unit(capsys, tmp_path):
    out_path = tmp_path / "t.csv"
    code, _, err = run(capsys, "table", "--fishway", "west", "--forebay", "77.4:77.5:0.1 m",
                       "--tailwater", "65.5 m", "-o", str(out_path), "-q")
    assert code == 0, err
    df = pd.read_csv(out_path, comment="#")
    assert df["forebay_m"].tolist() == pytest.approx([77.4, 77.5])
    assert err == ""  # -q: no progress


@pytest.mark.parametrize("args, message", [
    (["--forebay", "255:252:1", "--tailwater", "215", "-o", "x.csv"], "must run upwards"),
    (["--forebay", "252:255", "--tailwater", "215", "-o", "x.csv"], "expected A:B:STEP"),
    (["--forebay", "252:255:0", "--tailwater", "215", "-o", "x.csv"], "step must be positive"),
    (["--forebay", "252", "--tailwater", "215", "-o", "x.pdf"], "must end in .csv or .html"),
])
def test_table_bad_input_exits_2(capsys, tmp_path, args, message):
    code, _, err = run(capsys, "table", *EAST, *args)
    assert code == 2 and message in err, err


def test_parse_level_range_helpers():
    assert parse_level_range("254:255:0.5", "us") == pytest.approx([254 * FT, 254.5 * FT,
                                                                    255 * FT])
    assert parse_level_range("254ft:255ft:6in", "si") == pytest.approx(
        [254 * FT, 254.5 * FT, 255 * FT])
    assert parse_level("77.5", "si") == 77.5
    with pytest.raises(InputError, match="--x: cannot read"):
        parse_level("seventy", "si", "--x")


# -- calibrate -------------------------------------------------------------------------------
_OBS_HEADER = ("forebay,tailwater,exit_crest,entrance_E1_crest,entrance_E2_crest,"
               "aux_G1_opening_pct,aux_PS1_pumps,level_P01,level_P40")


def test_calibrate_bad_row_exits_2_with_line_number(capsys, tmp_path):
    obs = tmp_path / "obs.csv"
    obs.write_text("\n".join([_OBS_HEADER, "254,215,253,211.5,211.5,50,0,251.8,215.7",
                              "254,215,253,211.5,211.5,fifty,0,251.8,215.7"]), encoding="utf-8")
    code, out, err = run(capsys, "calibrate", *EAST, str(obs))
    assert code == 2 and out == ""
    assert f"fishway calibrate: {obs}: line 3: aux_G1_opening_pct: " in err, err


def test_calibrate_json(capsys, tmp_path, east_cli):
    rows = [_OBS_HEADER]
    for fb, tw, ex in [(253.0, 214.0, 252.0), (254.0, 216.0, 253.0), (255.0, 218.0, 254.0)]:
        s = east_cli.check_settings({"exit_crest_m": ex * FT})
        p = east_cli.solve(fb * FT, tw * FT, s)
        rows.append(f"{fb},{tw},{ex},{s['entrance_E1_crest_m'] / FT!r},"
                    f"{s['entrance_E2_crest_m'] / FT!r},50,0,"
                    f"{p.pools[0].water_level_m / FT + 0.01!r},{p.pools[-1].water_level_m / FT!r}")
    obs = tmp_path / "obs.csv"
    obs.write_text("\n".join(rows), encoding="utf-8")
    code, out, err = run(capsys, "calibrate", *EAST, "--kinds", "exit", str(obs), "--json")
    assert code == 0, err
    d = _strict_json(out)
    assert d["n_observations"] == 3 and d["n_levels"] == 6
    assert set(d["multipliers"]) == {"exit", "weir", "orifice", "entrance_gate"}
    assert d["rms_after_m"] <= d["rms_before_m"]
    code, out, _ = run(capsys, "calibrate", *EAST, "--kinds", "exit", str(obs))
    assert code == 0 and "RMS level error before" in out and "Residuals per measured pool" in out


def test_calibrate_with_explicit_site_path(capsys, tmp_path):
    obs = tmp_path / "obs.csv"
    obs.write_text(_OBS_HEADER + "\n254,215,253,211.5,211.5,50,0,100,215.7\n", encoding="utf-8")
    code, _, err = run(capsys, "calibrate", str(demo_site_path()), *EAST, str(obs))
    assert code == 2 and "line 2: level_P01: " in err and "floor of pool P01" in err


# -- errors and demo -------------------------------------------------------------------------
def test_internal_error_exits_1_traceback_only_with_debug(capsys, monkeypatch):
    def boom(*_a, **_k):
        raise RuntimeError("boom")

    monkeypatch.setattr(ops_logic.cli, "format_site", boom)
    monkeypatch.delenv("FISHWAY_DEBUG", raising=False)
    code, _, err = run(capsys, "check-config")
    assert code == 1
    assert "fishway check-config: internal error: RuntimeError: boom" in err
    assert "Traceback" not in err
    code, _, err = run(capsys, "check-config", "--debug")
    assert code == 1 and "Traceback" in err
    monkeypatch.setenv("FISHWAY_DEBUG", "1")
    code, _, err = run(capsys, "check-config")
    assert code == 1 and "Traceback" in err


