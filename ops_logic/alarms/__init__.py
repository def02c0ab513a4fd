"""The alarm engine as pure logic: rules, ISA-18.2 states, grouping, flood, performance.

Modules (arrows point down: each uses only those below it):

=================  =============================================================================
``engine``         :class:`AlarmEngine`: evaluate, group, flood, operator actions; its
                   serialisable :class:`EngineState`
``rules``          every rule judged against the inputs (conditions with their deadband)
``performance``    EEMUA 191 / ISA-18.2 performance figures and the history filter on a
                   DataFrame of events
``inputs``         what an evaluation is given (readings with QC flags and ages, profiles,
                   recommendations, settings, feed health, modes)
``config``         :class:`AlarmSettings`: the ``[fishways.alarms]`` section of the site file
``temperature``    the seven-day average of daily maximum temperatures (7DADM)
``limits``         deadband and on/off delays (:func:`alarm_intervals` for trying them on history)
``states``         the ISA-18.2 state model (:func:`next_state`), alarm records and events
=================  =============================================================================

Names are imported lazily (``ops_logic.site`` imports ``config`` while the engine imports the
site model), so ``from ops_logic.alarms import AlarmEngine`` works as usual.
"""
from __future__ import annotations

import importlib
from typing import Any

__all__ = [
    "AlarmEngine",
    "AlarmEvent",
    "AlarmInputs",
    "AlarmPerformance",
    "AlarmRecord",
    "AlarmSettings",
    "AlarmState",
    "EngineState",
    "FeedStatus",
    "FishwayInputs",
    "FloodStatus",
    "IllegalTransitionError",
    "TagValue",
    "Trigger",
    "alarm_history",
    "alarm_intervals",
    "alarm_performance",
    "events_frame",
    "next_state",
    "seven_day_average_daily_max",
    "to_csv",
]

_WHERE = {
    "AlarmEngine": "engine", "EngineState": "engine", "FloodStatus": "engine",
    "AlarmEvent": "states", "AlarmRecord": "states", "AlarmState": "states",
    "IllegalTransitionError": "states", "Trigger": "states", "next_state": "states",
    "AlarmInputs": "inputs", "FeedStatus": "inputs", "FishwayInputs": "inputs",
    "TagValue": "inputs", "AlarmSettings": "config", "alarm_intervals": "limits",
    "seven_day_average_daily_max": "temperature", "AlarmPerformance": "performance",
    "alarm_history": "performance", "alarm_performance": "performance",
    "events_frame": "performance", "to_csv": "performance",
}


def __getattr__(name: str) -> Any:
    if name in _WHERE:
        return getattr(importlib.import_module(f"ops_logic.alarms.{_WHERE[name]}"), name)
    raise AttributeError(f"module 'ops_logic.alarms' has no attribute {name!r}")
