"""Accuracy benchmark of :func:`runup.identify.identify` on synthetic runs of known truth.

All data here is synthetic: invented modes, probes and noise from :mod:`runup.synthetic`.
Four families of seeded cases are identified with the default conditioning (automatic
slow-roll compensation, despiking) and scored against the truth:

* ``single_dense``  -- one mode, 300-600 evenly spaced points from ~8 % to ~2x its natural speed;
* ``single_sparse`` -- the same with 40-80 points at sorted uniform random speeds;
* ``two_modes``     -- two modes 1.6-2.5x apart, both inside the record;
* ``none``          -- no resonance in the record (a mode at 3-5x the top speed, or runout and
  noise only): every reported critical is a false alarm.

Beside runup, a naive baseline is scored on the same cases: per probe, the highest raw
sample is the critical (natural speed = peak speed) and the API 684 half-power AF of the raw
samples gives the damping through the single-mode relation; median over probes.

For the single-mode families the Cramér–Rao lower bound (Kay 1993) of natural speed and
damping is computed per case for the generating model (complex circular Gaussian noise,
``F = (2/sigma^2) Re(J^H J)``; parameters natural speed, damping and, per probe, the complex
participation and the complex runout) and compared with the RMS error.

Run ``python benchmarks/accuracy.py [--quick] [--cases N] [--seed N] [--jobs N]``;
``--show FAMILY:INDEX`` prints one case's truth and identification.
"""

from __future__ import annotations

import argparse
import math
import time
import warnings
from collections import Counter
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass

import numpy as np
import pandas as pd

from runup.fit.half_power import half_power
from runup.fit.models import (
    amplification_factor_from_damping,
    damping_from_amplification_factor,
    unbalance_response,
)
from runup.identify import identify
from runup.run import SAMPLE_COLUMNS, Probe, Run, RunMetadata
from runup.synthetic import SyntheticMode, SyntheticProbe, synthetic_run, synthetic_samples
from runup.units import amplitude_of, phase_lag_deg_of

FAMILIES = ("single_dense", "single_sparse", "two_modes", "none")
CASES = {"single_dense": 60, "single_sparse": 100, "two_modes": 60, "none": 80}
QUICK_CASES = 20
#: A true mode is detected by the nearest reported critical within this relative distance.
MATCH_TOLERANCE = 0.05
#: Least peak-to-noise ratio of every mode on its best probe in ``two_modes`` (else redrawn).
MIN_MODE_SNR = 10.0
TARGETS = {"fn": 0.5, "zeta": 15.0, "af": 10.0, "crb": 1.5}


# ----------------------------------------------------------------------------------------
# cases
@dataclass(frozen=True)
class Case:
    """One synthetic run of known truth (all numbers invented)."""

    family: str
    index: int
    speed_rpm: np.ndarray
    modes: tuple[SyntheticMode, ...]
    probes: tuple[SyntheticProbe, ...]
    noise_fraction_of_peak: float  # used when there are modes
    noise_um_pp: float  # absolute noise, runout-only cases
    noise_seed: int


def _log_uniform(rng: np.random.Generator, low: float, high: float) -> float:
    return float(np.exp(rng.uniform(np.log(low), np.log(high))))


def _phasor(rng: np.random.Generator, low: float, high: float) -> complex:
    return complex(rng.uniform(low, high) * np.exp(1j * rng.uniform(0.0, 2.0 * np.pi)))


def _probes(rng: np.random.Generator, n_modes: int, n_probes: int = 2) -> tuple[SyntheticProbe, ...]:
    return tuple(
        SyntheticProbe(
            f"P{p + 1}",
            tuple(_phasor(rng, 5.0, 30.0) for _ in range(n_modes)),
            _phasor(rng, 1.0, 8.0),
        )
        for p in range(n_probes)
    )


def _sigmas(speed_rpm: np.ndarray, modes, probes, fraction: float) -> np.ndarray:
    """Noise RMS per probe, as :func:`runup.synthetic.synthetic_samples` sets it."""
    out = []
    for probe in probes:
        x = sum(
            unbalance_response(speed_rpm, natural_speed_rpm=m.natural_speed_rpm, damping_ratio=m.damping_ratio,
                               modal_constant=a)
            for m, a in zip(modes, probe.participations_um_pp, strict=True)
        )
        out.append(fraction * float(np.abs(x).max()))
    return np.array(out)


