"""Side view of a fishway drawn to scale, with its water surface, drops and power density.

Coordinates: x is the distance along the fishway from the exit [display length unit],
accumulated from the pool lengths of the site file (pool j spans ``[x_j, x_j + L_j)``; control
j, the exit for j = 0 and baffle j − 1 otherwise, stands at ``x_j``; the entrance gates at the
end); y is the elevation. The forebay is drawn upstream of x = 0 and the tailwater downstream
of the entrance, each one pool length long (schematic lengths). Below the side view, sharing
its x axis, two bar panels: the head drop at the exit, at each baffle and at the entrance
against its band, and the power density of each pool against its limit.

Colours follow high-performance HMI practice (ANSI/ISA-101): greys for structure and normal
values, a desaturated blue for water, amber only for a value out of its band. Traces keep a
fixed order (:data:`TRACES`) so that a refresh can patch their data without redrawing
(:func:`figure_patch`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import plotly.graph_objects as go
from dash import Patch
from plotly.subplots import make_subplots

from ops_logic.ladder import Ladder
from ops_logic.profile import Profile
from ops_logic.site import (
    AdjustableWeirExit,
    GravityAux,
    OrificeBaffle,
    SlotBaffle,
    WeirBaffle,
    WeirOrificeBaffle,
)
from ops_logic.units import UnitSystem, display_unit, from_si

__all__ = ["COLORS", "TRACES", "Geometry", "bullet", "figure_patch", "geometry",
           "headline", "profile_figure"]

COLORS = {
    "structure": "#3b4045", "floor": "#6b6f73", "water": "#b9c8d3", "water_edge": "#52697a",
    "surface": "#2f4858", "measured": "#1f2326", "abnormal": "#c77d00", "band": "#c9ccc6",
    "bar": "#7d8489", "grid": "#cfd0cc", "bg": "#ececea", "plot": "#e6e6e3", "aux": "#52697a",
    "select": "#1f2326",
}
"""Palette (greys; amber ``abnormal`` as in ``assets/style.css``)."""

TRACES = ("water", "floor", "walls", "slots", "surface", "measured", "selected", "aux_paths",
          "aux_diffusers", "drops", "power")
"""Trace order of the full figure (the compact what-if view has the first seven)."""

_HOVER = "%{hovertext}<extra></extra>"


@dataclass(frozen=True)
class Geometry:
    """Pool spans along the fishway [m]: starts, lengths, centres; end of the last pool."""

    x0: tuple[float, ...]
    length: tuple[float, ...]
    end: float
    reach: float  # schematic length of the forebay and tailwater

    def centre(self, j: int) -> float:
        return self.x0[j] + 0.5 * self.length[j]


def geometry(ladder: Ladder) -> Geometry:
    """Pool spans from the site file's pool lengths (x from the exit, SI).

    >>> from ops_logic.site import load_site
    >>> g = geometry(Ladder.from_site(load_site(), "east"))
    >>> round(g.x0[1], 3), round(g.end / 0.3048, 1)   # pools of 16 ft, entrance pool 30 ft
    (4.877, 654.0)
    """
    lengths = [p.length for p in ladder.fishway.pools]
    x0, x = [], 0.0
    for length in lengths:
        x0.append(x)
        x += length
    return Geometry(tuple(x0), tuple(lengths), x, max(lengths))


def _band_ok(value: float, lo: float | None, hi: float | None) -> bool:
    return (lo is None or value >= lo - 1e-9) and (hi is None or value <= hi + 1e-9)


def _wall_segments(ladder: Ladder, profile: Profile, j: int) -> tuple[list, list]:
    """Solid wall pieces and open slot pieces ``[(y_low, y_high), ...]`` of control j [m]."""
    f = ladder.fishway
    floors = ladder.pool_floor_m
    ctrl = [f.exit, *f.baffles][j]
    upstream_water = profile.forebay_m if j == 0 else profile.pools[j - 1].water_level_m
    top_free = max(upstream_water, profile.pools[j].water_level_m) + 0.3
    if j == 0:
        bottom = (ctrl.approach_floor if isinstance(ctrl, AdjustableWeirExit)
                  and ctrl.approach_floor is not None else floors[0])
        bottom = min(bottom, floors[0])
    else:
        bottom = min(floors[j - 1], floors[j])
    if isinstance(ctrl, AdjustableWeirExit):
        return [(bottom, profile.settings["exit_crest_m"])], []
    if isinstance(ctrl, WeirBaffle):
        return [(bottom, ctrl.crest)], []
    if isinstance(ctrl, SlotBaffle):
        return [(bottom, ctrl.invert)], [(ctrl.invert, top_free)]
    top = ctrl.crest if isinstance(ctrl, WeirOrificeBaffle) else top_free
    pieces, y = [], bottom
    for o in sorted(ctrl.orifices, key=lambda o: o.invert):  # type: ignore[union-attr]
        if o.invert > y:
            pieces.append((y, o.invert))
        y = max(y, o.invert + o.height)
    if top > y:
        pieces.append((y, top))
    assert isinstance(ctrl, WeirOrificeBaffle | OrificeBaffle)
    return pieces, []


def _fmt(value: float, kind: str, units: UnitSystem, digits: int = 2) -> str:
    if value is None or not math.isfinite(value):
        return "—"
    return f"{from_si(value, kind, units):.{digits}f} {display_unit(kind, units)}"


def _side_view(fig: go.Figure, ladder: Ladder, profile: Profile, measured: Sequence[Any],
               units: UnitSystem, selected: int | None, tolerance_m: float,
               row: int | None) -> None:
    g = geometry(ladder)
    L = lambda v: from_si(v, "length", units)  # noqa: E731
    lu = display_unit("length", units)
    n = ladder.n_pools
    floors = ladder.pool_floor_m
    kw = {"row": row, "col": 1} if row else {}
    fore_bottom = min(floors[0], _wall_segments(ladder, profile, 0)[0][0][0])
    # water bodies: forebay, each pool (clickable: customdata = pool index), tailwater
    xs, ws, bases, heights, custom, hover = [], [], [], [], [], []
    xs.append(L(-0.5 * g.reach))
    ws.append(L(g.reach))
    bases.append(L(fore_bottom))
    heights.append(L(profile.forebay_m - fore_bottom))
    custom.append(-1)
    hover.append(f"Forebay {_fmt(profile.forebay_m, 'length', units)}")
    for j, p in enumerate(profile.pools):
        xs.append(L(g.centre(j)))
        ws.append(L(g.length[j]))
        bases.append(L(p.floor_m))
        heights.append(L(max(p.depth_m, 0.0)))
        custom.append(j)
        hover.append(f"{p.id}: level {_fmt(p.water_level_m, 'length', units)}, depth "
                     f"{_fmt(p.depth_m, 'length', units)}<br>click for details")
    tw_bottom = floors[-1]
    xs.append(L(g.end + 0.5 * g.reach))
    ws.append(L(g.reach))
    bases.append(L(tw_bottom))
    heights.append(L(max(profile.tailwater_m - tw_bottom, 0.0)))
    custom.append(-2)
    hover.append(f"Tailwater {_fmt(profile.tailwater_m, 'length', units)}")
    fig.add_trace(go.Bar(name="water", x=xs, y=heights, base=bases, width=ws, customdata=custom,
                         hovertext=hover, hovertemplate=_HOVER,
                         marker={"color": COLORS["water"], "line": {"width": 0}},
                         showlegend=False), **kw)
    # floor
    fx, fy = [L(-g.reach), L(0.0)], [L(fore_bottom), L(fore_bottom)]
    for j in range(n):
        fx += [L(g.x0[j]), L(g.x0[j] + g.length[j])]
        fy += [L(floors[j]), L(floors[j])]
    fx.append(L(g.end + g.reach))
    fy.append(L(tw_bottom))
    fig.add_trace(go.Scatter(name="floor", x=fx, y=fy, mode="lines", hoverinfo="skip",
                             line={"color": COLORS["floor"], "width": 2}, showlegend=False), **kw)
    # walls: exit, baffles, entrance gates (solid), slots (dotted)
    wx, wy, sx, sy = [], [], [], []
    for j in range(n):
        solid, slots = _wall_segments(ladder, profile, j)
        for lo, hi in solid:
            wx += [L(g.x0[j]), L(g.x0[j]), None]
            wy += [L(lo), L(hi), None]
        for lo, hi in slots:
            sx += [L(g.x0[j]), L(g.x0[j]), None]
            sy += [L(lo), L(hi), None]
    for gate in ladder.fishway.entrance.gates:
        crest = profile.settings[f"entrance_{gate.id}_crest_m"]
        wx += [L(g.end), L(g.end), None]
        wy += [L(floors[-1]), L(crest), None]
    fig.add_trace(go.Scatter(name="walls", x=wx, y=wy, mode="lines", hoverinfo="skip",
                             line={"color": COLORS["structure"], "width": 3},
                             showlegend=False), **kw)
    fig.add_trace(go.Scatter(name="slots", x=sx or [None], y=sy or [None], mode="lines",
                             hoverinfo="skip", line={"color": COLORS["structure"], "width": 1,
                                                     "dash": "dot"}, showlegend=False), **kw)
    # computed water surface
    zx, zy = [L(-g.reach), L(0.0)], [L(profile.forebay_m)] * 2
    for j, p in enumerate(profile.pools):
        zx += [L(g.x0[j]), L(g.x0[j] + g.length[j])]
        zy += [L(p.water_level_m)] * 2
    zx += [L(g.end), L(g.end + g.reach)]
    zy += [L(profile.tailwater_m)] * 2
    fig.add_trace(go.Scatter(name="surface", x=zx, y=zy, mode="lines",
                             hoverinfo="skip", line={"color": COLORS["surface"], "width": 2},
                             showlegend=False), **kw)
    # measured levels (markers), amber where they differ from the computed surface
    index = {p.id: j for j, p in enumerate(profile.pools)}
    mx, my, mc, mh = [], [], [], []
    for m in measured:
        if m.where == "forebay":
            x, computed = -0.5 * g.reach, profile.forebay_m
        elif m.where == "tailwater":
            x, computed = g.end + 0.5 * g.reach, profile.tailwater_m
        elif m.where in index:
            j = index[m.where]
            x = g.centre(j) + (0.15 * g.length[j] if m.redundant else 0.0)
            computed = profile.pools[j].water_level_m
        else:
            continue
        diff = m.value_m - computed
        off = abs(diff) > tolerance_m
        mx.append(L(x))
        my.append(L(m.value_m))
        mc.append(COLORS["abnormal"] if off else COLORS["measured"])
        mh.append(f"{m.tag}: measured {_fmt(m.value_m, 'length', units)}<br>computed "
                  f"{_fmt(computed, 'length', units)} (difference "
                  f"{_fmt(diff, 'length', units)}{' — beyond the gauge tolerance' if off else ''})")
    fig.add_trace(go.Scatter(name="measured", x=mx or [None], y=my or [None], mode="markers",
                             hovertext=mh, hovertemplate=_HOVER,
                             marker={"symbol": "diamond", "size": 11, "color": mc or None,
                                     "line": {"width": 1, "color": "#ffffff"}},
                             showlegend=False), **kw)
    # selected pool outline
    if selected is not None and 0 <= selected < n:
        p = profile.pools[selected]
        x_a, x_b = L(g.x0[selected]), L(g.x0[selected] + g.length[selected])
        y_a, y_b = L(p.floor_m), L(max(p.water_level_m, p.floor_m) + 0.15)
        ox, oy = [x_a, x_b, x_b, x_a, x_a], [y_a, y_a, y_b, y_b, y_a]
    else:
        ox, oy = [None], [None]
    fig.add_trace(go.Scatter(name="selected", x=ox, y=oy, mode="lines", hoverinfo="skip",
                             line={"color": COLORS["select"], "width": 2, "dash": "dash"},
                             showlegend=False), **kw)
    fig.update_yaxes(title_text=f"Elevation ({lu})", **kw)


def _aux(fig: go.Figure, ladder: Ladder, profile: Profile, units: UnitSystem, row: int) -> None:
    """Auxiliary water paths: schematic conduits along the bottom of the side view from the
    forebay (gravity) or the tailwater (pumps) to the diffuser pool, with their flows."""
    g = geometry(ladder)
    L = lambda v: from_si(v, "length", units)  # noqa: E731
    t = ladder.fishway.targets
    low = min(ladder.pool_floor_m) - 0.6
    px, py, dx, dy, dh, dc = [], [], [], [], [], []
    for k, (src, state) in enumerate(zip(ladder.aux, profile.aux, strict=True)):
        j = src.pool_index
        y = low - 0.5 * k
        gravity = isinstance(src.spec, GravityAux)
        x_from = -0.5 * g.reach if gravity else g.end + 0.5 * g.reach
        x_to = g.centre(j) + (k - 0.5 * (len(ladder.aux) - 1)) * 0.2 * g.length[j]
        floor = ladder.pool_floor_m[j]
        px += [L(x_from), L(x_from), L(x_to), L(x_to), None]
        py += [L(ladder.pool_floor_m[0] if gravity else floor), L(y), L(y), L(floor), None]
        vmax = getattr(t.max_diffuser_velocity, src.spec.diffuser)
        over = state.diffuser_velocity_m_s > vmax + 1e-9
        setting = (f"valve {state.setting_value:.0f} % open" if gravity else
                   f"{round(state.setting_value):d} of {src.spec.count} pumps")  # type: ignore[union-attr]
        what = "gravity conduit from the forebay" if gravity else "pumps from the tailwater"
        text = (f"{src.id}: {what}, {setting} — {_fmt(state.flow_m3s, 'flow', units, 1)} into "
                f"{state.pool_id}; {src.spec.diffuser} diffuser "
                f"{_fmt(state.diffuser_velocity_m_s, 'velocity', units)} (limit "
                f"{_fmt(vmax, 'velocity', units)})")
        # stacked in the empty corner below the upper pools, clear of the paths
        fig.add_annotation(x=L(0.02 * g.end), y=L(min(ladder.pool_floor_m)), text=text,
                           showarrow=False, xanchor="left", yanchor="bottom",
                           yshift=6 + 19 * (len(ladder.aux) - 1 - k),
                           font={"size": 13, "color": COLORS["abnormal"] if over
                                 else COLORS["aux"]}, row=row, col=1)
        dx.append(L(x_to))
        dy.append(L(floor + 0.1))
        dh.append(text)
        dc.append(COLORS["abnormal"] if over else COLORS["aux"])
    fig.add_trace(go.Scatter(name="aux_paths", x=px or [None], y=py or [None], mode="lines",
                             hoverinfo="skip", line={"color": COLORS["aux"], "width": 2,
                                                     "dash": "dash"}, showlegend=False),
                  row=row, col=1)
    fig.add_trace(go.Scatter(name="aux_diffusers", x=dx or [None], y=dy or [None], mode="markers",
                             hovertext=dh, hovertemplate=_HOVER,
                             marker={"symbol": "triangle-up", "size": 12, "color": dc or None},
                             showlegend=False), row=row, col=1)


def _drops(fig: go.Figure, ladder: Ladder, profile: Profile, units: UnitSystem,
           row: int) -> None:
    g = geometry(ladder)
    L = lambda v: from_si(v, "length", units)  # noqa: E731
    t = ladder.fishway.targets
    width = 0.6 * min(g.length)
    xs, ys, cs, hs, cd = [], [], [], [], []
    band = t.pool_head_drop

    def add(x: float, value: float, lo: float | None, hi: float | None, label: str,
            custom: int) -> None:
        ok = _band_ok(value, lo, hi)
        xs.append(L(x))
        ys.append(L(value))
        cs.append(COLORS["bar"] if ok else COLORS["abnormal"])
        cd.append(custom)
        lo_t = _fmt(lo, "length", units) if lo is not None else "0"
        hs.append(f"{label}: {_fmt(value, 'length', units)} (band {lo_t} – "
                  f"{_fmt(hi, 'length', units) if hi is not None else 'open'})"
                  + ("" if ok else " — out of band"))

    exit_band = t.exit_head
    if "exit_crest_m" in profile.settings and exit_band is not None:
        add(0.0, profile.forebay_m - profile.settings["exit_crest_m"], exit_band.min,
            exit_band.max, "Exit head (forebay − exit crest)", 0)
    for j in range(1, ladder.n_pools):
        add(g.x0[j], profile.pools[j].head_drop_m, band.min, band.max,
            f"Drop at {profile.controls[j].id} into {profile.pools[j].id}", j)
    eb = t.entrance_head
    add(g.end, profile.entrance_head_m, eb.min, eb.max, "Entrance head (entrance pool − "
        "tailwater)", ladder.n_pools - 1)
    # bands: baffles over the ladder, exit and entrance at their own positions
    shapes = [(L(g.x0[1] - width) if ladder.n_pools > 1 else L(0.0),
               L(g.x0[-1] + width), band.min or 0.0, band.max)]
    if exit_band is not None and "exit_crest_m" in profile.settings:
        shapes.append((L(-width), L(width), exit_band.min, exit_band.max))
    shapes.append((L(g.end - width), L(g.end + width), eb.min, eb.max))
    for x_a, x_b, lo, hi in shapes:
        if hi is None:
            continue
        fig.add_shape(type="rect", x0=x_a, x1=x_b, y0=L(lo or 0.0), y1=L(hi), layer="below",
                      line={"width": 0}, fillcolor=COLORS["band"], row=row, col=1)
    if band.target is not None:
        fig.add_shape(type="line", x0=shapes[0][0], x1=shapes[0][1], y0=L(band.target),
                      y1=L(band.target), line={"color": COLORS["floor"], "width": 1,
                                                "dash": "dot"}, row=row, col=1)
    fig.add_trace(go.Bar(name="drops", x=xs, y=ys, width=L(width), customdata=cd,
                         marker={"color": cs}, hovertext=hs, hovertemplate=_HOVER,
                         showlegend=False), row=row, col=1)
    fig.update_yaxes(title_text=f"Drop ({display_unit('length', units)})", rangemode="tozero",
                     row=row, col=1)


def _power(fig: go.Figure, ladder: Ladder, profile: Profile, units: UnitSystem,
           row: int) -> None:
    g = geometry(ladder)
    L = lambda v: from_si(v, "length", units)  # noqa: E731
    P = lambda v: from_si(v, "power_density", units)  # noqa: E731
    limit = ladder.fishway.targets.max_power_density
    xs, ys, cs, hs, ws, cd = [], [], [], [], [], []
    for j, p in enumerate(profile.pools):
        ok = p.power_density_w_m3 <= limit + 1e-9
        xs.append(L(g.centre(j)))
        ws.append(L(0.6 * g.length[j]))
        ys.append(P(p.power_density_w_m3))
        cs.append(COLORS["bar"] if ok else COLORS["abnormal"])
        cd.append(j)
        hs.append(f"{p.id}: {_fmt(p.power_density_w_m3, 'power_density', units)} (limit "
                  f"{_fmt(limit, 'power_density', units)})" + ("" if ok else " — over"))
    fig.add_shape(type="line", x0=L(-g.reach), x1=L(g.end + g.reach), y0=P(limit),
                  y1=P(limit), line={"color": COLORS["structure"], "width": 1.5, "dash": "dash"},
                  row=row, col=1)
    fig.add_trace(go.Bar(name="power", x=xs, y=ys, width=ws, customdata=cd,
                         marker={"color": cs}, hovertext=hs, hovertemplate=_HOVER,
                         showlegend=False), row=row, col=1)
    fig.update_yaxes(title_text=f"Power ({display_unit('power_density', units)})",
                     rangemode="tozero", row=row, col=1)


def profile_figure(ladder: Ladder, profile: Profile, measured: Sequence[Any] = (),
                   units: UnitSystem = "si", *, selected: int | None = None,
                   tolerance_m: float = 0.03, compact: bool = False) -> go.Figure:
    """The side view (and, unless ``compact``, the drop and power panels) of ``profile``.

    ``measured`` holds gauge readings with ``where``, ``tag``, ``value_m``, ``ts`` and
    ``redundant`` (:class:`dashboard.services.profile.Measured`); a reading further than
    ``tolerance_m`` [m] from the computed surface is drawn amber. ``selected`` outlines a pool.

    >>> from ops_logic.site import load_site
    >>> lad = Ladder.from_site(load_site(), "east")
    >>> fig = profile_figure(lad, lad.solve(77.3, 65.7, lad.default_settings()), units="us")
    >>> [t.name for t in fig.data] == list(TRACES)
    True
    >>> len(fig.data[0].x)          # forebay, 40 pools, tailwater
    42
    """
    g = geometry(ladder)
    L = lambda v: from_si(v, "length", units)  # noqa: E731
    if compact:
        fig = go.Figure()
        _side_view(fig, ladder, profile, measured, units, selected, tolerance_m, None)
        height = 300
    else:
        fig = make_subplots(rows=3, cols=1, shared_xaxes=True, row_heights=[0.6, 0.2, 0.2],
                            vertical_spacing=0.05)
        _side_view(fig, ladder, profile, measured, units, selected, tolerance_m, 1)
        _aux(fig, ladder, profile, units, 1)
        _drops(fig, ladder, profile, units, 2)
        _power(fig, ladder, profile, units, 3)
        height = 760
    lu = display_unit("length", units)
    fig.update_layout(
        height=height, margin={"l": 70, "r": 20, "t": 10, "b": 50}, barmode="overlay",
        bargap=0, paper_bgcolor=COLORS["bg"], plot_bgcolor=COLORS["plot"],
        font={"family": "DejaVu Sans, Arial, sans-serif", "size": 15, "color": "#1f2326"},
        hovermode="closest", clickmode="event", uirevision=f"{ladder.id}-{compact}",
        hoverlabel={"font": {"size": 15}})
    fig.update_xaxes(gridcolor=COLORS["grid"], zeroline=False,
                     range=[L(-g.reach), L(g.end + g.reach)])
    fig.update_yaxes(gridcolor=COLORS["grid"], zeroline=False)
    fig.update_xaxes(title_text=f"Distance along the fishway from the exit ({lu})",
                     row=None if compact else 3, col=None if compact else 1)
    return fig


_PATCHED = ("x", "y", "base", "width", "customdata", "hovertext", "marker")


def figure_patch(new: go.Figure) -> Patch:
    """A :class:`dash.Patch` that carries ``new``'s trace data and annotations onto a figure of
    the same trace layout (same fishway): the axes, shapes and zoom stay as they are, so a
    refresh does not redraw the chart."""
    patch = Patch()
    for i, trace in enumerate(new.data):
        data = trace.to_plotly_json()
        for key in _PATCHED:
            if key in data:
                patch["data"][i][key] = data[key]
    patch["layout"]["annotations"] = [a.to_plotly_json() for a in new.layout.annotations]
    return patch


# -- bullet indicators (HTML): a value beside its band -----------------------------------------
def _scale(lo: float | None, hi: float | None, value: float) -> tuple[float, float]:
    if lo is not None and hi is not None:
        span = hi - lo
        return lo - 0.6 * span, hi + 0.6 * span
    if hi is not None:
        return 0.0, max(1.5 * hi, value * 1.05, 1e-9)
    assert lo is not None
    return 0.0, max(2.0 * lo, value * 1.05, 1e-9)


def bullet(label: str, value: float | None, lo: float | None, hi: float | None, kind: str,
           units: UnitSystem, *, target: float | None = None, note: str = "") -> Any:
    """A bullet indicator: the value as a mark on a track with its band drawn (grey); the
    value text turns amber (class ``abnormal``) when it is out of the band.

    >>> b = bullet("Entrance head", 0.40, 0.30, 0.46, "length", "si")
    >>> b.className, b.children[1].className
    ('bullet', 'bullet-value')
    """
    from dash import html

    if value is None or not math.isfinite(value):
        return html.Div(className="bullet", children=[
            html.Span(label, className="bullet-label"),
            html.Span("no value", className="bullet-value stale"),
            html.Div(className="bullet-track"), html.Span(note, className="bullet-range")])
    ok = _band_ok(value, lo, hi)
    a, b = _scale(lo, hi, value)

    def pct(v: float) -> float:
        return min(max((v - a) / (b - a) * 100.0, 0.0), 100.0)

    band_lo = pct(lo if lo is not None else a)
    band_hi = pct(hi if hi is not None else b)
    parts = [html.Div(className="bullet-band",
                      style={"left": f"{band_lo:.1f}%", "width": f"{band_hi - band_lo:.1f}%"})]
    if target is not None:
        parts.append(html.Div(className="bullet-target", style={"left": f"{pct(target):.1f}%"}))
    parts.append(html.Div(className="bullet-mark" + ("" if ok else " out"),
                          style={"left": f"{pct(value):.1f}%"}))
    if lo is not None and hi is not None:
        band = f"{_fmt(lo, kind, units)} – {_fmt(hi, kind, units)}"
    elif hi is not None:
        band = f"≤ {_fmt(hi, kind, units)}"
    else:
        band = f"≥ {_fmt(lo, kind, units)}"  # type: ignore[arg-type]
    return html.Div(className="bullet", title=note or None, children=[
        html.Span(label, className="bullet-label"),
        html.Span(_fmt(value, kind, units), className="bullet-value" + ("" if ok else
                                                                         " abnormal")),
        html.Div(parts, className="bullet-track"),
        html.Span(band + (f" · {note}" if note else ""), className="bullet-range")])


def headline(ladder: Ladder, profile: Profile, units: UnitSystem) -> list[Any]:
    """Bullet indicators of a profile's headline criteria: forebay and tailwater against the
    operating ranges, exit head, the worst pool drop, entrance head, the worst power density,
    ladder flow (when it has a band) and the attraction flow against its minimum."""
    f = ladder.fishway
    t = f.targets
    out = [bullet("Forebay", profile.forebay_m, *f.forebay_range, "length", units),
           bullet("Tailwater", profile.tailwater_m, *f.tailwater_range, "length", units)]
    if "exit_crest_m" in profile.settings and t.exit_head is not None:
        out.append(bullet("Exit head", profile.forebay_m - profile.settings["exit_crest_m"],
                          t.exit_head.min, t.exit_head.max, "length", units,
                          target=t.exit_head.target))
    if len(profile.pools) > 1:
        worst = max(profile.pools[1:], key=lambda p: p.head_drop_m)
        out.append(bullet("Largest pool drop", worst.head_drop_m, t.pool_head_drop.min,
                          t.pool_head_drop.max, "length", units,
                          target=t.pool_head_drop.target, note=f"into {worst.id}"))
    out.append(bullet("Entrance head", profile.entrance_head_m, t.entrance_head.min,
                      t.entrance_head.max, "length", units, target=t.entrance_head.target))
    worst_pd = max(profile.pools, key=lambda p: p.power_density_w_m3)
    out.append(bullet("Largest power density", worst_pd.power_density_w_m3, None,
                      t.max_power_density, "power_density", units, note=f"in {worst_pd.id}"))
    if t.ladder_flow is not None:
        out.append(bullet("Ladder flow", profile.ladder_flow_m3s, t.ladder_flow.min,
                          t.ladder_flow.max, "flow", units))
    ladder_q = _fmt(profile.ladder_flow_m3s, "flow", units, 1)
    out.append(bullet("Attraction flow", profile.entrance_flow_m3s, t.min_attraction_flow, None,
                      "flow", units, note=f"ladder {ladder_q} + auxiliary"))
    return out
