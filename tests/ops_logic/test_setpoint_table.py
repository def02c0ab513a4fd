"""Tests of ops_logic.setpoint_table: the level grid, the table, and its CSV and HTML writers."""

from __future__ import annotations

import itertools
import math
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ops_logic.advisory import ADVISORY_CAUTION
from ops_logic.ladder import Ladder
from ops_logic.recommend import recommend
from ops_logic.setpoint_table import level_grid, render_html, setpoint_table, to_csv, to_html
from ops_logic.site import load_site

FT = 0.3048  # the international foot, exactly (1959 definition)


@pytest.fixture(scope="module")
def west_tab() -> Ladder:
    return Ladder.from_site(load_site(), "west")


@pytest.fixture(scope="module")
def east_tab() -> Ladder:
    return Ladder.from_site(load_site(), "east")


@pytest.fixture(scope="module")
def small(west_tab) -> pd.DataFrame:
    return setpoint_table(west_tab, [253 * FT, 254.5 * FT], [213 * FT, 215 * FT, 218 * FT])


# -- grid ------------------------------------------------------------------------------------
def test_level_grid_inclusive():
    assert level_grid(76.0, 76.5, 0.25) == [76.0, 76.25, 76.5]
    assert level_grid(76.0, 76.0, 0.1) == [76.0]
    assert level_grid(76.0, 76.55, 0.25) == [76.0, 76.25, 76.5]  # stops below the end


@given(start=st.floats(50.0, 150.0), step=st.floats(0.01, 1.0), n=st.integers(0, 60))
@settings(max_examples=60, deadline=None)
def test_level_grid_counts_and_ends(start, step, n):
    grid = level_grid(start, start + n * step, step)
    assert len(grid) == n + 1
    assert grid[0] == pytest.approx(start, abs=1e-8)
    assert grid[-1] == pytest.approx(start + n * step, abs=1e-8)
    assert all(b > a for a, b in itertools.pairwise(grid))


@pytest.mark.parametrize("args, match", [((1.0, 2.0, 0.0), "positive"),
                                         ((2.0, 1.0, 0.1), "upwards"),
                                         ((0.0, 1000.0, 1e-3), "too many")])
def test_level_grid_rejects(args, match):
    with pytest.raises(ValueError, match=match):
        level_grid(*args)


# -- table -----------------------------------------------------------------------------------
def test_table_shape_and_columns(small, west_tab):
    assert len(small) == 6
    assert list(small.columns[:2]) == ["forebay_m", "tailwater_m"]
    for name in west_tab.settings:
        assert name in small.columns
    for col in ("feasible", "binding", "reason", "ladder_flow_m3s", "entrance_flow_m3s",
                "entrance_head_m", "max_head_drop_m", "max_power_density_w_m3"):
        assert col in small.columns
    # forebay-major order
    assert small["forebay_m"].tolist() == pytest.approx([253 * FT] * 3 + [254.5 * FT] * 3)
    assert small["tailwater_m"].tolist() == pytest.approx([213 * FT, 215 * FT, 218 * FT] * 2)
    for name, spec in west_tab.settings.items():
        assert small[name].between(spec.low - 1e-9, spec.high + 1e-9).all()


def test_each_cell_is_the_unlimited_recommendation(small, west_tab):
    # consistency with recommend() without current settings (no rate limits)
    for row in small.itertuples(index=False):
        rec = recommend(west_tab, row.forebay_m, row.tailwater_m)
        for name in west_tab.settings:
            assert getattr(row, name) == pytest.approx(rec.settings[name], abs=1e-12)
        assert row.feasible == rec.feasible and row.binding == rec.binding
        assert row.entrance_head_m == pytest.approx(rec.profile.entrance_head_m)


def test_impossible_cell_is_kept_and_marked(west_tab):
    t = setpoint_table(west_tab, [70.0], [65.0, 71.0])
    bad = t.iloc[1]
    assert not bad["feasible"] and bad["binding"] == "levels"
    assert "at or above the forebay" in bad["reason"]
    assert math.isnan(bad["entrance_E1_crest_m"])


def test_progress_is_reported(west_tab):
    seen = []
    setpoint_table(west_tab, [254 * FT], [214 * FT, 215 * FT], progress=lambda d, n: seen.append(
        (d, n)))
    assert seen == [(1, 2), (2, 2)]


def test_empty_grid_rejected(west_tab):
    with pytest.raises(ValueError, match="empty"):
        setpoint_table(west_tab, [], [214 * FT])


