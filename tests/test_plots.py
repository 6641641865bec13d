"""Plots: what is drawn matches the results, on every sample run and on closed-form cases.

References
----------
* Single-mode unbalance response ``X = A r^2 / (1 - r^2 + 2 j zeta r)`` (Jeffcott rotor;
  Rao, *Mechanical Vibrations*, 5th ed., 2011, sec. 3.7): at ``r = 1`` it is
  ``-j A / (2 zeta)``, a lag of exactly 90 degrees.
* Half-power speed ratios ``r_1,2 = 1/sqrt(1 - 2 zeta^2 +- 2 zeta sqrt(1 - zeta^2))``
  (derived from the same model; REFERENCE-VALUES.md).
* File signatures: PNG (ISO/IEC 15948:2004, sec. 5.2, eight-byte signature), PDF
  (ISO 32000-1:2008, sec. 7.5.2, ``%PDF-`` header), SVG (W3C SVG 1.1, an XML document
  with an ``svg`` root element).

Figures are inspected through the records the plot functions return (lines, markers,
labels), never through pixels.  All sample runs are synthetic (sample_runs/README.md).
"""

import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from matplotlib.figure import Figure
from numpy.testing import assert_allclose

import runup
from runup import plots
from runup.errors import DataFormatError
from runup.fit.models import half_power_speed_ratios, unbalance_response
from runup.run import OperatingSpeeds
from runup.synthetic import SyntheticMode, SyntheticProbe, synthetic_run

ROOT = Path(__file__).resolve().parents[1]
#: the sample *runs* (startups and coastdowns); predicted files live beside them
SAMPLES = sorted(
    p for p in (ROOT / "sample_runs").iterdir()
    if p.suffix in (".csv", ".parquet") and ("startup" in p.stem or "coastdown" in p.stem)
)


@pytest.fixture(scope="module", params=SAMPLES, ids=lambda p: p.name)
def sample(request):
    """Identification of one synthetic sample run (identified once per module)."""
    return runup.identify(str(request.param))


@pytest.fixture(scope="module")
def single_mode():
    """Noise-free single mode with runout: natural 3000 rpm, zeta 0.08, known participations."""
    wn, zeta = 3000.0, 0.08
    probes = [SyntheticProbe("A", (20.0 + 0j,), 3.0 + 1.0j), SyntheticProbe("B", (12.0j,), -2.0 + 0j)]
    speed = np.linspace(200.0, 6000.0, 500)
    run = synthetic_run(speed, modes=[SyntheticMode(wn, zeta)], probes=probes, machine_id="SYN-T",
                        run_id="SYN-T-01", operating=OperatingSpeeds(4000.0, 4500.0, 4725.0))
    return runup.identify(run), wn, zeta, speed


@pytest.fixture(scope="module")
def no_resonance():
    """Runout and noise only, no mode: identification finds no critical."""
    probes = [SyntheticProbe("A", (0j,), 5.0 + 2.0j), SyntheticProbe("B", (0j,), -3.0 + 1.0j)]
    speed = np.linspace(300.0, 5000.0, 300)
    rng = np.random.default_rng(11)
    run = synthetic_run(speed, modes=[SyntheticMode(9000.0, 0.05)], probes=probes, seed=int(rng.integers(1000)))
    result = runup.identify(run)
    assert result.criticals == ()
    return result


# ----------------------------------------------------------------------------- Bode


