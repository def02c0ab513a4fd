"""Calibration: fit discharge-coefficient multipliers of a fishway to measured pool levels.

One multiplier per kind of opening present in the fishway — ``weir`` (baffle weirs and weir
notches), ``orifice`` (baffle orifices), ``slot`` (vertical slots), ``entrance_gate`` and
``exit`` (every coefficient of the exit control) — is fitted by bounded non-linear least
squares (``scipy.optimize.least_squares``, trust-region reflective, default bounds 0.5–1.5)::

    minimise  Σ_i Σ_p [ z_p(m; forebay_i, tailwater_i, settings_i) − z_obs,ip ]²

over the measured pool levels z_obs of every observation i, where z_p is the level of pool p
computed by the profile solver with every coefficient of kind k multiplied by m_k.

Weirs without an explicit coefficient use Kindsvater–Carter (Ce varies with h/P and carries
head and width corrections). The site file can only hold one plain ``cd`` per weir, so a fitted
kind's Kindsvater–Carter weirs are switched to the simple form Q = (2/3)·cd·√(2g)·b·h^1.5 with
``cd = m × Ce_eq``, where Ce_eq is the median over the observations of the Kindsvater–Carter
free-flow discharge expressed in that form (``Q_KC / ((2/3)·√(2g)·b·h^1.5)``, heads ≥ 0.03 m)
under the uncalibrated model. The reported cd values are then exactly the model that was
fitted: writing them into the site file reproduces the fit. The simple form drops the h/P
dependence of Ce and the head and width corrections, so even at m = 1 it is not the
Kindsvater–Carter model: on the demo East ladder Ce_eq spans about 1 % over the heads of a
season and the computed pool levels move by up to a few millimetres (most in the backwatered
lower pools); the "before" error is always that of the site file as it stands. Kinds that are
not fitted are left untouched, Kindsvater–Carter included.

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
trust-region reflective method of ``least_squares``); Kindsvater & Carter (1957).
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from scipy.optimize import least_squares

from ops_logic.hydraulics import KC_LIMITS
from ops_logic.ladder import Ladder, SettingError
from ops_logic.openings import SQRT_2G, Opening, WeirOpening
from ops_logic.site import (
    AdjustableWeirExit,
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
    "kc_equivalent_cd",
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
def _scale(b: Any, kinds: tuple[str, str, str], m: Mapping[str, float],
           kc: Mapping[str, float | None]) -> Any:
    """Copy of one control with its coefficients scaled; ``kinds`` = (weir, orifice, slot)."""
    weir, orifice, slot = kinds
    upd: dict[str, Any] = {}

    def weir_cd(cd: float | None, kind: str) -> float | None:
        base = cd if cd is not None else kc.get(kind)
        return None if base is None else m[kind] * base

    if isinstance(b, AdjustableWeirExit | WeirBaffle) and weir in m:
        upd["cd"] = weir_cd(b.cd, weir)
    elif isinstance(b, SlotBaffle) and slot in m:
        upd["cd"] = m[slot] * b.cd
    if isinstance(b, WeirOrificeBaffle) and weir in m:
        upd["weir_cd"] = weir_cd(b.weir_cd, weir)
    if isinstance(b, WeirOrificeBaffle | OrificeBaffle) and orifice in m:
        upd["orifices"] = [o.model_copy(update={"cd": m[orifice] * o.cd}) for o in b.orifices]
    return b.model_copy(update=upd) if upd else b


def scaled_fishway(fishway: Fishway, multipliers: Mapping[str, float],
                   kc_cd: Mapping[str, float | None] | None = None) -> Fishway:
    """``fishway`` with every coefficient of each kind in ``multipliers`` scaled by it.

    Kindsvater–Carter weirs (no cd) of a scaled kind get ``cd = m × kc_cd[kind]`` (the simple
    form; see the module docstring); kinds absent from ``multipliers`` are unchanged.
    """
    kc = dict(kc_cd or {})
    for kind in multipliers:
        if kind not in OPENING_KINDS:
            raise ValueError(f"unknown opening kind {kind!r} (kinds: {', '.join(OPENING_KINDS)})")
    exit_ = _scale(fishway.exit, ("exit",) * 3, multipliers, kc)
    baffles = [_scale(b, ("weir", "orifice", "slot"), multipliers, kc) for b in fishway.baffles]
    gates = fishway.entrance.gates
    if "entrance_gate" in multipliers:
        gates = [g.model_copy(update={"cd": (multipliers["entrance_gate"] * base) if (
            base := g.cd if g.cd is not None else kc.get("entrance_gate")) is not None else None})
            for g in gates]
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
              ) -> tuple[dict[str, int], dict[str, bool], dict[str, list[float]], list[Any]]:
    counts: dict[str, int] = {}
    flowing: dict[str, bool] = {}
    ce: dict[str, list[float]] = {}
    profiles = []
    for k, _, _ in _openings_by_kind(ladder, ladder.default_settings()):
        counts[k] = counts.get(k, 0) + 1
        flowing.setdefault(k, False)
    for obs in observations:
        p = ladder.solve(obs.forebay_m, obs.tailwater_m, obs.settings,
                         temperature_c=obs.temperature_c)
        profiles.append(p)
        z = [p.forebay_m, *(q.water_level_m for q in p.pools), p.tailwater_m]
        for kind, j, o in _openings_by_kind(ladder, obs.settings):
            zu, zd = z[j], z[j + 1]
            flowing[kind] = flowing[kind] or o.flow(zu, zd)[0] > 1e-9
            if isinstance(o, WeirOpening) and o.cd is None:
                h = zu - o.crest_m
                if h >= KC_LIMITS["min_head_m"]:
                    q_free = o.flow(zu, -math.inf)[0]
                    ce.setdefault(kind, []).append(
                        q_free / ((2.0 / 3.0) * SQRT_2G * o.width_m * h**1.5))
    return counts, flowing, ce, profiles


def kc_equivalent_cd(ladder: Ladder, observations: Sequence[Observation]
                     ) -> dict[str, float | None]:
    """Per kind, the median simple-form cd equivalent to its Kindsvater–Carter weirs over the
    observations (``None`` where a kind has no Kindsvater–Carter weir that flows)."""
    _, _, ce, _ = _baseline(ladder, observations)
    return {k: (float(np.median(v)) if v else None) for k, v in ce.items()}


# -- results ---------------------------------------------------------------------------------
@dataclass(frozen=True)
class CoefficientChange:
    """A coefficient to write into the site file: ``where`` lists the elements, ``field`` the
    key; ``cd_before`` is ``None`` for Kindsvater–Carter (then ``cd_equivalent`` is Ce_eq)."""

    field: str
    where: str
    cd_before: float | None
    cd_equivalent: float
    cd_after: float


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

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict (SI, unit-suffixed keys)."""
        return {
            "fishway": self.fishway_id, "n_observations": self.n_observations,
            "n_levels": self.n_levels, "rms_before_m": self.rms_before_m,
            "rms_after_m": self.rms_after_m, "success": self.success, "message": self.message,
            "multipliers": self.multipliers,
            "kinds": [{"kind": k.kind, "openings": k.openings, "fitted": k.fitted,
                       "multiplier": k.multiplier, "std_error": k.std_error, "note": k.note,
                       "coefficients": [c.__dict__.copy() for c in k.coefficients]}
                      for k in self.kinds],
            "pools": [p.__dict__.copy() for p in self.pools],
            "warnings": list(self.warnings),
        }


