"""Trend and drift against hand-computed cases; `archive diff` and `archive trend` on the command line.

Fingerprints here are built by hand (invented numbers) so that every expected value is worked
out in the comment beside it.
"""

import dataclasses
import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from typer.testing import CliRunner

import runup.cli.archive  # noqa: F401  (registers the archive commands on the shared app)
from runup.archive import DriftThresholds, add_fingerprint, diff, trend
from runup.archive.drift import match_criticals, twice_x_peaks
from runup.cli import app
from runup.errors import DataFormatError
from runup.fingerprint import CriticalPrint, Fingerprint, GridCurve, SlowRollPrint

runner = CliRunner()
NAN = math.nan


def crit(speed_rpm, af, *, order=1, peak=20.0):
    return CriticalPrint(0, "startup", order, speed_rpm, speed_rpm, NAN, NAN, 1 / (2 * af), NAN, NAN, af, NAN, NAN,
                         peak, "modal_fit", ("X",), ())


def fp(run_id, criticals, slow_roll=(10 + 0j,), *, curves=(), start_time=None):
    return Fingerprint("K-301", run_id, start_time, "startup", "ccw", (), (), 50.0, tuple(curves), tuple(criticals),
                       tuple(SlowRollPrint(f"P{k}", 1, 0, v, 500.0, 800.0) for k, v in enumerate(slow_roll)), (),
                       None, (), (), "test")


def test_match_criticals_is_optimal_and_gated():
    """Nearest-speed one-to-one assignment; a pair beyond the gate stays unmatched.

    Hand case: baseline 4,000 and 8,000; current 4,100 (2.5 %), 8,050 (0.6 %), 12,000 (50 % from
    8,000: beyond a 15 % gate) -> (0,0), (1,1), (None,2).
    """
    b, c = [crit(4000, 5), crit(8000, 4)], [crit(4100, 5), crit(8050, 4), crit(12000, 3)]
    assert match_criticals(b, c, gate_percent=15.0) == [(0, 0), (1, 1), (None, 2)]
    # baseline 4,000/4,400, current 4,190: cost 4.75 % vs 4.77 % -> matched to 4,000
    assert match_criticals([crit(4000, 5), crit(4400, 5)], [crit(4190, 5)], gate_percent=15.0) == [(0, 0), (1, None)]


def test_diff_speed_shift_af_change_and_slow_roll_hand_computed():
    """Shift 100*(4,130/4,000 - 1) = +3.25 % > 3 %; AF 6.5 vs 5.0 = +30 % > 25 %; slow roll |(10+6j)-10| = 6 > max(2.5, 5)."""
    base = fp("b", [crit(4000, 5.0)], slow_roll=(10 + 0j, 40 + 0j))
    cur = fp("c", [crit(4130, 6.5)], slow_roll=(10 + 6j, 40 + 9j))
    d = diff(cur, base)
    assert_allclose(d.matches[0].speed_shift_percent, 3.25, rtol=1e-12)
    assert_allclose(d.matches[0].af_change_percent, 30.0, rtol=1e-12)
    kinds = sorted(a.kind for a in d.alerts)
    # P1: |9j| = 9 < max(0.25*40, 5) = 10 -> no alert; P0: 6 > 5 -> alert
    assert kinds == ["amplification_factor_change", "critical_speed_shift", "slow_roll_change"]
    sr = {s.probe: s for s in d.slow_roll}
    assert_allclose([sr["P0"].change_um_pp, sr["P0"].threshold_um_pp, sr["P1"].threshold_um_pp], [6.0, 5.0, 10.0])
    assert d.exit_code == 1


def test_diff_below_thresholds_is_quiet_and_thresholds_override():
    """+2.5 % shift and +20 % AF stay quiet by default; with 2 % and 10 % thresholds both alert."""
    base, cur = fp("b", [crit(4000, 5.0)]), fp("c", [crit(4100, 6.0)])
    assert diff(cur, base).alerts == () and diff(cur, base).exit_code == 0
    th = DriftThresholds(critical_speed_shift_percent=2.0, amplification_factor_change_percent=10.0)
    assert sorted(a.kind for a in diff(cur, base, thresholds=th).alerts) == [
        "amplification_factor_change", "critical_speed_shift"]
    with pytest.raises(DataFormatError):
        DriftThresholds(critical_speed_shift_percent=-1.0)


def test_missing_and_new_criticals_alert():
    """A baseline critical with no match within the gate and a new one each raise an alert."""
    d = diff(fp("c", [crit(6000, 4.0)]), fp("b", [crit(4000, 5.0)]))  # 50 % apart: beyond the 15 % gate
    assert sorted(a.kind for a in d.alerts) == ["critical_missing", "critical_new"]


def _two_x_curve(peak_rpm, peak_um):
    speed = np.arange(500.0, 9001.0, 50.0)
    amp = 1.0 + (peak_um - 1.0) * np.exp(-(((speed - peak_rpm) / 60.0) ** 2))
    return GridCurve("X", "probe", 2, 0, speed, amp.astype(complex))


