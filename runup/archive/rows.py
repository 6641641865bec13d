"""Fingerprint <-> table rows: the mapping between :class:`~runup.fingerprint.Fingerprint`
and the archive's tables (see :mod:`runup.archive.schema`).  Pure: no file access here.

Complex vectors are stored as amplitude (um pp) and phase lag (degrees in [0, 360)), the
trade's reading; they are rebuilt with :func:`runup.units.to_response`.
"""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa

from ..fingerprint import (
    CriticalPrint,
    Fingerprint,
    GridCurve,
    RunningSpeedPrint,
    SegmentPrint,
    SlowRollPrint,
    VerdictPrint,
)
from ..run import SourceFile
from ..units import amplitude_of, phase_lag_deg_of, to_response
from .schema import SCHEMA_VERSION, TABLES

__all__ = ["fingerprint_tables", "fingerprints_from_frames"]


def _vec(z: np.ndarray | complex) -> tuple[np.ndarray, np.ndarray]:
    arr = np.atleast_1d(np.asarray(z, dtype=complex))
    return amplitude_of(arr), phase_lag_deg_of(arr, unwrap=False)


def _table(name: str, columns: dict[str, Any], n: int, run_id: str, write_id: str) -> pa.Table:
    data = {"run_id": [run_id] * n, "write_id": [write_id] * n, **columns}
    return pa.Table.from_pydict(data, schema=TABLES[name])


def fingerprint_tables(fp: Fingerprint, *, write_id: str, committed_utc: str) -> dict[str, pa.Table]:
    """The rows of one fingerprint, one Arrow table per archive table (``runs`` has one row).

    Tables with no rows are left out (a reader treats a missing file as no rows).
    """
    rid = fp.run_id
    out: dict[str, pa.Table] = {}
    segs = fp.segments
    out["segments"] = _table("segments", {
        "segment": [s.index for s in segs], "direction": [s.direction for s in segs],
        "start_rpm": [s.start_rpm for s in segs], "end_rpm": [s.end_rpm for s in segs],
        "sweep_rate_rpm_per_s": [s.sweep_rate_rpm_per_s for s in segs],
    }, len(segs), rid, write_id)
    crits = fp.criticals
    names = [f.name for f in TABLES["criticals"] if f.name not in ("run_id", "write_id", "index")]
    cols: dict[str, Any] = {"index": list(range(len(crits)))}
    for name in names:
        cols[name] = [list(getattr(c, name)) if name in ("probes", "flags") else getattr(c, name) for c in crits]
    out["criticals"] = _table("criticals", cols, len(crits), rid, write_id)
    parts: dict[str, list[np.ndarray]] = {k: [] for k in ("curve", "name", "kind", "order", "segment", "speed_rpm", "amp", "lag")}
    for i, c in enumerate(fp.curves):
        n = c.speed_rpm.size
        amp, lag = _vec(c.response_um_pp) if n else (np.empty(0), np.empty(0))
        for key, value in (("curve", np.full(n, i)), ("name", np.full(n, c.name, dtype=object)),
                           ("kind", np.full(n, c.kind, dtype=object)), ("order", np.full(n, c.order)),
                           ("segment", np.full(n, c.segment)), ("speed_rpm", c.speed_rpm), ("amp", amp), ("lag", lag)):
            parts[key].append(value)
    joined = {k: (np.concatenate(v) if v else np.empty(0)) for k, v in parts.items()}
    n_rows = int(joined["speed_rpm"].size)
    out["curves"] = _table("curves", {
        "curve": joined["curve"].astype(np.int32), "name": joined["name"].tolist(),
        "kind": joined["kind"].tolist(), "order": joined["order"].astype(np.int32),
        "segment": joined["segment"].astype(np.int32), "speed_rpm": joined["speed_rpm"].astype(float),
        "amplitude_um_pp": pa.array(joined["amp"].astype(float), from_pandas=True),
        "phase_lag_deg": pa.array(joined["lag"].astype(float), from_pandas=True),
    }, n_rows, rid, write_id)
    sr = fp.slow_roll
    amp, lag = _vec(np.array([s.vector_um_pp for s in sr], dtype=complex))
    out["slow_roll"] = _table("slow_roll", {
        "index": list(range(len(sr))), "probe": [s.probe for s in sr], "order": [s.order for s in sr],
        "segment": [s.segment for s in sr], "amplitude_um_pp": amp.tolist(), "phase_lag_deg": lag.tolist(),
        "low_rpm": [s.low_rpm for s in sr], "high_rpm": [s.high_rpm for s in sr],
    }, len(sr), rid, write_id)
    rs = fp.running_speed
    amp, lag = _vec(np.array([r.response_um_pp for r in rs], dtype=complex))
    out["running_speed"] = _table("running_speed", {
        "index": list(range(len(rs))), "probe": [r.probe for r in rs], "segment": [r.segment for r in rs],
        "speed_rpm": [r.speed_rpm for r in rs], "basis": [r.basis for r in rs],
        "amplitude_um_pp": pa.array(amp, from_pandas=True), "phase_lag_deg": pa.array(lag, from_pandas=True),
    }, len(rs), rid, write_id)
    vs = fp.verdicts
    out["verdicts"] = _table("verdicts", {
        "index": list(range(len(vs))), "kind": [v.kind for v in vs], "segment": [v.segment for v in vs],
        "subject": [v.subject for v in vs], "value": [v.value for v in vs], "limit": [v.limit for v in vs],
        "status": [v.status for v in vs], "rule": [v.rule for v in vs],
    }, len(vs), rid, write_id)
    out = {k: t for k, t in out.items() if t.num_rows}
    out["runs"] = _table("runs", {
        "schema_version": [SCHEMA_VERSION], "committed_utc": [committed_utc], "start_time": [fp.start_time],
        "time_key": [fp.time_key], "direction": [fp.direction], "rotation": [fp.rotation],
        "tags_json": [json.dumps(dict(fp.tags), sort_keys=True)], "grid_step_rpm": [fp.grid_step_rpm],
        "rule_set": [fp.rule_set],
        "sources_json": [json.dumps([{"path": s.path, "sha256": s.sha256} for s in fp.sources])],
        "tool_version": [fp.tool_version], "n_criticals": [len(fp.criticals)],
    }, 1, rid, write_id)
    return out