def test_bode_draws_one_line_per_probe_and_marks_each_critical(sample):
    """Every sample: one amplitude and one phase line per probe of the segment, each
    critical marked at its speed_rpm on both axes, labels carry the units."""
    plot = plots.bode(sample)
    curves = [c for c in sample.conditioned.curves if c.segment == 0 and c.order == 1]
    assert list(plot.lines) == [c.probe for c in curves]
    assert len(plot.phase_lines) == len(curves)
    for curve in curves:
        # amplitude is |X| of the compensated vectors (runup.units: X = A exp(-j phi))
        assert_allclose(plot.lines[curve.probe].get_ydata(), np.abs(curve.response_um_pp), rtol=1e-12)
        # the displayed phase equals the lag -angle(X) up to whole turns (numpy.angle)
        lag = -np.degrees(np.angle(curve.response_um_pp))
        turns = (np.asarray(plot.phase_lines[curve.probe].get_ydata()) - lag) / 360.0
        assert_allclose(turns, np.round(turns), atol=1e-9)  # float round-off of degrees only
    crits = [c for c in sample.criticals if c.segment == 0 and c.order == 1]
    assert [m.get_xdata()[0] for m in plot.critical_markers] == [c.speed_rpm for c in crits]
    assert [m.get_xdata()[0] for m in plot.phase_critical_markers] == [c.speed_rpm for c in crits]
    assert "µm pk-pk" in plot.amplitude_ax.get_ylabel()
    assert plot.phase_ax.get_ylabel() == "1X phase lag (deg)"
    assert plot.phase_ax.get_xlabel() == "speed (rpm)"
    meta = sample.conditioned.metadata
    assert meta.machine_id in plot.amplitude_ax.get_title(loc="left")
    assert meta.run_id in plot.amplitude_ax.get_title(loc="left")
    assert sample.conditioned.segments[0].label in plot.amplitude_ax.get_title(loc="left")


def test_bode_shades_operating_range_margins_and_predictions(sample):
    """Operating range MOS-MCS shaded, one hatched span per margin band, one dash-dot line per
    predicted critical, each at the speeds given."""
    op = sample.conditioned.metadata.operating
    plot = plots.bode(sample, margin_bands=[(1000.0, 1500.0), (2500.0, 2000.0)],
                      predicted_speeds_rpm=[1234.0, 2345.0])
    x0, x1 = (plot.operating_span.get_x(), plot.operating_span.get_x() + plot.operating_span.get_width())
    assert_allclose([x0, x1], [op.min_operating_rpm, op.max_continuous_rpm])
    spans = [(s.get_x(), s.get_x() + s.get_width()) for s in plot.margin_spans]
    assert_allclose(spans, [(1000.0, 1500.0), (2000.0, 2500.0)])  # a reversed band is put in order
    assert all(s.get_hatch() == "////" for s in plot.margin_spans)
    assert [line.get_xdata()[0] for line in plot.predicted_lines] == [1234.0, 2345.0]
    assert all(line.get_linestyle() == "-." for line in plot.predicted_lines)


def test_bode_fitted_curve_matches_closed_form_single_mode(single_mode):
    """Noise-free single mode: the dashed fitted line equals the Jeffcott closed form (Rao
    2011, sec. 3.7) plus runout, and the half-power bracket spans Omega_n r_1 .. Omega_n r_2."""
    result, wn, zeta, _speed = single_mode
    plot = plots.bode(result)
    (crit,) = plot.criticals
    (fit_line,) = plot.fit_lines["A"]
    assert plot.fit_is_modal_part["A"] == (False,)
    s = np.asarray(fit_line.get_xdata())
    # compensated data = mode + (true runout - slow-roll estimate), a constant the fit's
    # residual term B takes exactly
    offset = 3.0 + 1.0j - result.conditioned.curve("A").slow_roll.vector_um_pp
    truth = np.abs(unbalance_response(s, natural_speed_rpm=wn, damping_ratio=zeta, modal_constant=20.0) + offset)
    # noise-free data: the modal fit recovers the model to optimiser precision; 1e-4 of the
    # peak leaves room for the residual-term projection, far below anything visible
    assert_allclose(fit_line.get_ydata(), truth, atol=1e-4 * truth.max())
    r1, r2 = half_power_speed_ratios(zeta)
    (bracket,) = plot.half_power_brackets
    assert_allclose(bracket.get_xdata(), [crit.lower_half_power_rpm, crit.upper_half_power_rpm])
    # identification on noise-free data is exact to the fit's tolerance; 1e-4 relative
    assert_allclose(bracket.get_xdata(), [wn * r1, wn * r2], rtol=1e-4)
    # bracket level 0.707 of the largest probe peak: API 684 half-power level (from memory)
    peak = max(d.peak_amplitude_um_pp for d in crit.detail)
    assert_allclose(bracket.get_ydata(), [0.707 * peak] * 2)