def make_case(family: str, index: int, seed: int) -> Case:
    """Draw case ``index`` of ``family`` from ``default_rng([seed, family number, index])``."""
    rng = np.random.default_rng([seed, FAMILIES.index(family), index])
    noise = float(rng.uniform(0.01, 0.05))
    noise_abs = 0.0
    if family in ("single_dense", "single_sparse"):
        fn = float(rng.uniform(2000.0, 9000.0))
        modes = (SyntheticMode(fn, _log_uniform(rng, 0.02, 0.2)),)
        probes = _probes(rng, 1)
        low, high = fn * rng.uniform(0.07, 0.09), fn * rng.uniform(1.8, 2.2)
        if family == "single_dense":
            speed = np.linspace(low, high, int(rng.integers(300, 601)))
        else:
            speed = np.sort(rng.uniform(low, high, int(rng.integers(40, 81))))
    elif family == "two_modes":
        fn1 = float(rng.uniform(2000.0, 5000.0))
        fn2 = fn1 * float(rng.uniform(1.6, 2.5))
        modes = (SyntheticMode(fn1, _log_uniform(rng, 0.02, 0.2)), SyntheticMode(fn2, _log_uniform(rng, 0.02, 0.2)))
        speed = np.linspace(0.08 * fn1, fn2 * rng.uniform(1.5, 2.0), int(rng.integers(300, 601)))
        for _ in range(100):  # redraw participations until both modes stand above the noise
            probes = _probes(rng, 2)
            sig = _sigmas(speed, modes, probes, noise)
            snr = [max(abs(p.participations_um_pp[k]) / (2 * m.damping_ratio) / s for p, s in zip(probes, sig, strict=True))
                   for k, m in enumerate(modes)]
            if min(snr) >= MIN_MODE_SNR:
                break
    else:  # none
        top = float(rng.uniform(2000.0, 9000.0))
        speed = np.linspace(0.08 * top, top, int(rng.integers(40, 601)))
        if index % 2 == 0:  # a mode well above the record: only a rising baseline
            modes = (SyntheticMode(top * float(rng.uniform(3.0, 5.0)), _log_uniform(rng, 0.02, 0.2)),)
            probes = _probes(rng, 1)
        else:  # runout and noise only
            modes = ()
            probes = tuple(SyntheticProbe(f"P{p + 1}", (), _phasor(rng, 1.0, 8.0)) for p in range(2))
            noise_abs = float(rng.uniform(0.1, 0.5))
    return Case(family, index, speed, modes, probes, noise, noise_abs, int(rng.integers(2**31)))


def make_run(case: Case) -> Run:
    """The run of a case (synthetic)."""
    if case.modes:
        return synthetic_run(case.speed_rpm, modes=case.modes, probes=case.probes,
                             noise_fraction_of_peak=case.noise_fraction_of_peak, seed=case.noise_seed)
    # no modes: synthetic_samples scales noise by the (zero) dynamic peak, so add it here
    df = synthetic_samples(case.speed_rpm, modes=(), probes=case.probes)
    rng = np.random.default_rng(case.noise_seed)
    x = df["amplitude_um_pp"].to_numpy() * np.exp(-1j * np.deg2rad(df["phase_lag_deg"].to_numpy()))
    x = x + case.noise_um_pp * (rng.standard_normal(x.size) + 1j * rng.standard_normal(x.size)) / np.sqrt(2.0)
    df["amplitude_um_pp"] = amplitude_of(x)
    df["phase_lag_deg"] = np.mod(phase_lag_deg_of(x, unwrap=False), 360.0)
    meta = RunMetadata(machine_id="synthetic", run_id="synthetic", probes=tuple(Probe(p.name) for p in case.probes))
    return Run(meta, df[list(SAMPLE_COLUMNS)])


