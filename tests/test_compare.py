"""Tests of measured-versus-predicted comparison (runup.compare).

References
----------
* MAC: Allemang & Brown, "A correlation coefficient for modal vector analysis", Proc. 1st
  IMAC, 1982 -- MAC(a, b) = |a^H b|^2 / ((a^H a)(b^H b)).
* Assignment: checked against a brute-force search over all one-to-one pairings
  (itertools), independent of scipy's Kuhn-Munkres solver.
* Verification rules (+-5 %, split-pair band, amplitude not above predicted): API 617 8th ed.
  2014 / API RP 684 2nd ed. 2005, from memory.
All criticals and predictions are synthetic.
"""

from __future__ import annotations

import itertools
import json
import math
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from runup import identify
from runup.compare import agreement_to_dict, compare, mac
from runup.critical import Critical, ProbeDetail
from runup.errors import DataFormatError
from runup.io.predicted import Predicted, PredictedMode, read_predicted
from runup.run import Probe

SAMPLES = Path(__file__).resolve().parents[1] / "sample_runs"
PROBES = (Probe("DE-X", "DE", -45), Probe("DE-Y", "DE", 45), Probe("NDE-X", "NDE", -45), Probe("NDE-Y", "NDE", 45))


def detail(probe: str, peak_um_pp: float, participation: complex) -> ProbeDetail:
    return ProbeDetail(probe, "peak+phase", 0.0, peak_um_pp, math.nan, None, None, participation)


def critical(speed_rpm: float, *, af: float = 9.9, segment: int = 0, order: int = 1, details=()) -> Critical:
    """A synthetic Critical with only the fields compare reads set meaningfully."""
    return Critical(
        speed_rpm=speed_rpm, natural_speed_rpm=speed_rpm / 1.0025, damping_ratio=0.05,
        amplification_factor=af, lower_half_power_rpm=math.nan, upper_half_power_rpm=math.nan,
        natural_speed_ci95_rpm=None, damping_ratio_ci95=None, amplification_factor_ci95=None,
        probes=tuple(d.probe for d in details), evidence="peak+phase", order=order, segment=segment,
        direction="startup", method="modal_fit", af_method="", flags=(), notes=(), detail=tuple(details),
        fit_low_rpm=0.0, fit_high_rpm=0.0, fit_points=0,
    )


def test_mac_closed_forms():
    """MAC is 1 for vectors differing by a complex scale, 0 for orthogonal vectors, and
    |a.b|^2/(|a|^2|b|^2) otherwise: [1, 1] vs [1, 0] gives 1/2 (hand calculation)."""
    a = np.array([0.3 + 0.4j, -1.2 + 0.1j, 0.7j])
    assert_allclose(mac(a, (2.0 - 3.0j) * a), 1.0, rtol=1e-14)  # exact up to rounding
    assert_allclose(mac([1, 0], [0, 1]), 0.0, atol=0)
    assert_allclose(mac([1, 1], [1, 0]), 0.5, rtol=1e-15)
    assert math.isnan(mac([0, 0], [1, 0]))


def test_speed_errors_rules_and_score_by_hand():
    """Two well separated modes: speed error 100(Nm-Np)/Np, the +-5 % rule, AF ratio and the
    score 100*mean(exp(-(e/5)^2)) (the formula of docs/compare.md), computed by hand."""
    predicted = Predicted((PredictedMode("1st", 4200.0, 8.0), PredictedMode("2nd", 8700.0, 5.0)))
    measured = [critical(4364.0, af=9.0), critical(9200.0, af=5.5)]
    a = compare(measured, predicted)
    e1, e2 = 100 * (4364 - 4200) / 4200, 100 * (9200 - 8700) / 8700  # 3.905 %, 5.747 %
    assert [m.predicted.mode for m in a.matches] == ["1st", "2nd"]
    assert_allclose([m.speed_error_percent for m in a.matches], [e1, e2], rtol=1e-12)  # same arithmetic
    assert_allclose([m.af_ratio for m in a.matches], [9.0 / 8.0, 5.5 / 5.0], rtol=1e-12)
    assert [m.passed for m in a.matches] == [True, False]  # 5.75 % is outside +-5 %
    assert_allclose(a.score, 100 * (math.exp(-(e1 / 5) ** 2) + math.exp(-(e2 / 5) ** 2)) / 2, rtol=1e-12)
    assert not a.passed


