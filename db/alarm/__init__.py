"""Alarm management on the database side: storage, evaluation per ingest cycle, actions.

The pure engine is :mod:`ops_logic.alarms`; this package runs it against the database.

=================  =============================================================================
``store``          :class:`~db.alarm.store.AlarmStore`: the engine state of a site, one locked
                   transaction per change (evaluation or action), events appended atomically
``overrides``      the dashboard's alarm-limit and mode overrides (``setting_changes``) brought
                   into the engine
``inputs``         :class:`~db.alarm.inputs.InputReader`: ``AlarmInputs`` from the database in a
                   fixed handful of queries
``evaluator``      :class:`~db.alarm.evaluator.AlarmEvaluator`: the ingest's per-cycle hook
``service``        :class:`~db.alarm.service.AlarmService`: operators' and supervisors' actions
                   (the API the dashboard calls)
``history``        alarm history queries, CSV export, performance figures for a period
=================  =============================================================================

E-mail notification is :mod:`db.notify`; the command line ``fishway alarms`` is
:mod:`db.alarm_cli`.
"""

__all__ = ["evaluator", "history", "inputs", "overrides", "service", "store"]