# ----------------------------------------------------------------------------------------
# Cramér–Rao bound
def crb_single_mode(speed_rpm: np.ndarray, natural_speed_rpm: float, damping_ratio: float,
                    participations: list[complex], sigmas: list[float], *, runout: bool = True,
                    residual: bool = False) -> tuple[float, float]:
    """Lower bounds on the standard deviation of natural speed (rpm) and damping ratio.

    Model per probe ``mu = A r^2 / (1 - r^2 + 2 j zeta r) + B``; unknowns natural speed,
    damping and per probe Re/Im of ``A`` (and of ``B`` when ``runout``; and of ``C`` in an
    extra ``C r^2`` term when ``residual``, the upper residual runup's modal fit carries).
    Complex circular Gaussian noise with ``E|n|^2 = sigma_p^2``:
    ``F = sum_p (2/sigma_p^2) Re(J_p^H J_p)`` (Kay 1993); the bound is ``sqrt(diag(F^-1))``.
    Derivatives are analytic.
    """
    r = np.asarray(speed_rpm, float) / natural_speed_rpm
    d = 1.0 - r * r + 2j * damping_ratio * r
    g = r * r / d
    dg_dwn = -(r / natural_speed_rpm) * (2.0 * r + 2j * damping_ratio * r * r) / d**2
    dg_dz = -2j * r**3 / d**2
    n_p = len(participations)
    per = 2 + 2 * runout + 2 * residual
    fisher = np.zeros((2 + per * n_p, 2 + per * n_p))
    for p, (a, s) in enumerate(zip(participations, sigmas, strict=True)):
        jac = np.zeros((r.size, 2 + per * n_p), dtype=complex)
        jac[:, 0], jac[:, 1] = a * dg_dwn, a * dg_dz
        jac[:, 2 + per * p], jac[:, 3 + per * p] = g, 1j * g
        col = 4 + per * p
        if runout:
            jac[:, col], jac[:, col + 1] = 1.0, 1j
            col += 2
        if residual:
            jac[:, col], jac[:, col + 1] = r * r, 1j * r * r
        fisher += (2.0 / s**2) * np.real(jac.conj().T @ jac)
    bound = np.sqrt(np.diag(np.linalg.inv(fisher)))
    return float(bound[0]), float(bound[1])


def crb_check() -> tuple[float, float]:
    """REFERENCE-VALUES.md example: 50 Hz, zeta 0.05, 200 points 25-75 Hz, sigma 2 % of peak."""
    speed = np.linspace(25.0, 75.0, 200) * 60.0
    peak = float(np.abs(unbalance_response(speed, natural_speed_rpm=3000.0, damping_ratio=0.05)).max())
    b_fn, b_z = crb_single_mode(speed, 3000.0, 0.05, [1.0], [0.02 * peak], runout=False)
    return b_fn / 3000.0, b_z / 0.05


# ----------------------------------------------------------------------------------------
# one case
def _naive(run: Run, case: Case) -> list[tuple[float, float, float]]:
    """Per true-mode window (whole record for one mode or none): (fn, zeta, AF), median over probes."""
    truth = [m.natural_speed_rpm for m in case.modes] or [math.nan]
    cuts = [math.sqrt(a * b) for a, b in zip(truth, truth[1:], strict=False)]
    bounds = list(zip([-math.inf, *cuts], [*cuts, math.inf], strict=True))
    out = []
    for lo, hi in bounds:
        found = []
        for _, g in run.samples.groupby("probe", sort=False):
            g = g.sort_values("speed_rpm")
            speed, amp = g["speed_rpm"].to_numpy(), g["amplitude_um_pp"].to_numpy()
            i0, i1 = int(np.searchsorted(speed, lo)), int(np.searchsorted(speed, hi)) - 1
            if i1 - i0 < 2:
                continue
            hp = half_power(speed, amp, search_from=i0, search_to=i1)
            if hp.amplification_factor is None or hp.peak_speed_rpm in (speed[i0], speed[i1]):
                continue
            try:
                z = damping_from_amplification_factor(hp.amplification_factor)
            except ValueError:
                z = math.nan
            found.append((hp.peak_speed_rpm, z, hp.amplification_factor))
        if found:
            out.append(tuple(float(np.median([f[i] for f in found])) for i in range(3)))
    return out


