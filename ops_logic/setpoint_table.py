"""Setpoint table: recommended settings over a grid of forebay and tailwater levels.

:func:`setpoint_table` runs :func:`~ops_logic.recommend.recommend` with no current settings
(so no rate limits: each cell is the setting to aim for from any starting point) at every
(forebay, tailwater) pair and returns one tidy DataFrame, one row per cell, forebay-major.
The forebay of a cell is the level the ladder's exit sees: with a clean trash rack it is the
forebay gauge; with a head loss across the rack, read the table at the gauge less that loss
(:func:`ops_logic.ladder.ladder_forebay`, as the live recommender does).

=============================  ==================================================================
column                         meaning
=============================  ==================================================================
``forebay_m``, ``tailwater_m``  the levels of the cell [m]
``<setting name>``             one column per setting, named as ``fishway solve --set`` accepts
                               (``exit_crest_m`` [m], ``entrance_E1_crest_m`` [m],
                               ``aux_G1_opening_pct`` [%], ``aux_PS1_pumps`` [count])
``feasible``                   whether the recommended settings meet every criterion
``binding``, ``reason``        the binding criterion or limit, and the recommender's explanation
``ladder_flow_m3s``,           predicted flows [m³/s] and entrance head [m] under the settings
``entrance_flow_m3s``,
``entrance_head_m``
``max_head_drop_m``            largest pool-to-pool drop [m]
``max_power_density_w_m3``     largest pool power density [W/m³]
=============================  ==================================================================

Writers: :func:`to_csv` writes those SI columns and, for a site in US units, display-unit copies
of the level and flow columns (``forebay_ft``, ``exit_crest_ft``, ``ladder_flow_cfs``...) after
them; a few ``#`` comment lines on top carry the fishway, the units and the advisory caution
(read it back with ``pandas.read_csv(path, comment="#")``). :func:`render_html` /
:func:`to_html` write a self-contained printable page (no JavaScript): one heat-map table per
setting, forebay down the rows and tailwater across the columns, each cell shaded on a single
blue scale over the setting's actuator range; cells where no setting meets the criteria are
hatched (see the legend); each table prints on its own landscape page with the caution.
"""

from __future__ import annotations

import html
from collections.abc import Callable, Sequence
from datetime import date, datetime
from pathlib import Path

import numpy as np
import pandas as pd

from ops_logic.advisory import ADVISORY_CAUTION
from ops_logic.ladder import Ladder, SettingSpec
from ops_logic.recommend import recommend
from ops_logic.units import UnitSystem, display_unit, from_si

__all__ = ["level_grid", "render_html", "setpoint_table", "to_csv", "to_html"]

MAX_CELLS = 20_000
"""Largest grid accepted (a guard against a mistyped step)."""


def level_grid(start_m: float, stop_m: float, step_m: float) -> list[float]:
    """Levels from ``start_m`` to ``stop_m`` inclusive in steps of ``step_m`` [m].

    The last level is ``stop_m`` when the span is a whole number of steps (to 1e-9 of a step);
    otherwise the grid stops below ``stop_m``. ``start_m == stop_m`` gives one level.

    >>> level_grid(76.0, 76.5, 0.25)
    [76.0, 76.25, 76.5]
    """
    if not step_m > 0.0:
        raise ValueError(f"the step must be positive, got {step_m:g} m")
    if stop_m < start_m:
        raise ValueError(f"the range must run upwards: {start_m:g} m to {stop_m:g} m")
    n = int(np.floor((stop_m - start_m) / step_m + 1e-9)) + 1
    if n > MAX_CELLS:
        raise ValueError(f"{n} levels from {start_m:g} m to {stop_m:g} m in steps of "
                         f"{step_m:g} m: too many (at most {MAX_CELLS})")
    return [round(start_m + i * step_m, 9) for i in range(n)]