def test_twice_x_near_half_critical_from_curves_and_growth():
    """A 2X hump at 2,050 rpm is within 5 % of 4,000/2 = 2,000 (2.5 %); absent in the baseline -> alert.

    With the hump in both, 8 -> 12 um pp is +50 % growth > 25 % -> alert; 8 -> 9 (+12.5 %) -> quiet.
    """
    base = fp("b", [crit(4000, 5.0)])
    cur = fp("c", [crit(4000, 5.0)], curves=[_two_x_curve(2050.0, 8.0)])
    peaks = twice_x_peaks(cur)
    assert len(peaks) == 1 and peaks[0].shaft_speed_rpm == 2050.0 and peaks[0].amplitude_um_pp == pytest.approx(8.0)
    assert [a.kind for a in diff(cur, base).alerts] == ["twice_x_near_half_critical"]
    base2 = dataclasses.replace(base, curves=(_two_x_curve(2050.0, 8.0),))
    grown = dataclasses.replace(cur, curves=(_two_x_curve(2050.0, 12.0),))
    alert = diff(grown, base2).alerts[0]
    assert_allclose(alert.value, 50.0, rtol=1e-9)
    assert diff(dataclasses.replace(cur, curves=(_two_x_curve(2050.0, 9.0),)), base2).alerts == ()
    # 2,200 rpm is 10 % above half the critical: outside the +-5 % window, no peak
    assert twice_x_peaks(dataclasses.replace(cur, curves=(_two_x_curve(2200.0, 8.0),))) == ()


def test_twice_x_from_order_two_critical():
    """An order-2 critical at 3,960 cpm is a 2X peak at 1,980 rpm shaft speed, 1 % from 4,000/2."""
    cur = fp("c", [crit(4000, 5.0), crit(3960, 8.0, order=2, peak=6.0)])
    (p,) = twice_x_peaks(cur)
    assert p.source == "critical" and p.shaft_speed_rpm == 1980.0 and p.amplitude_um_pp == 6.0


def test_trend_tracks_modes_of_the_reference():
    """Three runs: 4,000 / 4,040 / 4,200 rpm tracked as mode 1; AF and slow-roll amplitude |3+4j| = 5 trended."""
    runs = [fp("r1", [crit(4000, 5.0)], (3 + 4j,)), fp("r2", [crit(4040, 5.5)], (3 + 4j,)),
            fp("r3", [crit(4200, 6.0), crit(9000, 3.0)], (6 + 8j,))]
    t = trend(runs)
    speeds = t.series("critical_speed_rpm")
    assert list(speeds) == ["mode 1 (4,000 rpm)"]  # 9,000 has no reference mode: left out
    assert_allclose([p.value for p in speeds["mode 1 (4,000 rpm)"]], [4000, 4040, 4200])
    assert_allclose([p.value for p in t.series("amplification_factor")["mode 1 (4,000 rpm)"]], [5.0, 5.5, 6.0])
    assert_allclose([p.value for p in t.series("slow_roll_amplitude_um_pp")["P0"]], [5.0, 5.0, 10.0])
    assert len(t.to_frame()) == 9


def test_cli_diff_exit_codes_and_trend_plot(tmp_path):
    """`archive diff` exits 1 with alerts and 0 without; `archive trend -o` writes a plot and prints the table."""
    arc = tmp_path / "arc"
    add_fingerprint(arc, fp("b", [crit(4000, 5.0)], start_time="2024-05-01T08:00:00"), baseline=True)
    add_fingerprint(arc, fp("same", [crit(4040, 5.2)], start_time="2024-05-02T08:00:00"))
    add_fingerprint(arc, fp("moved", [crit(4200, 5.0)], start_time="2024-05-03T08:00:00"))
    res = runner.invoke(app, ["archive", "diff", "same", "--archive", str(arc), "--machine", "K-301"])
    assert res.exit_code == 0, res.output
    assert "no drift alert" in res.output
    res = runner.invoke(app, ["archive", "diff", "moved", "--archive", str(arc), "--machine", "K-301", "--json", "-"])
    assert res.exit_code == 1
    doc = json.loads(res.stdout)
    assert [a["kind"] for a in doc["alerts"]] == ["critical_speed_shift"]  # +5 % > 3 %
    res = runner.invoke(app, ["archive", "diff", "moved", "--archive", str(arc), "--machine", "K-301",
                              "--speed-shift", "6"])
    assert res.exit_code == 0
    png = tmp_path / "trend.png"
    res = runner.invoke(app, ["archive", "trend", "K-301", "--archive", str(arc), "-o", str(png)])
    assert res.exit_code == 0, res.output
    assert png.stat().st_size > 0 and "4,200" in res.output
    res = runner.invoke(app, ["archive", "diff", "nope", "--archive", str(arc), "--machine", "K-301"])
    assert res.exit_code == 2 and "error: " in res.output
