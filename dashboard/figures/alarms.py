"""Figures of the Alarms page: the alarm rate per 10 minutes with its targets, the ten most
frequent alarms, and the priority split beside its target.

Targets (EEMUA 191; ANSI/ISA-18.2-2016; REFERENCES.md "Alarms and displays"): about 1 alarm
per 10 minutes acceptable, 2 the most manageable, more than 10 in 10 minutes a flood (seen);
priorities about 80 % low, 15 % medium, 5 % high (from memory). The values come from
:mod:`ops_logic.alarms.performance` and :mod:`ops_logic.alarms.engine`, so the lines drawn are
the ones the figures are judged by.

Neutral greys for what is within target; a 10-minute bar above the manageable rate is amber,
a flood bar red (ANSI/ISA-101: colour only for the abnormal).
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime

import plotly.graph_objects as go

from dashboard.figures.trends import local_x
from ops_logic.alarms.engine import FLOOD_START
from ops_logic.alarms.performance import AVERAGE_ACCEPTABLE, AVERAGE_MANAGEABLE, PERIOD

__all__ = ["BAR_COLOURS", "TARGET_LINES", "bar_colour", "priority_figure", "rate_figure",
           "top10_figure"]

BAR_COLOURS = {"normal": "#8d9196", "above": "#c77d00", "flood": "#b3261e"}
"""Bar colours: within the manageable rate, above it, in flood (palette of style.css)."""
TARGET_LINES = (
    (AVERAGE_ACCEPTABLE, "≈ 1 per 10 min: acceptable", "dot", "start"),
    (AVERAGE_MANAGEABLE, "2 per 10 min: most manageable", "dash", "end"),
    (float(FLOOD_START), f"flood: more than {FLOOD_START} in 10 min", "solid", "start"),
)
"""``(alarms per 10 min, label, line dash, label position)`` drawn on the rate chart."""

_FONT = {"family": "DejaVu Sans, Arial, sans-serif", "size": 15, "color": "#1f2326"}
_EMPTY = "No alarms annunciated in this period"


def _layout(fig: go.Figure, height: int, **extra: object) -> go.Figure:
    layout = {"height": height, "margin": {"l": 70, "r": 30, "t": 50, "b": 50},
              "paper_bgcolor": "#ececea", "plot_bgcolor": "#e6e6e3", "font": _FONT,
              "showlegend": False, **extra}
    fig.update_layout(**layout)
    fig.update_xaxes(gridcolor="#cfd0cc", zeroline=False)
    fig.update_yaxes(gridcolor="#cfd0cc", zeroline=False)
    return fig


def bar_colour(count: int) -> str:
    """The colour of a 10-minute bar.

    >>> bar_colour(2), bar_colour(3), bar_colour(11)
    ('#8d9196', '#c77d00', '#b3261e')
    """
    if count > FLOOD_START:
        return BAR_COLOURS["flood"]
    return BAR_COLOURS["above"] if count > AVERAGE_MANAGEABLE else BAR_COLOURS["normal"]


def rate_figure(period_starts: Sequence[datetime], counts: Sequence[int],
                time_zone: str) -> go.Figure:
    """Annunciations per 10-minute period (bars spanning their period, site time) with the
    acceptable, manageable and flood lines.

    >>> from datetime import UTC
    >>> t = [datetime(2026, 7, 15, 12, 0, tzinfo=UTC), datetime(2026, 7, 15, 12, 10, tzinfo=UTC)]
    >>> fig = rate_figure(t, [3, 12], "UTC")
    >>> list(fig.data[0].y), [s.y0 for s in fig.layout.shapes]
    ([3, 12], [1.0, 2.0, 10.0])
    """
    width_ms = PERIOD.total_seconds() * 1000.0
    fig = go.Figure(go.Bar(
        x=local_x(period_starts, time_zone), y=list(counts), offset=0, width=width_ms,
        marker={"color": [bar_colour(c) for c in counts], "line": {"width": 0}},
        hovertemplate="%{x|%H:%M}: %{y} alarms<extra></extra>"))
    for value, label, dash, where in TARGET_LINES:
        fig.add_shape(type="line", xref="paper", x0=0, x1=1, y0=value, y1=value,
                      line={"dash": dash, "color": "#3b4045", "width": 1.5},
                      label={"text": label, "textposition": where, "yanchor": "bottom",
                             "font": {"size": 12, "color": "#3b4045"}})
    top = max([*counts, FLOOD_START]) + 2
    x_range = local_x([period_starts[0], period_starts[-1] + PERIOD], time_zone) \
        if len(period_starts) else None
    _layout(fig, 380, title={"text": "Alarms per 10 minutes", "x": 0.01},
            bargap=0.05, yaxis={"title": "alarms", "range": [0, top], "rangemode": "tozero"},
            xaxis={"type": "date", "title": f"Site time ({time_zone})", "range": x_range})
    return fig


def top10_figure(top: Sequence[tuple[str, int]], share_pct: float, target_pct: float
                 ) -> go.Figure:
    """The ten most frequent alarms (most frequent on top) and their share of all alarms.

    >>> fig = top10_figure([("Stale reading · P10 (East)", 6), ("Entrance head (East)", 2)],
    ...                    40.0, 5.0)
    >>> list(fig.data[0].y), list(fig.data[0].x)
    (['Entrance head (East)', 'Stale reading · P10 (East)'], [2, 6])
    """
    rows = list(top)[::-1]
    fig = go.Figure(go.Bar(
        y=[label for label, _ in rows], x=[n for _, n in rows], orientation="h",
        marker={"color": BAR_COLOURS["normal"]}, text=[n for _, n in rows],
        textposition="outside", hovertemplate="%{y}: %{x}<extra></extra>"))
    title = (f"Ten most frequent: {share_pct:.0f} % of all alarms (target ≤ {target_pct:g} %)"
             if rows else _EMPTY)
    most = max([n for _, n in rows], default=1)
    _layout(fig, 110 + 34 * max(len(rows), 3), title={"text": title, "x": 0.01},
            xaxis={"title": "alarms", "range": [0, most * 1.15 + 0.5], "tickformat": "d",
                   "dtick": 1 if most <= 10 else None},
            yaxis={"automargin": True})
    return fig


def priority_figure(split: Sequence[tuple[str, float, float]]) -> go.Figure:
    """Share of alarms per priority beside the target share, ``(priority, %, target %)``.

    >>> fig = priority_figure([("low", 70.0, 80.0), ("medium", 20.0, 15.0), ("high", 10.0, 5.0)])
    >>> [t.name for t in fig.data], list(fig.data[1].y)
    (['this period', 'target'], [80.0, 15.0, 5.0])
    """
    names = [p for p, _, _ in split]
    fig = go.Figure([
        go.Bar(name="this period", x=names, y=[v for _, v, _ in split],
               marker={"color": "#3b4045"}, texttemplate="%{y:.0f} %", textposition="outside"),
        go.Bar(name="target", x=names, y=[t for _, _, t in split],
               marker={"color": "rgba(0,0,0,0)", "line": {"color": "#3b4045", "width": 2}},
               texttemplate="%{y:.0f} %", textposition="outside"),
    ])
    _layout(fig, 360, title={"text": "Priority of alarms: this period and target", "x": 0.01},
            barmode="group", showlegend=True,
            legend={"orientation": "h", "y": 1.0, "yanchor": "bottom", "x": 1, "xanchor": "right"},
            yaxis={"title": "% of alarms", "range": [0, 110]})
    return fig
