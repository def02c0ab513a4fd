"""``fishway`` sub-commands of the hydraulic core: check-config, solve, recommend, table, calibrate.

:func:`register` adds them to the top command line (:mod:`dashboard.cli`). Every command takes
the site file as an optional first positional ``SITE``; without it the shipped demo site is used.

Input levels (``--forebay``, ``--tailwater``, ``A:B:STEP`` grids) are in the site's display
units (ft for a ``units = "us"`` site, m for ``"si"``) unless the value carries a unit
(``"77.5 m"``, ``254ft``). A grid ``A:B:STEP`` runs from A to B inclusive; one unit written at
its end (``"76.8:77.8:0.1 m"``) applies to all three numbers. ``--set NAME=VALUE`` takes a
setting name as listed by ``fishway check-config``; a bare VALUE is in the unit the name ends
with (``_m`` metres, ``_pct`` per cent open, ``_pumps`` pumps running), a VALUE with a unit is
converted (``exit_crest_m="254.5 ft"``), and a level setting written without its ``_m``
(``exit_crest=254.5``) takes the value in display units.

Human output is a text report in display units (:mod:`ops_logic.report_format`); ``--json``
prints the SI result with unit-suffixed keys (``Profile.to_dict()`` /
``Recommendation.to_dict()``), so a recommendation's ``settings`` can be fed straight back as
``--set`` options. Bad input raises :class:`InputError`: the top command line prints one line
per problem on stderr and exits with status 2.
"""

from __future__ import annotations

import argparse
import re
import sys
from datetime import datetime
from pathlib import Path
from typing import Any

from ops_logic.advisory import ADVISORY_CAUTION
from ops_logic.calibrate import ObservationError, calibrate, read_observations
from ops_logic.ladder import Ladder, SettingSpec
from ops_logic.recommend import recommend
from ops_logic.report_format import (
    format_calibration,
    format_profile,
    format_recommendation,
    format_site,
    format_value,
    json_text,
    setting_range_text,
)
from ops_logic.setpoint_table import level_grid, setpoint_table, to_csv, to_html
from ops_logic.site import Site, demo_site_path, load_site
from ops_logic.units import UnitSystem, display_unit, to_si

__all__ = [
    "InputError",
    "parse_level",
    "parse_level_range",
    "parse_settings",
    "register",
    "site_summary",
]


class InputError(ValueError):
    """Bad command-line input; ``problems`` holds one message per problem."""

    def __init__(self, problems: list[str] | str):
        self.problems = [problems] if isinstance(problems, str) else list(problems)
        super().__init__("\n".join(self.problems))


# -- parsing ---------------------------------------------------------------------------------
def parse_level(text: str, units: UnitSystem, option: str = "level") -> float:
    """A level [m] from ``text``: a bare number in ``units``' length unit, or with a unit.

    >>> round(parse_level("254", "us"), 4), parse_level("77.5 m", "us")
    (77.4192, 77.5)
    """
    try:
        return to_si(text, "length", units)
    except ValueError as exc:
        raise InputError(f"{option}: {exc}") from None


_TRAILING_UNIT = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([A-Za-z].*?)\s*$")


def parse_level_range(text: str, units: UnitSystem, option: str = "range") -> list[float]:
    """Levels [m] of a grid ``A:B:STEP`` (inclusive) or a single level ``A``.

    >>> [round(z, 4) for z in parse_level_range("254:255:0.5", "us")]
    [77.4192, 77.5716, 77.724]
    >>> parse_level_range("76.0:76.2:0.1 m", "us")
    [76.0, 76.1, 76.2]
    """
    parts = text.split(":")
    if len(parts) not in (1, 3):
        raise InputError(f"{option}: expected A:B:STEP (or one level), got {text!r}")
    m = _TRAILING_UNIT.match(parts[-1])
    if len(parts) == 3 and m and all(_is_number(p) for p in parts[:2]):
        parts = [f"{p.strip()} {m.group(2)}" for p in parts[:2]] + [parts[-1]]
    values = [parse_level(p, units, option) for p in parts]
    if len(values) == 1:
        return values
    try:
        return level_grid(*values)
    except ValueError as exc:
        raise InputError(f"{option}: {exc}") from None


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _range_text(spec: SettingSpec, units: UnitSystem) -> str:
    text = setting_range_text(spec, units).split(",")[0]
    if spec.kind == "level" and units == "us":
        text += f" ({spec.low:.3f}–{spec.high:.3f} m)"
    return text


