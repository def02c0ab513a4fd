"""The advisory caution that every displayed or printed setting carries."""

__all__ = ["ADVISORY_CAUTION"]

ADVISORY_CAUTION = (
    "Advisory only: confirm every setting against the staff gauges and the site's approved "
    "operating criteria before moving a gate, weir, valve or pump. The fish agencies' criteria, "
    "local codes and licensed engineers govern."
)
