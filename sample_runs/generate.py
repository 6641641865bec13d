"""Write the bundled sample runs (synthetic: an invented machine, invented numbers).

Scenario (invented): "SYN-K7", a synthetic two-bearing centrifugal compressor on a
test stand, with X-Y proximity probes at the drive-end (DE) and non-drive-end (NDE)
bearings, mounted 45 degrees either side of vertical.  Rotation counter-clockwise viewed
from the driver.  Minimum operating speed 10,500 rpm, maximum continuous 11,500 rpm,
trip 12,075 rpm.

Run ``python sample_runs/generate.py`` to re-create the files; the truth they were
generated from is written to ``sample_runs/truth.json``.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

from runup.synthetic import SyntheticMode, SyntheticProbe, synthetic_samples

HERE = Path(__file__).resolve().parent

SPEEDS_TOML = """[speeds]
min_operating_rpm = 10500
max_continuous_rpm = 11500
trip_rpm = 12075
"""

PROBES_TOML = """
[[probes]]
name = "DE-X"
plane = "DE"
angle_deg = -45

[[probes]]
name = "DE-Y"
plane = "DE"
angle_deg = 45

[[probes]]
name = "NDE-X"
plane = "NDE"
angle_deg = -45

[[probes]]
name = "NDE-Y"
plane = "NDE"
angle_deg = 45
"""


def _polar(amplitude: float, angle_deg: float) -> complex:
    return amplitude * np.exp(1j * np.deg2rad(angle_deg))


def startup() -> dict:
    """Startup to 12,000 rpm: first (rigid-body-like) mode and second (bending-like) mode."""
    modes = [SyntheticMode(4350.0, 0.055), SyntheticMode(8900.0, 0.085)]
    probes = [
        SyntheticProbe("DE-X", (_polar(5.5, -20), _polar(3.6, 150)), _polar(4.2, 30), "DE", -45),
        SyntheticProbe("DE-Y", (_polar(5.0, -110), _polar(3.3, 60)), _polar(3.1, 120), "DE", 45),
        SyntheticProbe("NDE-X", (_polar(6.5, -10), _polar(4.6, -30)), _polar(5.0, 200), "NDE", -45),
        SyntheticProbe("NDE-Y", (_polar(6.0, -100), _polar(4.2, -120)), _polar(2.7, 290), "NDE", 45),
    ]
    rng = np.random.default_rng(2026)
    time_s = np.arange(0.0, 190.0, 0.5)
    speed = 300.0 + 61.0 * time_s + rng.normal(0.0, 2.0, time_s.size)  # ~61 rpm/s ramp, jitter
    df = synthetic_samples(speed, modes=modes, probes=probes, noise_fraction_of_peak=0.015, time_s=time_s, seed=7)
    out = df.drop(columns=["row"])
    out.to_csv(HERE / "compressor_startup.csv", index=False, float_format="%.4f")
    (HERE / "compressor_startup.toml").write_text(
        '# Synthetic sample run (invented machine and numbers).\n[run]\nmachine_id = "SYN-K7"\n'
        'run_id = "SYN-K7-startup-01"\ndirection = "startup"\nrotation = "ccw"\n\n' + SPEEDS_TOML + PROBES_TOML
    )
    return {"file": "compressor_startup.csv", "layout": "long", "modes": [m.__dict__ for m in modes],
            "noise_fraction_of_peak": 0.015, "note": "two modes, both below the minimum operating speed; keeps the api617 margins"}


def coastdown() -> dict:
    """Hot coastdown from 12,000 rpm after a long run, wide layout, split first critical,
    second critical moved up (invented: warmer oil, stiffer bearings), glitches and gaps."""
    # anisotropic supports: a horizontal-dominant mode at 4,210 rpm and a vertical-dominant
    # one at 4,520 rpm, each seen with different weight by the 45-degree probes
    modes = [SyntheticMode(4210.0, 0.045), SyntheticMode(4520.0, 0.05), SyntheticMode(9350.0, 0.075)]
    probes = [
        SyntheticProbe("DE-X", (_polar(5.5, -15), _polar(2.0, 75), _polar(3.4, 150)), _polar(4.0, 25), "DE", -45),
        SyntheticProbe("DE-Y", (_polar(2.0, -105), _polar(5.2, -15), _polar(3.1, 60)), _polar(3.2, 115), "DE", 45),
        SyntheticProbe("NDE-X", (_polar(6.5, -5), _polar(2.3, 85), _polar(4.5, -30)), _polar(4.8, 205), "NDE", -45),
        SyntheticProbe("NDE-Y", (_polar(2.4, -95), _polar(6.2, -5), _polar(4.0, -120)), _polar(2.9, 285), "NDE", 45),
    ]
    time_s = np.arange(0.0, 360.0, 0.4)
    speed = 12000.0 * np.exp(-time_s / 95.0)  # exponential coastdown, invented
    keep = speed >= 250.0
    time_s, speed = time_s[keep], np.round(speed[keep])  # 1 rpm resolution: duplicate speeds at the tail
    df = synthetic_samples(speed, modes=modes, probes=probes, noise_fraction_of_peak=0.012, time_s=time_s, seed=11)
    wide = pd.DataFrame({"time_s": time_s, "speed_rpm": speed})
    for p in probes:
        sub = df[df["probe"] == p.name]
        wide[f"{p.name}.amplitude_um_pp"] = sub["amplitude_um_pp"].to_numpy()
        wide[f"{p.name}.phase_lag_deg"] = sub["phase_lag_deg"].to_numpy()
    # acquisition glitches, labelled: one spike, two dropped cells
    i_spike = int(np.argmin(np.abs(speed - 6500.0)))
    wide.loc[i_spike, "NDE-X.amplitude_um_pp"] *= 6.0
    wide.loc[i_spike, "NDE-X.phase_lag_deg"] = (wide.loc[i_spike, "NDE-X.phase_lag_deg"] + 140.0) % 360.0
    wide.loc[int(np.argmin(np.abs(speed - 7600.0))), "DE-Y.amplitude_um_pp"] = np.nan
    wide.loc[int(np.argmin(np.abs(speed - 3000.0))), "DE-X.phase_lag_deg"] = np.nan
    wide.to_csv(HERE / "compressor_coastdown.csv", index=False, float_format="%.4f", na_rep="")
    (HERE / "compressor_coastdown.toml").write_text(
        '# Synthetic sample run (invented machine and numbers).\n[run]\nmachine_id = "SYN-K7"\n'
        'run_id = "SYN-K7-coastdown-01"\ndirection = "coastdown"\nrotation = "ccw"\n\n' + SPEEDS_TOML + PROBES_TOML
    )
    return {"file": "compressor_coastdown.csv", "layout": "wide", "modes": [m.__dict__ for m in modes],
            "noise_fraction_of_peak": 0.012,
            "note": "first critical split by support anisotropy (4,210 / 4,520 rpm); second critical moved "
                    "up to 9,350 rpm, inside the api617 margin below the minimum operating speed; one spike "
                    "at ~6,500 rpm on NDE-X, two empty cells; speeds rounded to 1 rpm"}


def pump() -> dict:
    """A heavily damped mode (AF < 2.5) on an invented pump, Parquet, mils 0-p and phase lead."""
    modes = [SyntheticMode(2650.0, 0.21)]
    probes = [
        SyntheticProbe("IB-X", (_polar(30.0, 10),), _polar(3.0, 40), "IB", -45),
        SyntheticProbe("IB-Y", (_polar(26.0, -80),), _polar(2.0, 130), "IB", 45),
    ]
    speed = np.linspace(200.0, 3600.0, 240)
    df = synthetic_samples(speed, modes=modes, probes=probes, noise_fraction_of_peak=0.01, seed=5)
    out = pd.DataFrame({
        "speed_hz": df["speed_rpm"] / 60.0,
        "probe": df["probe"],
        "amplitude_mil_0p": df["amplitude_um_pp"] / 25.4 / 2.0,
        "phase_lead_deg": -df["phase_lag_deg"],
    })
    out.to_parquet(HERE / "pump_startup.parquet", index=False)
    (HERE / "pump_startup.toml").write_text(
        '# Synthetic sample run (invented machine and numbers).\n[run]\nmachine_id = "SYN-P3"\n'
        'run_id = "SYN-P3-startup-01"\ndirection = "startup"\n\n[speeds]\nmin_operating_rpm = 3000\n'
        'max_continuous_rpm = 3580\n'
    )
    return {"file": "pump_startup.parquet", "layout": "long, speed_hz, amplitude_mil_0p, phase_lead_deg",
            "modes": [m.__dict__ for m in modes], "noise_fraction_of_peak": 0.01,
            "note": "one heavily damped mode (AF about 2.0, critically damped by the AF < 2.5 rule)"}


def main() -> None:
    truth = {"synthetic": True, "runs": [startup(), coastdown(), pump()]}
    (HERE / "truth.json").write_text(json.dumps(truth, indent=2) + "\n")


if __name__ == "__main__":
    main()