def _setting_value(spec: SettingSpec, raw: str, units: UnitSystem) -> float:
    if spec.kind == "level":
        return to_si(raw, "length", units)
    text = raw.strip()
    if spec.kind == "opening":
        text = text.removesuffix("%").strip()
    value = float(text)  # ValueError names the text
    if spec.kind == "count" and value != round(value):
        raise ValueError(f"a number of pumps must be whole, got {raw!r}")
    return value


def parse_settings(ladder: Ladder, items: list[str] | None, units: UnitSystem) -> dict[str, float]:
    """``NAME=VALUE`` items to SI settings (see the module docstring); every problem is
    collected into one :class:`InputError`."""
    out: dict[str, float] = {}
    problems: list[str] = []
    for item in items or []:
        name, sep, raw = item.partition("=")
        name, raw = name.strip(), raw.strip()
        if not sep or not name or not raw:
            problems.append(f"--set {item}: expected NAME=VALUE")
            continue
        if name in ladder.settings:
            spec, system = ladder.settings[name], "si"
        elif f"{name}_m" in ladder.settings:
            spec, system = ladder.settings[f"{name}_m"], units
        else:
            problems.append(f"--set {item}: unknown setting {name!r} for fishway {ladder.id!r} "
                            f"(settings: {', '.join(ladder.settings)})")
            continue
        try:
            value = _setting_value(spec, raw, system)  # type: ignore[arg-type]
        except ValueError as exc:
            problems.append(f"--set {item}: {exc}")
            continue
        if not spec.low - 1e-9 <= value <= spec.high + 1e-9:
            shown = format_value(value, "length", units) if spec.kind == "level" else (
                f"{value:g} {spec.unit}")
            problems.append(f"--set {item}: {spec.name} ({spec.label}) = {shown} is outside "
                            f"its range {_range_text(spec, units)}")
            continue
        if spec.name in out:
            problems.append(f"--set {item}: {spec.name} is given twice")
            continue
        out[spec.name] = min(max(value, spec.low), spec.high)
    if problems:
        raise InputError(problems)
    return out


# -- shared pieces ---------------------------------------------------------------------------
def _load(args: argparse.Namespace) -> tuple[Site, str, Path]:
    path = Path(args.site) if args.site else demo_site_path()
    return load_site(path), str(path), path


def _ladder(site: Site, fishway_id: str | None) -> Ladder:
    ids = [f.id for f in site.fishways]
    if fishway_id is None:
        if len(ids) == 1:
            return Ladder(site.fishways[0])
        raise InputError(f"--fishway: required, this site has several fishways ({', '.join(ids)})")
    if fishway_id not in ids:
        raise InputError(f"--fishway: no fishway {fishway_id!r} at this site (have: "
                         f"{', '.join(ids)})")
    return Ladder.from_site(site, fishway_id)


def _levels(args: argparse.Namespace, ladder: Ladder, units: UnitSystem) -> tuple[float, float]:
    problems = []
    fb = tw = None
    for opt in ("forebay", "tailwater"):
        try:
            v = parse_level(getattr(args, opt), units, f"--{opt}")
        except InputError as exc:
            problems += exc.problems
            continue
        fb, tw = (v, tw) if opt == "forebay" else (fb, v)
    if fb is not None and tw is not None and tw >= fb:
        problems.append(f"--tailwater: {format_value(tw, 'length', units)} is at or above the "
                        f"forebay {format_value(fb, 'length', units)}")
    if problems:
        raise InputError(problems)
    assert fb is not None and tw is not None
    f = ladder.fishway
    for opt, z, (lo, hi) in (("forebay", fb, f.forebay_range),
                             ("tailwater", tw, f.tailwater_range)):
        if not lo <= z <= hi:
            print(f"note: --{opt} {format_value(z, 'length', units)} is outside the fishway's "
                  f"{opt} range {format_value(lo, 'length', units, with_si=False)}–"
                  f"{format_value(hi, 'length', units, with_si=False)}: flagged in the criteria",
                  file=sys.stderr)
    return fb, tw


