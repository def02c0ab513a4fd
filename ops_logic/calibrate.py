"""Calibration: fit discharge-coefficient multipliers of a fishway to measured pool levels.

One multiplier per kind of opening present in the fishway — ``weir`` (baffle weirs and weir
notches), ``orifice`` (baffle orifices), ``slot`` (vertical slots), ``entrance_gate`` and
``exit`` (every coefficient of the exit control) — is fitted by bounded non-linear least
squares (``scipy.optimize.least_squares``, trust-region reflective, default bounds 0.5–1.5)::

    minimise  Σ_i Σ_p [ z_p(m; forebay_i, tailwater_i, settings_i) − z_obs,ip ]²

over the measured pool levels z_obs of every observation i, where z_p is the level of pool p
computed by the profile solver with every coefficient of kind k multiplied by m_k.

Each multiplier scales the field of the site file that belongs to that opening, so the fitted
model keeps every method's form and is, at m = 1, exactly the model of the site file:

* weirs (baffle weirs and weir notches: kind ``weir``; entrance gates: ``entrance_gate``) —
  their ``cd_factor`` (``weir_cd_factor`` on a weir-with-orifice baffle), which multiplies the
  Kindsvater–Carter Ce (``cd`` unset: Ce = a + β·h/P with its head and width corrections,
  times the Villemonte submergence factor) or the given ``cd``; an existing factor is
  multiplied, the weir's ``cd`` is never touched, so a Kindsvater–Carter weir stays
  Kindsvater–Carter;
* orifices and vertical slots — their ``cd``;
* the exit — whatever it has: an adjustable weir's ``cd_factor``; a fixed exit's weir
  ``cd_factor`` / ``weir_cd_factor``, orifice ``cd`` or slot ``cd`` (all by the one ``exit``
  multiplier).

The result lists, per fitted kind, the site-file fields to write, as paths inside the
fishway's entry with the fitted value (``baffles[*].weir_cd_factor = 0.93``,
``baffles[*].orifices[*].cd = 0.568``, ``entrance.gates[E1].cd_factor = 1.04``): ``[*]`` means
every element of the list, otherwise the elements are named by id as loaded (``B01 … B38`` for
unnamed baffles, including those of a ``repeat`` entry). Writing them reproduces the fitted
model; a value the site file would reject (cd_factor outside 0.3–2.0, cd outside 0–1.5) is
warned about. Kinds that are not fitted are left untouched.

Observations CSV (one row per observation; ``#`` lines and blank lines are skipped):

* ``forebay``, ``tailwater`` — levels; ``temperature_c`` — optional water temperature [°C];
* one column per setting of the fishway, named as ``fishway solve --set`` accepts:
  ``exit_crest_m`` [m], ``entrance_E1_crest_m`` [m], ``aux_G1_opening_pct`` [%],
  ``aux_PS1_pumps`` [count]; a level setting may also be written ``exit_crest`` (display units)
  or ``exit_crest_ft`` [ft]; every setting must be given;
* one column per measured pool, ``level_<pool id>`` (``level_P05``); an empty cell means "not
  measured on that row";
* the suffix ``_m`` or ``_ft`` on ``forebay``, ``tailwater`` and ``level_…`` names the unit;
  without it the site's display units apply; a cell may also carry its unit (``"254.2 ft"``);
* columns ``time``, ``timestamp``, ``date``, ``note``, ``comment`` are ignored; any other
  column is an error (a typo would otherwise drop data silently).

A bad row raises :class:`ObservationError` naming the line, the column and the reason.

Reference: Branch, Coleman & Li (1999), "A subspace, interior and conjugate gradient method for
large-scale bound-constrained minimization problems", SIAM J. Sci. Comput. 21(1) (the
trust-region reflective method of ``least_squares``); Kindsvater & Carter (1957), J. Hydraulics
Div. ASCE 83(6); Villemonte (1947), "Submerged weir discharge studies", Eng. News-Record 139.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np
from pydantic import TypeAdapter, ValidationError
from scipy.optimize import least_squares

from ops_logic.ladder import Ladder, SettingError
from ops_logic.openings import Opening
from ops_logic.site import (
    AdjustableWeirExit,
    CdFactor,
    Coefficient,
    Fishway,
    OrificeBaffle,
    SlotBaffle,
    WeirBaffle,
    WeirOrificeBaffle,
)
from ops_logic.units import UnitSystem, to_si

__all__ = [
    "OPENING_KINDS",
    "CalibrationResult",
    "CoefficientChange",
    "KindFit",
    "Observation",
    "ObservationError",
    "PoolResidual",
    "calibrate",
    "parse_observations",
    "read_observations",
    "scaled_fishway",
]

OPENING_KINDS = ("weir", "orifice", "slot", "entrance_gate", "exit")
_IGNORED = {"time", "timestamp", "date", "note", "notes", "comment"}


# -- observations ----------------------------------------------------------------------------
@dataclass(frozen=True)
class Observation:
    """One field observation: levels [m], the settings in force (SI) and measured pools [m]."""

    line: int
    forebay_m: float
    tailwater_m: float
    settings: dict[str, float]
    levels_m: dict[str, float]
    temperature_c: float = 10.0


class ObservationError(ValueError):
    """Bad observations file; ``errors`` holds ``(line, column, reason)`` triples."""

    def __init__(self, source: str, errors: list[tuple[int | None, str, str]]):
        self.source, self.errors = source, errors
        super().__init__("\n".join(self.lines()))

    def lines(self) -> list[str]:
        return [f"{self.source}: " + (f"line {ln}: " if ln else "") + (f"{col}: " if col else "")
                + reason for ln, col, reason in self.errors]


def _columns(header: list[str], ladder: Ladder, units: UnitSystem
             ) -> tuple[dict[int, tuple[str, str, UnitSystem]], list[tuple[str, str]]]:
    """Column index -> (role, key, unit system); roles: forebay, tailwater, temperature,
    setting, level, ignore. Also the header problems."""
    pools = set(ladder.pool_ids)
    out: dict[int, tuple[str, str, UnitSystem]] = {}
    bad: list[tuple[str, str]] = []
    for i, raw in enumerate(header):
        name = raw.strip()
        base, unit = name, units
        for suffix, system in (("_ft", "us"), ("_m", "si")):
            if name.endswith(suffix):
                base, unit = name[: -len(suffix)], system  # type: ignore[assignment]
        if name.lower() in _IGNORED:
            out[i] = ("ignore", name, units)
        elif base in ("forebay", "tailwater"):
            out[i] = (base, base, unit)
        elif name == "temperature_c":
            out[i] = ("temperature", name, "si")
        elif name.startswith("level_") and name[6:] in pools:
            out[i] = ("level", name[6:], units)
        elif base.startswith("level_") and base[6:] in pools:
            out[i] = ("level", base[6:], unit)
        elif name in ladder.settings:
            out[i] = ("setting", name, "si")
        elif f"{base}_m" in ladder.settings and ladder.settings[f"{base}_m"].kind == "level":
            out[i] = ("setting", f"{base}_m", unit)
        else:
            bad.append((name, "unknown column (expected forebay, tailwater, temperature_c, a "
                        f"setting name ({', '.join(ladder.settings)}) or level_<pool id>)"))
    seen: dict[tuple[str, str], str] = {}
    for i, (role, key, _) in out.items():
        if role != "ignore" and (role, key) in seen:
            bad.append((header[i].strip(), f"gives the same quantity as column "
                        f"{seen[(role, key)]!r}"))
        seen.setdefault((role, key), header[i].strip())
    keys = {(r, k) for r, k, _ in out.values()}
    for need in ("forebay", "tailwater"):
        if (need, need) not in keys:
            bad.append((need, "missing column"))
    for s in ladder.settings:
        if ("setting", s) not in keys:
            bad.append((s, "missing column (every setting in force must be given)"))
    if not any(r == "level" for r, _, _ in out.values()):
        bad.append(("level_<pool id>", "no measured pool level column"))
    return out, bad


def _cell(text: str, kind: str, unit: UnitSystem) -> float:
    value = to_si(text, "length", unit) if kind == "level" else float(text.strip().rstrip("%"))
    if not math.isfinite(value):
        raise ValueError(f"not a finite number: {text!r}")
    return value


def parse_observations(text: str, ladder: Ladder, units: UnitSystem,
                       source: str = "<observations>") -> list[Observation]:
    """Observations from CSV text (format in the module docstring)."""
    rows = csv.reader(io.StringIO(text))
    errors: list[tuple[int | None, str, str]] = []
    header: list[str] | None = None
    cols: dict[int, tuple[str, str, UnitSystem]] = {}
    out: list[Observation] = []
    floors = dict(zip(ladder.pool_ids, ladder.pool_floor_m, strict=True))
    for row in rows:
        line = rows.line_num
        if not row or not "".join(row).strip() or row[0].lstrip().startswith("#"):
            continue
        if header is None:
            header = row
            cols, bad = _columns(row, ladder, units)
            errors += [(line, c, r) for c, r in bad]
            if bad:
                break
            continue
        if len(row) != len(header):
            errors.append((line, "", f"{len(row)} fields, the header has {len(header)}"))
            continue
        vals: dict[str, Any] = {"settings": {}, "levels": {}, "temperature": 10.0}
        row_ok = True
        for i, (role, key, unit) in cols.items():
            cell, name = row[i].strip(), header[i].strip()
            if role == "ignore" or (role == "level" and cell == ""):
                continue
            if cell == "":
                errors.append((line, name, "empty (required)"))
                row_ok = False
                continue
            try:
                kind = ("level" if role in ("forebay", "tailwater", "level") or (
                    role == "setting" and ladder.settings[key].kind == "level") else "number")
                v = _cell(cell, kind, unit)
            except ValueError as exc:
                errors.append((line, name, str(exc)))
                row_ok = False
                continue
            if role == "setting":
                vals["settings"][key] = v
            elif role == "level":
                if v <= floors[key]:
                    errors.append((line, name, f"{v:.3f} m is at or below the floor of pool "
                                   f"{key} ({floors[key]:.3f} m)"))
                    row_ok = False
                vals["levels"][key] = v
            else:
                vals[role] = v
        if not row_ok:
            continue
        try:
            settings = ladder.check_settings(vals["settings"])
        except SettingError as exc:
            errors.append((line, "", str(exc)))
            continue
        if vals["tailwater"] >= vals["forebay"]:
            errors.append((line, "tailwater", "at or above the forebay"))
            continue
        if not vals["levels"]:
            errors.append((line, "", "no pool level measured on this row"))
            continue
        out.append(Observation(line, vals["forebay"], vals["tailwater"], settings,
                               vals["levels"], vals["temperature"]))
    if header is None:
        errors.append((None, "", "no header row: the file is empty"))
    elif not out and not errors:
        errors.append((None, "", "no observation rows after the header"))
    if errors:
        raise ObservationError(source, errors)
    return out


def read_observations(path: str | Path, ladder: Ladder, units: UnitSystem) -> list[Observation]:
    """Read an observations CSV file (format in the module docstring)."""
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except OSError as exc:
        raise ObservationError(str(path), [(None, "", f"cannot read the file "
                                            f"({exc.strerror})")]) from None
    return parse_observations(text, ladder, units, str(path))


# -- the model with scaled coefficients ------------------------------------------------------
class _Coef(NamedTuple):
    """One coefficient of a control: its kind, site-file field (``orifice`` = index in
    ``orifices``, the field then being ``cd``) and value now."""

    kind: str
    field: str
    orifice: int | None
    value: float

    @property
    def subpath(self) -> str:
        return f"orifices[{self.orifice}].cd" if self.orifice is not None else self.field


def _control_coefs(b: Any, kinds: tuple[str, str, str]) -> list[_Coef]:
    """The coefficients of one control; ``kinds`` = (weir, orifice, slot) kind names. A weir
    is scaled through its cd_factor (× its Kindsvater–Carter Ce or its given cd), never cd."""
    weir, orifice, slot = kinds
    out = []
    if isinstance(b, AdjustableWeirExit | WeirBaffle):
        out.append(_Coef(weir, "cd_factor", None, b.cd_factor))
    elif isinstance(b, WeirOrificeBaffle):
        out.append(_Coef(weir, "weir_cd_factor", None, b.weir_cd_factor))
    elif isinstance(b, SlotBaffle):
        out.append(_Coef(slot, "cd", None, b.cd))
    if isinstance(b, WeirOrificeBaffle | OrificeBaffle):
        out.extend(_Coef(orifice, "cd", i, o.cd) for i, o in enumerate(b.orifices))
    return out


_AS_BAFFLE = ("weir", "orifice", "slot")
_AS_EXIT = ("exit", "exit", "exit")


def _elements(fishway: Fishway) -> list[tuple[str, str, list[_Coef]]]:
    """(site-file section, element id, coefficients) of the exit, baffles and gates."""
    out = [("exit", fishway.exit.id or "exit", _control_coefs(fishway.exit, _AS_EXIT))]
    out += [("baffles", bid, _control_coefs(b, _AS_BAFFLE))
            for bid, b in zip(fishway.baffle_ids(), fishway.baffles, strict=True)]
    out += [("entrance.gates", g.id, [_Coef("entrance_gate", "cd_factor", None, g.cd_factor)])
            for g in fishway.entrance.gates]
    return out


def _scale(b: Any, coefs: list[_Coef], m: Mapping[str, float]) -> Any:
    upd: dict[str, Any] = {}
    orifices = list(getattr(b, "orifices", []))
    for c in coefs:
        if c.kind not in m:
            continue
        if c.orifice is not None:
            orifices[c.orifice] = orifices[c.orifice].model_copy(
                update={"cd": m[c.kind] * c.value})
            upd["orifices"] = orifices
        else:
            upd[c.field] = m[c.kind] * c.value
    return b.model_copy(update=upd) if upd else b


def scaled_fishway(fishway: Fishway, multipliers: Mapping[str, float]) -> Fishway:
    """``fishway`` with every coefficient of each kind in ``multipliers`` scaled by it.

    Weirs (exit, baffle weirs and notches, entrance gates) have their ``cd_factor`` (or
    ``weir_cd_factor``) multiplied, so a Kindsvater–Carter weir stays Kindsvater–Carter;
    orifices and slots have their ``cd`` multiplied. Kinds absent from ``multipliers`` are
    unchanged; at multiplier 1 the model is the original one exactly.
    """
    for kind in multipliers:
        if kind not in OPENING_KINDS:
            raise ValueError(f"unknown opening kind {kind!r} (kinds: {', '.join(OPENING_KINDS)})")
    coefs = [c for _, _, c in _elements(fishway)]
    n = len(fishway.baffles)
    exit_ = _scale(fishway.exit, coefs[0], multipliers)
    baffles = [_scale(b, c, multipliers)
               for b, c in zip(fishway.baffles, coefs[1:n + 1], strict=True)]
    gates = [_scale(g, c, multipliers)
             for g, c in zip(fishway.entrance.gates, coefs[n + 1:], strict=True)]
    entrance = fishway.entrance.model_copy(update={"gates": gates})
    return fishway.model_copy(update={"exit": exit_, "baffles": baffles, "entrance": entrance})


def _openings_by_kind(ladder: Ladder, settings: Mapping[str, float]
                      ) -> list[tuple[str, int, Opening]]:
    """(kind, control index, opening); control index N means the entrance gates."""
    out = []
    for j, ctrl in enumerate(ladder.controls(settings)):
        for o in ctrl:
            out.append(("exit" if j == 0 else o.kind, j, o))
    out.extend(("entrance_gate", ladder.n_pools, o) for o in ladder.gates(settings))
    return out


def _baseline(ladder: Ladder, observations: Sequence[Observation]
              ) -> tuple[dict[str, int], dict[str, bool], list[Any]]:
    """Openings per kind (merged identical notches and orifices counted one by one), whether
    each kind flows in some observation, and the uncalibrated profiles."""
    counts: dict[str, int] = {}
    flowing: dict[str, bool] = {}
    profiles = []
    for k, _, o in _openings_by_kind(ladder, ladder.default_settings()):
        counts[k] = counts.get(k, 0) + int(getattr(o, "count", 1))
        flowing.setdefault(k, False)
    for obs in observations:
        p = ladder.solve(obs.forebay_m, obs.tailwater_m, obs.settings,
                         temperature_c=obs.temperature_c)
        profiles.append(p)
        z = [p.forebay_m, *(q.water_level_m for q in p.pools), p.tailwater_m]
        for kind, j, o in _openings_by_kind(ladder, obs.settings):
            flowing[kind] = flowing[kind] or o.flow(z[j], z[j + 1])[0] > 1e-9
    return counts, flowing, profiles


# -- results ---------------------------------------------------------------------------------
@dataclass(frozen=True)
class CoefficientChange:
    """A value to write into the site file: ``path`` is the field within the fishway's entry
    (``baffles[*].weir_cd_factor``: every baffle; ``baffles[B01 … B38]``: those baffles, by
    id as loaded); ``elements`` the ids; ``before`` the value now (1 for a
    cd_factor left at its default) and ``after`` = multiplier × ``before``."""

    path: str
    elements: tuple[str, ...]
    before: float
    after: float

    @property
    def assignment(self) -> str:
        """``'baffles[*].weir_cd_factor = 0.93'`` (4 decimals, trailing zeros dropped)."""
        return f"{self.path} = {round(self.after, 4):g}"

    def to_dict(self) -> dict[str, Any]:
        return {"path": self.path, "elements": list(self.elements), "before": self.before,
                "after": self.after, "assignment": self.assignment}


@dataclass(frozen=True)
class KindFit:
    kind: str
    openings: int
    fitted: bool
    multiplier: float
    std_error: float | None
    coefficients: tuple[CoefficientChange, ...] = ()
    note: str = ""


@dataclass(frozen=True)
class PoolResidual:
    pool_id: str
    n: int
    rms_before_m: float
    rms_after_m: float
    mean_after_m: float


@dataclass(frozen=True)
class CalibrationResult:
    """The fit: multipliers per kind, coefficients for the site file, errors before/after."""

    fishway_id: str
    n_observations: int
    n_levels: int
    kinds: tuple[KindFit, ...]
    rms_before_m: float
    rms_after_m: float
    pools: tuple[PoolResidual, ...]
    warnings: tuple[str, ...]
    success: bool
    message: str
    fishway: Fishway = field(repr=False, compare=False)

    @property
    def multipliers(self) -> dict[str, float]:
        return {k.kind: k.multiplier for k in self.kinds}

    @property
    def site_file(self) -> dict[str, float]:
        """Field path (within the fishway's entry) -> fitted value, for every change."""
        return {c.path: c.after for k in self.kinds for c in k.coefficients}

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict (SI, unit-suffixed keys)."""
        return {
            "fishway": self.fishway_id, "n_observations": self.n_observations,
            "n_levels": self.n_levels, "rms_before_m": self.rms_before_m,
            "rms_after_m": self.rms_after_m, "success": self.success, "message": self.message,
            "multipliers": self.multipliers, "site_file": self.site_file,
            "kinds": [{"kind": k.kind, "openings": k.openings, "fitted": k.fitted,
                       "multiplier": k.multiplier, "std_error": k.std_error, "note": k.note,
                       "coefficients": [c.to_dict() for c in k.coefficients]}
                      for k in self.kinds],
            "pools": [p.__dict__.copy() for p in self.pools],
            "warnings": list(self.warnings),
        }


def _id_list(ids: list[str], order: list[str]) -> str:
    """``'B01 … B38, B40'``: runs of three or more consecutive elements shortened."""
    pos = [order.index(i) for i in ids]
    runs: list[list[int]] = []
    for p in pos:
        if runs and p == runs[-1][-1] + 1:
            runs[-1].append(p)
        else:
            runs.append([p])
    parts = []
    for r in runs:
        parts += ([f"{order[r[0]]} … {order[r[-1]]}"] if len(r) >= 3 else [order[i] for i in r])
    return ", ".join(parts)


def _coefficients(fishway: Fishway, kind: str, m: float) -> tuple[CoefficientChange, ...]:
    """The site-file fields of kind ``kind`` and their values after scaling by ``m``; elements
    sharing a field and a value now are grouped (``[*]``: every element of the section)."""
    groups: dict[tuple[str, str, float], list[str]] = {}
    order: dict[str, list[str]] = {}
    for section, eid, coefs in _elements(fishway):
        order.setdefault(section, []).append(eid)
        mine = [c for c in coefs if c.kind == kind]
        orf = [c for c in mine if c.orifice is not None]
        if orf and len({c.value for c in orf}) == 1:  # one value for all its orifices
            mine = [c for c in mine if c.orifice is None] + [orf[0]._replace(orifice=-1)]
        for c in mine:
            sub = "orifices[*].cd" if c.orifice == -1 else c.subpath
            groups.setdefault((section, sub, c.value), []).append(eid)
    out = []
    for (section, sub, before), ids in groups.items():
        if section == "exit":
            path = f"exit.{sub}"
        else:
            every = order[section]
            sel = "*" if ids == every and len(every) > 1 else _id_list(ids, every)
            path = f"{section}[{sel}].{sub}"
        out.append(CoefficientChange(path, tuple(ids), before, m * before))
    return tuple(out)


_FACTOR_CHECK = TypeAdapter(CdFactor)
_CD_CHECK = TypeAdapter(Coefficient)


def _outside_schema(change: CoefficientChange) -> str | None:
    """Why the site file would reject ``change.after`` (``None`` if it accepts it)."""
    check = _FACTOR_CHECK if change.path.endswith("cd_factor") else _CD_CHECK
    try:
        check.validate_python(change.after)
    except ValidationError as exc:
        return exc.errors(include_url=False)[0]["msg"].lower()
    return None


def _levels(ladder: Ladder, observations: Sequence[Observation], warm: list[Any]) -> np.ndarray:
    out = []
    for i, obs in enumerate(observations):
        p = ladder.solve(obs.forebay_m, obs.tailwater_m, obs.settings,
                         temperature_c=obs.temperature_c, warm=warm[i])
        warm[i] = p
        z = {q.id: q.water_level_m for q in p.pools}
        out.extend(z[pid] - v for pid, v in obs.levels_m.items())
    return np.asarray(out, dtype=float)


def _rms(r: np.ndarray) -> float:
    return float(np.sqrt(np.mean(r**2))) if r.size else math.nan


def calibrate(ladder: Ladder, observations: Sequence[Observation], *,
              kinds: Iterable[str] | None = None,
              bounds: tuple[float, float] = (0.5, 1.5)) -> CalibrationResult:
    """Fit one discharge-coefficient multiplier per opening kind to measured pool levels.

    ``kinds`` restricts the fit (default: every kind present whose openings flow in at least
    one observation); the others stay as in the site file. Raises ``ValueError`` without
    observations or with bounds that do not contain 1.

    Reference: see the module docstring (least squares by trust-region reflective).
    """
    if not observations:
        raise ValueError("no observations to fit")
    lo, hi = bounds
    if not 0.0 < lo < 1.0 < hi:
        raise ValueError(f"bounds must satisfy 0 < low < 1 < high, got {bounds}")
    f = ladder.fishway
    counts, flowing, base_profiles = _baseline(ladder, observations)
    wanted = list(counts) if kinds is None else list(kinds)
    warnings: list[str] = []
    for k in wanted:
        if k not in OPENING_KINDS:
            raise ValueError(f"unknown opening kind {k!r} (kinds: {', '.join(OPENING_KINDS)})")
        if k not in counts:
            raise ValueError(f"fishway {f.id!r} has no {k} openings")
    fit: list[str] = []
    for k in wanted:
        if not flowing[k]:
            warnings.append(f"{k}: no {k} opening flows in any observation, so the data say "
                            "nothing about it: not fitted (multiplier kept at 1)")
        else:
            fit.append(k)
    no_aux = all(sum(a.flow_m3s for a in p.aux) <= 0.0 for p in base_profiles)
    if no_aux and len(fit) > 1 and set(fit) == {k for k in counts if flowing[k]}:
        warnings.append("no auxiliary water flows in any observation: scaling every coefficient "
                        "by one factor scales every flow and leaves every level unchanged, so "
                        "the levels fix only the ratios between the fitted kinds; fix one kind "
                        "(fit the others) or add observations with auxiliary water running")
    n_obs = len(observations)
    z0 = np.asarray([p_lvl - v for p, obs in zip(base_profiles, observations, strict=True)
                     for pid, v in obs.levels_m.items()
                     for p_lvl in [next(q.water_level_m for q in p.pools if q.id == pid)]])
    warm: list[Any] = list(base_profiles)

    def residuals(x: np.ndarray) -> np.ndarray:
        trial = Ladder(scaled_fishway(f, dict(zip(fit, x, strict=True))))
        return _levels(trial, observations, warm)

    std: dict[str, float | None] = {}
    if fit:
        res = least_squares(residuals, np.ones(len(fit)), bounds=(lo, hi), method="trf",
                            diff_step=1e-5, x_scale=1.0, xtol=1e-10, ftol=1e-12, gtol=1e-12,
                            max_nfev=200)
        x, success, message = np.asarray(res.x, dtype=float), bool(res.success), str(res.message)
        r = res.fun
        jac = np.asarray(res.jac, dtype=float)
        dof = r.size - len(fit)
        if dof <= 0:
            warnings.append(f"{r.size} measured levels for {len(fit)} multipliers: the fit is "
                            "not determined; add observations")
        jtj = jac.T @ jac
        s2 = float(r @ r) / dof if dof > 0 else math.nan
        cov = np.linalg.pinv(jtj) * s2
        col = np.sqrt(np.diag(jtj))
        for i, k in enumerate(fit):
            std[k] = float(math.sqrt(cov[i, i])) if dof > 0 and cov[i, i] >= 0 else None
            if col[i] < 1e-6 * max(col.max(), 1e-300):
                warnings.append(f"{k}: the measured levels barely depend on it (poorly "
                                "determined)")
            if min(x[i] - lo, hi - x[i]) < 1e-3:
                warnings.append(f"{k}: the multiplier reached its bound ({x[i]:.3f}); the "
                                "model or the data may be wrong (gauge datum, settings)")
            elif std[k] is not None and std[k] > 0.05 * x[i]:
                warnings.append(f"{k}: poorly determined (multiplier {x[i]:.3f} ± {std[k]:.3f})")
        c = np.linalg.pinv(jtj)
        d = np.sqrt(np.clip(np.diag(c), 1e-300, None))
        corr = c / np.outer(d, d)
        for i in range(len(fit)):
            for j in range(i + 1, len(fit)):
                if abs(corr[i, j]) > 0.95:
                    warnings.append(f"{fit[i]} and {fit[j]}: strongly correlated estimates "
                                    f"(r = {corr[i, j]:.2f}); the observations cannot separate "
                                    "them well: add observations at more varied levels")
    else:
        x, success, message = np.ones(0), True, "nothing to fit"
        r = z0
    fitted = dict(zip(fit, (float(v) for v in x), strict=True))
    out_kinds = []
    for k in counts:
        m = fitted.get(k, 1.0)
        coefs = _coefficients(f, k, m) if k in fitted else ()
        note = "" if k in fitted else ("never flows" if not flowing[k] else "not fitted")
        for c in coefs:
            why = _outside_schema(c)
            if why is not None:
                warnings.append(f"{k}: {c.assignment}: the site file would reject it ({why}); "
                                "the model or the data may be wrong")
        out_kinds.append(KindFit(k, counts[k], k in fitted, m, std.get(k), coefs, note))
    pools = []
    ids = [pid for obs in observations for pid in obs.levels_m]
    for pid in dict.fromkeys(ids):
        mask = np.asarray([i == pid for i in ids])
        pools.append(PoolResidual(pid, int(mask.sum()), _rms(z0[mask]), _rms(r[mask]),
                                  float(np.mean(r[mask]))))
    return CalibrationResult(f.id, n_obs, int(z0.size), tuple(out_kinds), _rms(z0), _rms(r),
                             tuple(pools), tuple(warnings), success, message,
                             scaled_fishway(f, fitted))