def test_assignment_matches_brute_force():
    """Over seeded random sets, the assignment has as many pairs as the best one-to-one
    pairing of gated pairs and, among those, the least total |ln(Nm/Np)| (brute force)."""
    rng = np.random.default_rng(11)
    for _ in range(20):
        p_speeds = np.sort(rng.uniform(2000, 12000, rng.integers(1, 5)))
        m_speeds = np.sort(rng.uniform(2000, 12000, rng.integers(1, 5)))
        predicted = Predicted(tuple(PredictedMode(f"m{i}", float(s)) for i, s in enumerate(p_speeds)))
        a = compare([critical(float(s)) for s in m_speeds], predicted, gate_percent=25.0)
        got = (len(a.matches), sum(abs(math.log(m.measured.speed_rpm / m.predicted.speed_rpm)) for m in a.matches))
        best = (0, 0.0)
        for choice in itertools.product([None, *range(len(p_speeds))], repeat=len(m_speeds)):
            used = [j for j in choice if j is not None]
            if len(used) != len(set(used)):
                continue  # not one-to-one
            pairs = [(m_speeds[i], p_speeds[j]) for i, j in enumerate(choice) if j is not None]
            if any(abs(x - y) > 0.25 * y for x, y in pairs):
                continue  # gated out
            cand = (len(pairs), sum(abs(math.log(x / y)) for x, y in pairs))
            if cand[0] > best[0] or (cand[0] == best[0] and cand[1] < best[1]):
                best = cand
        assert got[0] == best[0]
        assert_allclose(got[1], best[1], rtol=1e-12, atol=1e-15)  # same sums, different order


def test_mode_shapes_resolve_close_modes():
    """Two predicted modes 4 % apart with distinct shapes (cylindrical, conical): measured
    criticals whose speeds alone would pair them the other way are assigned by MAC."""
    predicted = Predicted((
        PredictedMode("cylindrical", 5000.0, shape=(("DE", 1.0), ("NDE", 1.0))),
        PredictedMode("conical", 5200.0, shape=(("DE", -1.0), ("NDE", 1.0))),
    ))
    conical = [detail("DE-X", 50, -2 + 1j), detail("NDE-X", 60, 2 - 1j), detail("DE-Y", 50, 1 + 2j), detail("NDE-Y", 60, -1 - 2j)]
    cylindrical = [detail("DE-X", 50, 2 + 1j), detail("NDE-X", 60, 2 + 1j), detail("DE-Y", 50, -1 + 2j), detail("NDE-Y", 60, -1 + 2j)]
    measured = [critical(5050.0, details=conical), critical(5150.0, details=cylindrical)]
    a = compare(measured, predicted, probes=PROBES)
    pairs = {m.predicted.mode: m.measured.speed_rpm for m in a.matches}
    assert pairs == {"cylindrical": 5150.0, "conical": 5050.0}
    assert_allclose([m.mac for m in a.matches], [1.0, 1.0], rtol=1e-12)  # shapes proportional
    without = compare(measured, predicted)  # no planes: speed alone
    assert {m.predicted.mode: m.measured.speed_rpm for m in without.matches} == {"cylindrical": 5050.0, "conical": 5150.0}


def test_split_pair_band_and_unresolved_partner():
    """A split pair 4150/4450 rpm: a measured critical at 4300 passes the band
    [0.95*4150, 1.05*4450] = [3942.5, 4672.5]; one at 4700 fails it; the unmatched partner is
    'not seen separately' and not scored."""
    predicted = Predicted((
        PredictedMode("1st H", 4150.0, split_pair="1st"), PredictedMode("1st V", 4450.0, split_pair="1st"),
    ))
    inside = compare([critical(4300.0)], predicted)
    check = inside.matches[0].checks[0]
    assert check.passed and "split pair" in check.rule
    assert_allclose((check.low, check.high), (3942.5, 4672.5), rtol=1e-12)
    assert inside.unmatched_predicted[0].reason.startswith("not seen separately")
    assert not inside.unmatched_predicted[0].scored
    assert_allclose(inside.score, 100.0, rtol=1e-12)  # inside the band: e = 0
    outside = compare([critical(4700.0)], predicted)
    assert not outside.matches[0].checks[0].passed
    e = 100 * (4700 - 4450) / 4450  # percent above the higher predicted speed (score formula)
    assert_allclose(outside.score, 100 * math.exp(-(e / 5) ** 2), rtol=1e-12)


