"""How many modes a fit window holds: acceptance of a mode and model-order selection.

A fitted mode is *plausible* when its natural speed lies inside the fitted window, its
damping ratio is inside ``(2e-4, 0.69)`` and its standard errors are finite; it is
*significant* when its fitted peak response ``max_p |A_pk| / (2 zeta_k)`` is at least
``AMPLITUDE_PROMINENCE_SIGMAS`` times the residual RMS, the same threshold detection uses.

Model order: when the residual of a K-mode fit is larger than the measurement noise
(reduced chi-square ``(s / sigma)^2 > 1.5``, ``sigma`` the noise scale estimated
independently from second differences), runup tries K + 1 modes, starting the extra one
either by splitting an existing mode into two at ``Omega_k (1 -+ max(zeta_k, 0.02))`` or
at the peak of the summed residual, and keeps the best K + 1 fit when

* the Bayesian information criterion ``BIC = n ln(SSR/n) + P ln n`` (Schwarz, "Estimating
  the dimension of a model", Ann. Statist. 6, 1978; ``n`` real residuals, ``P`` real
  parameters) falls by at least 10 ("very strong" evidence on the scale of Kass & Raftery,
  "Bayes factors", JASA 90, 1995);
* every mode is plausible and significant, and no two modes are closer than a quarter of
  their mean half-power bandwidth;
* the new mode is *stable*: refitted on a window 15 % narrower on each side, every natural
  speed moves less than 2 % and every damping ratio less than 35 % (the idea of pole
  stability across model variations in modal parameter estimation; Peeters et al.,
  Shock and Vibration 11, 2004).

At most two modes are added per window.  Each kept mode says why.  The residual term
``C s^2`` is itself kept only when it lowers the BIC (:func:`select_residual`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from ..detect import AMPLITUDE_PROMINENCE_SIGMAS
from ..errors import FitError
from .modal import ModalFit, fit_modes

__all__ = [
    "Selection",
    "bic",
    "mode_is_plausible",
    "mode_is_significant",
    "peak_to_noise",
    "select_modes",
    "select_residual",
]

#: Reduced chi-square above which more modes are tried.
CHI2_TRY_MORE = 1.5
#: BIC decrease required to keep an added mode.
BIC_MIN_DROP = 10.0
#: At most this many modes are added to a window.
MAX_ADDED = 2

Data = Sequence[tuple[str, NDArray[np.float64], NDArray[np.complex128]]]


@dataclass(frozen=True)
class Selection:
    """Result of :func:`select_modes`.

    Attributes
    ----------
    fit
        The fit kept.
    added
        Indices (in ``fit.modes``) of modes added by model-order selection.
    bic_drops
        BIC decrease of each accepted addition, in order.
    reduced_chi2
        ``(residual RMS / noise scale)^2`` of the fit kept (``nan`` without a noise scale).
    """

    fit: ModalFit
    added: tuple[int, ...]
    bic_drops: tuple[float, ...]
    reduced_chi2: float


def bic(fit: ModalFit) -> float:
    """Schwarz's information criterion of a fit, ``n ln(SSR/n) + P ln n``, ``n = 2 N`` with
    ``N`` the complex residuals (a bin counts once; its weight already carries its samples)."""
    n = 2.0 * (fit.n_residuals or fit.n_points)
    return n * math.log(max(fit.ssr_um2, 1e-300) / n) + fit.n_parameters * math.log(n)


def peak_to_noise(fit: ModalFit, k: int) -> float:
    """Fitted peak response of mode ``k`` over the residual RMS."""
    mode = fit.modes[k]
    peak = max(abs(a) for a in mode.modal_constants_um_pp) / (2.0 * mode.damping_ratio)
    return peak / fit.noise_rms_um_pp if fit.noise_rms_um_pp > 0 else math.inf


def mode_is_significant(fit: ModalFit, k: int) -> bool:
    """Fitted peak at least the detection threshold above the residual RMS."""
    return peak_to_noise(fit, k) >= AMPLITUDE_PROMINENCE_SIGMAS


def mode_is_plausible(fit: ModalFit, k: int) -> bool:
    """Natural speed inside the window, damping physical, standard errors finite."""
    mode = fit.modes[k]
    return (
        fit.low_rpm <= mode.natural_speed_rpm <= fit.high_rpm
        and 2e-4 < mode.damping_ratio < 0.69
        and math.isfinite(mode.natural_speed_stderr_rpm)
        and math.isfinite(mode.damping_ratio_stderr)
    )


def _separated(fit: ModalFit) -> bool:
    modes = fit.modes
    for a, b in zip(modes, modes[1:], strict=False):
        mean = 0.5 * (a.natural_speed_rpm + b.natural_speed_rpm)
        if b.natural_speed_rpm - a.natural_speed_rpm < 0.25 * (a.damping_ratio + b.damping_ratio) * mean:
            return False
    return True


def _acceptable(fit: ModalFit) -> bool:
    return _separated(fit) and all(
        mode_is_plausible(fit, k) and mode_is_significant(fit, k) for k in range(len(fit.modes))
    )


def _trial_starts(fit: ModalFit, data: Data, weights: Sequence[NDArray]) -> list[list[tuple[float, float]]]:
    base = [(m.natural_speed_rpm, m.damping_ratio) for m in fit.modes]
    trials = []
    for k, (wn, z) in enumerate(base):
        d = max(z, 0.02)
        split = [(wn * (1 - d), z), (wn * (1 + d), z)]
        trials.append(base[:k] + split + base[k + 1 :])
    # the peak of the summed residual magnitude (weighted), on a common speed grid
    grid = np.linspace(fit.low_rpm, fit.high_rpm, 200)
    total = np.zeros(grid.size)
    for (probe, s, x), w in zip(data, weights, strict=True):
        r = np.abs(x - fit.predict(probe, s)) * np.sqrt(w)
        total += np.interp(grid, s, r)
    peak = float(grid[int(np.argmax(total))])
    zeta = float(np.median([z for _, z in base]))
    trials.append(sorted(base + [(peak, zeta)]))
    return trials


def _stable(fit: ModalFit, data: Data, weights: Sequence[NDArray], starts: list[tuple[float, float]]) -> bool:
    span = fit.high_rpm - fit.low_rpm
    low, high = fit.low_rpm + 0.15 * span, fit.high_rpm - 0.15 * span
    narrow, narrow_w = [], []
    for (probe, s, x), w in zip(data, weights, strict=True):
        sel = (s >= low) & (s <= high)
        if sel.sum() >= 8:
            narrow.append((probe, s[sel], x[sel]))
            narrow_w.append(w[sel])
    if not narrow:
        return False
    try:
        refit = fit_modes(narrow, initial=starts, weights=narrow_w, residual_terms=fit.residual_model)  # type: ignore[arg-type]
    except FitError:
        return False
    for a, b in zip(fit.modes, refit.modes, strict=True):
        if abs(b.natural_speed_rpm / a.natural_speed_rpm - 1) > 0.02:
            return False
        if abs(b.damping_ratio / a.damping_ratio - 1) > 0.35:
            return False
    return True


def select_residual(
    data: Data, weights: Sequence[NDArray[np.float64]], base: ModalFit
) -> ModalFit:
    """The fit with or without the ``C s^2`` residual term, whichever has the lower BIC.

    For a broad (heavily damped) mode the quadratic term can mimic part of the mode and
    leave natural speed and damping poorly determined; when the data do not need it, the
    criterion drops it (same BIC as for the number of modes).
    """
    if base.residual_model != "constant+quadratic":
        return base
    try:
        simpler = fit_modes(
            data,
            initial=[(m.natural_speed_rpm, m.damping_ratio) for m in base.modes],
            weights=weights,
            residual_terms="constant",
        )
    except FitError:
        return base
    if not _acceptable(simpler):
        return base
    return simpler if bic(simpler) < bic(base) else base


def select_modes(
    data: Data,
    weights: Sequence[NDArray[np.float64]],
    base: ModalFit,
    *,
    noise_rms_um_pp: float,
) -> Selection:
    """Add modes to ``base`` while the criteria of the module notes support them.

    Parameters
    ----------
    data, weights
        The window's curves and bin weights, as given to :func:`~runup.fit.modal.fit_modes`.
    base
        The fit of the candidates' modes.
    noise_rms_um_pp
        Independent estimate of the per-sample complex noise RMS (``nan`` to skip the
        chi-square gate and always try).
    """

    def chi2(fit: ModalFit) -> float:
        return (fit.noise_rms_um_pp / noise_rms_um_pp) ** 2 if noise_rms_um_pp > 0 else math.nan

    fit = base
    added: list[float] = []
    drops: list[float] = []
    while len(added) < MAX_ADDED:
        c2 = chi2(fit)
        if math.isfinite(c2) and c2 <= CHI2_TRY_MORE:
            break
        best: tuple[float, ModalFit, list[tuple[float, float]]] | None = None
        for starts in _trial_starts(fit, data, weights):
            try:
                trial = fit_modes(data, initial=starts, weights=weights, residual_terms=fit.residual_model)  # type: ignore[arg-type]
            except FitError:
                continue
            if not _acceptable(trial):
                continue
            score = bic(trial)
            if best is None or score < best[0]:
                best = (score, trial, starts)
        if best is None:
            break
        drop = bic(fit) - best[0]
        if drop < BIC_MIN_DROP or not _stable(best[1], data, weights, [(m.natural_speed_rpm, m.damping_ratio) for m in best[1].modes]):
            break
        old = [m.natural_speed_rpm for m in fit.modes]
        new = [m.natural_speed_rpm for m in best[1].modes]
        # the added mode: the new natural speed farthest from every old one
        extra = max(new, key=lambda w: min(abs(w - o) for o in old))
        added.append(extra)
        drops.append(drop)
        fit = best[1]
    idx = tuple(
        int(np.argmin([abs(m.natural_speed_rpm - w) for m in fit.modes])) for w in added
    )
    return Selection(fit=fit, added=idx, bic_drops=tuple(drops), reduced_chi2=chi2(fit))
