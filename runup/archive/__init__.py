"""The fingerprint archive: a Parquet dataset partitioned by machine, with JSON metadata.

See ``docs/archive.md`` for the layout, the table schemas and the guarantees.
"""

from .drift import (
    Alert,
    CriticalMatch,
    Drift,
    DriftThresholds,
    SlowRollChange,
    Trend,
    TrendPoint,
    diff,
    trend,
)
from .query import history, list_runs, load_run, machines, read_table
from .schema import SCHEMA_VERSION, TABLES
from .store import (
    ArchiveError,
    ArchiveInfo,
    Commit,
    add_fingerprint,
    create_archive,
    open_archive,
    read_baseline,
    set_baseline,
    validate_id,
)

__all__ = [
    "SCHEMA_VERSION", "TABLES", "ArchiveError", "ArchiveInfo", "Commit", "validate_id", "create_archive",
    "open_archive", "add_fingerprint", "set_baseline", "read_baseline", "machines", "list_runs", "read_table",
    "load_run", "history", "DriftThresholds", "CriticalMatch", "SlowRollChange", "Alert", "Drift", "diff",
    "TrendPoint", "Trend", "trend",
]