def run_case(key: tuple[str, int, int]) -> dict:
    """Identify one case with runup and the naive baseline; return raw results for scoring."""
    family, index, seed = key
    case = make_case(family, index, seed)
    run = make_run(case)
    res: dict = {"family": family, "index": index, "error": None, "warnings": []}
    t0 = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            ident = identify(run)
            res["reported"] = [
                (c.natural_speed_rpm, c.damping_ratio, c.amplification_factor,
                 c.natural_speed_ci95_rpm and (c.natural_speed_ci95_rpm.low, c.natural_speed_ci95_rpm.high),
                 c.damping_ratio_ci95 and (c.damping_ratio_ci95.low, c.damping_ratio_ci95.high), c.method,
                 (c.fit_low_rpm, c.fit_high_rpm))
                for c in ident.criticals
            ]
        except Exception as exc:  # noqa: BLE001 - a benchmark records failures instead of stopping
            res["error"] = f"{type(exc).__name__}: {exc}"
            res["reported"] = []
    res["warnings"] = [f"{w.category.__name__}: {w.message}" for w in caught]
    res["seconds"] = time.perf_counter() - t0
    res["naive"] = _naive(run, case)
    # a mode above the record (family "none") is not there to be found
    res["truth"] = [] if family == "none" else [(m.natural_speed_rpm, m.damping_ratio) for m in case.modes]
    res["points"] = case.speed_rpm.size
    res["noise"] = case.noise_fraction_of_peak
    if family.startswith("single"):
        m = case.modes[0]
        sig = _sigmas(case.speed_rpm, case.modes, case.probes, case.noise_fraction_of_peak)
        b_fn, b_z = crb_single_mode(case.speed_rpm, m.natural_speed_rpm, m.damping_ratio,
                                    [p.participations_um_pp[0] for p in case.probes], list(sig))
        res["crb"] = (b_fn / m.natural_speed_rpm, b_z / m.damping_ratio)
        # the bound for what runup's modal fit sees: its window, and its model (B + C r^2)
        near = [r for r in res["reported"] if abs(r[0] / m.natural_speed_rpm - 1) <= MATCH_TOLERANCE]
        res["crb_window"] = (math.nan, math.nan)
        if near:
            low, high = near[0][6]
            sel = (case.speed_rpm >= low) & (case.speed_rpm <= high)
            if sel.sum() >= 8:
                b_fn, b_z = crb_single_mode(case.speed_rpm[sel], m.natural_speed_rpm, m.damping_ratio,
                                            [p.participations_um_pp[0] for p in case.probes], list(sig), residual=True)
                res["crb_window"] = (b_fn / m.natural_speed_rpm, b_z / m.damping_ratio)
    return res


# ----------------------------------------------------------------------------------------
# scoring
def _match(truth: list[tuple[float, float]], reported: list[tuple]) -> tuple[list[tuple | None], int]:
    """Nearest reported critical within MATCH_TOLERANCE per true mode; and the false-alarm count."""
    used: set[int] = set()
    matches: list[tuple | None] = []
    for fn, _ in truth:
        dist = [abs(r[0] - fn) / fn if i not in used else math.inf for i, r in enumerate(reported)]
        j = int(np.argmin(dist)) if dist else -1
        if j >= 0 and dist[j] <= MATCH_TOLERANCE:
            used.add(j)
            matches.append(reported[j])
        else:
            matches.append(None)
    return matches, len(reported) - len(used)


