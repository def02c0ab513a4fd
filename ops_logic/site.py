"""The site file: one dam site and its fishways, in our own TOML schema, validated with pydantic.

Values are read in the file's declared unit system (``[site] units = "us"``: ft, cfs, ft²,
ft/s, ft·lbf/s/ft³; ``"si"``: m, m³/s, m², m/s, W/m³) or as strings with explicit units
(``"1.2 m"``, ``"40 cfs"``). After loading, every number in the model is SI.

A fishway is described from its upstream exit to its downstream entrance: the exit control and
the pool below it, every baffle in order with the pool below it, the entrance gates that discharge
from the last pool (the entrance pool) to the tailwater, the auxiliary water sources, the targets
and the actuator rate limits. A baffle entry may carry ``repeat = N`` and ``drop = X``: it then
stands for N identical baffles, each X lower than the one above (uniform pools are common).

Errors are collected into one :class:`SiteConfigError` whose lines each name the file, the dotted
field path and what is wrong.
"""

from __future__ import annotations

import copy
import re
import tomllib
from importlib import resources
from pathlib import Path
from typing import Annotated, Any, Literal
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from pydantic import (
    AfterValidator,
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    ValidationError,
    ValidationInfo,
    field_validator,
    model_validator,
)

from ops_logic.alarms.config import AlarmSettings
from ops_logic.units import UnitSystem, level_text, to_si

__all__ = [
    "Band",
    "Feed",
    "Fishway",
    "Ingest",
    "Notify",
    "Site",
    "SiteConfigError",
    "demo_site_path",
    "load_site",
    "parse_site",
]


class SiteConfigError(ValueError):
    """A site file that cannot be used; ``errors`` holds ``(dotted_path, reason)`` pairs."""

    def __init__(self, source: str, errors: list[tuple[str, str]]):
        self.source = source
        self.errors = errors
        super().__init__("\n".join(f"{source}: {p}: {m}" if p else f"{source}: {m}"
                                   for p, m in errors))


def _quantity(kind: str) -> BeforeValidator:
    def convert(value: Any, info: ValidationInfo) -> float:
        system = (info.context or {}).get("units", "si")
        return to_si(value, kind, system)

    return BeforeValidator(convert)


def _ordered(pair: tuple[float, float]) -> tuple[float, float]:
    if not pair[0] < pair[1]:
        raise ValueError(f"range must be [low, high] with low < high, got {list(pair)}")
    return pair


Elevation = Annotated[float, _quantity("length")]
Length = Annotated[float, _quantity("length"), Field(gt=0)]
Flow = Annotated[float, _quantity("flow"), Field(ge=0)]
Area = Annotated[float, _quantity("area"), Field(gt=0)]
Velocity = Annotated[float, _quantity("velocity"), Field(gt=0)]
PowerDensity = Annotated[float, _quantity("power_density"), Field(gt=0)]
LevelRange = Annotated[tuple[Elevation, Elevation], AfterValidator(_ordered)]
Coefficient = Annotated[float, Field(gt=0, le=1.5)]
CdFactor = Annotated[float, Field(gt=0.3, le=2.0)]
"""A calibrated multiplier on a weir's Kindsvater–Carter coefficient (``cd`` unset) or on its
given ``cd``: the field correction keeps the method's form."""
Ident = Annotated[str, Field(pattern=r"^[A-Za-z][A-Za-z0-9_]*$", max_length=32)]

_FROZEN = ConfigDict(extra="forbid", frozen=True)


class SiteInfo(BaseModel):
    model_config = _FROZEN
    name: str = Field(min_length=1)
    time_zone: str = "UTC"
    units: Literal["us", "si"]
    elevation: Elevation = 0.0
    """Site elevation above sea level, for barometric pressure in DO saturation."""

    @field_validator("time_zone")
    @classmethod
    def _zone(cls, value: str) -> str:
        try:
            ZoneInfo(value)
        except (ZoneInfoNotFoundError, ValueError):
            raise ValueError(f"unknown time zone {value!r} (use an IANA name such as "
                             "'Etc/GMT+8' or 'UTC')") from None
        return value