def test_bode_fitted_phase_meets_measured_phase(single_mode):
    """The fitted phase is shifted by whole turns onto the measured phase: at the natural
    speed both read the same lag (noise-free data, Jeffcott closed form)."""
    result, wn, _zeta, _speed = single_mode
    plot = plots.bode(result, probes=["B"])
    (fit_phase,) = plot.fit_phase_lines["B"]
    measured = np.interp(wn, plot.phase_lines["B"].get_xdata(), plot.phase_lines["B"].get_ydata())
    fitted = np.interp(wn, fit_phase.get_xdata(), fit_phase.get_ydata())
    assert abs(measured - fitted) < 1.0  # 500-point linear interpolation on a noise-free curve


def test_bode_raw_lines_only_where_a_slow_roll_was_removed(single_mode):
    """Uncompensated lines are |raw X| and exist only with show_raw and a slow-roll vector."""
    result, *_ = single_mode
    plot = plots.bode(result)
    curves = {c.probe: c for c in result.conditioned.curves}
    for probe, line in plot.raw_lines.items():
        assert curves[probe].slow_roll is not None
        assert_allclose(line.get_ydata(), np.abs(curves[probe].raw_response_um_pp), rtol=1e-12)
    assert set(plot.raw_lines) == {p for p, c in curves.items() if c.slow_roll is not None}
    assert plots.bode(result, show_raw=False).raw_lines == {}


def test_bode_probe_selection_and_log_scale(single_mode):
    """probes= picks and orders lines; amplitude_scale='log' sets a log axis."""
    result, *_ = single_mode
    plot = plots.bode(result, probes=["B", "A"], amplitude_scale="log")
    assert list(plot.lines) == ["B", "A"]
    assert plot.amplitude_ax.get_yscale() == "log"


def test_bode_on_given_axes():
    """With axes=(a, b) the plot draws on them and returns their figure."""
    result = runup.identify(str(SAMPLES[0]))
    fig = Figure()
    a, b = fig.subplots(2, 1)
    plot = plots.bode(result, axes=(a, b))
    assert plot.figure is fig and plot.amplitude_ax is a and plot.phase_ax is b


def test_no_resonance_draws_data_without_markers(no_resonance):
    """A run without critical: data lines drawn, no critical marker, bracket or fit."""
    plot = plots.bode(no_resonance)
    assert len(plot.lines) == 2
    assert plot.critical_markers == () and plot.half_power_brackets == ()
    assert all(v == () for v in plot.fit_lines.values())
    pol = plots.polar(no_resonance, probe="A")
    assert pol.critical_markers == () and pol.fit_lines == ()


@pytest.mark.parametrize(
    ("options", "needle"),
    [
        ({"probes": ["nope"]}, "valid probes"),
        ({"probes": []}, "list of probe names"),
        ({"probes": "A"}, "list of probe names"),
        ({"segment": 7}, "segment 7"),
        ({"order": 2}, "order 2"),
        ({"amplitude_scale": "dB"}, "'linear' or 'log'"),
        ({"predicted_speeds_rpm": [-5.0]}, "positive"),
        ({"margin_bands": [(1.0, 2.0, 3.0)]}, "pairs"),
    ],
)
def test_bode_bad_options_raise_one_line_errors(single_mode, options, needle):
    """Bad options raise DataFormatError with one line naming the problem and the fix."""
    result, *_ = single_mode
    with pytest.raises(DataFormatError, match=needle) as info:
        plots.bode(result, **options)
    assert "\n" not in str(info.value)


@pytest.fixture(scope="module")
def coastdown():
    """Identification of the synthetic coastdown, whose first critical is split (README)."""
    result = runup.identify(str(ROOT / "sample_runs" / "compressor_coastdown.csv"))
    assert result.criticals[0].split is not None
    return result


