"""X–Y probe geometry: 1X orbits, forward/backward whirl, virtual probes.

Coordinates (runup's convention): viewed from the driver end, ``x`` to the right, ``y``
up; a probe mounted at ``angle_deg`` from vertical-up, positive counter-clockwise, reads
the projection of the shaft displacement on ``d = (-sin a, cos a)``.  With the phasor
convention of :mod:`runup.units` (signal ``Re[X e^{j Omega t}]``, ``X = A e^{-j phi}``), two
non-parallel probes with vectors ``p1``, ``p2`` give the shaft's complex components
``(X, Y)`` by solving ``p_i = d_i . (X, Y)``.

Writing the position as ``z = x + j y``,

.. math::  z(t) = r_{+} e^{j\\Omega t} + r_{-} e^{-j\\Omega t}, \\qquad
           r_{+} = (X + jY)/2, \\quad r_{-} = (\\bar X + j\\bar Y)/2

``r_+`` turns counter-clockwise, ``r_-`` clockwise (the usual forward/backward
decomposition of an elliptical orbit; e.g. Muszynska, *Rotordynamics*, 2005, ch. 2;
Childs, 1993, sec. 1.5).  Semi-major axis ``|r_+| + |r_-|``, semi-minor
``||r_+| - |r_-||``; the major axis points at ``(arg r_+ + arg r_-)/2`` from ``+x``.
Forward whirl means whirl in the direction of rotation: the counter-clockwise component
dominates for a counter-clockwise rotor (rotation viewed from the driver end).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import DataFormatError
from .run import Curve, Probe, RunMetadata

__all__ = ["ProbePair", "Orbit", "probe_pairs", "resolve", "orbit", "virtual_probe", "major_axis_response"]


@dataclass(frozen=True)
class ProbePair:
    """Two non-parallel probes of one plane (``first`` at the smaller angle)."""

    plane: str
    first: Probe
    second: Probe


@dataclass(frozen=True)
class Orbit:
    """1X orbit at each speed of a probe pair.

    Attributes
    ----------
    speed_rpm
        Speeds, rpm.
    x_um_pp, y_um_pp
        Complex horizontal (``x``, to the right viewed from the driver) and vertical (``y``,
        up) components, um pp.
    ccw_um_pp, cw_um_pp
        Counter-clockwise and clockwise whirl components ``r_+``, ``r_-``, complex; with
        peak-to-peak inputs their moduli are the peak-to-peak diameters of the two circles.
    semi_major_um_pp, semi_minor_um_pp
        Major and minor axes as peak-to-peak amplitudes (twice the semi-axes).
    major_axis_angle_deg
        Direction of the major axis from vertical-up, positive counter-clockwise, in
        (-90, 90].
    forward
        Whether the orbit whirls in the direction of rotation (``None`` when the rotation is
        not known).
    """

    speed_rpm: NDArray[np.float64]
    x_um_pp: NDArray[np.complex128]
    y_um_pp: NDArray[np.complex128]
    ccw_um_pp: NDArray[np.complex128]
    cw_um_pp: NDArray[np.complex128]
    semi_major_um_pp: NDArray[np.float64]
    semi_minor_um_pp: NDArray[np.float64]
    major_axis_angle_deg: NDArray[np.float64]
    forward: NDArray[np.bool_] | None


def _direction(angle_deg: float) -> tuple[float, float]:
    a = math.radians(angle_deg)
    return (-math.sin(a), math.cos(a))


def probe_pairs(metadata: RunMetadata) -> tuple[ProbePair, ...]:
    """Pairs of probes sharing a plane with known, non-parallel mounting angles.

    A plane with more than two probes pairs its first two (in metadata order) that are at
    least 30 degrees from parallel.
    """
    by_plane: dict[str, list[Probe]] = {}
    for p in metadata.probes:
        if p.plane is not None and p.angle_deg is not None:
            by_plane.setdefault(p.plane, []).append(p)
    pairs = []
    for plane, probes in by_plane.items():
        found = None
        for i in range(len(probes)):
            for j in range(i + 1, len(probes)):
                diff = abs((probes[j].angle_deg - probes[i].angle_deg + 90.0) % 180.0 - 90.0)  # type: ignore[operator]
                if diff >= 30.0 and found is None:
                    found = (probes[i], probes[j])
        if found:
            first, second = sorted(found, key=lambda p: p.angle_deg)  # type: ignore[arg-type, return-value]
            pairs.append(ProbePair(plane, first, second))
    return tuple(pairs)


def resolve(
    first: ArrayLike, second: ArrayLike, *, first_angle_deg: float, second_angle_deg: float
) -> tuple[NDArray[np.complex128], NDArray[np.complex128]]:
    """Horizontal and vertical complex components ``(X, Y)`` from two probe vectors."""
    d1, d2 = _direction(first_angle_deg), _direction(second_angle_deg)
    det = d1[0] * d2[1] - d1[1] * d2[0]
    if abs(det) < math.sin(math.radians(10.0)):
        raise DataFormatError(
            f"probes at {first_angle_deg:g} and {second_angle_deg:g} deg are (nearly) parallel; "
            "an orbit needs two probes at least 10 deg from parallel"
        )
    p1, p2 = np.asarray(first, dtype=complex), np.asarray(second, dtype=complex)
    x = (p1 * d2[1] - p2 * d1[1]) / det
    y = (d1[0] * p2 - d2[0] * p1) / det
    return x, y


def virtual_probe(x_um_pp: ArrayLike, y_um_pp: ArrayLike, *, angle_deg: float) -> NDArray[np.complex128]:
    """Response a probe mounted at ``angle_deg`` would read, ``d . (X, Y)``."""
    d = _direction(angle_deg)
    return d[0] * np.asarray(x_um_pp, dtype=complex) + d[1] * np.asarray(y_um_pp, dtype=complex)


def orbit(
    speed_rpm: ArrayLike,
    first: ArrayLike,
    second: ArrayLike,
    *,
    first_angle_deg: float,
    second_angle_deg: float,
    rotation: str | None = None,
) -> Orbit:
    """1X orbit of a probe pair (see module notes); ``rotation`` is ``"ccw"``, ``"cw"`` or None."""
    x, y = resolve(first, second, first_angle_deg=first_angle_deg, second_angle_deg=second_angle_deg)
    rp = (x + 1j * y) / 2.0
    rm = (np.conj(x) + 1j * np.conj(y)) / 2.0
    major = np.abs(rp) + np.abs(rm)
    minor = np.abs(np.abs(rp) - np.abs(rm))
    from_x = np.degrees((np.angle(rp) + np.angle(rm)) / 2.0)
    from_up = np.mod(from_x - 90.0 + 90.0, 180.0) - 90.0  # fold to (-90, 90]
    from_up = np.where(from_up == -90.0, 90.0, from_up)
    forward = None
    if rotation in ("ccw", "cw"):
        forward = np.abs(rp) > np.abs(rm) if rotation == "ccw" else np.abs(rm) > np.abs(rp)
    return Orbit(
        speed_rpm=np.asarray(speed_rpm, dtype=float),
        x_um_pp=x,
        y_um_pp=y,
        ccw_um_pp=rp,
        cw_um_pp=rm,
        semi_major_um_pp=major,
        semi_minor_um_pp=minor,
        major_axis_angle_deg=from_up,
        forward=forward,
    )


def major_axis_response(orb: Orbit) -> NDArray[np.complex128]:
    """Major-axis response as a complex vector: amplitude = major axis (um pp), phase = lag
    of the orbit's extreme along the major axis, made continuous along speed.

    The extreme is reached at ``Omega t = (arg r_- - arg r_+)/2`` (modulo 180 deg); the
    branch is chosen to keep the lag continuous from one speed to the next.
    """
    rp, rm = orb.ccw_um_pp, orb.cw_um_pp
    lag = (np.angle(rm) - np.angle(rp)) / 2.0  # shaft angle of the extreme, modulo pi
    # continuity: unwrap on twice the angle (period pi), then halve
    lag = np.unwrap(2.0 * lag) / 2.0
    return orb.semi_major_um_pp * np.exp(-1j * lag)


def pair_curves(curves: Sequence[Curve], pair: ProbePair) -> tuple[Curve, Curve] | None:
    """The two curves of a pair on common speeds (same segment/order), or ``None``."""
    a = next((c for c in curves if c.probe == pair.first.name), None)
    b = next((c for c in curves if c.probe == pair.second.name), None)
    if a is None or b is None:
        return None
    return a, b