def _temperature(args: argparse.Namespace) -> float:
    t = float(args.temperature)
    if not 0.0 <= t <= 40.0:
        raise InputError(f"--temperature: {t:g} °C is outside 0–40 °C")
    return t


def site_summary(site: Site, source: str) -> dict[str, Any]:
    """The ``check-config --json`` document: the site and each fishway with its levels ranges
    [m], pools, controls and adjustable settings with their ranges (SI)."""
    fishways = []
    for f in site.fishways:
        ladder = Ladder(f)
        types: dict[str, int] = {}
        for b in f.baffles:
            types[b.type] = types.get(b.type, 0) + 1
        fishways.append({
            "id": f.id, "name": f.name,
            "forebay_range_m": list(f.forebay_range), "tailwater_range_m": list(f.tailwater_range),
            "n_pools": ladder.n_pools, "pools": list(ladder.pool_ids),
            "exit_type": f.exit.type, "baffle_types": types,
            "entrance_gates": [g.id for g in f.entrance.gates],
            "aux": [{"id": a.id, "type": a.type, "into_pool": a.into_pool} for a in f.aux],
            "settings": [{"name": s.name, "label": s.label, "unit": s.unit, "min": s.low,
                          "max": s.high, "rate_limit": s.rate_limit}
                         for s in ladder.settings.values()],
        })
    return {"source": source, "valid": True,
            "site": {"name": site.site.name, "units": site.site.units,
                     "time_zone": site.site.time_zone, "elevation_m": site.site.elevation},
            "fishways": fishways}


# -- commands --------------------------------------------------------------------------------
def _check_config(args: argparse.Namespace) -> int:
    site, source, _ = _load(args)
    print(json_text(site_summary(site, source), indent=2) if args.json
          else format_site(site, source))
    return 0


def _solve(args: argparse.Namespace) -> int:
    site, _, _ = _load(args)
    units = site.site.units
    ladder = _ladder(site, args.fishway)
    fb, tw = _levels(args, ladder, units)
    settings = parse_settings(ladder, args.set, units)
    p = ladder.solve(fb, tw, settings, temperature_c=_temperature(args))
    print(json_text(p.to_dict(), indent=2) if args.json else format_profile(p, ladder, units))
    return 0


def _recommend(args: argparse.Namespace) -> int:
    site, _, _ = _load(args)
    units = site.site.units
    ladder = _ladder(site, args.fishway)
    fb, tw = _levels(args, ladder, units)
    current = parse_settings(ladder, args.set, units) if args.set else None
    if current is not None and (missing := [n for n in ladder.settings if n not in current]):
        print(f"note: current value not given for {', '.join(missing)}: taken at the default "
              "for the rate limits", file=sys.stderr)
    rec = recommend(ladder, fb, tw, current, temperature_c=_temperature(args))
    print(json_text(rec.to_dict(), indent=2) if args.json
          else format_recommendation(rec, ladder, units))
    return 0


