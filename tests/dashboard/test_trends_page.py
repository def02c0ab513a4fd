"""Trends page: M4 data over the rollups keep every extreme with a bounded number of points,
a zoom fetches finer data, derived heads are true differences, guides follow the site file,
the CSV holds the shown data.

Outside references: the extremes and values of the synthetic series inserted here (numpy);
the demo site file read directly (``tomllib``) for bands; 1 ft = 0.3048 m exactly (NIST SP 811;
from memory); dissolved-oxygen limits 5.0 and 4.0 mg/L (US EPA 1986, coldwater 7-day mean
minimum and 1-day minimum; from memory, as REFERENCES.md says).
"""

from __future__ import annotations

import doctest
import importlib
import io
import sys
import tomllib
from datetime import UTC, datetime, timedelta
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from dash import Patch

FT = 0.3048  # m, exact (NIST SP 811; from memory)
END = datetime(2026, 7, 15, 12, 0, tzinfo=UTC)
YEAR_STEP_S = 300  # five-minute readings for a year
SPIKE_HI = (END - timedelta(days=200, hours=3, minutes=25), 78.9)
SPIKE_LO = (END - timedelta(days=41, hours=7, minutes=5), 75.1)


@pytest.fixture(scope="module")
def fresh(tmp_path_factory, demo_site):
    """A year of forebay readings (one spike up, one down), two days of entrance-pool and
    tailwater readings each minute, and an app on that database."""
    from dashboard import context
    from dashboard.app import create_app
    from db.engine import make_engine
    from db.migrate import upgrade
    from db.readings import store_batch
    from db.site_sync import sync_site

    engine = make_engine(sqlite_path=tmp_path_factory.mktemp("trends") / "t.sqlite")
    upgrade(engine)
    tag = sync_site(engine, demo_site)
    t0 = END.timestamp() - 365 * 86400
    ts = t0 + np.arange(0, 365 * 86400, YEAR_STEP_S, dtype="float64")
    fb = 77.0 + 0.4 * np.sin(ts / 86400.0 * 2 * np.pi / 365.0) + 0.05 * np.sin(ts / 3600.0)
    for when, value in (SPIKE_HI, SPIKE_LO):
        fb[np.searchsorted(ts, when.timestamp())] = value
    rows = [(tag["east.forebay_level"], t, v, 1) for t, v in zip(ts.tolist(), fb.tolist(),
                                                                 strict=True)]
    minutes = END.timestamp() - 2 * 86400 + np.arange(0, 2 * 86400, 60, dtype="float64")
    tw = 65.5 + 0.2 * np.sin(minutes / 7200.0)
    pool = tw + 0.40 + 0.03 * np.cos(minutes / 1800.0)
    rows += [(tag["east.tailwater_level"], t, v, 1) for t, v in zip(minutes.tolist(),
                                                                    tw.tolist(), strict=True)]
    rows += [(tag["east.P40.level"], t, v, 1) for t, v in zip(minutes.tolist(), pool.tolist(),
                                                              strict=True)]
    for i in range(0, len(rows), 50_000):
        store_batch(engine, rows[i:i + 50_000])
    old = context._current
    app = create_app(demo_site, engine, secret_key="test")
    app.server.test_client().get("/login")
    yield SimpleNamespace(app=app, engine=engine, ctx=context.current(), tag=tag,
                          page=sys.modules["pages.trends"], forebay=(ts, fb),
                          head=(minutes, pool - tw))
    if old is not None:
        context.install(old)
    engine.dispose()


def _option(fresh, key):
    from dashboard.services.trends import series_options

    return next(o for o in series_options(fresh.ctx) if o.key == key)


@pytest.mark.parametrize("columns", [120, 600, 1500])
def test_a_year_keeps_every_extreme_within_four_points_per_column(fresh, columns):
    from dashboard.services.trends import series_data

    opt = _option(fresh, "east.forebay_level")
    (s,) = series_data(fresh.ctx, [opt], END - timedelta(days=365), END, columns)
    assert s.source == "rollup" and len(s.ts) <= 4 * columns
    ts, fb = fresh.forebay
    assert s.value_si.max() == fb.max() == SPIKE_HI[1]
    assert s.value_si.min() == fb.min() == SPIKE_LO[1]
    hi_at = s.ts[int(np.argmax(s.value_si))]
    assert hi_at == pd.Timestamp(SPIKE_HI[0]).floor("5min")
    # every point is a stored reading (M4 picks points, it does not average them)
    stored = pd.Series(fb, index=pd.to_datetime(ts, unit="s", utc=True).as_unit("ms"))
    assert np.allclose(stored.reindex(s.ts.as_unit("ms")).to_numpy(), s.value_si)