def test_unmatched_modes_are_explained_and_scored():
    """Unmatched predicted modes are explained (critically damped, outside the record, or not
    excited); only the last counts 0 in the score; an unmatched measured critical is a model
    gap and counts 0."""
    predicted = Predicted((
        PredictedMode("1st", 4000.0, 8.0), PredictedMode("damped", 2500.0, 2.0),
        PredictedMode("high", 15000.0, 6.0), PredictedMode("quiet", 7000.0, 6.0),
    ))
    a = compare([critical(4000.0), critical(11000.0)], predicted, speed_range_rpm=(300.0, 12000.0))
    reasons = {u.mode.mode: (u.reason, u.scored) for u in a.unmatched_predicted}
    assert "critically damped" in reasons["damped"][0] and not reasons["damped"][1]
    assert "outside the record's speed range [300, 12000]" in reasons["high"][0] and not reasons["high"][1]
    assert "not excited" in reasons["quiet"][0] and reasons["quiet"][1]
    assert [u.critical.speed_rpm for u in a.unmatched_measured] == [11000.0]
    assert "model gap" in a.unmatched_measured[0].reason
    assert_allclose(a.score, 100 * 1.0 / 3, rtol=1e-12)  # groups 1st (1) + quiet (0), plus one gap (0)


def test_amplitude_rule_per_plane():
    """The largest single-probe peak of each plane is judged against the predicted peak."""
    mode = PredictedMode("1st", 4000.0, peak_amplitude_um_pp=(("DE", 60.0), ("NDE", 70.0)))
    details = [detail("DE-X", 55, 1), detail("DE-Y", 58, 1j), detail("NDE-X", 75, 1), detail("NDE-Y", 40, 1j)]
    m = compare([critical(4000.0, details=details)], Predicted((mode,)), probes=PROBES).matches[0]
    amps = {x.plane: (x.measured_um_pp, x.ratio) for x in m.amplitudes}
    assert amps["DE"] == (58, 58 / 60) and amps["NDE"] == (75, 75 / 70)
    assert [c.passed for c in m.checks] == [True, True, False]  # speed, DE, NDE


def test_several_segments_need_a_choice():
    """Criticals of a startup and a coastdown segment are compared one segment at a time."""
    predicted = Predicted((PredictedMode("1st", 4000.0),))
    both = [critical(4000.0, segment=0), critical(3950.0, segment=1)]
    with pytest.raises(DataFormatError, match="segment="):
        compare(both, predicted)
    assert compare(both, predicted, segment=1).matches[0].measured.speed_rpm == 3950.0
    with pytest.raises(DataFormatError, match="tolerance_percent"):
        compare(both, predicted, tolerance_percent=0.0, segment=0)


def test_sample_run_against_sample_prediction_and_json():
    """The synthetic SYN-K7 startup (truth 4,350 / 8,900 rpm) against its synthetic prediction
    (4,200 / 8,700 rpm): both modes matched within +-5 %, shapes agree (MAC > 0.9, the
    synthetic participations of generate.py are nearly proportional to the predicted shapes),
    and the JSON form is strict JSON."""
    result = identify(SAMPLES / "compressor_startup.csv")
    predicted = read_predicted(SAMPLES / "compressor_predicted.toml")
    a = compare(result.criticals, predicted, probes=result.conditioned.metadata.probes,
                speed_range_rpm=(300.0, 11900.0))
    assert [m.predicted.mode for m in a.matches] == ["1st forward", "2nd forward"]
    assert a.passed and not a.unmatched_predicted and not a.unmatched_measured
    assert all(m.mac > 0.9 for m in a.matches)
    doc = json.loads(json.dumps(agreement_to_dict(a), allow_nan=False))
    assert doc["matches"][0]["checks"][0]["source"].endswith("from memory")
    assert len(a.to_frame()) == 2


def test_measured_split_critical_meets_a_predicted_split_pair(tmp_path):
    """A split critical resolved by identify enters the assignment as its two speeds when the
    prediction has a split pair (synthetic coastdown: 4,210 / 4,520 rpm truth)."""
    import runup
    from runup.compare import compare
    from runup.io.predicted import read_predicted

    pred = tmp_path / "split.toml"
    pred.write_text(
        "# synthetic prediction with a split pair\nschema_version = 1\n"
        '[[modes]]\nmode = "1st horizontal"\nspeed_rpm = 4250\nsplit_pair = "first"\n'
        '[[modes]]\nmode = "1st vertical"\nspeed_rpm = 4500\nsplit_pair = "first"\n'
        '[[modes]]\nmode = "2nd"\nspeed_rpm = 9300\n'
    )
    ident = runup.identify("sample_runs/compressor_coastdown.csv")
    agreement = compare(ident.criticals, read_predicted(pred))
    matched = sorted(round(m.measured.speed_rpm) for m in agreement.matches)
    assert len(matched) == 3 and not agreement.unmatched_measured
    # the branches' peak speeds (about 4,220 and 4,531 rpm) each sit within 5 % of a pair member
    assert abs(matched[0] / 4250 - 1) < 0.05 and abs(matched[1] / 4500 - 1) < 0.05
