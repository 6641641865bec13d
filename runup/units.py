"""Units and conventions: the only place where a unit changes.

Inside runup every quantity has one canonical unit:

=================  ===============================================================
quantity           canonical form
=================  ===============================================================
shaft speed        ``speed_rpm`` (revolutions per minute)
vibration          ``amplitude_um_pp`` (micrometres, peak-to-peak)
phase              ``phase_lag_deg`` (degrees of lag, see below)
complex 1X vector  ``response_um_pp = amplitude_um_pp * exp(-1j * radians(phase_lag_deg))``
time               ``time_s`` (seconds)
=================  ===============================================================

Phase convention
----------------
A probe signal component of order ``n`` is written
``x(t) = A cos(n*Omega*t - phi)``, with ``t = 0`` at the once-per-turn reference pulse.
``phi`` is the *phase lag*: the shaft angle (per order) from the reference pulse to the
first positive peak of the filtered signal.  With this convention the lag of a forced
response grows through a resonance (by about 180 degrees for an isolated mode), and the
complex vector is ``A * exp(-1j*phi)``, so that the textbook receptance
``1 / (k - m w**2 + 1j c w)`` has exactly the same angle as the measured vector.
A *phase lead* column is converted by ``lag = -lead``.

Column names carry their unit (``amplitude_mil_0p``, ``speed_hz``, ``phase_lead_deg``);
:func:`parse_column_name` reads it and the converters below apply it, once, at import.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import UnitError

__all__ = [
    "MICROMETRES_PER_MIL",
    "ColumnUnit",
    "parse_column_name",
    "amplitude_to_um_pp",
    "speed_to_rpm",
    "phase_to_lag_deg",
    "to_response",
    "amplitude_of",
    "phase_lag_deg_of",
    "rpm_to_rad_s",
]

#: One mil (thousandth of an inch) in micrometres, exact by definition of the inch
#: (international yard and pound agreement, 1959).
MICROMETRES_PER_MIL = 25.4

AMPLITUDE_UNITS = {"um": 1.0, "mil": MICROMETRES_PER_MIL}
#: factor from the named amplitude definition to peak-to-peak (sinusoid: pp = 2 * 0-p)
AMPLITUDE_DEFINITIONS = {"pp": 1.0, "0p": 2.0}
SPEED_UNITS = {"rpm": 1.0, "hz": 60.0}
PHASE_UNITS = {"deg": 1.0, "rad": 180.0 / np.pi}
PHASE_SENSES = ("lag", "lead")

_QUANTITY_PREFIXES = ("amplitude", "speed", "phase")


@dataclass(frozen=True)
class ColumnUnit:
    """The quantity and unit a column name declares.

    Attributes
    ----------
    quantity
        ``"amplitude"``, ``"speed"`` or ``"phase"``.
    unit
        ``"um"``/``"mil"`` for amplitude, ``"rpm"``/``"hz"`` for speed,
        ``"deg"``/``"rad"`` for phase.
    qualifier
        Amplitude definition ``"pp"`` or ``"0p"``; phase sense ``"lag"`` or ``"lead"``;
        ``""`` for speed.
    """

    quantity: Literal["amplitude", "speed", "phase"]
    unit: str
    qualifier: str

    @property
    def canonical(self) -> bool:
        """True when the column is already in runup's internal unit."""
        return (self.quantity, self.unit, self.qualifier) in {
            ("amplitude", "um", "pp"),
            ("speed", "rpm", ""),
            ("phase", "deg", "lag"),
        }


def parse_column_name(name: str) -> ColumnUnit | None:
    """Read the quantity and unit declared by a column name.

    Parameters
    ----------
    name
        A column name such as ``"amplitude_mil_0p"``, ``"speed_hz"`` or
        ``"phase_lead_deg"`` (case-insensitive).

    Returns
    -------
    ColumnUnit or None
        ``None`` when the name is not a unit-bearing quantity name at all
        (``"probe"``, ``"time_s"``, ``"comment"``).

    Raises
    ------
    UnitError
        When the name starts with ``amplitude_``, ``speed_`` or ``phase_`` but its unit
        or definition is unknown; the message lists the valid forms.
    """
    low = name.strip().lower()
    head = low.split("_", 1)[0]
    if head not in _QUANTITY_PREFIXES:
        return None
    if head == "amplitude":
        m = re.fullmatch(r"amplitude_([a-z]+)_([a-z0-9]+)", low)
        if m and m.group(1) in AMPLITUDE_UNITS and m.group(2) in AMPLITUDE_DEFINITIONS:
            return ColumnUnit("amplitude", m.group(1), m.group(2))
        raise UnitError(
            f"unknown amplitude unit in column name '{name}'; use amplitude_<unit>_<definition> "
            f"with unit one of {sorted(AMPLITUDE_UNITS)} and definition one of "
            f"{sorted(AMPLITUDE_DEFINITIONS)} (pp = peak-to-peak, 0p = zero-to-peak), "
            "e.g. amplitude_um_pp",
            column=name,
        )
    if head == "speed":
        m = re.fullmatch(r"speed_([a-z]+)", low)
        if m and m.group(1) in SPEED_UNITS:
            return ColumnUnit("speed", m.group(1), "")
        raise UnitError(
            f"unknown speed unit in column name '{name}'; use one of "
            f"{['speed_' + u for u in SPEED_UNITS]}",
            column=name,
        )
    m = re.fullmatch(r"phase_([a-z]+)_([a-z]+)", low)
    if m and m.group(1) in PHASE_SENSES and m.group(2) in PHASE_UNITS:
        return ColumnUnit("phase", m.group(2), m.group(1))
    raise UnitError(
        f"unknown phase unit in column name '{name}'; use phase_<sense>_<unit> with sense "
        f"one of {list(PHASE_SENSES)} and unit one of {sorted(PHASE_UNITS)}, "
        "e.g. phase_lag_deg",
        column=name,
    )


