"""Shared page controls: the fishway picker (URL argument or the first fishway), the page head
and the refresh timer, as the profile and setpoints pages use them.

Outside reference: the demo site file read directly (``tomllib``, not through the site model)
for the fishway ids, names and their order. The component ids checked are the literal ids the
browser tests select (tests/dashboard/test_browser_pages.py), not the pages' constants.
"""

from __future__ import annotations

import doctest
import tomllib

import flask
import pytest
from dash import dcc, html
from hypothesis import given
from hypothesis import strategies as st


@pytest.fixture(scope="module")
def raw_fishways():
    from ops_logic.site import demo_site_path

    raw = tomllib.loads(demo_site_path().read_text(encoding="utf-8"))
    return [(f["id"], f["name"]) for f in raw["fishways"]]


@pytest.fixture(scope="module")
def ctx(demo_site):
    """What the controls read of the dashboard context: the site (no database needed)."""
    from types import SimpleNamespace

    return SimpleNamespace(site=demo_site)


def test_a_fishway_named_in_the_url_is_chosen(ctx, raw_fishways):
    from dashboard.controls import chosen_fishway

    assert len(raw_fishways) >= 2  # otherwise the first fishway would pass by accident
    for fid, _name in raw_fishways:
        assert chosen_fishway(ctx, fid) == fid


@given(st.one_of(st.none(), st.text(max_size=12)))
def test_anything_else_opens_the_first_fishway_of_the_site_file(ctx, raw_fishways, text):
    from dashboard.controls import chosen_fishway

    ids = [fid for fid, _name in raw_fishways]
    assert chosen_fishway(ctx, text) == (text if text in ids else ids[0])


def test_the_first_fishway_is_the_first_in_the_site_file(ctx, raw_fishways):
    from dashboard.controls import chosen_fishway

    assert chosen_fishway(ctx, None) == raw_fishways[0][0]
    assert chosen_fishway(ctx, "no such fishway") == raw_fishways[0][0]


def test_head_holds_title_picker_and_status_line(ctx, raw_fishways):
    from dashboard.controls import fishway_head

    second = raw_fishways[1][0]
    head = fishway_head(ctx, "A title", picker_id="x-fishway", status_id="x-status",
                        chosen=second)
    assert isinstance(head, html.Div) and head.className == "page-head"
    title, picker, status = head.children
    assert isinstance(title, html.H1) and title.children == "A title"
    assert isinstance(picker, dcc.Dropdown)
    assert (picker.id, picker.value, picker.clearable) == ("x-fishway", second, False)
    assert [(o["value"], o["label"]) for o in picker.options] == raw_fishways
    assert isinstance(status, html.Div)
    assert (status.id, status.className) == ("x-status", "status-line")


def test_refresh_timer_and_callback_inputs():
    from dashboard.controls import picker_inputs, refresh_timer

    timer = refresh_timer("x-refresh", 45_000)
    assert isinstance(timer, dcc.Interval) and (timer.id, timer.interval) == ("x-refresh",
                                                                              45_000)
    picked, tick = picker_inputs("x-fishway", "x-refresh")
    assert (picked.component_id, picked.component_property) == ("x-fishway", "value")
    assert (tick.component_id, tick.component_property) == ("x-refresh", "n_intervals")


def _find(node, component_id):
    if getattr(node, "id", None) == component_id:
        return node
    children = getattr(node, "children", None)
    for child in children if isinstance(children, list | tuple) else [children]:
        if child is not None and not isinstance(child, str):
            found = _find(child, component_id)
            if found is not None:
                return found
    return None


@pytest.mark.parametrize(("name", "prefix", "period_ms"), [
    ("profile", "profile", 30_000),  # regression value: the page's documented period
    ("setpoints", "setpoints", 60_000),  # regression value
])
def test_pages_keep_their_picker_and_refresh_ids(page_module, raw_fishways, name, prefix,
                                                 period_ms):
    page = page_module(name)
    app = flask.Flask(__name__)
    app.secret_key = "test"
    second = raw_fishways[1][0]
    with app.test_request_context("/"):
        flask.session["user"] = {"name": "op1", "role": "operator"}
        for arg, want in ((second, second), (None, raw_fishways[0][0]),
                          ("bogus", raw_fishways[0][0])):
            layout = page.layout(arg)
            picker = _find(layout, f"{prefix}-fishway")
            assert isinstance(picker, dcc.Dropdown) and picker.value == want
            assert picker.className == "fishway-select"
            assert _find(layout, f"{prefix}-status").className == "status-line"
            timer = _find(layout, f"{prefix}-refresh")
            assert isinstance(timer, dcc.Interval) and timer.interval == period_ms


def test_doctests():
    import dashboard.controls

    result = doctest.testmod(dashboard.controls)
    assert result.attempted > 0 and result.failed == 0
