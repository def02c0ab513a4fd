"""The status of each fishway for the overview and the wall display: judged from the readings
once per ingest cycle (:mod:`db.status.judge`), stored (:mod:`db.status.store`), read back by
the dashboard. The records are :mod:`db.status.model`'s."""

from db.status.judge import compute_status, worst_criterion
from db.status.model import Adjustment, FishwayStatus, Metric, Reading
from db.status.store import StoredStatus, read_status, status_evaluator, update_status

__all__ = ["Adjustment", "FishwayStatus", "Metric", "Reading", "StoredStatus",
           "compute_status", "read_status", "status_evaluator", "update_status",
           "worst_criterion"]
