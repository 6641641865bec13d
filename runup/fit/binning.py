"""Averaging dense samples into speed bins before fitting.

A curve with thousands of points inside a fit window carries no more information about a
smooth response than a few hundred bin means, each weighted by the number of samples it
averages: for a model that is nearly linear across a bin the weighted least-squares fit
of the bin means has the same solution and Fisher information, to first order, as the fit
of the samples (the normal equations of a block-averaged regression; e.g. Bates & Watts,
1988, sec. 1.3 on weighted least squares).  Fitting cost then no longer grows with the
record length.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

__all__ = ["MAX_FIT_POINTS", "bin_curve"]

#: Points per probe above which a fit window is averaged into this many bins.
MAX_FIT_POINTS = 300


def bin_curve(
    speed_rpm: NDArray[np.float64],
    response_um_pp: NDArray[np.complex128],
    *,
    max_points: int = MAX_FIT_POINTS,
) -> tuple[NDArray[np.float64], NDArray[np.complex128], NDArray[np.float64]]:
    """Bin means of a curve with more than ``max_points`` points (else the curve itself).

    Bins are equal in speed between the first and last point; empty bins are skipped.

    Returns
    -------
    (speed_rpm, response_um_pp, counts)
        Mean speed and mean complex response of each bin, and the samples it averages.
    """
    speed = np.asarray(speed_rpm, dtype=float)
    x = np.asarray(response_um_pp, dtype=complex)
    if speed.size <= max_points:
        return speed, x, np.ones(speed.size)
    edges = np.linspace(speed[0], speed[-1], max_points + 1)
    idx = np.clip(np.searchsorted(edges, speed, side="right") - 1, 0, max_points - 1)
    counts = np.bincount(idx, minlength=max_points).astype(float)
    keep = counts > 0
    mean_speed = np.bincount(idx, weights=speed, minlength=max_points)[keep] / counts[keep]
    re = np.bincount(idx, weights=x.real, minlength=max_points)[keep] / counts[keep]
    im = np.bincount(idx, weights=x.imag, minlength=max_points)[keep] / counts[keep]
    return mean_speed, re + 1j * im, counts[keep]
