"""Result types of identification: Critical, its per-probe detail, and Identification.

A :class:`Critical` reports both senses of "critical speed": ``speed_rpm``, the speed of
peak unbalance response, and ``natural_speed_rpm``, the fitted undamped natural speed
(where the phase lag passes 90 degrees for an isolated mode).  For the headline the
isolated-mode relations of :mod:`runup.fit.models` tie them together:
``speed_rpm = natural_speed_rpm / sqrt(1 - 2 zeta^2)`` and the API half-power AF of the
mode, ``amplification_factor``.  What each probe showed on its own (its peak, its API
half-power AF on the samples, its circle fit) stays in :class:`ProbeDetail`.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Literal

import pandas as pd

from .estimators import EstimatorTable
from .fit.circle import CircleFit
from .fit.half_power import HalfPower
from .fit.modal import ModalFit
from .run import ConditionedRun

__all__ = ["Interval", "ProbeDetail", "SplitBranch", "SplitPair", "Critical", "Identification", "to_frame"]

Method = Literal["modal_fit", "circle_fit", "half_power"]

#: AF below which API 684 / API 617 call a response critically damped and require no
#: separation margin (API RP 684 2nd ed. 2005, API 617 8th ed. 2014 — from memory).
CRITICALLY_DAMPED_AF = 2.5


@dataclass(frozen=True)
class Interval:
    """A two-sided 95 % confidence interval ``[low, high]``."""

    low: float
    high: float

    @property
    def width(self) -> float:
        return self.high - self.low

    def __contains__(self, value: float) -> bool:
        return self.low <= value <= self.high


@dataclass(frozen=True)
class ProbeDetail:
    """What one probe shows of a critical.

    Attributes
    ----------
    probe
        Probe name.
    evidence
        ``"peak+phase"``, ``"peak"``, ``"phase"`` or ``"fit"`` (no candidate of its own,
        but the shared fit gives it a participation).
    peak_speed_rpm, peak_amplitude_um_pp
        Highest sample of the probe near the critical.
    phase_rise_deg
        Lag rise across +-15 % of speed around the candidate (``nan`` if unreliable).
    half_power
        API 684 half-power result on the samples, or ``None`` for phase-only evidence.
    circle
        Kennedy–Pancu circle fit, or ``None`` where it could not be made.
    modal_constant_um_pp
        Participation ``A`` of the mode on this probe from the shared fit (``nan`` without).
    flags
        Probe-level flags (from half-power and circle fit).
    """

    probe: str
    evidence: str
    peak_speed_rpm: float
    peak_amplitude_um_pp: float
    phase_rise_deg: float
    half_power: HalfPower | None
    circle: CircleFit | None
    modal_constant_um_pp: complex
    flags: tuple[str, ...] = ()


@dataclass(frozen=True)
class SplitBranch:
    """One speed of a split critical.

    Attributes
    ----------
    speed_rpm, natural_speed_rpm, damping_ratio, amplification_factor
        As for :class:`Critical`, for this branch.
    natural_speed_ci95_rpm
        95 % interval of the natural speed.
    dominant_probe
        Probe with the largest participation in this branch.
    direction_deg
        Major-axis direction of the branch's modal orbit on the plane with the largest
        participation, degrees from vertical-up, positive counter-clockwise viewed from the
        driver end (``nan`` without an X–Y pair of known angles).
    """

    speed_rpm: float
    natural_speed_rpm: float
    damping_ratio: float
    amplification_factor: float
    natural_speed_ci95_rpm: Interval | None
    dominant_probe: str
    direction_deg: float


@dataclass(frozen=True)
class SplitPair:
    """A critical split in two by anisotropic supports: two close modes that the probes of
    a plane see with different weight (API RP 684, 2nd ed., 2005: split criticals from
    unequal horizontal and vertical support stiffness — from memory)."""

    lower: SplitBranch
    upper: SplitBranch

    @property
    def separation_percent(self) -> float:
        """Natural-speed separation relative to the lower branch, %."""
        return 100.0 * (self.upper.natural_speed_rpm / self.lower.natural_speed_rpm - 1.0)


@dataclass(frozen=True)
class Critical:
    """One critical speed seen in a run.

    Attributes
    ----------
    speed_rpm
        Speed of peak unbalance response, rpm (API 684's ``N_c``).
    natural_speed_rpm
        Fitted undamped natural speed, rpm.
    damping_ratio
        Viscous modal damping ratio.
    amplification_factor
        API half-power AF of the identified mode (see module notes and ``af_method``);
        ``nan`` when not determinable.
    lower_half_power_rpm, upper_half_power_rpm
        Half-power speeds ``N_1``, ``N_2`` of the identified mode (``nan`` if missing).
    natural_speed_ci95_rpm, damping_ratio_ci95, amplification_factor_ci95
        95 % confidence intervals (``None`` when the method gives none).
    probes
        Probes that show the critical (candidate evidence), in the order of the data.
    evidence
        ``"peak+phase"``, ``"peak"`` or ``"phase"`` over all probes.
    order, segment, direction
        Harmonic order, speed segment index and its direction.
    method
        Where the headline natural speed and damping come from.
    af_method
        Where the headline AF comes from.
    flags
        Any of ``critically_damped`` (AF < 2.5), ``half_power_one_sided``,
        ``no_half_power_points``, ``peak_at_range_edge``, ``flat_peak``, ``fit_failed``,
        ``estimators_disagree``.
    notes
        Sentences explaining the choices made.
    detail
        Per-probe :class:`ProbeDetail`.
    fit_low_rpm, fit_high_rpm, fit_points
        Speed window and number of complex points of the fit.
    fit
        The least-squares modal fit the headline came from (shared by the criticals fitted
        together), or ``None`` for the circle-fit and half-power fall-backs.  Its
        ``predict(probe, speed_rpm)`` gives the fitted response including residual terms.
    estimators
        AF estimators side by side (:mod:`runup.estimators`), or ``None``.
    split
        The two branches when the critical is split (flag ``split_critical``); the headline
        fields are then those of the branch with the larger fitted response.

    For harmonic order ``n > 1`` the speeds are frequencies written in rpm (cycles per
    minute): a resonance excited by 2X at shaft speed ``N`` is a mode at ``2N``;
    :attr:`shaft_speed_rpm` gives ``N``.
    """

    speed_rpm: float
    natural_speed_rpm: float
    damping_ratio: float
    amplification_factor: float
    lower_half_power_rpm: float
    upper_half_power_rpm: float
    natural_speed_ci95_rpm: Interval | None
    damping_ratio_ci95: Interval | None
    amplification_factor_ci95: Interval | None
    probes: tuple[str, ...]
    evidence: str
    order: int
    segment: int
    direction: str
    method: Method
    af_method: str
    flags: tuple[str, ...]
    notes: tuple[str, ...]
    detail: tuple[ProbeDetail, ...]
    fit_low_rpm: float
    fit_high_rpm: float
    fit_points: int
    fit: ModalFit | None = None
    estimators: EstimatorTable | None = None
    split: SplitPair | None = None

    def branches(self) -> tuple[Critical, ...]:
        """This critical, or one critical per branch of a split critical.

        Each branch carries its own speeds, damping, AF and natural-speed interval; the AF
        interval is known only for the headline branch; per-probe detail is shared.  For
        judging and comparison, where either speed of a split pair matters.
        """
        if self.split is None:
            return (self,)
        return tuple(
            dataclasses.replace(
                self,
                speed_rpm=b.speed_rpm,
                natural_speed_rpm=b.natural_speed_rpm,
                damping_ratio=b.damping_ratio,
                amplification_factor=b.amplification_factor,
                natural_speed_ci95_rpm=b.natural_speed_ci95_rpm,
                amplification_factor_ci95=self.amplification_factor_ci95 if b.speed_rpm == self.speed_rpm else None,
                split=None,
            )
            for b in (self.split.lower, self.split.upper)
        )

    @property
    def shaft_speed_rpm(self) -> float:
        """Shaft speed at which the peak was seen, ``speed_rpm / order``."""
        return self.speed_rpm / self.order

    @property
    def critically_damped(self) -> bool:
        """AF below 2.5 (API 684 / 617, from memory)."""
        return "critically_damped" in self.flags


@dataclass(frozen=True)
class Identification:
    """Everything :func:`runup.identify` found in a run.

    Attributes
    ----------
    conditioned
        The conditioned run the criticals were identified on.
    criticals
        Sorted by segment, then speed.  Empty when no resonance was found.
    rejected
        Sentences about candidates that were examined and not reported, with the reason.
    settings
        Identification options, ``(name, value)`` pairs.
    """

    conditioned: ConditionedRun
    criticals: tuple[Critical, ...]
    rejected: tuple[str, ...] = ()
    settings: tuple[tuple[str, str], ...] = ()

    def to_frame(self) -> pd.DataFrame:
        """The criticals as a DataFrame, one row each (see :func:`to_frame`)."""
        return to_frame(self.criticals)


_FRAME_FIELDS = [
    "segment", "direction", "order", "speed_rpm", "natural_speed_rpm", "damping_ratio",
    "amplification_factor", "lower_half_power_rpm", "upper_half_power_rpm", "evidence",
    "method", "af_method",
]


def to_frame(criticals: Iterable[Critical]) -> pd.DataFrame:
    """Criticals as a tidy DataFrame: headline fields, 95 % bounds, probes and flags joined.

    Examples
    --------
    >>> import runup
    >>> result = runup.identify("sample_runs/compressor_startup.csv")  # doctest: +SKIP
    >>> runup.to_frame(result.criticals)  # doctest: +SKIP
    """
    rows = []
    for c in criticals:
        row = {name: getattr(c, name) for name in _FRAME_FIELDS}
        for name in ("natural_speed_ci95_rpm", "damping_ratio_ci95", "amplification_factor_ci95"):
            ci = getattr(c, name)
            base = name.replace("_ci95", "")
            row[f"{base}_ci95_low"] = ci.low if ci else math.nan
            row[f"{base}_ci95_high"] = ci.high if ci else math.nan
        row["probes"] = ",".join(c.probes)
        row["flags"] = ",".join(c.flags)
        rows.append(row)
    columns = _FRAME_FIELDS + [
        "natural_speed_rpm_ci95_low", "natural_speed_rpm_ci95_high", "damping_ratio_ci95_low",
        "damping_ratio_ci95_high", "amplification_factor_ci95_low", "amplification_factor_ci95_high",
        "probes", "flags",
    ]
    return pd.DataFrame(rows, columns=columns)