def test_zoom_fetches_finer_data_and_patches_only_the_traces(fresh, monkeypatch):
    from dashboard.figures.trends import local_x
    from dashboard.services.trends import series_data

    page = fresh.page
    start, end = END - timedelta(days=365), END
    shown = {"keys": ["east.forebay_level"], "start": start.isoformat(),
             "end": end.isoformat(), "base_start": start.isoformat(),
             "base_end": end.isoformat(), "columns": 600}
    day0, day1 = END - timedelta(days=3), END - timedelta(days=2)
    x0, x1 = local_x([day0, day1], "Etc/GMT+8")
    patch, new, status = page.zoom({"xaxis.range[0]": x0 + ".000", "xaxis.range[1]": x1},
                                   shown)
    assert isinstance(patch, Patch) and "zoomed" in str(status)
    ops = patch.to_plotly_json()["operations"]
    assert {tuple(o["location"]) for o in ops} == {("data", 0, "x"), ("data", 0, "y")}
    ys = next(o["params"]["value"] for o in ops if o["location"][-1] == "y")
    assert len(ys) == 288  # every five-minute reading of that day: finer than the year view
    year = series_data(fresh.ctx, [_option(fresh, "east.forebay_level")], start, end, 600)[0]
    in_day = ((year.ts >= day0) & (year.ts < day1)).sum()
    assert in_day < len(ys)
    assert new["start"] == day0.isoformat() and new["base_start"] == start.isoformat()
    back, again, _ = page.zoom({"xaxis.autorange": True}, new)
    assert again["start"] == start.isoformat() and isinstance(back, Patch)
    assert page.zoom({"dragmode": "pan"}, shown) == (page.no_update,) * 3


@pytest.mark.parametrize(("hours", "source"), [(2, "raw"), (30, "rollup means")])
def test_entrance_head_is_the_difference_of_its_gauges(fresh, hours, source):
    from dashboard.services.trends import series_data

    opt = _option(fresh, "east:entrance_head")
    (s,) = series_data(fresh.ctx, [opt], END - timedelta(hours=hours), END, 600)
    assert s.source == source and len(s.ts) > 0
    minutes, head = fresh.head
    expected = pd.Series(head, index=pd.to_datetime(minutes, unit="s", utc=True).as_unit("ms"))
    assert np.allclose(expected.reindex(s.ts.as_unit("ms")).to_numpy(), s.value_si,
                       atol=1e-12)
    assert s.value_si.max() == pytest.approx(expected[expected.index >= END - timedelta(
        hours=hours)].max())


def test_guides_follow_the_site_file_and_the_alarm_rules(fresh):
    from dashboard.services.trends import series_options
    from ops_logic.site import demo_site_path

    raw = tomllib.loads(demo_site_path().read_text(encoding="utf-8"))["fishways"][0]
    opts = {o.key: o for o in series_options(fresh.ctx)}
    (band,) = opts["east.forebay_level"].guides
    assert band.style == "band"
    assert (band.low / FT, band.high / FT) == pytest.approx(tuple(raw["forebay_range"]))
    (eh,) = opts["east:entrance_head"].guides
    assert (eh.low / FT, eh.high / FT) == pytest.approx(
        (raw["targets"]["entrance_head"]["min"], raw["targets"]["entrance_head"]["max"]))
    do = opts["east.do"].guides
    assert sorted(g.low for g in do if g.style == "alarm") == [4.0, 5.0]
    assert any(g.style == "qc" for g in do)  # default QC spans for dissolved oxygen
    crest = opts["east.E1.crest"].guides
    assert [(g.low / FT, g.high / FT) for g in crest] == [
        pytest.approx(tuple(raw["entrance"]["gates"][0]["crest_range"]))]
    assert opts["east.forebay_level"].kind == "elevation"
    assert opts["east:entrance_head"].kind == opts["east.trash_rack_dp"].kind == "head"
    assert "west:exit_head" not in opts  # the west exit is a fixed slot