def setpoint_table(ladder: Ladder, forebay_levels_m: Sequence[float],
                   tailwater_levels_m: Sequence[float], *, temperature_c: float = 10.0,
                   progress: Callable[[int, int], None] | None = None) -> pd.DataFrame:
    """Recommended settings at every (forebay, tailwater) pair [m]; columns in the module
    docstring. ``progress(done, total)`` is called after each cell.

    A cell whose levels are impossible (tailwater at or above the forebay) is kept, infeasible,
    with the reason and empty settings.
    """
    total = len(forebay_levels_m) * len(tailwater_levels_m)
    if total == 0:
        raise ValueError("the grid is empty: give at least one forebay and one tailwater level")
    if total > MAX_CELLS:
        raise ValueError(f"{total} cells: too many (at most {MAX_CELLS})")
    names = list(ladder.settings)
    rows = []
    done = 0
    for fb in forebay_levels_m:
        for tw in tailwater_levels_m:
            row: dict[str, object] = {"forebay_m": float(fb), "tailwater_m": float(tw)}
            try:
                rec = recommend(ladder, fb, tw, temperature_c=temperature_c)
            except ValueError as exc:  # impossible levels (documented by solve_profile)
                row.update({n: np.nan for n in names})
                row.update(feasible=False, binding="levels", reason=str(exc),
                           ladder_flow_m3s=np.nan, entrance_flow_m3s=np.nan,
                           entrance_head_m=np.nan, max_head_drop_m=np.nan,
                           max_power_density_w_m3=np.nan)
            else:
                p = rec.profile
                row.update({n: float(rec.settings[n]) for n in names})
                row.update(feasible=bool(rec.feasible), binding=rec.binding, reason=rec.reason,
                           ladder_flow_m3s=p.ladder_flow_m3s,
                           entrance_flow_m3s=p.entrance_flow_m3s,
                           entrance_head_m=p.entrance_head_m,
                           max_head_drop_m=max(q.head_drop_m for q in p.pools[1:]) if len(
                               p.pools) > 1 else 0.0,
                           max_power_density_w_m3=max(q.power_density_w_m3 for q in p.pools))
            rows.append(row)
            done += 1
            if progress is not None:
                progress(done, total)
    return pd.DataFrame(rows)


# -- CSV -------------------------------------------------------------------------------------
def _display_columns(table: pd.DataFrame, units: UnitSystem) -> pd.DataFrame:
    if units != "us":
        return table
    extra = {}
    for col in table.columns:
        if col.endswith("_m3s"):
            extra[col[:-4] + "_cfs"] = [from_si(v, "flow", "us") for v in table[col]]
        elif col.endswith("_m"):
            extra[col[:-2] + "_ft"] = [from_si(v, "length", "us") for v in table[col]]
    return pd.concat([table, pd.DataFrame(extra, index=table.index)], axis=1)


def to_csv(table: pd.DataFrame, path: str | Path, *, units: UnitSystem = "si",
           fishway: str = "", site_name: str = "") -> None:
    """Write the table as CSV: SI columns, then display-unit copies for a US site."""
    out = _display_columns(table, units)
    head = [f"# setpoint table: {site_name} / {fishway}".rstrip(" /"),
            "# SI columns carry their unit in the name (_m, _m3s, _pct, _pumps, _w_m3); "
            + ("_ft and _cfs columns repeat them in US units" if units == "us" else
               "the site works in SI units"),
            f"# {ADVISORY_CAUTION}"]
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write("\n".join(head) + "\n")
        out.to_csv(fh, index=False, float_format="%.6g", lineterminator="\n")


# -- HTML ------------------------------------------------------------------------------------
_CSS = """
@page { size: landscape; margin: 10mm; }
body { font-family: "DejaVu Sans", Arial, sans-serif; color: #222; margin: 16px; }
* { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
h1 { font-size: 18px; margin: 0 0 4px; } h2 { font-size: 15px; margin: 10px 0 4px; }
.meta { font-size: 12px; color: #444; margin-bottom: 6px; }
.caution { border: 2px solid #555; background: #f2f2f2; padding: 6px 8px; font-size: 12px;
           font-weight: bold; margin: 6px 0; }
section { page-break-after: always; break-after: page; }
section:last-of-type { page-break-after: auto; break-after: auto; }
table.grid { border-collapse: collapse; font-size: 10px; }
table.grid th, table.grid td { border: 1px solid #999; padding: 2px 4px; text-align: right; }
table.grid th { background: #e6e6e6; }
td.bad { background-image: repeating-linear-gradient(45deg, rgba(0,0,0,0.55) 0 2px,
         transparent 2px 6px) !important; outline: 2px solid #000; outline-offset: -2px; }
.legend { font-size: 11px; margin: 6px 0; display: flex; gap: 18px; align-items: center; }
.bar { display: inline-block; width: 160px; height: 12px; border: 1px solid #999;
       vertical-align: middle; background: linear-gradient(to right, #eef4fb, #08306b); }
.swatch { display: inline-block; width: 24px; height: 12px; border: 1px solid #000;
          vertical-align: middle; background: #9ecae1 repeating-linear-gradient(45deg,
          rgba(0,0,0,0.55) 0 2px, transparent 2px 6px); }
"""

_LIGHT, _DARK = (0xEE, 0xF4, 0xFB), (0x08, 0x30, 0x6B)