def test_bode_marks_both_branches_of_a_split_critical(coastdown):
    """A split critical: dotted lines at both branch speeds (the SplitPair's speed_rpm) and
    a label naming both; the headline marker stays at Critical.speed_rpm."""
    plot = plots.bode(coastdown, probes=["NDE-X", "NDE-Y"])
    split = coastdown.criticals[0].split
    (pair,) = plot.split_markers
    assert [line.get_xdata()[0] for line in pair] == [split.lower.speed_rpm, split.upper.speed_rpm]
    assert all(line.get_linestyle() != "-" for line in pair)  # dotted, told apart from the solid headline marker
    label = plot.critical_labels[0].get_text()
    assert f"split: {split.lower.speed_rpm:,.0f} / {split.upper.speed_rpm:,.0f} rpm" in label
    assert plot.critical_markers[0].get_xdata()[0] == coastdown.criticals[0].speed_rpm


def test_bode_phase_only_where_amplitude_is_reliable(coastdown):
    """Phase is drawn (finite) exactly where |X| >= 10 % of the curve's peak |X| (numpy.abs);
    elsewhere — the slow-roll region after compensation — it is nan."""
    plot = plots.bode(coastdown)
    for curve in (c for c in coastdown.conditioned.curves if c.segment == 0 and c.order == 1):
        amp = np.abs(curve.response_um_pp)
        drawn = np.isfinite(np.asarray(plot.phase_lines[curve.probe].get_ydata(), dtype=float))
        np.testing.assert_array_equal(drawn, amp >= 0.1 * amp.max())
        assert not drawn[0], "the lowest speeds (slow roll, compensated to about zero) are not drawn"
    assert "10%" in " ".join(t.get_text() for t in plot.legend.get_texts())


# ----------------------------------------------------------------------------- polar


def test_polar_on_every_probe_of_every_sample(sample):
    """Every probe of every sample: the curve is (Re X, Im X), the slow-roll arrow ends at
    the slow-roll vector, critical markers sit on the curve at speed_rpm, speed labels are
    at round speeds on the curve and do not overlap."""
    for curve in (c for c in sample.conditioned.curves if c.segment == 0 and c.order == 1):
        plot = plots.polar(sample, probe=curve.probe)
        assert_allclose(plot.line.get_xdata(), curve.response_um_pp.real)
        assert_allclose(plot.line.get_ydata(), curve.response_um_pp.imag)
        if curve.slow_roll is not None:
            assert plot.slow_roll_vector_um_pp == curve.slow_roll.vector_um_pp
            assert_allclose(plot.raw_line.get_xdata(), curve.raw_response_um_pp.real)
        for c, m in zip(plot.criticals, plot.critical_markers, strict=True):
            # the marker is the response linearly interpolated at the critical (numpy.interp)
            z = np.interp(c.speed_rpm, curve.speed_rpm, curve.response_um_pp.real) + 1j * np.interp(
                c.speed_rpm, curve.speed_rpm, curve.response_um_pp.imag)
            assert_allclose([m.get_xdata()[0], m.get_ydata()[0]], [z.real, z.imag], rtol=1e-12)
        assert plot.speed_labels, "at least one speed is labelled"
        for rpm, text in zip(plot.speed_label_rpm, plot.speed_labels, strict=True):
            assert text.get_text() == f"{rpm:,.0f}"
            step = 10.0 ** math.floor(math.log10(rpm))
            assert any(abs(rpm / (m * step / 10) - round(rpm / (m * step / 10))) < 1e-9 for m in (1, 2, 2.5, 5))
        plot.figure.draw_without_rendering()
        boxes = [t.get_window_extent() for t in plot.speed_labels]
        assert not any(a.overlaps(b) for i, a in enumerate(boxes) for b in boxes[i + 1:])
        assert plot.ax.get_aspect() == 1.0
        assert "µm pk-pk" in plot.ax.get_xlabel() and "µm pk-pk" in plot.ax.get_ylabel()


def test_polar_critical_labels_clear_of_lag_labels(coastdown):
    """Critical labels overlap no lag label of the grid ("0°", "90°", ...) nor each other,
    judged on the laid-out figure (matplotlib Bbox.overlaps)."""
    for probe in ("NDE-X", "NDE-Y", "DE-X", "DE-Y"):
        plot = plots.polar(coastdown, probe=probe)
        plot.figure.draw_without_rendering()
        grid = [t for t in plot.ax.texts if t.get_text().endswith("°")]
        assert len(grid) == 4
        boxes = [a.get_window_extent() for a in plot.critical_labels]
        assert len(boxes) == len(plot.critical_markers) > 0
        assert not any(b.overlaps(g.get_window_extent()) for b in boxes for g in grid)
        assert not any(a.overlaps(b) for i, a in enumerate(boxes) for b in boxes[i + 1:])