def amplitude_to_um_pp(
    values: ArrayLike, *, unit: str, definition: str, out: NDArray[np.float64] | None = None
) -> NDArray[np.float64]:
    """Convert vibration amplitudes to micrometres peak-to-peak.

    Parameters
    ----------
    values
        Amplitudes in ``unit`` and ``definition``.
    unit
        ``"um"`` or ``"mil"`` (1 mil = 25.4 um exactly).
    definition
        ``"pp"`` (peak-to-peak) or ``"0p"`` (zero-to-peak, i.e. half of pp for a sinusoid,
        which a filtered 1X component is).
    out
        Array to write the result into (as the ``out`` of a numpy ufunc); a new one when
        ``None``.
    """
    try:
        factor = AMPLITUDE_UNITS[unit] * AMPLITUDE_DEFINITIONS[definition]
    except KeyError:
        raise UnitError(
            f"unknown amplitude unit '{unit}' or definition '{definition}'; valid units "
            f"{sorted(AMPLITUDE_UNITS)}, definitions {sorted(AMPLITUDE_DEFINITIONS)}"
        ) from None
    return np.multiply(np.asarray(values, dtype=float), factor, out=out)


def speed_to_rpm(
    values: ArrayLike, *, unit: str, out: NDArray[np.float64] | None = None
) -> NDArray[np.float64]:
    """Convert shaft speeds to revolutions per minute (``"hz"`` means rev/s); ``out`` as
    in :func:`amplitude_to_um_pp`."""
    try:
        factor = SPEED_UNITS[unit]
    except KeyError:
        raise UnitError(f"unknown speed unit '{unit}'; valid: {sorted(SPEED_UNITS)}") from None
    return np.multiply(np.asarray(values, dtype=float), factor, out=out)


def phase_to_lag_deg(
    values: ArrayLike, *, unit: str, sense: str, out: NDArray[np.float64] | None = None
) -> NDArray[np.float64]:
    """Convert phase angles to degrees of lag (``lag = -lead``), not wrapped; ``out`` as
    in :func:`amplitude_to_um_pp`."""
    if unit not in PHASE_UNITS or sense not in PHASE_SENSES:
        raise UnitError(
            f"unknown phase unit '{unit}' or sense '{sense}'; valid units "
            f"{sorted(PHASE_UNITS)}, senses {list(PHASE_SENSES)}"
        )
    deg = np.multiply(np.asarray(values, dtype=float), PHASE_UNITS[unit], out=out)
    return deg if sense == "lag" else np.negative(deg, out=out)


def to_response(amplitude_um_pp: ArrayLike, phase_lag_deg: ArrayLike) -> NDArray[np.complex128]:
    """Complex vector ``A * exp(-1j * phi)`` from amplitude and phase lag (see module notes)."""
    amp = np.asarray(amplitude_um_pp, dtype=float)
    return amp * np.exp(-1j * np.deg2rad(np.asarray(phase_lag_deg, dtype=float)))


def amplitude_of(response_um_pp: ArrayLike) -> NDArray[np.float64]:
    """Amplitude (um pp) of complex vectors."""
    return np.abs(np.asarray(response_um_pp))


def phase_lag_deg_of(response_um_pp: ArrayLike, *, unwrap: bool = True) -> NDArray[np.float64]:
    """Phase lag in degrees of complex vectors ordered by speed.

    With ``unwrap=True`` the lag is made continuous along the array (``numpy.unwrap``)
    and the first value is placed in (-180, 180]; otherwise each value is wrapped to
    [0, 360).
    """
    lag = -np.angle(np.asarray(response_um_pp, dtype=complex))
    if not unwrap:
        return np.mod(np.rad2deg(lag), 360.0)
    if lag.size == 0:
        return np.rad2deg(lag)
    return np.rad2deg(np.unwrap(lag))


def rpm_to_rad_s(speed_rpm: ArrayLike) -> NDArray[np.float64]:
    """Shaft speed in rad/s from rpm."""
    return np.asarray(speed_rpm, dtype=float) * (2.0 * np.pi / 60.0)
