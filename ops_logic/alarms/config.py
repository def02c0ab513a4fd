"""Alarm rules of a fishway as configured in the site file (``[fishways.alarms]``).

Every rule has a priority (1 high, 2 medium, 3 low), an on-delay and an off-delay [s], a
deadband in the unit of its value where it compares a value with a limit, and the fishway
modes in which it is suppressed by design (``"maintenance"``: dewatered; ``"out_of_service"``:
closed to fish but watered). Numbers are SI in the unit the field name ends with (``_m``, ``_c``,
``_mg_l``, ``_pct``, ``_s``, ``_m3s``, ``_m_s``, ``_w_m3``); length, flow, velocity and power
density fields also take a string with its unit (``deadband_m = "0.05 ft"``). A misspelled rule
or field raises (``extra = "forbid"``): a typo never passes with a warning.

The defaults suit adult salmonids migrating through a pool fishway. The hydraulic limits are
the site's own targets (``[fishways.targets]``); the other limits are here, each default marked
with its source: a value from REFERENCES.md (with "from memory" where it says so) or "common
practice" (a trade starting value with no publication behind it here; tune it per site).
The priorities aim at the ISA-18.2 / EEMUA 191 split of about 5 % high, 15 % medium and 80 % low
alarms (from memory): high only for water that blocks or harms fish.

>>> s = AlarmSettings()
>>> s.do_low.limit_mg_l, s.temp_high_limit_c, s.rule("pump_trip").priority
(5.0, 18.0, 2)
>>> try:
...     AlarmSettings.model_validate({"do_lwo": {}})
... except ValueError as exc:
...     print(exc.errors()[0]["type"], exc.errors()[0]["loc"])
extra_forbidden ('do_lwo',)
"""
from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field

from ops_logic.units import to_si

__all__ = ["RULE_NAMES", "TEMPERATURE_7DADM_C", "AlarmSettings", "FishwayMode", "Rule"]

FishwayMode = Literal["operating", "maintenance", "out_of_service"]
Priority = Literal[1, 2, 3]

TEMPERATURE_7DADM_C = {
    "spawning": 13.0,
    "core_juvenile_rearing": 16.0,
    "migration_non_core_rearing": 18.0,
    "migration_corridor": 20.0,
}
"""7DADM criteria by use [°C]: US EPA Region 10 (2003), EPA 910-B-03-002 (from memory)."""

TEMPERATURE_BLOCKING_C = 21.0
"""Adult migration blocked near 21–22 °C (McCullough 1999, EPA 910-R-99-010; from memory):
the low end of the range."""


def _si(kind: str) -> BeforeValidator:
    return BeforeValidator(lambda v: to_si(v, kind, "si") if isinstance(v, str) else v)


Meters = Annotated[float, _si("length"), Field(ge=0)]
PositiveMeters = Annotated[float, _si("length"), Field(gt=0)]
FlowM3s = Annotated[float, _si("flow"), Field(ge=0)]
SpeedMS = Annotated[float, _si("velocity"), Field(ge=0)]
PowerWm3 = Annotated[float, _si("power_density"), Field(ge=0)]
Seconds = Annotated[float, Field(ge=0)]
Positive = Annotated[float, Field(gt=0)]

_ALL = ("maintenance", "out_of_service")
_DEWATERED = ("maintenance",)


class Rule(BaseModel):
    """Settings every rule has. Subclasses set their own defaults."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    enabled: bool = True
    priority: Priority = 3
    on_delay_s: Seconds = 0.0
    off_delay_s: Seconds = 0.0
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = ()

    @property
    def deadband(self) -> float:
        """The deadband in the unit of the rule's value (0 for rules without one)."""
        for name, value in self:
            if name.startswith("deadband_"):
                return float(value)
        return 0.0


