"""Rendering of results as JSON-ready dictionaries (a leaf: it computes nothing).

The JSON document written by ``runup identify --json`` is described in ``docs/json.md``;
``schema_version`` changes whenever a field changes meaning or is removed.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np

from ._version import __version__
from .critical import Critical, Identification, Interval, ProbeDetail, SplitBranch, SplitPair
from .estimators import EstimatorTable
from .fit.circle import CircleFit
from .fit.half_power import HalfPower
from .run import ConditionedRun

if TYPE_CHECKING:  # only for annotations: stiffness imports compare, which imports this module
    from .stiffness import StiffnessEstimate

__all__ = ["SCHEMA_VERSION", "CAUTION", "json_number", "identification_to_dict", "stiffness_to_dict"]

SCHEMA_VERSION = 1

#: Printed by the CLI and written into every report.
CAUTION = (
    "Results support, and never replace, engineering judgement. Acceptance follows the purchase "
    "specification, the applicable standards, local codes and licensed practice."
)

#: Source rows listed per correction in JSON (the count is always given).
_MAX_ROWS_LISTED = 50


def json_number(value: float | None) -> float | None:
    """A float for JSON: ``None`` for missing or non-finite values."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


_num = json_number


def _interval(ci: Interval | None) -> list[float] | None:
    return None if ci is None else [_num(ci.low), _num(ci.high)]  # type: ignore[list-item]


def _vector(z: complex) -> dict[str, float | None] | None:
    if not (math.isfinite(z.real) and math.isfinite(z.imag)):
        return None
    return {
        "amplitude_um_pp": _num(abs(z)),
        "phase_lag_deg": _num(float(np.mod(-np.degrees(np.angle(z)), 360.0))),
    }


def _half_power(hp: HalfPower | None) -> dict[str, Any] | None:
    if hp is None:
        return None
    return {
        "peak_speed_rpm": _num(hp.peak_speed_rpm),
        "peak_amplitude_um_pp": _num(hp.peak_amplitude_um_pp),
        "lower_speed_rpm": _num(hp.lower_speed_rpm),
        "upper_speed_rpm": _num(hp.upper_speed_rpm),
        "amplification_factor": _num(hp.amplification_factor),
        "flags": list(hp.flags),
    }


def _circle(cf: CircleFit | None) -> dict[str, Any] | None:
    if cf is None:
        return None
    return {
        "natural_speed_rpm": _num(cf.natural_speed_rpm),
        "damping_ratio": _num(cf.damping_ratio),
        "amplification_factor": _num(cf.amplification_factor),
        "modal_constant": _vector(cf.modal_constant_um_pp),
        "pair_damping_spread": _num(cf.pair_damping_spread),
        "residual_rms": _num(cf.residual_rms),
        "n_points": cf.n_points,
        "low_rpm": _num(cf.low_rpm),
        "high_rpm": _num(cf.high_rpm),
    }


def _detail(d: ProbeDetail) -> dict[str, Any]:
    return {
        "probe": d.probe,
        "evidence": d.evidence,
        "peak_speed_rpm": _num(d.peak_speed_rpm),
        "peak_amplitude_um_pp": _num(d.peak_amplitude_um_pp),
        "phase_rise_deg": _num(d.phase_rise_deg),
        "modal_constant": _vector(d.modal_constant_um_pp),
        "half_power": _half_power(d.half_power),
        "circle_fit": _circle(d.circle),
        "flags": list(d.flags),
    }


def _estimators(table: EstimatorTable | None) -> dict[str, Any] | None:
    if table is None:
        return None
    return {
        "headline": table.headline,
        "reason": table.reason,
        "disagree": list(table.disagree),
        "rows": [
            {
                "estimator": r.estimator,
                "amplification_factor": _num(r.amplification_factor),
                "amplification_factor_ci95": [_num(r.af_ci95_low), _num(r.af_ci95_high)],
                "damping_ratio": _num(r.damping_ratio),
                "probe": r.probe,
                "note": r.note,
            }
            for r in table.rows
        ],
    }


def _split(pair: SplitPair | None) -> dict[str, Any] | None:
    if pair is None:
        return None

    def branch(b: SplitBranch) -> dict[str, Any]:
        return {
            "speed_rpm": _num(b.speed_rpm),
            "natural_speed_rpm": _num(b.natural_speed_rpm),
            "natural_speed_ci95_rpm": _interval(b.natural_speed_ci95_rpm),
            "damping_ratio": _num(b.damping_ratio),
            "amplification_factor": _num(b.amplification_factor),
            "dominant_probe": b.dominant_probe,
            "direction_deg": _num(b.direction_deg),
        }

    return {"lower": branch(pair.lower), "upper": branch(pair.upper), "separation_percent": _num(pair.separation_percent)}


