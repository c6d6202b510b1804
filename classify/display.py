"""Display units: how SI values are shown to people, in one table.

Features and settings are stored in SI units (seconds, metres, amperes...).
Printing ``3.59e-07`` for a rise time makes a reader count digits; this table
says, for each SI unit, the engineering unit it is shown in and the factor,
and :func:`display_value` formats a value with it. It is applied only when
printing or drawing, never to stored numbers.

Examples
--------
>>> display_value(3.59e-07, "s")
'0.359 µs'
>>> display_value(48000.0, "m")
'48 km'
>>> display_value(float("nan"), "s")
''
"""

from __future__ import annotations

import math

__all__ = ["DISPLAY_UNITS", "display_unit", "display_value"]

#: SI unit -> (display unit, factor): display value = SI value x factor. Chosen so
#: the values of lightning pulses read as ordinary numbers: pulse times in µs,
#: distances in km, currents in kA, current moments in kA km, charge moments in
#: C km, speeds in km/s, frequencies in MHz. Units not listed are shown as they are.
DISPLAY_UNITS: dict[str, tuple[str, float]] = {
    "s": ("µs", 1e6),
    "m": ("km", 1e-3),
    "m/s": ("km/s", 1e-3),
    "A": ("kA", 1e-3),
    "A m": ("kA km", 1e-6),
    "C m": ("C km", 1e-3),
    "Hz": ("MHz", 1e-6),
    "V/m": ("V/m", 1.0),
    "dB": ("dB", 1.0),
    "deg": ("deg", 1.0),
    "deg/s": ("deg/s", 1.0),
}

#: Units of plain numbers: shown without a unit.
_UNITLESS = ("1", "-", "bool", "")


def display_unit(unit: str) -> str:
    """The unit a value of SI unit ``unit`` is shown in ("" for a plain number)."""
    if unit in _UNITLESS:
        return ""
    return DISPLAY_UNITS.get(unit, (unit, 1.0))[0]


def display_value(value, unit: str, digits: int = 3) -> str:
    """``value`` (in SI unit ``unit``) in its display unit, ``digits`` significant digits.

    Returns ``""`` for None, NaN or infinity.
    """
    if value is None:
        return ""
    x = float(value)
    if not math.isfinite(x):
        return ""
    shown, factor = ("", 1.0) if unit in _UNITLESS else DISPLAY_UNITS.get(unit, (unit, 1.0))
    text = f"{x * factor:.{digits}g}"
    return f"{text} {shown}" if shown else text