# -- hydraulic criteria (limits from [fishways.targets]) ---------------------------------------
# Deadbands of about the resolution of a pool gauge and delays of a few minutes (levels settle
# after an adjustment) are common practice for all of them.
class HeadDrop(Rule):
    """Pool-to-pool head drop out of its band: ONE alarm per fishway naming the worst baffle
    (a forebay or tailwater change moves every drop at once, and the operator's action is one
    adjustment, so one alarm per baffle would be a flood with one cause)."""

    on_delay_s: Seconds = 300.0  # common practice
    off_delay_s: Seconds = 60.0  # common practice
    deadband_m: Meters = 0.01  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _ALL


class EntranceHead(Rule):
    priority: Priority = 2  # common practice: attraction at the entrance comes first
    on_delay_s: Seconds = 300.0  # common practice
    off_delay_s: Seconds = 60.0  # common practice
    deadband_m: Meters = 0.02  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _ALL


class ExitHead(Rule):
    on_delay_s: Seconds = 300.0  # common practice
    off_delay_s: Seconds = 60.0  # common practice
    deadband_m: Meters = 0.02  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _ALL


class PowerDensity(Rule):
    """Volumetric power dissipation above its limit; one alarm per fishway (worst pool)."""

    on_delay_s: Seconds = 300.0  # common practice
    off_delay_s: Seconds = 60.0  # common practice
    deadband_w_m3: PowerWm3 = 5.0  # common practice (about 3 % of 191.5 W/m³)
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _ALL


class DiffuserVelocity(Rule):
    """Diffuser gross-area velocity above its limit; one alarm per auxiliary source."""

    on_delay_s: Seconds = 120.0  # common practice
    off_delay_s: Seconds = 60.0  # common practice
    deadband_m_s: SpeedMS = 0.01  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _ALL


class AttractionFlowLow(Rule):
    priority: Priority = 2  # common practice
    on_delay_s: Seconds = 300.0  # common practice
    off_delay_s: Seconds = 60.0  # common practice
    deadband_m3s: FlowM3s = 0.05  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _ALL


class ForebayRange(Rule):
    on_delay_s: Seconds = 600.0  # common practice
    off_delay_s: Seconds = 120.0  # common practice
    deadband_m: Meters = 0.03  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _ALL


class TailwaterRange(ForebayRange):
    pass


# -- water quality -----------------------------------------------------------------------------
class TempHigh(Rule):
    """Thermal stress: the 7DADM (or, with ``basis = "instantaneous"``, the reading) above the
    limit; ``limit_c`` unset takes the criterion of ``AlarmSettings.temperature_use``."""

    priority: Priority = 2  # common practice
    basis: Literal["7dadm", "instantaneous"] = "7dadm"  # the criterion is a 7DADM (from memory)
    limit_c: Annotated[float, Field(gt=0, lt=40)] | None = None
    deadband_c: Annotated[float, Field(ge=0)] = 0.2  # common practice
    on_delay_s: Seconds = 600.0  # common practice
    off_delay_s: Seconds = 600.0  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _DEWATERED


class TempHighHigh(Rule):
    """Migration blocked: the water temperature reading above the blocking threshold."""

    priority: Priority = 1  # harms or blocks fish
    limit_c: Annotated[float, Field(gt=0, lt=40)] = TEMPERATURE_BLOCKING_C  # McCullough
    # 1999 (from memory)
    deadband_c: Annotated[float, Field(ge=0)] = 0.5  # common practice
    on_delay_s: Seconds = 600.0  # common practice
    off_delay_s: Seconds = 600.0  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _DEWATERED


class DoLow(Rule):
    priority: Priority = 2  # common practice
    limit_mg_l: Positive = 5.0  # US EPA 1986 coldwater, other life stages, 7-day mean
    # minimum 5.0 mg/L (from memory), applied to the reading: conservative
    deadband_mg_l: Annotated[float, Field(ge=0)] = 0.2  # common practice (sensor noise)
    on_delay_s: Seconds = 300.0  # common practice
    off_delay_s: Seconds = 300.0  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _DEWATERED