def _coefficients(fishway: Fishway, kind: str, m: float, kc: float | None
                  ) -> tuple[CoefficientChange, ...]:
    groups: dict[tuple[str, float | None], list[str]] = {}
    pairs: list[tuple[str, str, float | None]] = []  # (element id, field, cd)

    def add_control(eid: str, b: Any, as_kind: tuple[str, str, str]) -> None:
        w, o, s = as_kind
        if isinstance(b, AdjustableWeirExit | WeirBaffle) and w == kind:
            pairs.append((eid, "cd", b.cd))
        if isinstance(b, WeirOrificeBaffle) and w == kind:
            pairs.append((eid, "weir_cd", b.weir_cd))
        if isinstance(b, SlotBaffle) and s == kind:
            pairs.append((eid, "cd", b.cd))
        if isinstance(b, WeirOrificeBaffle | OrificeBaffle) and o == kind:
            pairs.extend((eid, "orifices.cd", x.cd) for x in b.orifices)

    add_control(fishway.exit.id or "exit", fishway.exit, ("exit",) * 3)
    for bid, b in zip(fishway.baffle_ids(), fishway.baffles, strict=True):
        add_control(bid, b, ("weir", "orifice", "slot"))
    if kind == "entrance_gate":
        pairs.extend((g.id, "cd", g.cd) for g in fishway.entrance.gates)
    for eid, fld, cd in pairs:
        ids = groups.setdefault((fld, cd), [])
        if eid not in ids:
            ids.append(eid)
    out = []
    for (fld, cd), ids in groups.items():
        base = cd if cd is not None else kc
        if base is None:
            continue
        where = ids[0] if len(ids) == 1 else f"{ids[0]} … {ids[-1]} ({len(ids)})"
        out.append(CoefficientChange(fld, where, cd, base, m * base))
    return tuple(out)


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
    counts, flowing, ce, base_profiles = _baseline(ladder, observations)
    kc = {k: (float(np.median(v)) if v else None) for k, v in ce.items()}
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
    n_obs = len(observations)
    z0 = np.asarray([p_lvl - v for p, obs in zip(base_profiles, observations, strict=True)
                     for pid, v in obs.levels_m.items()
                     for p_lvl in [next(q.water_level_m for q in p.pools if q.id == pid)]])
    warm: list[Any] = list(base_profiles)

    def residuals(x: np.ndarray) -> np.ndarray:
        trial = Ladder(scaled_fishway(f, dict(zip(fit, x, strict=True)), kc))
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
        coefs = _coefficients(f, k, m, kc.get(k)) if k in fitted else ()
        note = "" if k in fitted else ("never flows" if not flowing[k] else "not fitted")
        if k in fitted and kc.get(k) is not None:
            note = "Kindsvater–Carter weirs switched to the simple form (cd = m × Ce_eq)"
        out_kinds.append(KindFit(k, counts[k], k in fitted, m, std.get(k), coefs, note))
    pools = []
    ids = [pid for obs in observations for pid in obs.levels_m]
    for pid in dict.fromkeys(ids):
        mask = np.asarray([i == pid for i in ids])
        pools.append(PoolResidual(pid, int(mask.sum()), _rms(z0[mask]), _rms(r[mask]),
                                  float(np.mean(r[mask]))))
    return CalibrationResult(f.id, n_obs, int(z0.size), tuple(out_kinds), _rms(z0), _rms(r),
                             tuple(pools), tuple(warnings), success, message,
                             scaled_fishway(f, fitted, kc))