def score(results: list[dict], *, naive: bool) -> dict:
    """Detection, false alarms, errors (%) and coverage over the cases of one family."""
    n_modes = detected = false_alarms = 0
    err: dict[str, list[float]] = {"fn": [], "zeta": [], "af": []}
    rel_fn: list[float] = []
    rel_z: list[float] = []
    crb_fn: list[float] = []
    crb_z: list[float] = []
    crb_w: list[tuple[float, float]] = []
    cover_fn = cover_z = 0
    worst: tuple[float, dict] | None = None
    for res in results:
        reported = res["naive"] if naive else res["reported"]
        matches, fa = _match(res["truth"], reported)
        false_alarms += fa
        for (fn, z), m in zip(res["truth"], matches, strict=True):
            n_modes += 1
            if m is None:
                continue
            detected += 1
            af_true = amplification_factor_from_damping(z)
            e_fn = abs(m[0] - fn) / fn * 100
            e_z = abs(m[1] - z) / z * 100 if math.isfinite(m[1]) else math.inf
            e_af = abs(m[2] - af_true) / af_true * 100 if math.isfinite(m[2]) else math.inf
            err["fn"].append(e_fn)
            err["zeta"].append(e_z)
            err["af"].append(e_af)
            badness = max(e_fn / TARGETS["fn"], e_z / TARGETS["zeta"], e_af / TARGETS["af"])
            if worst is None or badness > worst[0]:
                worst = (badness, {"index": res["index"], "fn": fn, "zeta": z, "points": res["points"],
                                   "noise": res["noise"], "got": m[:3]})
            if not naive:
                cover_fn += bool(m[3] and m[3][0] <= fn <= m[3][1])
                cover_z += bool(m[4] and m[4][0] <= z <= m[4][1])
                if "crb" in res:
                    rel_fn.append((m[0] - fn) / fn)
                    rel_z.append((m[1] - z) / z)
                    crb_fn.append(res["crb"][0])
                    crb_z.append(res["crb"][1])
                    crb_w.append(res["crb_window"])
    out = {"cases": len(results), "modes": n_modes, "detected": detected, "false_alarms": false_alarms,
           "err": err, "cover_fn": cover_fn, "cover_z": cover_z, "worst": worst}
    if rel_fn:
        rms = lambda v: float(np.sqrt(np.mean(np.square(v))))  # noqa: E731
        out["crb_ratio"] = (rms(rel_fn) / rms(crb_fn), rms(rel_z) / rms(crb_z))
        out["crb_normalised"] = (rms(np.divide(rel_fn, crb_fn)), rms(np.divide(rel_z, crb_z)))
        out["crb_median"] = (float(np.median(crb_fn)) * 100, float(np.median(crb_z)) * 100)
        w = np.array(crb_w)
        ok = np.isfinite(w).all(axis=1)
        out["crb_window_ratio"] = (rms(np.array(rel_fn)[ok]) / rms(w[ok, 0]), rms(np.array(rel_z)[ok]) / rms(w[ok, 1]))
    return out


def _q(values: list[float], q: float) -> float:
    return float(np.quantile(values, q)) if values else math.nan


def _fmt(x: float) -> str:
    if math.isnan(x):
        return "-"
    return "inf" if math.isinf(x) else f"{x:.3g}"


def report(family: str, results: list[dict]) -> None:
    """Print one family's figures, runup beside the naive baseline and the targets."""
    ru, nv = score(results, naive=False), score(results, naive=True)
    single = family.startswith("single")
    print(f"\n== {family}: {ru['cases']} cases, {ru['modes']} true modes")
    row = "  {:<28}{:>10}{:>10}{:>10}"
    print(row.format("", "runup", "naive", "target"))
    rate = lambda s: 100.0 * s["detected"] / s["modes"] if s["modes"] else math.nan  # noqa: E731
    print(row.format("detection rate %", _fmt(rate(ru)), _fmt(rate(nv)), "-"))
    print(row.format("false alarms per case", f"{ru['false_alarms'] / ru['cases']:.2f}",
                     f"{nv['false_alarms'] / nv['cases']:.2f}", "-"))
    if ru["modes"]:
        for key, label in (("fn", "natural speed"), ("zeta", "damping ratio"), ("af", "AF")):
            for name, q in (("median", 0.5), ("p90", 0.9), ("worst", 1.0)):
                target = f"{TARGETS[key]:g}" if (name == "worst" and single) else "-"
                print(row.format(f"{label} |err| % {name}", _fmt(_q(ru["err"][key], q)),
                                 _fmt(_q(nv["err"][key], q)), target))
        d = max(ru["detected"], 1)
        print(row.format("95 % CI covers fn %", f"{100 * ru['cover_fn'] / d:.0f}", "-", "~95"))
        print(row.format("95 % CI covers zeta %", f"{100 * ru['cover_z'] / d:.0f}", "-", "~95"))
        ratio = _q(nv["err"]["fn"], 0.5) / _q(ru["err"]["fn"], 0.5)
        print(f"  naive/runup median natural-speed error: {ratio:.1f}x")
    if "crb_ratio" in ru:
        print(f"  RMS error / RMS Cramer-Rao bound: natural speed {ru['crb_ratio'][0]:.2f}, "
              f"damping {ru['crb_ratio'][1]:.2f} (target <= {TARGETS['crb']:g})")
        print(f"  RMS of per-case error/bound:      natural speed {ru['crb_normalised'][0]:.2f}, "
              f"damping {ru['crb_normalised'][1]:.2f}; median bound {ru['crb_median'][0]:.3f} % fn, "
              f"{ru['crb_median'][1]:.2f} % zeta")
        print(f"  same, bound on runup's own fit window and model (with C r^2 residual): natural speed "
              f"{ru['crb_window_ratio'][0]:.2f}, damping {ru['crb_window_ratio'][1]:.2f}")
    if ru["worst"]:
        w = ru["worst"][1]
        print(f"  runup worst case: {family}:{w['index']} fn {w['fn']:.0f} rpm, zeta {w['zeta']:.4f}, "
              f"{w['points']} points, noise {100 * w['noise']:.1f} % -> fn {w['got'][0]:.0f}, "
              f"zeta {w['got'][1]:.4f}, AF {w['got'][2]:.3g}")
    errors = [r for r in results if r["error"]]
    if errors:
        print(f"  identify raised on {len(errors)} case(s), e.g. {family}:{errors[0]['index']}: {errors[0]['error']}")
    misses = [r["index"] for r in results if None in _match(r["truth"], r["reported"])[0]]
    if misses:
        print(f"  missed modes in cases: {', '.join(map(str, misses[:15]))}")
    alarms = [r["index"] for r in results if _match(r["truth"], r["reported"])[1]]
    if alarms:
        print(f"  false alarms in cases: {', '.join(map(str, alarms[:15]))}")
    caught = Counter(w for r in results for w in r["warnings"])
    for text, count in caught.most_common(3):
        print(f"  warning x{count}: {text[:120]}")