class DoLowLow(DoLow):
    priority: Priority = 1  # harms fish
    limit_mg_l: Positive = 4.0  # US EPA 1986 coldwater, 1-day minimum 4.0 mg/L (from memory)


class DoSatLow(Rule):
    priority: Priority = 3  # common practice
    limit_pct: Positive = 80.0  # common practice (no published value in REFERENCES.md)
    deadband_pct: Annotated[float, Field(ge=0)] = 2.0  # common practice
    on_delay_s: Seconds = 300.0  # common practice
    off_delay_s: Seconds = 300.0  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _DEWATERED


class DoSatLowLow(DoSatLow):
    priority: Priority = 2  # common practice
    limit_pct: Positive = 60.0  # common practice (no published value in REFERENCES.md)


class TdgHigh(Rule):
    """Total dissolved gas above its limit; off by default (the tag catalogue has no TDG
    gauge): give ``enabled = true`` and the tag name."""

    enabled: bool = False
    priority: Priority = 2  # common practice
    tag: str = "{fishway}.tdg"
    limit_pct: Positive = 110.0  # 110 % saturation in most water-quality standards (seen)
    deadband_pct: Annotated[float, Field(ge=0)] = 1.0  # common practice
    on_delay_s: Seconds = 600.0  # common practice
    off_delay_s: Seconds = 600.0  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _DEWATERED


# -- equipment and debris ----------------------------------------------------------------------
class TrashRackDpHigh(Rule):
    limit_m: PositiveMeters = 0.15  # common practice (debris builds up; set per site)
    deadband_m: Meters = 0.02  # common practice
    on_delay_s: Seconds = 300.0  # common practice
    off_delay_s: Seconds = 120.0  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _DEWATERED


class PicketDpHigh(TrashRackDpHigh):
    limit_m: PositiveMeters = 0.09  # common practice (about 0.3 ft; set per site)


class ActuatorMismatch(Rule):
    """An actuator's position differs from its last logged setting by more than a tolerance
    (by setting kind); one alarm per actuator."""

    tolerance_m: PositiveMeters = 0.03  # common practice (about 0.1 ft)
    tolerance_pct: Positive = 5.0  # common practice
    tolerance_pumps: Positive = 0.5  # one pump: any difference in whole pumps
    on_delay_s: Seconds = 120.0  # common practice (gate and valve travel time)
    off_delay_s: Seconds = 30.0  # common practice


class PumpTrip(Rule):
    priority: Priority = 2  # common practice: attraction water lost
    on_delay_s: Seconds = 0.0
    off_delay_s: Seconds = 0.0


# -- data --------------------------------------------------------------------------------------
class SensorFail(Rule):
    """QARTOD flag FAIL (4) or MISSING (9) for longer than the on-delay; one alarm per tag."""

    on_delay_s: Seconds = 300.0  # common practice
    off_delay_s: Seconds = 60.0  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _DEWATERED


class SensorSuspect(Rule):
    """QARTOD flag SUSPECT (3) for longer than the on-delay; one alarm per tag."""

    on_delay_s: Seconds = 1800.0  # common practice
    off_delay_s: Seconds = 300.0  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _DEWATERED


class StaleTag(Rule):
    """No reading younger than ``max_age_s``; one alarm per tag."""

    max_age_s: Positive = 120.0  # common practice (12 polls at the default 10 s)
    off_delay_s: Seconds = 0.0


class FeedComms(Rule):
    """A feed reports failure, or its last success is older than ``max_age_s``; one alarm per
    feed, with the stale and quality alarms of its tags grouped under it."""

    priority: Priority = 2  # common practice: every reading of the feed is lost
    max_age_s: Positive = 60.0  # common practice (6 polls at the default 10 s)
    on_delay_s: Seconds = 30.0  # common practice
    off_delay_s: Seconds = 30.0  # common practice


class GaugeDisagree(Rule):
    """Redundant gauges of one pool differ by more than ``limit_m``."""

    limit_m: PositiveMeters = 0.03  # common practice (about 0.1 ft)
    deadband_m: Meters = 0.01  # common practice
    on_delay_s: Seconds = 600.0  # common practice
    off_delay_s: Seconds = 120.0  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _DEWATERED


