"""Fingerprints, drift and trends as JSON-ready dictionaries (a leaf: it computes nothing)."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from .._version import __version__
from ..fingerprint import CriticalPrint, Fingerprint
from ..report import CAUTION, json_number
from .drift import Drift, Trend

__all__ = ["DRIFT_SCHEMA_VERSION", "fingerprint_to_dict", "drift_to_dict", "trend_to_dict"]

#: Version of the JSON documents written by ``runup archive show/trend/diff --json``.
DRIFT_SCHEMA_VERSION = 1

_num = json_number


def _vector(z: complex) -> dict[str, float | None] | None:
    if not (math.isfinite(z.real) and math.isfinite(z.imag)):
        return None
    return {"amplitude_um_pp": _num(abs(z)), "phase_lag_deg": _num(float(np.mod(-np.degrees(np.angle(z)), 360.0)))}


def _critical(c: CriticalPrint) -> dict[str, Any]:
    return {
        "segment": c.segment, "direction": c.direction, "order": c.order, "speed_rpm": _num(c.speed_rpm),
        "natural_speed_rpm": _num(c.natural_speed_rpm),
        "natural_speed_ci95_rpm": [_num(c.natural_speed_ci95_low_rpm), _num(c.natural_speed_ci95_high_rpm)],
        "damping_ratio": _num(c.damping_ratio),
        "damping_ratio_ci95": [_num(c.damping_ratio_ci95_low), _num(c.damping_ratio_ci95_high)],
        "amplification_factor": _num(c.amplification_factor),
        "amplification_factor_ci95": [_num(c.amplification_factor_ci95_low), _num(c.amplification_factor_ci95_high)],
        "peak_amplitude_um_pp": _num(c.peak_amplitude_um_pp), "method": c.method, "probes": list(c.probes),
        "flags": list(c.flags), "split_natural_speeds_rpm": [_num(c.split_lower_rpm), _num(c.split_upper_rpm)],
    }


def fingerprint_to_dict(fp: Fingerprint, *, curves: bool = False) -> dict[str, Any]:
    """A fingerprint as a JSON-ready dict; grid curves only with ``curves=True`` (they are long)."""
    doc: dict[str, Any] = {
        "schema_version": DRIFT_SCHEMA_VERSION, "document": "runup fingerprint",
        "machine_id": fp.machine_id, "run_id": fp.run_id, "start_time": fp.start_time, "time_key": fp.time_key,
        "direction": fp.direction, "rotation": fp.rotation, "tags": dict(fp.tags),
        "segments": [{"index": s.index, "direction": s.direction, "start_rpm": _num(s.start_rpm),
                      "end_rpm": _num(s.end_rpm), "sweep_rate_rpm_per_s": _num(s.sweep_rate_rpm_per_s)}
                     for s in fp.segments],
        "criticals": [_critical(c) for c in fp.criticals],
        "slow_roll": [{"probe": s.probe, "order": s.order, "segment": s.segment, "vector": _vector(s.vector_um_pp),
                       "low_rpm": _num(s.low_rpm), "high_rpm": _num(s.high_rpm)} for s in fp.slow_roll],
        "running_speed": [{"probe": r.probe, "segment": r.segment, "speed_rpm": _num(r.speed_rpm), "basis": r.basis,
                           "vector": _vector(r.response_um_pp)} for r in fp.running_speed],
        "rule_set": fp.rule_set,
        "verdicts": [{"kind": v.kind, "segment": v.segment, "subject": v.subject, "value": _num(v.value),
                      "limit": _num(v.limit), "status": v.status, "rule": v.rule} for v in fp.verdicts],
        "grid_step_rpm": _num(fp.grid_step_rpm),
        "sources": [{"path": s.path, "sha256": s.sha256} for s in fp.sources],
        "tool_version": fp.tool_version,
    }
    if curves:
        doc["curves"] = [
            {"name": g.name, "kind": g.kind, "order": g.order, "segment": g.segment,
             "speed_rpm": [_num(x) for x in g.speed_rpm], "vectors": [_vector(complex(z)) for z in g.response_um_pp]}
            for g in fp.curves
        ]
    return doc


def drift_to_dict(d: Drift) -> dict[str, Any]:
    """A drift result as a JSON-ready dict."""
    th = d.thresholds
    return {
        "schema_version": DRIFT_SCHEMA_VERSION, "document": "runup archive diff", "runup_version": __version__,
        "machine_id": d.machine_id, "run_id": d.run_id, "baseline_run_id": d.baseline_run_id,
        "thresholds": {k: _num(getattr(th, k)) for k in th.__dataclass_fields__},
        "criticals": [
            {"baseline_speed_rpm": None if m.baseline is None else _num(m.baseline.speed_rpm),
             "speed_rpm": None if m.current is None else _num(m.current.speed_rpm),
             "speed_shift_percent": _num(m.speed_shift_percent),
             "baseline_amplification_factor": None if m.baseline is None else _num(m.baseline.amplification_factor),
             "amplification_factor": None if m.current is None else _num(m.current.amplification_factor),
             "af_change_percent": _num(m.af_change_percent)}
            for m in d.matches
        ],
        "slow_roll": [{"probe": s.probe, "baseline": _vector(s.baseline_um_pp), "current": _vector(s.current_um_pp),
                       "change_um_pp": _num(s.change_um_pp), "threshold_um_pp": _num(s.threshold_um_pp)}
                      for s in d.slow_roll],
        "twice_x_peaks": [{"critical_speed_rpm": _num(p.critical_speed_rpm), "shaft_speed_rpm": _num(p.shaft_speed_rpm),
                           "amplitude_um_pp": _num(p.amplitude_um_pp), "source": p.source} for p in d.twice_x],
        "alerts": [{"kind": a.kind, "subject": a.subject, "value": _num(a.value), "threshold": _num(a.threshold),
                    "sentence": a.sentence} for a in d.alerts],
        "exit_code": d.exit_code,
        "caution": CAUTION,
    }


def trend_to_dict(t: Trend) -> dict[str, Any]:
    """A trend as a JSON-ready dict (long list of points)."""
    return {
        "schema_version": DRIFT_SCHEMA_VERSION, "document": "runup archive trend", "machine_id": t.machine_id,
        "reference_run_id": t.reference_run_id,
        "points": [{"run_id": p.run_id, "time_key": p.time_key, "start_time": p.start_time, "quantity": p.quantity,
                    "series": p.series, "value": _num(p.value)} for p in t.points],
    }
