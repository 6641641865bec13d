"""Synthetic run-up records of known truth, for demos, benchmarks and examples.

Everything here is invented data.  Responses are sums of unbalance-forced modes
(:func:`runup.fit.models.unbalance_response`) plus a constant slow-roll (runout) vector per
probe and complex circular Gaussian noise; the truth is returned beside the record so
that an identification can be scored against it.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from .fit.models import unbalance_response
from .run import SAMPLE_COLUMNS, OperatingSpeeds, Probe, Run, RunMetadata
from .units import amplitude_of, phase_lag_deg_of

__all__ = ["SyntheticMode", "SyntheticProbe", "synthetic_samples", "synthetic_run"]


@dataclass(frozen=True)
class SyntheticMode:
    """One mode of the invented rotor: natural speed (rpm) and damping ratio."""

    natural_speed_rpm: float
    damping_ratio: float


@dataclass(frozen=True)
class SyntheticProbe:
    """One invented probe: its name, plane, angle and how it sees each mode.

    Attributes
    ----------
    participations_um_pp
        Complex high-speed asymptote ``A`` of each mode on this probe, one per mode.
    runout_um_pp
        Slow-roll (runout) vector added at every speed.
    """

    name: str
    participations_um_pp: tuple[complex, ...]
    runout_um_pp: complex = 0j
    plane: str | None = None
    angle_deg: float | None = None


@dataclass(frozen=True)
class _Noise:
    relative: float = 0.0
    absolute_um_pp: float = 0.0


def synthetic_samples(
    speed_rpm: NDArray[np.float64],
    *,
    modes: Sequence[SyntheticMode],
    probes: Sequence[SyntheticProbe],
    noise_fraction_of_peak: float = 0.0,
    time_s: NDArray[np.float64] | None = None,
    seed: int = 0,
) -> pd.DataFrame:
    """Long-layout samples (canonical units) of the invented modes seen by the probes.

    Parameters
    ----------
    speed_rpm
        Speeds in acquisition order (rising for a startup, falling for a coastdown).
    modes, probes
        Truth; each probe has one participation per mode.
    noise_fraction_of_peak
        RMS of the complex noise as a fraction of each probe's peak dynamic amplitude
        (``E|n|^2 = (fraction * peak)^2``).
    time_s
        Acquisition times, or ``None``.
    seed
        Seed of ``numpy.random.default_rng``.
    """
    rng = np.random.default_rng(seed)
    speed = np.asarray(speed_rpm, dtype=float)
    frames = []
    for probe in probes:
        if len(probe.participations_um_pp) != len(modes):
            raise ValueError(f"probe {probe.name}: one participation per mode is needed")
        x = np.zeros(speed.size, dtype=complex)
        for mode, a in zip(modes, probe.participations_um_pp, strict=True):
            x += unbalance_response(
                speed, natural_speed_rpm=mode.natural_speed_rpm, damping_ratio=mode.damping_ratio, modal_constant=a
            )
        sigma = noise_fraction_of_peak * float(np.abs(x).max()) if x.size else 0.0
        noise = sigma * (rng.standard_normal(speed.size) + 1j * rng.standard_normal(speed.size)) / np.sqrt(2.0)
        x = x + probe.runout_um_pp + noise
        frames.append(
            pd.DataFrame(
                {
                    "speed_rpm": speed,
                    "probe": probe.name,
                    "order": 1,
                    "amplitude_um_pp": amplitude_of(x),
                    "phase_lag_deg": np.mod(phase_lag_deg_of(x, unwrap=False), 360.0),
                    "time_s": np.full(speed.size, np.nan) if time_s is None else np.asarray(time_s, float),
                    "sample": np.arange(speed.size),
                }
            )
        )
    # interleave probes sample by sample, as an acquisition system exports them
    df = pd.concat(frames, ignore_index=True).sort_values(["sample"], kind="stable")
    df = df.drop(columns="sample").reset_index(drop=True)
    df["row"] = np.arange(1, len(df) + 1)
    return df


def synthetic_run(
    speed_rpm: NDArray[np.float64],
    *,
    modes: Sequence[SyntheticMode],
    probes: Sequence[SyntheticProbe],
    noise_fraction_of_peak: float = 0.0,
    time_s: NDArray[np.float64] | None = None,
    seed: int = 0,
    machine_id: str = "synthetic",
    run_id: str = "synthetic",
    operating: OperatingSpeeds = field(default_factory=OperatingSpeeds),  # noqa: B008
) -> Run:
    """A :class:`~runup.run.Run` of :func:`synthetic_samples` with matching metadata."""
    samples = synthetic_samples(
        speed_rpm, modes=modes, probes=probes, noise_fraction_of_peak=noise_fraction_of_peak,
        time_s=time_s, seed=seed,
    )
    meta = RunMetadata(
        machine_id=machine_id,
        run_id=run_id,
        probes=tuple(Probe(p.name, p.plane, p.angle_deg) for p in probes),
        operating=operating if isinstance(operating, OperatingSpeeds) else OperatingSpeeds(),
    )
    return Run(meta, samples[list(SAMPLE_COLUMNS)])