def _shade(fraction: float) -> tuple[str, str]:
    """Background and text colour for a fraction 0–1 of the setting's range (one hue)."""
    t = min(max(fraction, 0.0), 1.0)
    rgb = tuple(round(a + t * (b - a)) for a, b in zip(_LIGHT, _DARK, strict=True))
    return "#{:02x}{:02x}{:02x}".format(*rgb), ("#fff" if t > 0.55 else "#000")


def _setting_text(spec: SettingSpec, value: float, units: UnitSystem) -> str:
    if not np.isfinite(value):
        return "—"
    if spec.kind == "level":
        return f"{from_si(value, 'length', units):.2f}"
    if spec.kind == "opening":
        return f"{value:.0f}"
    return f"{round(value):d}"


def _setting_unit(spec: SettingSpec, units: UnitSystem) -> str:
    return {"level": display_unit("length", units), "opening": "% open"}.get(spec.kind, "pumps")


def render_html(table: pd.DataFrame, ladder: Ladder, *, site_name: str,
                site_file_date: date | datetime | str, generated: date | datetime | str,
                units: UnitSystem = "si", title: str | None = None) -> str:
    """The printable HTML page of a setpoint table (a string; see the module docstring)."""
    forebays = sorted(set(table["forebay_m"]), reverse=True)  # high forebay at the top
    tailwaters = sorted(set(table["tailwater_m"]))
    cells = {(r.forebay_m, r.tailwater_m): r for r in table.itertuples(index=False)}
    lu = display_unit("length", units)
    esc = html.escape
    title = title or f"Setpoint table — {ladder.fishway.name}"
    head = (f"<h1>{esc(title)}</h1><div class='meta'>Site: {esc(site_name)} · fishway "
            f"{esc(ladder.fishway.name)} ({esc(ladder.id)}) · site file dated "
            f"{esc(str(site_file_date))} · generated {esc(str(generated))} · levels in {lu} · "
            f"{len(forebays)} forebay × {len(tailwaters)} tailwater levels · "
            f"{int((~table['feasible'].astype(bool)).sum())} of {len(table)} cells infeasible"
            f"</div><div class='caution'>{esc(ADVISORY_CAUTION)}</div>")
    sections = []
    for name, spec in ladder.settings.items():
        unit = _setting_unit(spec, units)
        lo, hi = spec.low, spec.high
        span = hi - lo if hi > lo else 1.0
        rows = [f"<tr><th>forebay \\ tailwater ({esc(lu)})</th>"
                + "".join(f"<th>{from_si(t, 'length', units):.2f}</th>" for t in tailwaters)
                + "</tr>"]
        for fb in forebays:
            tds = []
            for tw in tailwaters:
                r = cells.get((fb, tw))
                value = getattr(r, name) if r is not None else np.nan
                if r is None or not np.isfinite(value):
                    tds.append("<td class='bad'>—</td>")
                    continue
                bg, fg = _shade((value - lo) / span)
                cls = "" if r.feasible else " class='bad'"
                tip = esc(f"{r.binding}: {r.reason}", quote=True)
                tds.append(f"<td{cls} style='background-color:{bg};color:{fg}' title='{tip}'>"
                           f"{_setting_text(spec, value, units)}</td>")
            rows.append(f"<tr><th>{from_si(fb, 'length', units):.2f}</th>{''.join(tds)}</tr>")
        legend = (f"<div class='legend'><span>{_setting_text(spec, lo, units)} {esc(unit)} "
                  f"<span class='bar'></span> {_setting_text(spec, hi, units)} {esc(unit)} "
                  "(actuator range)</span><span><span class='swatch'></span> hatched: no "
                  "setting meets every criterion at these levels (the value shown is the "
                  "recommender's best compromise; see the tooltip)</span><span>forebay rows: "
                  "the level behind the trash rack (the gauge less the rack's head loss)"
                  "</span></div>")
        sections.append(f"<section>{head}<h2>{esc(spec.label)} — <code>{esc(name)}</code> "
                        f"[{esc(unit)}]</h2>{legend}<table class='grid'>{''.join(rows)}"
                        "</table></section>")
    return ("<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
            f"<title>{esc(title)}</title><style>{_CSS}</style></head><body>"
            + "".join(sections) + "</body></html>\n")


def to_html(table: pd.DataFrame, path: str | Path, ladder: Ladder, *, site_name: str,
            site_file_date: date | datetime | str, generated: date | datetime | str,
            units: UnitSystem = "si", title: str | None = None) -> None:
    """Write :func:`render_html` to ``path`` (UTF-8)."""
    Path(path).write_text(render_html(table, ladder, site_name=site_name,
                                      site_file_date=site_file_date, generated=generated,
                                      units=units, title=title), encoding="utf-8")