def _f(value: Any) -> float:
    return math.nan if value is None or pd.isna(value) else float(value)


def _s(value: Any) -> str | None:
    return None if value is None or (isinstance(value, float) and math.isnan(value)) else str(value)


def _z(amp: Any, lag: Any) -> complex:
    return complex(to_response(_f(amp), _f(lag)))


def _groups(frame: pd.DataFrame | None, sort: str) -> dict[str, pd.DataFrame]:
    if frame is None or frame.empty:
        return {}
    return {str(k): g.sort_values(sort, kind="stable") for k, g in frame.groupby("write_id", sort=False)}


def _criticals(g: pd.DataFrame | None) -> tuple[CriticalPrint, ...]:
    if g is None:
        return ()
    out = []
    for r in g.itertuples(index=False):
        d = r._asdict()
        kw: dict[str, Any] = {}
        for name in CriticalPrint.__dataclass_fields__:
            v = d[name]
            if name in ("probes", "flags"):
                kw[name] = tuple(str(x) for x in (v if v is not None else ()))
            elif name in ("segment", "order"):
                kw[name] = int(v)
            elif name in ("direction", "method"):
                kw[name] = str(v)
            else:
                kw[name] = _f(v)
        out.append(CriticalPrint(**kw))
    return tuple(out)


def _curves(g: pd.DataFrame | None) -> tuple[GridCurve, ...]:
    if g is None:
        return ()
    out = []
    for _, c in g.groupby("curve", sort=True):
        c = c.sort_values("speed_rpm", kind="stable")
        first = c.iloc[0]
        z = to_response(c["amplitude_um_pp"].to_numpy(float, na_value=np.nan),
                        c["phase_lag_deg"].to_numpy(float, na_value=np.nan))
        out.append(GridCurve(str(first["name"]), first["kind"], int(first["order"]), int(first["segment"]),
                             c["speed_rpm"].to_numpy(float), z))
    return tuple(out)


def fingerprints_from_frames(frames: dict[str, pd.DataFrame], *, machine_id: str) -> list[Fingerprint]:
    """Fingerprints of one machine from its (already upgraded and committed-filtered) tables.

    ``frames["runs"]`` gives the runs, in its row order; the other tables are joined on
    ``write_id``.
    """
    runs = frames["runs"]
    by: dict[str, dict[str, pd.DataFrame]] = {
        "segments": _groups(frames.get("segments"), "segment"),
        "criticals": _groups(frames.get("criticals"), "index"),
        "curves": _groups(frames.get("curves"), "curve"),
        "slow_roll": _groups(frames.get("slow_roll"), "index"),
        "running_speed": _groups(frames.get("running_speed"), "index"),
        "verdicts": _groups(frames.get("verdicts"), "index"),
    }
    out = []
    for r in runs.itertuples(index=False):
        wid = str(r.write_id)

        def rows(table: str, wid: str = wid) -> list[Any]:
            g = by[table].get(wid)
            return [] if g is None else list(g.itertuples(index=False))

        out.append(Fingerprint(
            machine_id=machine_id,
            run_id=str(r.run_id),
            start_time=_s(r.start_time),
            direction=_s(r.direction),
            rotation=_s(r.rotation),
            tags=tuple(sorted(json.loads(r.tags_json).items())),
            segments=tuple(SegmentPrint(int(s.segment), str(s.direction), _f(s.start_rpm), _f(s.end_rpm),
                                        _f(s.sweep_rate_rpm_per_s)) for s in rows("segments")),
            grid_step_rpm=_f(r.grid_step_rpm),
            curves=_curves(by["curves"].get(wid)),
            criticals=_criticals(by["criticals"].get(wid)),
            slow_roll=tuple(SlowRollPrint(str(s.probe), int(s.order), int(s.segment),
                                          _z(s.amplitude_um_pp, s.phase_lag_deg), _f(s.low_rpm), _f(s.high_rpm))
                            for s in rows("slow_roll")),
            running_speed=tuple(RunningSpeedPrint(str(s.probe), int(s.segment), _f(s.speed_rpm), s.basis,
                                                  _z(s.amplitude_um_pp, s.phase_lag_deg))
                                for s in rows("running_speed")),
            rule_set=_s(r.rule_set),
            verdicts=tuple(VerdictPrint(v.kind, int(v.segment), str(v.subject), _f(v.value), _f(v.limit),
                                        str(v.status), str(v.rule)) for v in rows("verdicts")),
            sources=tuple(SourceFile(d["path"], d["sha256"]) for d in json.loads(r.sources_json)),
            tool_version=str(r.tool_version),
        ))
    return out