def test_polar_orientation_lag_90_points_down(single_mode):
    """Lag grows clockwise: for A real positive the response at r = 1 is -j A / (2 zeta)
    (Rao 2011, sec. 3.7), straight down the imaginary axis, on the drawn curve."""
    result, wn, zeta, speed = single_mode
    plot = plots.polar(result, probe="A")
    xs, ys = np.asarray(plot.line.get_xdata()), np.asarray(plot.line.get_ydata())
    z = np.interp(wn, speed, xs) + 1j * np.interp(wn, speed, ys)
    runout = result.conditioned.curve("A").slow_roll.vector_um_pp
    expected = -1j * 20.0 / (2 * zeta) + (3.0 + 1.0j - runout)  # compensated: true runout minus estimate
    # 500 points over 5800 rpm: linear interpolation error near the peak is below 1 % of it
    assert abs(z - expected) < 0.01 * abs(expected)
    assert z.imag < 0 and abs(z.real) < 0.1 * abs(z.imag)


def test_polar_circle_fit_mapped_back_equals_closed_form(single_mode):
    """The circle fit, mapped from X/r back to X, traces the Jeffcott closed form over its
    window (noise-free data; Kennedy & Pancu 1947, Rao 2011 sec. 3.7)."""
    result, wn, zeta, _speed = single_mode
    plot = plots.polar(result, probe="A", fit="circle")
    (line,) = plot.fit_lines
    detail = next(d for d in result.criticals[0].detail if d.probe == "A")
    s = np.linspace(detail.circle.low_rpm, detail.circle.high_rpm, 300)
    runout = result.conditioned.curve("A").slow_roll.vector_um_pp
    truth = unbalance_response(s, natural_speed_rpm=wn, damping_ratio=zeta, modal_constant=20.0) + (3.0 + 1.0j - runout)
    drawn = np.asarray(line.get_xdata()) + 1j * np.asarray(line.get_ydata())
    # the circle is exact for X/r; the residual offset after compensation is small but not
    # exactly a circle term, so allow 1 % of the peak response
    assert np.max(np.abs(drawn - truth)) < 0.01 * np.max(np.abs(truth))


def test_polar_modal_and_no_fit(single_mode):
    """fit='modal' draws the least-squares fit; fit='none' draws none; others are refused."""
    result, *_ = single_mode
    assert len(plots.polar(result, probe="B", fit="modal").fit_lines) == 1
    assert plots.polar(result, probe="B", fit="none").fit_lines == ()
    with pytest.raises(DataFormatError, match="fit must be"):
        plots.polar(result, probe="B", fit="both")
    with pytest.raises(DataFormatError, match="valid probes"):
        plots.polar(result, probe="Z")


# ----------------------------------------------------------------------------- comparison, map, trend


def test_comparison_errors_band_and_outside_points():
    """Errors are 100 (measured - predicted) / predicted (hand calculation); points outside
    +-5 % are listed; unpaired modes are skipped."""
    plot = plots.comparison([4364.0, 8962.0, math.nan], [4500.0, 9600.0, 12000.0], labels=["1st", "2nd", "3rd"])
    assert plot.labels == ("1st", "2nd")
    # hand calculation: 100 * (4364 - 4500) / 4500 = -3.0222; 100 * (8962 - 9600) / 9600 = -6.6458
    assert_allclose(plot.error_percent, [-3.0222, -6.6458], atol=1e-4)
    assert plot.outside == ("2nd",)
    assert [(p.get_xdata()[0], p.get_ydata()[0]) for p in plot.points] == [(4500.0, 4364.0), (9600.0, 8962.0)]
    verts = plot.band.get_paths()[0].vertices
    x_lo = verts[:, 0].min()
    assert_allclose(np.unique(verts[np.isclose(verts[:, 0], x_lo), 1]), [0.95 * x_lo, 1.05 * x_lo])
    assert "(rpm)" in plot.ax.get_xlabel() and "(rpm)" in plot.ax.get_ylabel()
    with pytest.raises(DataFormatError, match="pair up"):
        plots.comparison([1.0, 2.0], [1.0])


