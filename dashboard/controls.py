"""Controls that several pages share: the fishway picker in the page head, and the refresh
timer with the two callback inputs that redraw a page for one fishway.

Not a page: modules in ``dashboard/pages/`` are each registered by Dash as a page
(``use_pages=True``, ``pages_folder=dashboard/pages`` in :func:`dashboard.app.create_app`), so
the shared pieces live here. The component ids are the calling page's own constants
(prefixed by the page), passed in; nothing here names an id.
"""

from __future__ import annotations

from dash import Input, dcc, html

from dashboard.context import AppContext
from dashboard.services.profile import fishway_options

__all__ = ["chosen_fishway", "fishway_head", "picker_inputs", "refresh_timer"]


def chosen_fishway(ctx: AppContext, fishway: str | None) -> str:
    """The fishway a page opens on: ``fishway`` (the URL argument) when it is the site-file id
    of one of the site's fishways, else the site's first fishway.

    >>> from types import SimpleNamespace as NS
    >>> ctx = NS(site=NS(fishways=[NS(id="a"), NS(id="b")]))
    >>> chosen_fishway(ctx, "b"), chosen_fishway(ctx, "zz"), chosen_fishway(ctx, None)
    ('b', 'a', 'a')
    """
    ids = [f.id for f in ctx.site.fishways]
    return fishway if fishway in ids else ids[0]


def fishway_head(ctx: AppContext, title: str, *, picker_id: str, status_id: str,
                 chosen: str) -> html.Div:
    """The page head of a one-fishway page: the title, the fishway picker (a dropdown of the
    site's fishways, showing ``chosen``, never empty) and the status line below them."""
    return html.Div(className="page-head", children=[
        html.H1(title),
        dcc.Dropdown(id=picker_id, options=fishway_options(ctx), value=chosen,
                     clearable=False, className="fishway-select"),
        html.Div(id=status_id, className="status-line"),
    ])


def refresh_timer(timer_id: str, period_ms: int) -> dcc.Interval:
    """The timer that refreshes a page every ``period_ms`` [ms]; keep the period far longer
    than the page's callback takes (PLATFORM_NOTES: overlapping refreshes stutter)."""
    return dcc.Interval(id=timer_id, interval=period_ms)


def picker_inputs(picker_id: str, timer_id: str) -> tuple[Input, Input]:
    """The inputs of a page's draw callback: the chosen fishway, then the timer's tick count
    (``ctx.triggered_id == timer_id`` tells a refresh from a new choice)."""
    return Input(picker_id, "value"), Input(timer_id, "n_intervals")
