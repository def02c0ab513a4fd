"""The ingest service of fishway-ops: scheduled polling, live QC, storage, recommendations.

Modules (each docstring documents its API):

* :mod:`db.ingest.service` — :class:`~db.ingest.service.IngestService` (``poll_once``,
  ``recommend_once``, ``prune_once``, ``partitions_once``, ``backup_once``, ``run_once``,
  ``ingest``) and the alarm hook (``evaluators`` given a ``CycleContext``);
* :mod:`db.ingest.live_qc` — trailing windows and the QARTOD tests of :mod:`ops_logic.qc` on
  live readings (re-flags, redundant pairs, source status);
* :mod:`db.ingest.qc_config` — each tag's QC thresholds from the site model;
* :mod:`db.ingest.recommending` — the recommender job and its input policy;
* :mod:`db.ingest.schedule` — the job list, the simulated clock, APScheduler wiring;
* :mod:`db.ingest.store` — window seeding and re-flags in storage;
* :mod:`db.ingest.upkeep` — the nightly SQLite online backup;
* :mod:`db.ingest.seed` — seeding a database with history (the demo);
* :mod:`db.ingest.cli` — ``fishway ingest``.

Nothing here imports the ``simulator`` package at module level: the command line imports it
inside the functions that build a simulated feed.
"""

__all__ = ["cli", "live_qc", "qc_config", "recommending", "schedule", "seed", "service",
           "store", "upkeep"]
