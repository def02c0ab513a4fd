"""Storage layer of fishway-ops: SQLAlchemy 2 models, alembic migrations and queries.

SQLite (WAL) is the embedded default, PostgreSQL the real-deployment engine
(``FISHWAY_DATABASE_URL``). All SQL of the project lives in this package. Entry points:

* :func:`db.engine.make_engine`, :func:`db.migrate.upgrade` — open and migrate;
* :func:`db.readings.store_batch` — the ingest write path (raw readings + rollups);
* :func:`db.readings.readings_frame`, :func:`db.readings.latest_values`,
  :func:`db.rollups.rollups_frame`, :func:`db.trends.trend` (M4) — reading;
* :func:`db.retention.prune`, :func:`db.partitions.ensure_partitions` — scheduled upkeep;
* :mod:`db.catalog`, :mod:`db.history`, :mod:`db.alarms`, :mod:`db.feed_health` — the
  other tables.

Each module's docstring documents its API.
"""

__all__ = ["alarms", "arrays", "catalog", "engine", "feed_health", "history", "migrate",
           "models", "partitions", "readings", "retention", "rollups", "trends", "types"]