class Pool(BaseModel):
    model_config = _FROZEN
    id: Ident | None = None
    floor: Elevation
    length: Length
    width: Length


class Orifice(BaseModel):
    model_config = _FROZEN
    invert: Elevation
    width: Length
    height: Length
    count: int = Field(1, ge=1)
    cd: Coefficient = 0.61


class WeirBaffle(BaseModel):
    """Plain overflow weir (pool-and-weir)."""

    model_config = _FROZEN
    type: Literal["weir"]
    id: Ident | None = None
    crest: Elevation
    width: Length
    cd: Coefficient | None = None
    cd_factor: CdFactor = 1.0
    pool: Pool


class WeirOrificeBaffle(BaseModel):
    """Weir with submerged orifice(s); ``weir_count = 2`` for two weir openings either side of
    a non-overflow centre section (each ``weir_width`` wide)."""

    model_config = _FROZEN
    type: Literal["weir_orifice"]
    id: Ident | None = None
    crest: Elevation
    weir_width: Length
    weir_count: Literal[1, 2] = 1
    weir_cd: Coefficient | None = None
    weir_cd_factor: CdFactor = 1.0
    orifices: list[Orifice] = Field(min_length=1)
    pool: Pool


class SlotBaffle(BaseModel):
    """Vertical slot; the default cd 0.75 sits in the published range 0.65–0.85 (Larinier
    2002); a site calibrates its own."""

    model_config = _FROZEN
    type: Literal["vertical_slot"]
    id: Ident | None = None
    invert: Elevation
    slot_width: Length
    cd: Coefficient = 0.75
    pool: Pool


class OrificeBaffle(BaseModel):
    """Plain submerged orifice(s)."""

    model_config = _FROZEN
    type: Literal["orifice"]
    id: Ident | None = None
    orifices: list[Orifice] = Field(min_length=1)
    pool: Pool


class AdjustableWeirExit(BaseModel):
    """Adjustable exit weir; ``approach_floor`` is the forebay-side floor for the weir height."""

    model_config = _FROZEN
    type: Literal["adjustable_weir"]
    id: Ident = "exit"
    width: Length
    crest_range: LevelRange
    cd: Coefficient | None = None
    cd_factor: CdFactor = 1.0
    approach_floor: Elevation | None = None
    pool: Pool


Baffle = Annotated[WeirBaffle | WeirOrificeBaffle | SlotBaffle | OrificeBaffle,
                   Field(discriminator="type")]
Exit = Annotated[AdjustableWeirExit | WeirBaffle | WeirOrificeBaffle | SlotBaffle | OrificeBaffle,
                 Field(discriminator="type")]


class EntranceGate(BaseModel):
    """Adjustable overflow entrance weir gate discharging to the tailwater."""

    model_config = _FROZEN
    id: Ident
    width: Length
    crest_range: LevelRange
    cd: Coefficient | None = None
    cd_factor: CdFactor = 1.0


class Entrance(BaseModel):
    model_config = _FROZEN
    gates: list[EntranceGate] = Field(min_length=1)
    discharges_to: str = "tailwater"


class Valve(BaseModel):
    model_config = _FROZEN
    diameter: Length
    characteristic: Literal["linear", "equal_percentage"]
    rangeability: float = Field(50.0, gt=1)
    cv: float | None = Field(None, gt=0, description="US gpm/psi at full open")
    kv: float | None = Field(None, gt=0, description="m³/h at 1 bar, full open")
    k_open: float | None = Field(None, gt=0, description="loss coefficient at full open")

    @model_validator(mode="after")
    def _one_capacity(self) -> Valve:
        given = [n for n in ("cv", "kv", "k_open") if getattr(self, n) is not None]
        if len(given) != 1:
            raise ValueError("give exactly one of cv, kv or k_open for the valve "
                             f"(got {', '.join(given) or 'none'})")
        return self


class Conduit(BaseModel):
    model_config = _FROZEN
    length: Length
    diameter: Length
    roughness: Annotated[float, _quantity("length"), Field(ge=0)]
    minor_k: float = Field(0.0, ge=0)
    intake_invert: Elevation | None = None