def critical_to_dict(c: Critical) -> dict[str, Any]:
    """One critical as a JSON-ready dictionary (see ``docs/json.md``)."""
    return {
        "speed_rpm": _num(c.speed_rpm),
        "natural_speed_rpm": _num(c.natural_speed_rpm),
        "natural_speed_ci95_rpm": _interval(c.natural_speed_ci95_rpm),
        "damping_ratio": _num(c.damping_ratio),
        "damping_ratio_ci95": _interval(c.damping_ratio_ci95),
        "amplification_factor": _num(c.amplification_factor),
        "amplification_factor_ci95": _interval(c.amplification_factor_ci95),
        "lower_half_power_rpm": _num(c.lower_half_power_rpm),
        "upper_half_power_rpm": _num(c.upper_half_power_rpm),
        "probes": list(c.probes),
        "evidence": c.evidence,
        "order": c.order,
        "shaft_speed_rpm": _num(c.shaft_speed_rpm),
        "segment": c.segment,
        "direction": c.direction,
        "method": c.method,
        "af_method": c.af_method,
        "flags": list(c.flags),
        "notes": list(c.notes),
        "fit": {"low_rpm": _num(c.fit_low_rpm), "high_rpm": _num(c.fit_high_rpm), "points": c.fit_points},
        "split": _split(c.split),
        "estimators": _estimators(c.estimators),
        "detail": [_detail(d) for d in c.detail],
    }


def conditioning_to_dict(cond: ConditionedRun) -> dict[str, Any]:
    """Segments, corrections, slow-roll vectors, warnings and settings of a conditioned run."""
    return {
        "settings": dict(cond.settings),
        "segments": [
            {
                "index": s.index,
                "label": s.label,
                "direction": s.direction,
                "start_rpm": _num(s.start_rpm),
                "end_rpm": _num(s.end_rpm),
                "n_samples": s.n_samples,
                "sweep_rate_rpm_per_s": _num(s.sweep_rate_rpm_per_s),
            }
            for s in cond.segments
        ],
        "slow_roll": [
            {
                "probe": c.probe,
                "order": c.order,
                "segment": c.segment,
                "low_rpm": _num(c.slow_roll.low_rpm),
                "high_rpm": _num(c.slow_roll.high_rpm),
                "amplitude_um_pp": _num(c.slow_roll.amplitude_um_pp),
                "phase_lag_deg": _num(c.slow_roll.phase_lag_deg),
                "n_points": c.slow_roll.n_points,
                "automatic": c.slow_roll.automatic,
            }
            for c in cond.curves
            if c.slow_roll is not None
        ],
        "corrections": [
            {
                "kind": k.kind,
                "probe": k.probe,
                "order": k.order,
                "segment": k.segment,
                "speed_rpm": _num(k.speed_rpm),
                "n_rows": len(k.rows),
                "rows": list(k.rows[:_MAX_ROWS_LISTED]),
                "detail": k.detail,
            }
            for k in cond.corrections
        ],
        "warnings": list(cond.warnings),
    }


def identification_to_dict(result: Identification) -> dict[str, Any]:
    """The whole identification as a JSON-ready dictionary (see ``docs/json.md``)."""
    meta = result.conditioned.metadata
    op = meta.operating
    out: dict[str, Any] = {
        "schema_version": SCHEMA_VERSION,
        "tool": {"name": "runup", "version": __version__},
        "caution": CAUTION,
        "run": {
            "machine_id": meta.machine_id,
            "run_id": meta.run_id,
            "direction": meta.direction,
            "rotation": meta.rotation,
            "operating": {
                "min_operating_rpm": _num(op.min_operating_rpm),
                "max_continuous_rpm": _num(op.max_continuous_rpm),
                "trip_rpm": _num(op.trip_rpm),
            },
            "probes": [{"name": p.name, "plane": p.plane, "angle_deg": _num(p.angle_deg)} for p in meta.probes],
            "sources": [{"path": s.path, "sha256": s.sha256} for s in meta.sources],
        },
        "conditioning": conditioning_to_dict(result.conditioned),
        "criticals": [critical_to_dict(c) for c in result.criticals],
        "rejected_candidates": list(result.rejected),
        "settings": dict(result.settings),
    }
    out["message"] = (
        f"{len(result.criticals)} critical speed(s) identified"
        if result.criticals
        else "no resonance found in the record"
    )
    return out


def stiffness_to_dict(estimate: StiffnessEstimate) -> dict[str, Any]:
    """The support-stiffness estimate as a JSON-ready dictionary."""
    return {
        "stiffness_ratio": _num(estimate.stiffness_ratio),
        "ci95": _interval(estimate.ci95),
        "chi_square": _num(estimate.chi_square),
        "degrees_of_freedom": estimate.degrees_of_freedom,
        "p_value": _num(estimate.p_value),
        "map_range": [_num(estimate.map_range[0]), _num(estimate.map_range[1])],
        "residuals": [
            {
                "mode": r.mode,
                "measured_speed_rpm": _num(r.measured_speed_rpm),
                "map_speed_rpm": _num(r.map_speed_rpm),
                "residual_percent": _num(r.residual_percent),
            }
            for r in estimate.residuals
        ],
        "flags": list(estimate.flags),
        "warnings": list(estimate.warnings),
        "caveat": estimate.caveat,
    }
