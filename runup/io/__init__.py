"""Readers of run tables (CSV, Parquet) and their TOML sidecars."""

from .sidecar import RunSidecar, read_sidecar
from .tables import MIN_POINTS_PER_PROBE, parse_column_map, read_run

__all__ = ["read_run", "read_sidecar", "parse_column_map", "RunSidecar", "MIN_POINTS_PER_PROBE"]