class GravityAux(BaseModel):
    """Gravity conduit from the forebay with a control valve, discharging through a diffuser."""

    model_config = _FROZEN
    type: Literal["gravity"]
    id: Ident
    into_pool: str
    diffuser_area: Area
    diffuser: Literal["wall", "floor"] = "wall"
    valve: Valve
    conduit: Conduit


class PumpAux(BaseModel):
    """Pumps drawing from the tailwater: a rated point (and shutoff head) or a head–flow curve."""

    model_config = _FROZEN
    type: Literal["pumps"]
    id: Ident
    into_pool: str
    diffuser_area: Area
    diffuser: Literal["wall", "floor"] = "wall"
    count: int = Field(ge=1, le=20)
    rated_flow: Flow | None = None
    rated_head: Length | None = None
    shutoff_head: Length | None = None
    curve: list[tuple[Elevation, Flow]] | None = None
    loss_k: Annotated[float, _quantity("loss_coefficient"), Field(ge=0)] = 0.0

    @model_validator(mode="after")
    def _curve_or_rating(self) -> PumpAux:
        if self.curve is None and (self.rated_flow is None or self.rated_head is None):
            raise ValueError("give either curve = [[head, flow], ...] or rated_flow and "
                             "rated_head")
        if self.curve is not None and len(self.curve) < 2:
            raise ValueError("curve needs at least two [head, flow] points")
        return self


Aux = Annotated[GravityAux | PumpAux, Field(discriminator="type")]


class Band(BaseModel):
    """A target band with an optional target inside it (SI after loading). One side may be
    left open (for example a pool head drop with a maximum only)."""

    model_config = _FROZEN
    min: float | None = None
    max: float | None = None
    target: float | None = None

    @model_validator(mode="after")
    def _inside(self) -> Band:
        if self.min is None and self.max is None:
            raise ValueError("give min, max or both")
        if self.min is not None and self.max is not None and not self.min < self.max:
            raise ValueError(f"min must be below max (got {self.min:g} and {self.max:g}, SI)")
        if self.target is not None and not (
                (self.min is None or self.target >= self.min)
                and (self.max is None or self.target <= self.max)):
            raise ValueError("target must lie within [min, max]")
        if self.target is None and (self.min is None or self.max is None):
            raise ValueError("a one-sided band needs a target")
        return self

    @property
    def aim(self) -> float:
        if self.target is not None:
            return self.target
        assert self.min is not None and self.max is not None
        return 0.5 * (self.min + self.max)

    @property
    def two_sided(self) -> bool:
        return self.min is not None and self.max is not None


def _band(kind: str) -> BeforeValidator:
    def convert(value: Any, info: ValidationInfo) -> Any:
        if not isinstance(value, dict):
            return value
        system = (info.context or {}).get("units", "si")
        return {k: (to_si(v, kind, system) if k in ("min", "max", "target") else v)
                for k, v in value.items()}

    return BeforeValidator(convert)


class DiffuserLimits(BaseModel):
    model_config = _FROZEN
    wall: Velocity
    floor: Velocity


class Targets(BaseModel):
    model_config = _FROZEN
    pool_head_drop: Annotated[Band, _band("length")]
    entrance_head: Annotated[Band, _band("length")]
    exit_head: Annotated[Band, _band("length")] | None = None
    ladder_flow: Annotated[Band, _band("flow")] | None = None
    max_power_density: PowerDensity
    max_diffuser_velocity: DiffuserLimits
    min_attraction_flow: Flow

    @model_validator(mode="after")
    def _two_sided(self) -> Targets:
        for name in ("entrance_head", "exit_head", "ladder_flow"):
            band = getattr(self, name)
            if band is not None and not band.two_sided:
                _fail(name, "needs both min and max")
        return self


class RateLimits(BaseModel):
    """Largest change per adjustment; ``None`` means no limit."""

    model_config = _FROZEN
    exit_crest: Length | None = None
    entrance_crest: Length | None = None
    valve_opening_pct: float | None = Field(None, gt=0, le=100)
    pumps: int | None = Field(None, ge=1)


