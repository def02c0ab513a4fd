"""Supervisors' overrides of a fishway's targets, alarm limits and mode, laid over the site file.

An override key is ``targets.<band>.<min|target|max>``, a scalar target
(``targets.max_power_density``...), ``alarms.<rule>.<parameter>`` or ``mode``; its value is SI
(``mode``: one of :data:`MODES`). The values in force are the site file's with the newest
override of each key laid over it, validated exactly like the site file (the pydantic models of
:mod:`ops_logic.site` and :mod:`ops_logic.alarms.config`), so an override the site file could
not hold is refused; one that no longer validates (the site file changed under it) is left out
and reported, never applied silently. Storage of the overrides is :mod:`db` 's
(``setting_changes``); everything that judges or recommends uses the fishway in force
(:func:`db.in_force.effective_site`).

>>> from ops_logic.site import load_site
>>> f = load_site().fishways[0]
>>> g, problems = apply_overrides(f, {"targets.pool_head_drop.max": (0.33, None)})
>>> round(g.targets.pool_head_drop.max, 2), problems
(0.33, [])
>>> g, problems = apply_overrides(f, {"targets.pool_head_drop.max": (0.01, None)})
>>> g.targets.pool_head_drop.max == f.targets.pool_head_drop.max, len(problems)
(True, 1)
"""

from __future__ import annotations

from collections.abc import Mapping

from pydantic import ValidationError

from ops_logic.alarms.config import AlarmSettings
from ops_logic.site import Fishway, Targets

__all__ = ["BANDS", "MODES", "MODE_LABELS", "apply_overrides", "validate_overrides",
           "validation_text"]

MODES = ("operating", "maintenance", "out_of_service")
MODE_LABELS = {"operating": "Operating", "maintenance": "Maintenance (dewatered)",
               "out_of_service": "Out of service (watered, closed to fish)"}
BANDS = ("pool_head_drop", "entrance_head", "exit_head", "ladder_flow")
"""The target bands (each with min, target, max)."""


def validation_text(exc: ValidationError | ValueError) -> str:
    """The reasons of a validation error, one clause each."""
    if isinstance(exc, ValidationError):
        return "; ".join(e["msg"].removeprefix("Value error, ") for e in exc.errors())
    return str(exc)


def _targets_with(targets: Targets, values: Mapping[str, float | None]) -> Targets:
    """Targets with several ``targets.…`` keys set at once, validated once."""
    data = targets.model_dump()
    for key, value in values.items():
        parts = key.split(".")[1:]
        node = data
        for part in parts[:-1]:
            node = node[part]
        if parts[-1] not in node:
            raise ValueError(f"no target {key!r}")
        node[parts[-1]] = value
    for band in BANDS:  # the band validator reads numbers only: leave unset sides out
        if isinstance(data.get(band), dict):
            data[band] = {k: v for k, v in data[band].items() if v is not None}
    return Targets.model_validate(data, context={"units": "si"})


def _alarms_with(alarms: AlarmSettings, key: str, value: float | None) -> AlarmSettings:
    _, rule, name = key.split(".")
    return alarms.with_parameter(rule, name, value)


def validate_overrides(fishway: Fishway, overrides: Mapping[str, tuple]) -> Fishway:
    """The fishway with all ``overrides`` laid over it at once (see :func:`apply_overrides`);
    ValueError with the reason when they do not validate together."""
    unknown = [k for k in overrides if k != "mode" and not k.startswith(("targets.",
                                                                         "alarms."))]
    if unknown:
        raise ValueError(f"unknown setting key {unknown[0]!r}")
    try:
        targets = _targets_with(fishway.targets, {k: v[0] for k, v in overrides.items()
                                                  if k.startswith("targets.")})
        alarms = fishway.alarms
        for key in sorted(k for k in overrides if k.startswith("alarms.")):
            alarms = _alarms_with(alarms, key, overrides[key][0])
    except ValidationError as exc:
        raise ValueError(validation_text(exc)) from None
    except (KeyError, AttributeError) as exc:
        raise ValueError(f"not a setting of this fishway ({exc})") from None
    return fishway.model_copy(update={"targets": targets, "alarms": alarms})


def apply_overrides(fishway: Fishway, overrides: Mapping[str, tuple]) -> tuple[Fishway,
                                                                              list[str]]:
    """The fishway with its target and alarm-limit overrides laid over the site file's values
    (``mode`` is not part of the model), and the overrides left out because they do not
    validate (one line each).

    Parameters
    ----------
    fishway : Fishway
        The fishway as the site file gives it.
    overrides : mapping
        Key → ``(value, text)``: the SI value (None clears an optional target) and, for
        ``mode``, the mode's name as text.

    All are tried together first (a band's sides may only hold together); when that fails,
    one at a time in key order, keeping those that hold.
    """
    try:
        return validate_overrides(fishway, overrides), []
    except ValueError:
        pass
    problems: list[str] = []
    kept: dict[str, tuple] = {}
    for key in sorted(overrides):
        try:
            validate_overrides(fishway, {**kept, key: overrides[key]})
        except ValueError as exc:
            problems.append(f"{fishway.id}: override {key} = {overrides[key][0]!r} not "
                            f"applied: {exc}")
            continue
        kept[key] = overrides[key]
    return validate_overrides(fishway, kept), problems
