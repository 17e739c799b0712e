"""Units at the edge: parse quantity strings to SI floats, format SI for people.

This is the only module that knows about unit strings. Everything inside the
package is SI (Hz, s, m, m/s, bit/s) or a plain ratio; decibel values are
floats whose names end in ``_db``.

pint parses ordinary units. Logarithmic values ("18 dB", "-25 dB",
"-90 dBc/Hz") are read here directly, because a ratio in dB is a plain number
for our purposes and pint's offset-unit algebra only gets in the way.
"""

from __future__ import annotations

import math
import re
from functools import lru_cache

from .errors import InputError

#: Expected dimension name -> (pint dimensionality string, SI unit for pint).
DIMENSIONS = {
    "frequency": ("1 / [time]", "1/s"),
    "time": ("[time]", "s"),
    "length": ("[length]", "m"),
    "speed": ("[length] / [time]", "m/s"),
    "bitrate": ("1 / [time]", "1/s"),
    "ratio": ("", "dimensionless"),
}

_DB_RE = re.compile(
    r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(dB|dBc/Hz|dBc)\s*$"
)

#: A quantity string starts with a number; pint would read a bare unit ("Hz") as 1 of it.
_NUMBER_FIRST = re.compile(r"^\s*[-+]?(?:\d|\.\d|nan|inf)", re.IGNORECASE)


@lru_cache(maxsize=1)
def registry():
    """The package's pint registry, built once per process.

    pint's on-disk cache (``cache_folder=":auto:"``) keeps repeated start-ups
    cheap; the registry is only built when a quantity string is parsed.
    """
    import pint

    try:
        ureg = pint.UnitRegistry(cache_folder=":auto:")
    except Exception:  # an unwritable cache folder must not stop the tool
        ureg = pint.UnitRegistry()
    ureg.define("ppm = 1e-6 = ppm_")
    ureg.define("ppb = 1e-9")
    return ureg


def parse_db(text, place: str) -> float:
    """Read a decibel value such as ``"18 dB"`` or ``"-95 dBc/Hz"``.

    A bare number is taken as dB too, since a key whose name ends in dB
    cannot mean anything else.
    """
    if isinstance(text, bool):
        raise InputError(place, f"expected a value in dB such as \"18 dB\", got {text!r}")
    if isinstance(text, (int, float)):
        value = float(text)
    else:
        match = _DB_RE.match(str(text))
        if not match:
            raise InputError(place, f"expected a value in dB such as \"18 dB\", got {text!r}")
        value = float(match.group(1))
    if not math.isfinite(value) or abs(value) > 400:
        raise InputError(place, f"expected a finite value in dB within +-400 dB, got {text!r}")
    return value


def parse_quantity(text, dimension: str, place: str) -> float:
    """Convert a quantity string to an SI float, checking its dimension.

    Parameters
    ----------
    text : str
        For example ``"3.5 GHz"``, ``"120 km/h"``, ``"2.3 us"``.
    dimension : str
        A key of :data:`DIMENSIONS`.
    place : str
        Where the value came from, for the error message.

    Returns
    -------
    float
        The value in SI units (Hz, s, m, m/s, bit/s, or a plain ratio).

    Examples
    --------
    >>> parse_quantity("120 km/h", "speed", "x")
    33.333333333333336
    """
    dims, si_unit = DIMENSIONS[dimension]
    example = EXAMPLES[dimension]
    if isinstance(text, bool) or not isinstance(text, (str, int, float)):
        raise InputError(place, f"expected a {dimension} such as \"{example}\", got {text!r}")
    if isinstance(text, (int, float)):
        if dimension != "ratio":
            raise InputError(
                place, f"expected a {dimension} with its unit, such as \"{example}\", got the bare number {text!r}"
            )
        value = float(text)
    else:
        if not _NUMBER_FIRST.match(text):
            raise InputError(place, f"expected a {dimension} such as \"{example}\" (a number, then the unit), got {text!r}")
        if "**" in text or "^" in text or len(text) > 80:
            # pint would evaluate powers of integers exactly: "10**10**10 Hz" never returns.
            raise InputError(place, f"expected a {dimension} such as \"{example}\", got {text!r} (no powers, at most 80 characters)")
        ureg = registry()
        try:
            quantity = ureg.Quantity(text.strip())
        except Exception:
            raise InputError(place, f"expected a {dimension} such as \"{example}\", could not read {text!r}") from None
        if not hasattr(quantity, "to"):
            quantity = ureg.Quantity(float(quantity))
        if quantity.dimensionless and dimension != "ratio":
            raise InputError(place, f"expected a {dimension} with its unit, such as \"{example}\", got {text!r}")
        # pint treats "bit" as dimensionless, so "50 Mbit/s" is a frequency.
        if not quantity.check(dims or "[]"):
            raise InputError(
                place, f"expected a {dimension} such as \"{example}\", got {text!r} ({quantity.dimensionality})"
            )
        try:
            value = float(quantity.to(si_unit).magnitude)
        except Exception:
            raise InputError(place, f"expected a {dimension} such as \"{example}\", could not read {text!r}") from None
    if not math.isfinite(value):
        raise InputError(place, f"expected a finite {dimension}, got {text!r}")
    return value


EXAMPLES = {
    "frequency": "3.5 GHz",
    "time": "2.3 us",
    "length": "150 m",
    "speed": "120 km/h",
    "bitrate": "50 Mbit/s",
    "ratio": "0.25",
}

# --- formatting for people ---------------------------------------------------

_PREFIXES = [(1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "u"), (1e-9, "n"), (1e-12, "p")]


def engineering(value: float, unit: str, digits: int = 4) -> str:
    """Format an SI value with an engineering prefix: ``engineering(4.6875e-6, "s") == "4.688 us"``."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "n/a"
    if math.isinf(value):
        return "unbounded" if value > 0 else "-unbounded"
    if value == 0:
        return f"0 {unit}"
    magnitude = abs(value)
    for scale, prefix in _PREFIXES:
        if float(f"{magnitude / scale:.{digits}g}") >= 1:  # 999.96 Hz rounds to "1 kHz", 999.9 Hz stays
            break
    return f"{value / scale:.{digits}g} {prefix}{unit}"


def speed_kmh(value_mps: float) -> str:
    """Format a speed in km/h, the unit engineers think in for vehicles."""
    if math.isinf(value_mps):
        return "unbounded"
    return f"{value_mps * 3.6:.4g} km/h"


def db(value_db: float, digits: int = 1) -> str:
    """Format a dB value, with +/- sign."""
    if math.isinf(value_db):
        return "-inf dB" if value_db < 0 else "+inf dB"
    return f"{value_db:+.{digits}f} dB"