def test_catalogue_qc_limits_are_drawn(fresh):
    from dashboard.services.trends import series_options
    from db.catalog import add_tag
    from db.dashboard_queries import fishway_db_ids

    fw = fishway_db_ids(fresh.engine, fresh.ctx.site.site.name)["west"]
    add_tag(fresh.engine, fw, "west.spare_level", "water_level", "m", poll_period_s=10,
            fail_low=60.0, fail_high=80.0, suspect_low=64.0, suspect_high=79.0)
    (opt,) = [o for o in series_options(fresh.ctx) if o.key == "west.spare_level"]
    assert sorted((g.label, g.low or g.high) for g in opt.guides) == [
        ("QC fail", 60.0), ("QC fail", 80.0), ("QC suspect", 64.0), ("QC suspect", 79.0)]


def test_csv_holds_the_shown_points_in_display_and_si_units(fresh):
    from dashboard.services.trends import csv_text, series_data

    opts = [_option(fresh, "east.forebay_level"), _option(fresh, "east:entrance_head")]
    series = series_data(fresh.ctx, opts, END - timedelta(hours=6), END, 300)
    frame = pd.read_csv(io.StringIO(csv_text(series, "us", "Etc/GMT+8")))
    assert len(frame) == sum(len(s.ts) for s in series)
    assert set(frame["unit"]) == {"ft"}
    assert np.allclose(frame["value"], frame["value_si"] / FT, atol=1e-4)
    fb = frame[frame["series"] == "east.forebay_level"]
    when = pd.to_datetime(fb["time_utc"], utc=True)
    assert (pd.to_datetime(fb["time_site"], utc=True) == when).all()  # same instant
    ts, values = fresh.forebay
    stored = pd.Series(values, index=pd.to_datetime(ts, unit="s", utc=True))
    assert np.allclose(stored.reindex(when).to_numpy(), fb["value_si"], atol=1e-6)


def test_export_callback_downloads_csv(fresh):
    start, end = END - timedelta(hours=8), END
    out = fresh.page.export(1, {"keys": ["east.forebay_level"], "start": start.isoformat(),
                                "end": end.isoformat(), "columns": 200})
    assert out["filename"] == "trend_20260715T0400_20260715T1200Z.csv"
    assert out["content"].startswith("time_site,time_utc,series,value,unit,value_si,flag")
    assert fresh.page.export(1, None) is fresh.page.no_update


def test_preset_range_without_recent_data_moves_to_the_newest_reading(fresh):
    from dashboard.services.trends import resolve_range

    opts = [_option(fresh, "east.forebay_level")]
    now = END + timedelta(days=30)
    start, end, note = resolve_range(fresh.ctx, opts, "8h", now)
    newest = datetime.fromtimestamp(fresh.forebay[0][-1], tz=UTC)
    assert end - start == timedelta(hours=8) and start < newest < end
    assert "newest reading" in note
    assert resolve_range(fresh.ctx, opts, "24h", END)[2] == ""
    with pytest.raises(ValueError, match="after its start"):
        resolve_range(fresh.ctx, opts, "custom", now, start_text="2026-07-02 00:00",
                      end_text="2026-07-01 00:00")
    with pytest.raises(ValueError, match="YYYY-MM-DD HH:MM"):
        resolve_range(fresh.ctx, opts, "custom", now, start_text="yesterday",
                      end_text="2026-07-01 00:00")


def test_draw_callback_separates_axes_and_halves_the_pixel_columns(fresh, monkeypatch):
    page = fresh.page
    monkeypatch.setattr(page, "now_utc", lambda: END)
    fig, status, shown = page.draw(1400, ["east.forebay_level", "east:entrance_head"], "24h",
                                   None, None)
    assert shown["columns"] == page.columns_for(1400) == (1400 - page.PLOT_MARGIN_PX) // 2
    assert "points from" in str(status)
    assert [t.yaxis for t in fig.data] == ["y", "y2"]
    assert fig.layout.yaxis.title.text == "Elevation (ft)"
    assert fig.layout.yaxis2.title.text == "Head (ft)"
    assert {s.yref for s in fig.layout.shapes} == {"y", "y2"}
    assert all(len(t.y) <= 2 * (1400 - page.PLOT_MARGIN_PX) for t in fig.data)
    _, message, _ = page.draw(1400, ["east.forebay_level"], "custom", "x", "y")
    assert "Range:" in str(message)
    empty, hint, _ = page.draw(1400, [], "24h", None, None)
    assert empty == {} and "Choose" in str(hint)


@pytest.mark.parametrize("name", ["dashboard.services.trends", "dashboard.figures.trends"])
def test_doctests(name):
    result = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0