# -- recommendation ----------------------------------------------------------------------------
class AdjustmentDue(Rule):
    """The recommended settings differ from the current ones by more than a threshold (by
    setting kind) for longer than the on-delay; one alarm per fishway."""

    threshold_m: PositiveMeters = 0.03  # common practice (about 0.1 ft)
    threshold_pct: Positive = 5.0  # common practice
    threshold_pumps: Positive = 0.5  # any change in whole pumps
    on_delay_s: Seconds = 900.0  # common practice
    off_delay_s: Seconds = 60.0  # common practice
    suppress_in: tuple[Literal["maintenance", "out_of_service"], ...] = _ALL


class AlarmSettings(BaseModel):
    """The alarm rules of one fishway; see the module docstring."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    temperature_use: Literal["spawning", "core_juvenile_rearing", "migration_non_core_rearing",
                             "migration_corridor"] = "migration_non_core_rearing"
    max_shelve_s: Positive = 43200.0  # common practice: shelving lasts at most a shift
    head_drop: HeadDrop = HeadDrop()
    entrance_head: EntranceHead = EntranceHead()
    exit_head: ExitHead = ExitHead()
    power_density: PowerDensity = PowerDensity()
    diffuser_velocity: DiffuserVelocity = DiffuserVelocity()
    attraction_flow_low: AttractionFlowLow = AttractionFlowLow()
    forebay_range: ForebayRange = ForebayRange()
    tailwater_range: TailwaterRange = TailwaterRange()
    temp_high: TempHigh = TempHigh()
    temp_high_high: TempHighHigh = TempHighHigh()
    do_low: DoLow = DoLow()
    do_low_low: DoLowLow = DoLowLow()
    do_sat_low: DoSatLow = DoSatLow()
    do_sat_low_low: DoSatLowLow = DoSatLowLow()
    tdg_high: TdgHigh = TdgHigh()
    trash_rack_dp_high: TrashRackDpHigh = TrashRackDpHigh()
    picket_dp_high: PicketDpHigh = PicketDpHigh()
    actuator_mismatch: ActuatorMismatch = ActuatorMismatch()
    pump_trip: PumpTrip = PumpTrip()
    sensor_fail: SensorFail = SensorFail()
    sensor_suspect: SensorSuspect = SensorSuspect()
    stale_tag: StaleTag = StaleTag()
    feed_comms: FeedComms = FeedComms()
    gauge_disagree: GaugeDisagree = GaugeDisagree()
    adjustment_due: AdjustmentDue = AdjustmentDue()

    @property
    def temp_high_limit_c(self) -> float:
        """The thermal-stress limit in force [°C]."""
        if self.temp_high.limit_c is not None:
            return self.temp_high.limit_c
        return TEMPERATURE_7DADM_C[self.temperature_use]

    def rule(self, name: str) -> Rule:
        """The settings of rule ``name``; an unknown name raises ``ValueError``."""
        if name not in RULE_NAMES:
            raise ValueError(f"unknown alarm rule {name!r}; known: {', '.join(RULE_NAMES)}")
        return getattr(self, name)

    def with_parameter(self, rule: str, parameter: str, value: Any) -> AlarmSettings:
        """A copy with one rule parameter changed, validated like the site file (a misspelled
        rule or parameter raises ``ValueError``)."""
        current = self.rule(rule)
        if parameter not in type(current).model_fields:
            raise ValueError(f"alarm rule {rule!r} has no parameter {parameter!r}; it has: "
                             f"{', '.join(type(current).model_fields)}")
        new_rule = type(current).model_validate({**current.model_dump(), parameter: value})
        return self.model_copy(update={rule: new_rule})


RULE_NAMES: tuple[str, ...] = tuple(n for n, f in AlarmSettings.model_fields.items()
                                    if isinstance(f.default, Rule))
"""Every rule name, in the order above."""