class Gauging(BaseModel):
    """Which pools carry a level gauge (default: the first, every tenth and the last) and which
    carry a second, redundant one (default: the entrance pool)."""

    model_config = _FROZEN
    pools: list[str] | None = None
    redundant: list[str] | None = None


class Fishway(BaseModel):
    model_config = _FROZEN
    id: Ident
    name: str
    forebay_range: LevelRange
    tailwater_range: LevelRange
    exit: Exit
    baffles: list[Baffle] = Field(min_length=1)
    entrance: Entrance
    aux: list[Aux] = []
    targets: Targets
    rate_limits: RateLimits = RateLimits()
    gauging: Gauging = Gauging()
    alarms: AlarmSettings = AlarmSettings()

    @model_validator(mode="after")
    def _consistent(self, info: ValidationInfo) -> Fishway:
        _check_fishway(self, (info.context or {}).get("units", "si"))
        return self

    @property
    def pools(self) -> list[Pool]:
        return [self.exit.pool, *(b.pool for b in self.baffles)]

    def pool_ids(self) -> list[str]:
        return [p.id or f"P{i + 1:02d}" for i, p in enumerate(self.pools)]

    def baffle_ids(self) -> list[str]:
        return [b.id or f"B{i + 1:02d}" for i, b in enumerate(self.baffles)]

    def aux_pool_index(self, aux: GravityAux | PumpAux) -> int:
        ids = self.pool_ids()
        return len(ids) - 1 if aux.into_pool == "entrance" else ids.index(aux.into_pool)


class Feed(BaseModel):
    """Where readings come from: the in-process simulated plant, an OPC UA server, or a folder
    of CSV files that loggers drop."""

    model_config = _FROZEN
    id: Ident = "plant"
    type: Literal["simulated", "opcua", "csv"] = "simulated"
    endpoint: str | None = None
    folder: str | None = None
    namespace: int = Field(2, ge=0)

    @model_validator(mode="after")
    def _needs(self) -> Feed:
        if self.type == "opcua" and not (self.endpoint or "").startswith("opc.tcp://"):
            raise ValueError("an opcua feed needs endpoint = \"opc.tcp://host:port\"")
        if self.type == "csv" and not self.folder:
            raise ValueError("a csv feed needs folder = \"path\"")
        return self


class TagOverride(BaseModel):
    model_config = _FROZEN
    name: str
    address: str | None = None
    poll_seconds: float | None = Field(None, gt=0)
    feed: str | None = None


class Ingest(BaseModel):
    """Scheduling of the ingest service; every period in seconds."""

    model_config = _FROZEN
    poll_seconds: float = Field(10.0, gt=0)
    recommend_seconds: float = Field(60.0, gt=0)
    keep_raw_days: float = Field(400.0, gt=0)
    feeds: list[Feed] = [Feed()]
    tags: list[TagOverride] = []


class Notify(BaseModel):
    """``[notify]``: outgoing e-mail for high-priority alarms (:mod:`db.notify`). The file holds
    no password: ``password_env`` names the environment variable that does. At most one mail
    per alarm per ``rate_limit_minutes``; more than ``digest_after`` alarms to mail at once (or
    an alarm flood) go out as one digest."""

    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)
    host: str = Field(min_length=1)
    port: int = Field(25, ge=1, le=65535)
    from_: str = Field(alias="from", pattern=r"^[^@\s]+@[^@\s]+$")
    to: list[Annotated[str, Field(pattern=r"^[^@\s]+@[^@\s]+$")]] = Field(min_length=1)
    starttls: bool = False
    username: str | None = None
    password_env: str | None = Field(None, pattern=r"^[A-Za-z_][A-Za-z0-9_]*$")
    max_priority: Literal[1, 2, 3] = 1
    rate_limit_minutes: float = Field(30.0, gt=0)
    digest_after: int = Field(3, ge=1)
    timeout_s: float = Field(10.0, gt=0, le=120)

    @model_validator(mode="before")
    @classmethod
    def _no_password(cls, data: Any) -> Any:
        if isinstance(data, dict) and "password" in data:
            raise ValueError("no password in the site file: put it in an environment variable "
                             "and name that variable in password_env")
        return data

    @model_validator(mode="after")
    def _login(self) -> Notify:
        if (self.username is None) != (self.password_env is None):
            raise ValueError("give both username and password_env (or neither)")
        return self