def show(spec: str, seed: int) -> None:
    """Print one case's truth, runup's criticals and the naive result."""
    family, index = spec.split(":")
    case = make_case(family, int(index), seed)
    print(f"{spec} (seed {seed}): {case.speed_rpm.size} points {case.speed_rpm[0]:.0f}-{case.speed_rpm[-1]:.0f} rpm, "
          f"noise {case.noise_fraction_of_peak:.3f} of peak (abs {case.noise_um_pp:.2f} um pp)")
    for m in case.modes:
        print(f"  true mode: fn {m.natural_speed_rpm:.1f} rpm, zeta {m.damping_ratio:.4f}, "
              f"AF {amplification_factor_from_damping(m.damping_ratio):.3f}")
    for p in case.probes:
        print(f"  probe {p.name}: participations {[f'{a:.2f}' for a in p.participations_um_pp]}, runout {p.runout_um_pp:.2f}")
    ident = identify(make_run(case))
    for c in ident.criticals:
        print(f"  runup: fn {c.natural_speed_rpm:.1f} rpm, zeta {c.damping_ratio:.4f}, AF {c.amplification_factor:.3f}, "
              f"CI fn {c.natural_speed_ci95_rpm}, method {c.method}, flags {c.flags}")
    for text in ident.rejected:
        print(f"  rejected: {text}")
    print(f"  naive: {_naive(make_run(case), case)}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help=f"{QUICK_CASES} cases per family")
    parser.add_argument("--seed", type=int, default=2024, help="base seed of all cases")
    parser.add_argument("--cases", type=int, help="cases per family (overrides the defaults)")
    parser.add_argument("--jobs", type=int, default=2, help="worker processes")
    parser.add_argument("--family", choices=FAMILIES, action="append", help="only these families")
    parser.add_argument("--show", metavar="FAMILY:INDEX", help="print one case and exit")
    args = parser.parse_args()
    if args.show:
        show(args.show, args.seed)
        return
    rel_fn, rel_z = crb_check()
    print("synthetic data only; runup.identify with default conditioning")
    print(f"CRB check (REFERENCE-VALUES.md: 2.59e-4, 5.19e-3): sigma(fn)/fn >= {rel_fn:.3e}, "
          f"sigma(zeta)/zeta >= {rel_z:.3e}")
    families = args.family or list(FAMILIES)
    keys = [(f, i, args.seed) for f in families for i in range(args.cases or (QUICK_CASES if args.quick else CASES[f]))]
    t0 = time.perf_counter()
    if args.jobs > 1:
        with ProcessPoolExecutor(max_workers=args.jobs) as pool:
            results = list(pool.map(run_case, keys, chunksize=4))
    else:
        results = [run_case(k) for k in keys]
    wall = time.perf_counter() - t0
    for family in families:
        report(family, [r for r in results if r["family"] == family])
    per = pd.Series([r["seconds"] for r in results])
    print(f"\n{len(results)} cases in {wall:.1f} s wall ({args.jobs} jobs); identify per case median "
          f"{per.median():.3f} s, max {per.max():.3f} s; seed {args.seed}")


if __name__ == "__main__":
    main()