def test_critical_speed_map_lines_and_log_axis():
    """One line per predicted mode on a log stiffness axis; measured criticals as horizontal
    lines at their speeds; mismatched lengths refused."""
    k = np.logspace(-1, 1, 25)
    modes = {"1st": 3000 + 2000 * np.tanh(k), "2nd": 7000 + 5000 * np.tanh(k / 2)}
    plot = plots.critical_speed_map(k, modes, measured_speeds_rpm=[4364.0, 8962.0],
                                    operating=OperatingSpeeds(10200.0, 11500.0, 12075.0))
    assert plot.ax.get_xscale() == "log"
    assert list(plot.mode_lines) == ["1st", "2nd"]
    assert_allclose(plot.mode_lines["2nd"].get_ydata(), modes["2nd"])
    assert [line.get_ydata()[0] for line in plot.measured_lines] == [4364.0, 8962.0]
    assert "(rpm)" in plot.ax.get_ylabel()
    with pytest.raises(DataFormatError, match="one speed per ratio"):
        plots.critical_speed_map(k, {"bad": np.ones(3)})
    with pytest.raises(DataFormatError, match="stiffness_ratio"):
        plots.critical_speed_map([0.0, 1.0], {"m": [1.0, 2.0]})


def test_trend_dates_and_seconds():
    """Dates give a date axis, numbers a seconds axis; points are drawn in time order; the
    y label is 'label (unit)'."""
    dates = np.array(["2025-03-01", "2024-01-05", "2024-09-12"], dtype="datetime64[D]")
    plot = plots.trend(dates, [4320.0, 4364.0, 4350.0], label="1st critical speed", unit="rpm")
    assert plot.ax.get_xlabel() == "date" and plot.ax.get_ylabel() == "1st critical speed (rpm)"
    assert_allclose(plot.line.get_ydata(), [4364.0, 4350.0, 4320.0])
    secs = plots.trend([0.0, 10.0], [2.0, 3.0], label="AF", unit="–")
    assert secs.ax.get_xlabel() == "time (s)"
    with pytest.raises(DataFormatError, match="same length"):
        plots.trend([0.0], [1.0, 2.0], label="AF", unit="–")


# ----------------------------------------------------------------------------- saving, purity


@pytest.mark.parametrize(("ext", "magic"), [("png", b"\x89PNG\r\n\x1a\n"), ("pdf", b"%PDF-"), ("svg", b"<?xml")])
def test_save_figure_writes_each_format(tmp_path, single_mode, ext, magic):
    """PNG, PDF and SVG by extension (signatures: ISO/IEC 15948, ISO 32000-1, W3C SVG 1.1),
    written atomically: no temporary file is left behind."""
    result, *_ = single_mode
    out = plots.save_figure(plots.bode(result).figure, tmp_path / f"bode.{ext.upper()}")
    data = out.read_bytes()
    assert data.startswith(magic)
    if ext == "svg":
        assert b"<svg" in data[:2000]
    assert [p.name for p in tmp_path.iterdir()] == [out.name]


def test_save_figure_refuses_other_extensions_and_missing_directory(tmp_path):
    """Another extension or a missing directory raises DataFormatError; an existing file is
    left as it was."""
    fig = Figure()
    fig.add_subplot().plot([0, 1])
    keep = tmp_path / "plot.jpg"
    keep.write_bytes(b"old")
    with pytest.raises(DataFormatError, match=r"\.png, \.svg, \.pdf"):
        plots.save_figure(fig, keep)
    assert keep.read_bytes() == b"old"
    with pytest.raises(DataFormatError, match="does not exist"):
        plots.save_figure(fig, tmp_path / "no" / "plot.png")


def test_importing_plots_leaves_pyplot_alone():
    """runup.plots builds Figures directly: importing it does not import matplotlib.pyplot
    (no global state, no backend switch)."""
    code = "import sys, runup.plots; print('matplotlib.pyplot' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=ROOT)
    assert out.stdout.strip() == "False"