class Site(BaseModel):
    model_config = _FROZEN
    site: SiteInfo
    fishways: list[Fishway] = Field(min_length=1)
    ingest: Ingest = Ingest()
    notify: Notify | None = None

    @model_validator(mode="after")
    def _unique(self) -> Site:
        ids = [f.id for f in self.fishways]
        dup = sorted({i for i in ids if ids.count(i) > 1})
        if dup:
            raise ValueError(f"fishway ids must be unique: {', '.join(dup)} repeated")
        return self

    def fishway(self, fishway_id: str) -> Fishway:
        for f in self.fishways:
            if f.id == fishway_id:
                return f
        raise KeyError(f"no fishway {fishway_id!r} at this site (have: "
                       f"{', '.join(f.id for f in self.fishways)})")


# ---------------------------------------------------------------------------------------------
_PATH = "§"  # marks "§sub.path§ reason" in messages raised by the model-level checks


def _fail(path: str, reason: str) -> None:
    raise ValueError(f"{_PATH}{path}{_PATH} {reason}")


def _control_level(b: Any, *, highest: bool = False) -> float:
    if isinstance(b, AdjustableWeirExit):
        return b.crest_range[1 if highest else 0]
    if isinstance(b, WeirBaffle | WeirOrificeBaffle):
        return b.crest
    if isinstance(b, SlotBaffle):
        return b.invert
    return min(o.invert for o in b.orifices)


def _check_fishway(f: Fishway, system: UnitSystem = "si") -> None:
    fb_hi = f.forebay_range[1]
    if f.tailwater_range[1] >= fb_hi:
        _fail("tailwater_range", "the tailwater range must lie below the forebay range")
    if _control_level(f.exit) >= fb_hi:
        _fail("exit.crest_range" if isinstance(f.exit, AdjustableWeirExit) else "exit",
              "the exit control lies above the whole forebay range: no water could enter")
    if isinstance(f.exit, AdjustableWeirExit):
        if f.targets.exit_head is None and f.targets.ladder_flow is None:
            _fail("targets", "an adjustable exit weir needs targets.exit_head or "
                  "targets.ladder_flow to set it by")
        if f.exit.approach_floor is not None and f.exit.approach_floor >= f.exit.crest_range[0]:
            _fail("exit.approach_floor", "must lie below the exit crest range")
    upstream = [f.exit, *f.baffles]
    pool_ids = f.pool_ids()
    if len(set(pool_ids)) != len(pool_ids):
        _fail("baffles", "pool ids must be unique")
    baffle_ids = f.baffle_ids()
    if len(set(baffle_ids)) != len(baffle_ids):
        _fail("baffles", "baffle ids must be unique")
    for i, b in enumerate(f.baffles):
        above = upstream[i]
        level_above = _control_level(above, highest=True)
        if _control_level(b) > level_above + 1e-9:
            _fail(f"baffles[{i}]", f"control at {level_text(_control_level(b), system)} lies "
                  f"above the one upstream of it ({level_text(level_above, system)}): list "
                  "baffles in order from the exit downstream")
        floor_above = above.pool.floor
        if isinstance(b, WeirBaffle | WeirOrificeBaffle) and b.crest <= floor_above:
            _fail(f"baffles[{i}].crest", "must lie above the floor of the pool upstream of it")
        for k, o in enumerate(getattr(b, "orifices", [])):
            if o.invert < floor_above - 1e-9:
                _fail(f"baffles[{i}].orifices[{k}].invert", "lies below the upstream pool floor")
            if isinstance(b, WeirOrificeBaffle) and o.invert + o.height > b.crest:
                _fail(f"baffles[{i}].orifices[{k}]", "the orifice top is above the weir crest")
    last_floor = f.pools[-1].floor
    for i, g in enumerate(f.entrance.gates):
        if g.crest_range[0] <= last_floor:
            _fail(f"entrance.gates[{i}].crest_range", "must lie above the entrance pool floor")
    for key in ("pools", "redundant"):
        for k, pid in enumerate(getattr(f.gauging, key) or []):
            if pid not in pool_ids:
                _fail(f"gauging.{key}[{k}]", f"no pool {pid!r} in this fishway")
    ids = [a.id for a in f.aux]
    if len(set(ids)) != len(ids):
        _fail("aux", "auxiliary water ids must be unique")
    for i, a in enumerate(f.aux):
        if a.into_pool != "entrance" and a.into_pool not in pool_ids:
            _fail(f"aux[{i}].into_pool", f"no pool {a.into_pool!r} (pools: {pool_ids[0]} … "
                  f"{pool_ids[-1]}, or 'entrance')")