def _progress_printer(total: int) -> Any:
    tty = sys.stderr.isatty()
    step = max(total // 20, 1)

    def show(done: int, total: int) -> None:
        if done % step and done != total:
            return
        bar = "#" * (20 * done // total)
        end = "\n" if done == total or not tty else ""
        start = "\r" if tty else ""
        print(f"{start}table: [{bar:<20}] {done}/{total} cells", end=end, file=sys.stderr,
              flush=True)

    return show


def _table(args: argparse.Namespace) -> int:
    site, _, path = _load(args)
    units = site.site.units
    ladder = _ladder(site, args.fishway)
    problems, grids = [], {}
    for opt in ("forebay", "tailwater"):
        try:
            grids[opt] = parse_level_range(getattr(args, opt), units, f"--{opt}")
        except InputError as exc:
            problems += exc.problems
    for out in args.output:
        if Path(out).suffix.lower() not in (".csv", ".html", ".htm"):
            problems.append(f"-o {out}: the file name must end in .csv or .html")
    if problems:
        raise InputError(problems)
    total = len(grids["forebay"]) * len(grids["tailwater"])
    progress = None if args.quiet or total < 25 else _progress_printer(total)
    try:
        table = setpoint_table(ladder, grids["forebay"], grids["tailwater"],
                               temperature_c=_temperature(args), progress=progress)
    except ValueError as exc:
        raise InputError(f"--forebay/--tailwater: {exc}") from None
    file_date = datetime.fromtimestamp(path.stat().st_mtime).date().isoformat()
    generated = datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z")
    for out in args.output:
        if Path(out).suffix.lower() == ".csv":
            to_csv(table, out, units=units, fishway=ladder.id, site_name=site.site.name)
        else:
            to_html(table, out, ladder, site_name=site.site.name, site_file_date=file_date,
                    generated=generated, units=units)
        print(f"wrote {out}")
    bad = int((~table["feasible"].astype(bool)).sum())
    print(f"{len(table)} cells ({len(grids['forebay'])} forebay × {len(grids['tailwater'])} "
          f"tailwater levels, {display_unit('length', units)}), {bad} infeasible")
    print(f"CAUTION: {ADVISORY_CAUTION}")
    return 0


def _calibrate(args: argparse.Namespace) -> int:
    if len(args.paths) > 2:
        raise InputError(f"expected [SITE] OBSERVATIONS.csv, got {len(args.paths)} paths: "
                         + " ".join(args.paths))
    args.site = args.paths[0] if len(args.paths) == 2 else None
    site, _, _ = _load(args)
    units = site.site.units
    ladder = _ladder(site, args.fishway)
    try:
        obs = read_observations(args.paths[-1], ladder, units)
    except ObservationError as exc:
        raise InputError(exc.lines()) from None
    kinds = [k.strip() for k in args.kinds.split(",")] if args.kinds else None
    try:
        result = calibrate(ladder, obs, kinds=kinds)
    except ValueError as exc:
        raise InputError(f"--kinds: {exc}") from None
    print(json_text(result.to_dict(), indent=2) if args.json
          else format_calibration(result, ladder, units))
    return 0


# -- registration ----------------------------------------------------------------------------
_INPUT_HELP = """\
Levels are in the site's display units unless a unit is given ("77.5 m", 254ft).
--set NAME=VALUE: a bare VALUE is in the unit the name ends with (_m metres,
_pct per cent open, _pumps pumps running); a VALUE with a unit is converted
(exit_crest_m="254.5 ft"); a level setting without its _m (exit_crest=254.5) is
read in display units. --json prints SI with unit-suffixed keys."""
_LEVEL_HELP = "in the site's display units unless a unit is given ('77.5 m', 254ft)"


def _common_solve(p: argparse.ArgumentParser, what: str) -> None:
    p.add_argument("site", nargs="?", metavar="SITE",
                   help="site file (TOML); the shipped demo site when omitted")
    p.add_argument("--fishway", metavar="ID", help="fishway id (needed when the site has "
                   "several; see check-config)")
    p.add_argument("--forebay", required=True, metavar="X", help=f"forebay level, {_LEVEL_HELP}")
    p.add_argument("--tailwater", required=True, metavar="Y",
                   help=f"tailwater level, {_LEVEL_HELP}")
    p.add_argument("--set", action="append", metavar="NAME=VALUE",
                   help=f"{what}; repeat for several (names: see check-config)")
    p.add_argument("--temperature", default=10.0, type=float, metavar="C",
                   help="water temperature [°C] (default 10)")
    p.add_argument("--json", action="store_true", help="print SI JSON instead of the report")


def register(subparsers: Any, common: argparse.ArgumentParser) -> None:
    """Add this package's sub-commands; each sets ``handler(args) -> exit status``."""
    fmt = argparse.RawDescriptionHelpFormatter
    p = subparsers.add_parser("check-config", parents=[common], formatter_class=fmt,
                              help="validate a site file and summarise it",
                              description="Validate SITE (default: the demo site) and print a "
                              "summary of each fishway: pools, baffles and adjustable settings "
                              "with their ranges. Errors: one line per problem, exit status 2.")
    p.add_argument("site", nargs="?", metavar="SITE", help="site file (TOML)")
    p.add_argument("--json", action="store_true", help="print the summary as SI JSON")
    p.set_defaults(handler=_check_config)

    p = subparsers.add_parser("solve", parents=[common], formatter_class=fmt,
                              help="steady water-surface profile at given levels and settings",
                              description="Solve the steady profile of one fishway.\n\n"
                              + _INPUT_HELP)
    _common_solve(p, "a setting to solve with (others at their defaults)")
    p.set_defaults(handler=_solve)

    p = subparsers.add_parser("recommend", parents=[common], formatter_class=fmt,
                              help="advisory settings that best hold the targets",
                              description="Recommend settings at the given levels. With --set "
                              "(the settings now in force) the rate limits apply around them; "
                              "without, any setting in range may be chosen. Advisory only.\n\n"
                              + _INPUT_HELP)
    _common_solve(p, "a setting now in force")
    p.set_defaults(handler=_recommend)

    p = subparsers.add_parser("table", parents=[common], formatter_class=fmt,
                              help="setpoint table over a grid of levels (CSV and/or HTML)",
                              description="Recommended settings over a grid of forebay and "
                              "tailwater levels, written to each -o FILE: .csv (SI columns, and "
                              "ft/cfs copies for a US site) or .html (a printable heat-map "
                              "page per setting). Repeat -o to write both.")
    p.add_argument("site", nargs="?", metavar="SITE", help="site file (TOML)")
    p.add_argument("--fishway", metavar="ID", help="fishway id")
    p.add_argument("--forebay", required=True, metavar="A:B:STEP",
                   help=f"forebay levels, {_LEVEL_HELP}")
    p.add_argument("--tailwater", required=True, metavar="A:B:STEP",
                   help=f"tailwater levels, {_LEVEL_HELP}")
    p.add_argument("-o", "--output", action="append", required=True, metavar="FILE",
                   help="output file, .csv or .html; repeat for both")
    p.add_argument("--temperature", default=10.0, type=float, metavar="C",
                   help="water temperature [°C] (default 10)")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar on stderr")
    p.set_defaults(handler=_table)

    p = subparsers.add_parser("calibrate", parents=[common], formatter_class=fmt,
                              usage="fishway calibrate [-h] [SITE] --fishway ID [--kinds K,...] "
                              "[--json] OBSERVATIONS.csv",
                              help="fit discharge-coefficient multipliers to measured levels",
                              description="Fit one discharge-coefficient multiplier per "
                              "opening kind (weir, orifice, slot, entrance_gate, exit) to "
                              "measured pool levels by bounded least squares. The CSV format "
                              "is described in the ops_logic.calibrate module docstring: "
                              "columns forebay, tailwater, every setting name, and "
                              "level_<pool id> (suffix _ft or _m for the unit).")
    p.add_argument("paths", nargs="+", metavar="[SITE] OBSERVATIONS.csv",
                   help="site file (optional) and the observations CSV")
    p.add_argument("--fishway", metavar="ID", help="fishway id")
    p.add_argument("--kinds", metavar="K,...", help="fit only these kinds (default: all "
                   "present that flow)")
    p.add_argument("--json", action="store_true", help="print SI JSON")
    p.set_defaults(handler=_calibrate, extra_positionals="paths")
