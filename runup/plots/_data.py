"""What the plots take from the results: curve and critical selection, display phase, fits.

Nothing here computes a result; it selects curves and criticals and evaluates the fitted
models that the results already hold, for drawing.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..critical import Critical, Identification
from ..errors import DataFormatError
from ..fit.models import unbalance_response
from ..run import Curve

#: Fraction of a curve's peak amplitude below which its phase is not drawn, and does not
#: steer the unwrapping: the angle of a near-zero vector is mostly noise (at 10 % of the
#: peak, noise of 1.5 % of the peak moves the angle by about 9 deg; below it the scatter
#: grows to +-180 deg, e.g. the slow-roll region after compensation).
PHASE_RELIABLE_FRACTION = 0.1


def select_curves(
    identification: Identification, *, segment: int, order: int, probes: Sequence[str] | None
) -> tuple[Curve, ...]:
    """Curves of one segment and order, all or the named probes in the order given."""
    cond = identification.conditioned
    available = [c for c in cond.curves if c.segment == segment and c.order == order]
    if not available:
        have = sorted({(c.segment, c.order) for c in cond.curves})
        raise DataFormatError(
            f"no curves for segment {segment}, order {order}; the run has (segment, order) "
            f"{have}; choose one of those"
        )
    if probes is None:
        return tuple(available)
    if isinstance(probes, str) or not probes:
        raise DataFormatError(
            f"probes must be a list of probe names, got {probes!r}; e.g. probes=['{available[0].probe}']"
        )
    by_name = {c.probe: c for c in available}
    unknown = [p for p in probes if p not in by_name]
    if unknown:
        raise DataFormatError(
            f"probe(s) {', '.join(map(repr, unknown))} not in segment {segment}, order {order}; "
            f"valid probes: {', '.join(by_name)}"
        )
    return tuple(by_name[p] for p in probes)


def select_criticals(identification: Identification, *, segment: int, order: int) -> tuple[Critical, ...]:
    """Criticals of one segment and order."""
    return tuple(c for c in identification.criticals if c.segment == segment and c.order == order)


def check_speeds(values: Sequence[float] | ArrayLike, name: str) -> NDArray[np.float64]:
    """Speeds as a flat float array; ``nan`` allowed, a non-positive speed refused."""
    arr = np.asarray(values, dtype=float).ravel()
    bad = np.isfinite(arr) & (arr <= 0)
    if bad.any():
        raise DataFormatError(
            f"{name} must be positive speeds in rpm, found {arr[bad][0]:g}; pass rpm values > 0"
        )
    return arr


def reliable(response_um_pp: NDArray) -> NDArray[np.bool_]:
    """Points of at least :data:`PHASE_RELIABLE_FRACTION` of the curve's peak amplitude."""
    amp = np.abs(np.asarray(response_um_pp, dtype=complex))
    return amp >= PHASE_RELIABLE_FRACTION * amp.max(initial=0.0)


def display_phase(response_um_pp: NDArray) -> NDArray[np.float64]:
    """Phase lag for display, deg: unwrapped over the reliable points only.

    The points of at least :data:`PHASE_RELIABLE_FRACTION` of the peak amplitude are
    unwrapped along speed (first one placed in [0, 360)); each weaker point is wrapped to
    within +-180 deg of the reliable phase interpolated at its position, so noise near
    zero amplitude scatters about the trend instead of adding whole turns to it.
    """
    x = np.asarray(response_um_pp, dtype=complex)
    lag = np.rad2deg(-np.angle(x))
    if x.size == 0 or not np.any(np.abs(x) > 0):
        return lag
    idx = np.flatnonzero(reliable(x))
    trend = np.rad2deg(np.unwrap(np.deg2rad(lag[idx])))
    trend -= 360.0 * math.floor(trend[0] / 360.0)
    guide = np.interp(np.arange(x.size), idx, trend)
    return guide + (lag - guide + 180.0) % 360.0 - 180.0


def align_phase(phase_deg: NDArray, reference_deg: float, at: int) -> NDArray:
    """Shift an unwrapped phase by a whole number of turns to meet ``reference_deg`` at ``at``."""
    if phase_deg.size == 0 or not math.isfinite(reference_deg):
        return phase_deg
    return phase_deg - 360.0 * round((phase_deg[at] - reference_deg) / 360.0)


def fitted_curves(
    critical_list: Sequence[Critical], probe: str
) -> list[tuple[NDArray, NDArray, bool]]:
    """(speed, complex response, is modal part only) of the fitted models for one probe.

    Criticals fitted together share one least-squares fit (``Critical.fit``); its
    prediction includes the residual terms.  A fall-back critical without a stored fit
    gives the modal part ``A r^2 / (1 - r^2 + 2 j zeta r)`` alone.
    """
    out: list[tuple[NDArray, NDArray, bool]] = []
    seen: set[int] = set()
    for c in critical_list:
        fit = c.fit
        if fit is not None:
            if id(fit) in seen or probe not in fit.probes:
                continue
            seen.add(id(fit))
            s = np.linspace(fit.low_rpm, fit.high_rpm, 400)
            out.append((s, fit.predict(probe, s), False))
            continue
        detail = next((d for d in c.detail if d.probe == probe), None)
        a = detail.modal_constant_um_pp if detail is not None else complex(math.nan)
        if not np.isfinite(a) and detail is not None and detail.circle is not None:
            a = detail.circle.modal_constant_um_pp
        if np.isfinite(a) and math.isfinite(c.natural_speed_rpm) and c.fit_high_rpm > c.fit_low_rpm:
            s = np.linspace(c.fit_low_rpm, c.fit_high_rpm, 400)
            x = unbalance_response(
                s, natural_speed_rpm=c.natural_speed_rpm, damping_ratio=c.damping_ratio, modal_constant=a
            )
            out.append((s, x, True))
    return out


def interp_complex(x: NDArray, xp: NDArray, fp: NDArray) -> NDArray[np.complex128]:
    """Linear interpolation of real and imaginary parts separately (``numpy.interp``)."""
    return np.interp(x, xp, fp.real) + 1j * np.interp(x, xp, fp.imag)