def _shift(item: dict[str, Any], dz: float, system: UnitSystem, path: str) -> dict[str, Any]:
    def low(value: Any, where: str) -> float:
        try:
            return to_si(value, "length", system) - dz
        except ValueError as exc:
            raise SiteConfigError("", [(f"{path}.{where}", str(exc))]) from None

    out = copy.deepcopy(item)
    for key in ("crest", "invert"):
        if key in out:
            out[key] = f"{low(out[key], key)!r} m"
    if isinstance(out.get("pool"), dict) and "floor" in out["pool"]:
        out["pool"]["floor"] = f"{low(out['pool']['floor'], 'pool.floor')!r} m"
    for k, o in enumerate(out.get("orifices") or []):
        if isinstance(o, dict) and "invert" in o:
            o["invert"] = f"{low(o['invert'], f'orifices[{k}].invert')!r} m"
    return out


def _repeat_baffle(item: dict[str, Any], index: int, system: UnitSystem) -> list[dict[str, Any]]:
    path = f"baffles[{index}]"
    count, drop = item.get("repeat"), item.get("drop")
    if not isinstance(count, int) or isinstance(count, bool) or not 1 <= count <= 500:
        raise SiteConfigError("", [(f"{path}.repeat", "must be a whole number from 1 to 500")])
    try:
        drop_m = to_si(drop, "length", system)
    except ValueError as exc:
        raise SiteConfigError("", [(f"{path}.drop", f"{exc} (the fall from one repeated baffle "
                                    "to the next)")]) from None
    if drop_m < 0:
        raise SiteConfigError("", [(f"{path}.drop", "must be ≥ 0")])
    base = {k: v for k, v in item.items() if k not in ("repeat", "drop")}
    out = []
    for n in range(count):
        one = _shift(base, n * drop_m, system, path)
        if "id" in base:
            one["id"] = f"{base['id']}_{n + 1}"
        if isinstance(one.get("pool"), dict) and "id" in one["pool"]:
            one["pool"]["id"] = f"{base['pool']['id']}_{n + 1}"
        out.append(one)
    return out


_TAGS = {"weir", "weir_orifice", "vertical_slot", "orifice", "adjustable_weir", "gravity", "pumps"}


def _dotted(loc: tuple[Any, ...]) -> str:
    parts: list[str] = []
    for i, item in enumerate(loc):
        if isinstance(item, int):
            parts[-1:] = [f"{parts[-1]}[{item}]"] if parts else [f"[{item}]"]
        elif (item in _TAGS and i > 0 and isinstance(loc[i - 1], int | str)) or (
                isinstance(item, str) and item.startswith("function-")):
            continue
        else:
            parts.append(str(item))
    return ".".join(parts)


def _format(exc: ValidationError) -> list[tuple[str, str]]:
    out = []
    for err in exc.errors(include_url=False):
        path = _dotted(tuple(err["loc"]))
        msg = re.sub(r"^(Value error|Assertion failed), ", "", err["msg"])
        m = re.match(rf"^{_PATH}(.*?){_PATH} (.*)$", msg, re.S)
        if m:
            path = f"{path}.{m.group(1)}" if path else m.group(1)
            msg = m.group(2)
        if err["type"] == "missing":
            msg = "missing (required)"
        elif err["type"] == "extra_forbidden":
            msg = "unknown field (check the spelling)"
        elif "input" in err and err["type"] not in ("value_error",) and not isinstance(
                err["input"], dict | list):
            msg = f"{msg} (got {err['input']!r})"
        out.append((path, msg))
    return out


