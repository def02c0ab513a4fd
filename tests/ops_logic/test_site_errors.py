"""Bad site files through ``fishway check-config FILE``: exit status 2 and one message per
problem naming the file, the dotted field path and the reason.

Each bad file is the shipped demo file with one small text edit, written to tmp_path.
"""

from __future__ import annotations

import re

import pytest

from dashboard.cli import main
from ops_logic.site import demo_site_path

DEMO = demo_site_path().read_text(encoding="utf-8")


def _once(old: str, new: str, count: int = 1):
    def edit(text: str) -> str:
        assert text.count(old) >= 1, f"demo file changed: {old!r} not found"
        return text.replace(old, new, count)

    return edit


CASES = {
    # name: (edit, dotted path expected in the message, reason fragment)
    "missing field": (_once("width = 8.0\ncrest_range", "crest_range"),
                      "fishways[0].exit.width", "missing (required)"),
    "wrong units (flow for a length)": (_once("width = 8.0\n", 'width = "3 cfs"\n'),
                                        "fishways[0].exit.width", "is not a length"),
    "negative width": (_once("weir_width = 4.0", "weir_width = -4.0"),
                       "fishways[0].baffles[0] (copy 1 of 38).weir_width", "greater than 0"),
    "exit crest range above the forebay range": (
        _once("crest_range = [250.0, 255.0]", "crest_range = [256.0, 258.0]"),
        "fishways[0].exit.crest_range", "above the whole forebay range"),
    "baffles out of order": (_once('id = "B39"\ncrest = 213.0', 'id = "B39"\ncrest = 260.0'),
                             "fishways[0].baffles[1]", "list baffles in order"),
    "unknown aux pool": (_once('into_pool = "entrance"', 'into_pool = "P99"'),
                         "fishways[0].aux[0].into_pool", "no pool 'P99'"),
    "unknown field": (_once('type = "adjustable_weir"', 'type = "adjustable_weir"\ncolour = 3'),
                      "fishways[0].exit.colour", "unknown field"),
    "bad unit system": (_once('units = "us"', 'units = "imperial"'), "site.units",
                        "must be 'us'"),
    "tailwater range above the forebay": (
        _once("tailwater_range = [212.0, 219.0]", "tailwater_range = [212.0, 260.0]"),
        "fishways[0].tailwater_range", "must lie below the forebay range"),
    "range the wrong way round": (
        _once("forebay_range = [252.0, 255.5]", "forebay_range = [255.5, 252.0]"),
        "fishways[0].forebay_range", "low < high"),
}


@pytest.mark.parametrize("name", list(CASES))
def test_bad_site_file_exits_2_naming_file_and_field(tmp_path, capsys, name):
    edit, path, reason = CASES[name]
    bad = tmp_path / "bad_site.toml"
    bad.write_text(edit(DEMO), encoding="utf-8")
    assert main(["check-config", str(bad)]) == 2
    out, err = capsys.readouterr()
    assert out == ""
    lines = err.strip().splitlines()
    assert lines, "no message"
    # one line per problem, each naming the command and the file
    assert all(line.startswith(f"fishway check-config: {bad}: ") for line in lines), lines
    assert any(f": {path}" in line and reason in line for line in lines), lines


@pytest.mark.parametrize("name", ["missing field", "unknown field"])
def test_bad_site_file_json_mode_also_exits_2(tmp_path, capsys, name):
    edit, path, _ = CASES[name]
    bad = tmp_path / "bad_site.toml"
    bad.write_text(edit(DEMO), encoding="utf-8")
    assert main(["check-config", str(bad), "--json"]) == 2
    out, err = capsys.readouterr()
    assert out == "" and path in err


def test_several_problems_give_several_lines(tmp_path, capsys):
    text = _once('into_pool = "entrance"', 'into_pool = "P99"')(
        _once("width = 8.0\n", 'width = "3 cfs"\n')(DEMO))
    bad = tmp_path / "two.toml"
    bad.write_text(text, encoding="utf-8")
    assert main(["check-config", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "fishways[0].exit.width" in err
    # the model-level aux check only runs once the fields parse; either way every line names
    # the file
    assert all(str(bad) in line for line in err.strip().splitlines())


def test_missing_file(tmp_path, capsys):
    missing = tmp_path / "nowhere.toml"
    assert main(["check-config", str(missing)]) == 2
    err = capsys.readouterr().err
    assert re.search(rf"{re.escape(str(missing))}: cannot read the file", err), err


def test_invalid_toml(tmp_path, capsys):
    bad = tmp_path / "broken.toml"
    bad.write_text(DEMO.replace("[site]", "[site", 1), encoding="utf-8")
    assert main(["check-config", str(bad)]) == 2
    err = capsys.readouterr().err
    assert f"{bad}: not valid TOML" in err and "line" in err


def test_bad_site_given_to_solve_also_exits_2(tmp_path, capsys):
    bad = tmp_path / "bad_site.toml"
    bad.write_text(CASES["unknown field"][0](DEMO), encoding="utf-8")
    assert main(["solve", str(bad), "--fishway", "east", "--forebay", "254",
                 "--tailwater", "215"]) == 2
    assert "fishways[0].exit.colour" in capsys.readouterr().err


def test_the_unedited_demo_file_is_valid(tmp_path, capsys):
    good = tmp_path / "good.toml"
    good.write_text(DEMO, encoding="utf-8")
    assert main(["check-config", str(good)]) == 0
    assert f"{good}: valid" in capsys.readouterr().out
