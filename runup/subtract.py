"""Unbalance-verification subtraction: the response to a trial weight alone.

In an unbalance-response verification test the rotor is run once as it is (the
*residual* run) and once with a known test weight added (the *with-weight* run).  For a
linear rotor-bearing system the 1X vectors add, so the vector difference of the two runs,
speed by speed and probe by probe, is the response to the test weight alone -- the
quantity a predicted unbalance response is computed for (common practice; e.g. API RP 684
2nd ed., 2005, verification test -- from memory).

:func:`subtract` works on the conditioned curves of each run
(:func:`runup.conditioning.condition` with ``slow_roll="off"``, so that the runout, the
same in both runs, cancels in the difference instead of being estimated twice):

1. per probe and order, the residual run's complex response is interpolated linearly, real
   and imaginary parts, onto the with-weight run's speeds inside the overlapping speed
   range;
2. the difference ``X_with_weight - X_residual`` becomes a new :class:`~runup.run.Run` in
   the canonical long layout, in the with-weight run's acquisition order, with metadata
   ``"<with-weight id> minus <residual id>"`` and the sources of both.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .conditioning import condition
from .errors import DataFormatError
from .io.tables import MIN_POINTS_PER_PROBE
from .run import SAMPLE_COLUMNS, ConditionedRun, Curve, Run, RunMetadata
from .units import amplitude_of, phase_lag_deg_of

__all__ = ["subtract"]


def _curves(conditioned: ConditionedRun, segment: int, what: str) -> dict[tuple[str, int], Curve]:
    chosen = {(c.probe, c.order): c for c in conditioned.curves if c.segment == segment}
    if not chosen:
        present = sorted({c.segment for c in conditioned.curves})
        raise DataFormatError(
            f"the {what} run has no curve in speed segment {segment}; segments present: {present}"
        )
    return chosen


def _check_probes(a: RunMetadata, b: RunMetadata, keys: list[tuple[str, int]]) -> None:
    for name in sorted({p for p, _ in keys}):
        pa, pb = a.probe(name), b.probe(name)
        for attr in ("plane", "angle_deg"):
            va, vb = getattr(pa, attr), getattr(pb, attr)
            if va is not None and vb is not None and va != vb:
                raise DataFormatError(
                    f"probe '{name}' has {attr} {va!r} in the with-weight run but {vb!r} in the "
                    "residual run; the runs must be recorded on the same probes"
                )


def _difference(a: Curve, b: Curve) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Speeds, times and ``a - b`` on ``a``'s speeds inside the overlap, acquisition order."""
    low = max(a.speed_rpm[0], b.speed_rpm[0])
    high = min(a.speed_rpm[-1], b.speed_rpm[-1])
    sel = (a.speed_rpm >= low) & (a.speed_rpm <= high)
    if low >= high or sel.sum() < MIN_POINTS_PER_PROBE:
        raise DataFormatError(
            f"probe '{a.probe}' order {a.order}: the runs' speed ranges "
            f"({a.speed_rpm[0]:.0f}-{a.speed_rpm[-1]:.0f} and {b.speed_rpm[0]:.0f}-"
            f"{b.speed_rpm[-1]:.0f} rpm) overlap in {int(sel.sum())} with-weight speed(s); at least "
            f"{MIN_POINTS_PER_PROBE} are needed. Subtract runs that cover the same speeds"
        )
    speed = a.speed_rpm[sel]
    rb = b.response_um_pp
    interp = np.interp(speed, b.speed_rpm, rb.real) + 1j * np.interp(speed, b.speed_rpm, rb.imag)
    diff = a.response_um_pp[sel] - interp
    time = a.time_s[sel]
    if a.direction == "coastdown":  # curves run by ascending speed; restore acquisition order
        speed, time, diff = speed[::-1], time[::-1], diff[::-1]
    return speed, time, diff


def subtract(
    with_weight: Run,
    residual: Run,
    *,
    with_weight_segment: int = 0,
    residual_segment: int = 0,
    despike: bool = True,
) -> Run:
    """Vector difference of a with-weight run and a residual run (module notes).

    Parameters
    ----------
    with_weight, residual
        The two runs, recorded on the same probes and orders.
    with_weight_segment, residual_segment
        Monotonic speed segment of each run to use (0 = the first).
    despike
        Remove isolated spikes while conditioning each run.

    Returns
    -------
    Run
        Long-layout samples on the with-weight run's speeds inside the overlap.

    Raises
    ------
    DataFormatError
        The runs do not have the same probes and orders in the chosen segments, a probe's
        plane or angle differs, or the speed ranges overlap in fewer than
        ``MIN_POINTS_PER_PROBE`` speeds.
    """
    cw = condition(with_weight, slow_roll="off", despike=despike)
    cr = condition(residual, slow_roll="off", despike=despike)
    a = _curves(cw, with_weight_segment, "with-weight")
    b = _curves(cr, residual_segment, "residual")
    if set(a) != set(b):
        only_a = sorted(f"{p} {o}X" for p, o in set(a) - set(b))
        only_b = sorted(f"{p} {o}X" for p, o in set(b) - set(a))
        raise DataFormatError(
            "the runs must have the same probes and orders; only in the with-weight run: "
            f"{only_a or 'none'}; only in the residual run: {only_b or 'none'}"
        )
    keys = [k for k in a]  # with-weight order of the curves
    _check_probes(with_weight.metadata, residual.metadata, keys)
    frames = []
    for probe, order in keys:
        speed, time, diff = _difference(a[(probe, order)], b[(probe, order)])
        frames.append(pd.DataFrame({
            "speed_rpm": speed, "probe": probe, "order": order,
            "amplitude_um_pp": amplitude_of(diff), "phase_lag_deg": phase_lag_deg_of(diff, unwrap=False),
            "time_s": time, "k": np.arange(speed.size),
        }))
    df = pd.concat(frames, ignore_index=True)
    key = "time_s" if np.isfinite(df["time_s"].to_numpy()).all() else "k"
    df = df.sort_values(key, kind="stable").drop(columns="k").reset_index(drop=True)
    df["row"] = np.arange(1, len(df) + 1)
    ma, mb = with_weight.metadata, residual.metadata
    segment = cw.segment(with_weight_segment)
    names = {p for p, _ in keys}
    meta = RunMetadata(
        machine_id=ma.machine_id if ma.machine_id == mb.machine_id else f"{ma.machine_id} minus {mb.machine_id}",
        run_id=f"{ma.run_id} minus {mb.run_id}",
        direction=segment.direction,
        rotation=ma.rotation,
        probes=tuple(p for p in ma.probes if p.name in names),
        operating=ma.operating,
        sources=ma.sources + mb.sources,
    )
    return Run(meta, df[list(SAMPLE_COLUMNS)])