def _expand_repeats(data: dict[str, Any], system: UnitSystem
                    ) -> tuple[dict[str, Any], dict[tuple[int, int], str]]:
    """Expand ``repeat``/``drop`` baffle entries; also return, for each expanded baffle
    (fishway index, baffle index), how to name it in an error: ``baffles[2] (copy 5 of 38)``."""
    names: dict[tuple[int, int], str] = {}
    fishways = data.get("fishways")
    if not isinstance(fishways, list):
        return data, names
    out_fw = []
    for fi, fw in enumerate(fishways):
        if not isinstance(fw, dict) or not isinstance(fw.get("baffles"), list):
            out_fw.append(fw)
            continue
        out: list[Any] = []
        for i, item in enumerate(fw["baffles"]):
            if isinstance(item, dict) and "repeat" in item:
                try:
                    copies = _repeat_baffle(item, i, system)
                except SiteConfigError as exc:
                    raise SiteConfigError("", [(f"fishways[{fi}].{p}", m)
                                               for p, m in exc.errors]) from None
                for k in range(len(copies)):
                    names[(fi, len(out) + k)] = f"baffles[{i}] (copy {k + 1} of {len(copies)})"
                out.extend(copies)
            else:
                names[(fi, len(out))] = f"baffles[{i}]"
                out.append(item)
        out_fw.append({**fw, "baffles": out})
    return {**data, "fishways": out_fw}, names


def _file_paths(errors: list[tuple[str, str]], names: dict[tuple[int, int], str]
                ) -> list[tuple[str, str]]:
    """Name expanded baffles by their entry in the file; one line for the copies of an entry
    that share an error."""
    out: list[tuple[str, str]] = []
    seen: set[tuple[str, str]] = set()
    for raw, msg in errors:
        path = raw
        m = re.match(r"^fishways\[(\d+)\]\.baffles\[(\d+)\](.*)$", raw)
        if m:
            name = names.get((int(m.group(1)), int(m.group(2))))
            if name is not None:
                entry = re.sub(r" \(copy \d+ of (\d+)\)", r" (all \1 copies)", name)
                key = (f"fishways[{m.group(1)}].{entry}{m.group(3)}", msg)
                if key in seen:
                    continue
                seen.add(key)
                path = f"fishways[{m.group(1)}].{name}{m.group(3)}"
        out.append((path, msg))
    return out


def parse_site(data: dict[str, Any], source: str = "<site>") -> Site:
    """Validate a parsed TOML document (a dict) into a :class:`Site` with SI values."""
    units = data.get("site", {}).get("units") if isinstance(data.get("site"), dict) else None
    if units not in ("us", "si"):
        raise SiteConfigError(source, [("site.units", "must be 'us' (ft, cfs) or 'si' "
                                        f"(m, m³/s), got {units!r}")])
    try:
        expanded, names = _expand_repeats(data, units)
    except SiteConfigError as exc:
        raise SiteConfigError(source, exc.errors) from None
    try:
        return Site.model_validate(expanded, context={"units": units})
    except ValidationError as exc:
        raise SiteConfigError(source, _file_paths(_format(exc), names)) from None


def demo_site_path() -> Path:
    """The demo site file shipped inside the package (an invented dam and river)."""
    return Path(str(resources.files("ops_logic") / "data" / "demo_site.toml"))


def load_site(path: str | Path | None = None) -> Site:
    """Read and validate a site file; ``None`` loads the shipped demo site."""
    p = Path(path) if path is not None else demo_site_path()
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as exc:
        raise SiteConfigError(str(p), [("", f"cannot read the file ({exc.strerror})")]) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SiteConfigError(str(p), [("", f"not valid TOML: {exc}")]) from None
    return parse_site(data, str(p))