# -- CSV -------------------------------------------------------------------------------------
def test_csv_si_and_us_columns(small, tmp_path):
    path = tmp_path / "t.csv"
    to_csv(small, path, units="us", fishway="west", site_name="Demo")
    text = path.read_text(encoding="utf-8")
    assert text.startswith("# setpoint table: Demo / west")
    assert ADVISORY_CAUTION in text.splitlines()[2]
    back = pd.read_csv(path, comment="#")
    assert len(back) == len(small)
    # the ft and cfs copies are the SI columns over exact conversion factors
    # (1 ft = 0.3048 m; 1 cfs = 0.3048³ m³/s)
    assert back["forebay_ft"].to_numpy() == pytest.approx(back["forebay_m"] / FT, rel=1e-5)
    assert back["entrance_E1_crest_ft"].to_numpy() == pytest.approx(
        back["entrance_E1_crest_m"] / FT, rel=1e-5)
    assert back["ladder_flow_cfs"].to_numpy() == pytest.approx(
        back["ladder_flow_m3s"] / FT**3, rel=1e-5)
    assert back["aux_G2_opening_pct"].to_numpy() == pytest.approx(
        small["aux_G2_opening_pct"].to_numpy(), rel=1e-5)


def test_csv_si_site_has_no_us_columns(small, tmp_path):
    path = tmp_path / "t.csv"
    to_csv(small, path, units="si")
    back = pd.read_csv(path, comment="#")
    assert not [c for c in back.columns if c.endswith(("_ft", "_cfs"))]


# -- HTML ------------------------------------------------------------------------------------
class _Cells(HTMLParser):
    """Collects the sections, tables and td cells (class, style) of a page."""

    def __init__(self):
        super().__init__()
        self.sections = self.tables = 0
        self.cells: list[list[tuple[str, str]]] = []
        self.stack: list[str] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "section":
            self.sections += 1
        if tag == "table":
            self.tables += 1
            self.cells.append([])
        if tag == "td":
            self.cells[-1].append((a.get("class") or "", a.get("style") or ""))
        if tag not in ("meta", "br"):
            self.stack.append(tag)

    def handle_endtag(self, tag):
        assert self.stack and self.stack[-1] == tag, f"unbalanced </{tag}>"
        self.stack.pop()


def _page(table, ladder, **kw) -> str:
    return render_html(table, ladder, site_name="Demo dam", site_file_date="2026-11-30",
                       generated="2026-12-01 08:00", units="us", **kw)


def test_html_structure(small, west_tab):
    page = _page(small, west_tab)
    parser = _Cells()
    parser.feed(page)
    assert parser.stack == []
    n = len(west_tab.settings)
    assert parser.sections == n and parser.tables == n
    assert all(len(cells) == len(small) for cells in parser.cells)
    assert page.count(ADVISORY_CAUTION.replace("'", "&#x27;")) == n  # on every printed page
    assert "@page" in page and "landscape" in page and "print-color-adjust" in page
    assert "<script" not in page and "http" not in page and " src=" not in page
    assert "Demo dam" in page and "2026-11-30" in page and "West ladder" in page


def test_html_colour_scale_single_hue_and_hatched_infeasible(east_tab):
    spec = east_tab.settings["aux_G1_opening_pct"]
    rows = []
    for i, (value, ok) in enumerate([(spec.low, True), (50.0, True), (spec.high, True),
                                     (50.0, False)]):
        row = {"forebay_m": 77.0, "tailwater_m": 65.0 + i, "feasible": ok, "binding": "x",
               "reason": "y"}
        row.update({n: (value if n == spec.name else east_tab.default_settings()[n])
                    for n in east_tab.settings})
        rows.append(row)
    page = _page(pd.DataFrame(rows), east_tab)
    parser = _Cells()
    parser.feed(page)
    cells = parser.cells[list(east_tab.settings).index(spec.name)]
    colours = [style.split("background-color:")[1].split(";")[0] for _, style in cells]
    rgb = [tuple(int(c[i:i + 2], 16) for i in (1, 3, 5)) for c in colours]
    lum = [0.2126 * r + 0.7152 * g + 0.0722 * b for r, g, b in rgb]
    assert lum[0] > lum[1] > lum[2]  # low = light, high = dark
    assert colours[1] == colours[3]  # same value, same colour whether feasible or not
    # one hue: blue dominates every shade
    assert all(b >= r and b >= g for r, g, b in rgb)
    assert [cls for cls, _ in cells] == ["", "", "", "bad"]
    assert "hatched: no setting meets every criterion" in page


def test_to_html_writes_file(small, west_tab, tmp_path):
    path = tmp_path / "t.html"
    to_html(small, path, west_tab, site_name="Demo", site_file_date="2026-11-30",
            generated="now", units="us")
    text = path.read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>") and text.rstrip().endswith("</html>")


def test_nan_settings_render_as_dash(west_tab):
    t = setpoint_table(west_tab, [70.0], [71.0])
    page = _page(t, west_tab)
    assert "<td class='bad'>—</td>" in page
    assert np.isnan(t["aux_G2_opening_pct"].iloc[0])
