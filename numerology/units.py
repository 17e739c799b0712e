"""Units at the edge: parse quantity strings to SI floats, format SI for people.

This is the only module that knows about unit strings. Everything inside the
package is SI (Hz, s, m, m/s, bit/s) or a plain ratio; decibel values are
floats whose names end in ``_db``.

pint parses ordinary units. Logarithmic values ("18 dB", "-25 dB",
"-90 dBc/Hz") are read here directly, because a ratio in dB is a plain number
for our purposes and pint's offset-unit algebra only gets in the way.

Importing pint costs about a fifth of a second, a large part of a short run.
The SI values pint gave for the quantity strings of earlier runs are therefore
kept in an advisory cache (:mod:`numerology.quantity_cache`: one file per
installation, every entry checked before use); a run whose strings are all
known never imports pint.
"""

from __future__ import annotations

import math
import re
from functools import lru_cache

from . import quantity_cache
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
    r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(dB|dBc/Hz|dBc)?\s*$"
)

#: A quantity string starts with a number; pint would read a bare unit ("Hz") as 1 of it.
_NUMBER_FIRST = re.compile(r"^\s*[-+]?(?:\d|\.\d|nan|inf)", re.IGNORECASE)

#: The one rule for bare numbers, quoted by every error that meets one.
BARE_NUMBER_RULE = "a bare number is read only for dB keys (as dB); every other quantity needs its unit"

#: Longest quantity string read (longer ones are typos or attempts to make the unit library work hard).
MAX_QUANTITY_CHARACTERS = 80

#: Characters a quantity string may hold once blanks are normalised: digits, ASCII letters, blanks, the
#: decimal point, signs, multiplication and division, brackets, percent, the underscore of pint's long unit
#: names ("mile_per_hour") and the micro sign (two code points).
_ALLOWED = re.compile("[0-9A-Za-z_ .+\\-*/()%\u00b5\u03bc]*")
#: Superscript digits and signs: pint reads "10\u2079" as 10**9, so they are powers in disguise.
_SUPERSCRIPTS = "\u2070\u00b9\u00b2\u00b3\u2074\u2075\u2076\u2077\u2078\u2079\u207a\u207b\u207c\u207d\u207e"
#: Blanks people type or paste between a number and its unit; between two digits they group digits.
_BLANKS = "\t\u00a0\u2009\u202f"
_DIGIT_GROUP = re.compile(f"\\d+(?:[ _'{_BLANKS}]+\\d+)+")
#: Units that take SI prefixes; a prefix on any other unit ("kmph": kilo-mile per hour) is refused.
METRIC_UNITS = frozenset({"meter", "second", "hertz", "bit", "byte", "baud"})
#: What to write instead of a prefixed non-metric unit, where one spelling is clearly meant.
_METRIC_SPELLING = {("kilo", "mile_per_hour"): "km/h"}


class UnitSpellingError(InputError):
    """A quantity string spelled in a way that is refused on purpose (powers, commas, digit groups,
    odd characters, prefixed non-metric units); the message says what to write instead."""


def _spelled(text: str, example: str, place: str) -> str:
    """The string with its blanks normalised, or an :class:`InputError` saying what to write instead.

    Powers (``**``, ``^``, superscripts), decimal commas and digit-group separators never reach
    pint: it would evaluate powers exactly (a hang for "10\u2079\u2079\u2079\u2079\u2079\u2079 Hz"),
    drop commas ("3,5 GHz" as 35 GHz) and multiply blank-separated digits ("1 500 Hz" as 500 Hz).
    """
    if len(text) > MAX_QUANTITY_CHARACTERS:
        raise UnitSpellingError(place, f"expected a value such as \"{example}\", got a string of {len(text)} "
                                       f"characters (at most {MAX_QUANTITY_CHARACTERS} characters)")
    if "**" in text or "^" in text or any(c in _SUPERSCRIPTS for c in text):
        raise UnitSpellingError(place, f"{text!r}: powers are not read; write the number out or in e-notation, "
                                f"such as \"1e9 Hz\" for 10^9 Hz")
    if "," in text:
        raise UnitSpellingError(place, f"{text!r}: commas are not read in numbers; {_comma_advice(text)}")
    grouped = _DIGIT_GROUP.search(text)
    if grouped:
        together = re.sub(f"[ _'{_BLANKS}]", "", grouped.group(0))
        raise UnitSpellingError(place, f"{text!r}: digit groups ({grouped.group(0)!r}) are not read; write the digits "
                                       f"together, such as {text.replace(grouped.group(0), together)!r}")
    return text.translate({ord(c): " " for c in _BLANKS})


def _screened(text: str, dimension: str, place: str) -> str:
    """:func:`_spelled` and then a number first and plain characters only (see :data:`_ALLOWED`)."""
    example = EXAMPLES[dimension]
    text = _spelled(text, example, place)
    if not _NUMBER_FIRST.match(text):
        raise InputError(place, f"expected a {dimension} such as \"{example}\" (a number, then the unit), got {text!r}")
    if not _ALLOWED.fullmatch(text):
        bad = next(c for c in text if not _ALLOWED.fullmatch(c))
        raise UnitSpellingError(place, f"{text!r}: unexpected character {bad!r} (U+{ord(bad):04X}); expected a number "
                                f"and a unit in plain letters, such as \"{example}\"")
    return text


def _comma_advice(text: str) -> str:
    """What a comma in a number most likely meant, and what to write for each reading."""
    numbers = re.findall(r"\d[\d,]*", text)
    decimal = text.replace(",", ".")
    grouped = text.replace(",", "")
    if any(re.fullmatch(r"\d{1,3}(,\d{3})+", n) for n in numbers):
        if all(n.count(",") <= 1 for n in numbers):
            return f"write {grouped!r} if it groups digits, or {decimal!r} if it is a decimal comma"
        return f"write {grouped!r} (no digit-group separators)"
    return f"write {decimal!r} (a decimal point, not a decimal comma)"


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

    A bare number (``18`` or ``"18"``) is taken as dB too: the one rule for
    bare numbers is :data:`BARE_NUMBER_RULE`.
    """
    if isinstance(text, bool) or not isinstance(text, (str, int, float)):
        raise InputError(place, f"expected a value in dB such as \"18 dB\", got {text!r}")
    if isinstance(text, (int, float)):
        value = float(text)
    else:
        match = _DB_RE.match(_spelled(text, "18 dB", place))
        if not match:
            raise InputError(place, f"expected a value in dB such as \"18 dB\" (or a bare number, read as dB), "
                                    f"got {text!r}")
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
    if not isinstance(dimension, str) or dimension not in DIMENSIONS:
        raise InputError(place, f"unknown dimension {dimension!r}; expected one of: {', '.join(DIMENSIONS)}")
    example = EXAMPLES[dimension]
    if isinstance(text, bool) or not isinstance(text, (str, int, float)):
        raise InputError(place, f"expected a {dimension} such as \"{example}\", got {text!r}")
    if isinstance(text, (int, float)):
        if dimension != "ratio":
            raise InputError(place, f"expected a {dimension} with its unit, such as \"{example}\", got the bare "
                                    f"number {text!r}; {BARE_NUMBER_RULE}")
        value = float(text)
    else:
        text = _screened(text, dimension, place)
        cache_key = f"{dimension}|{text.strip()}"
        value = quantity_cache.lookup(cache_key)
        if value is None:
            value = pint_value(text, dimension, place)
            quantity_cache.learn(cache_key, value)
    if not math.isfinite(value):
        raise InputError(place, f"expected a finite {dimension}, got {text!r}")
    return value


def parse_either(text: str, dimensions: tuple, place: str) -> tuple[str, float]:
    """The first of ``dimensions`` a quantity string has, and its SI value.

    For keys that accept more than one kind of value (a frequency error in Hz
    or in ppm of the carrier). The dimensions must exclude each other, so a
    string known in the cache under one of them is read without pint.
    """
    stripped = str(text).strip()
    for dimension in dimensions:
        if quantity_cache.lookup(f"{dimension}|{stripped}") is not None:
            return dimension, parse_quantity(text, dimension, place)
    error = None
    for dimension in dimensions:
        try:
            return dimension, parse_quantity(text, dimension, place)
        except InputError as exc:
            error = exc
    raise error


def pint_value(text: str, dimension: str, place: str) -> float:
    """The SI value of a quantity string read by pint (no cache), with the dimension checked.

    ``text`` has passed :func:`_screened`; :func:`parse_quantity` is the function to call.
    """
    dims, si_unit = DIMENSIONS[dimension]
    example = EXAMPLES[dimension]
    ureg = registry()
    try:
        quantity = ureg.Quantity(text.strip())
    except Exception:
        raise InputError(place, f"expected a {dimension} such as \"{example}\", could not read {text!r}") from None
    if not hasattr(quantity, "to"):
        quantity = ureg.Quantity(float(quantity))
    if quantity.dimensionless and dimension != "ratio":
        raise InputError(place, f"expected a {dimension} with its unit, such as \"{example}\", got {text!r}; "
                                f"{BARE_NUMBER_RULE}")
    # pint treats "bit" as dimensionless, so "50 Mbit/s" is a frequency.
    if not quantity.check(dims or "[]"):
        raise InputError(
            place, f"expected a {dimension} such as \"{example}\", got {text!r} ({quantity.dimensionality})"
        )
    _refuse_prefixed_non_metric(quantity, text, dimension, place)
    try:
        return float(quantity.to(si_unit).magnitude)
    except Exception:
        raise InputError(place, f"expected a {dimension} such as \"{example}\", could not read {text!r}") from None


def _refuse_prefixed_non_metric(quantity, text: str, dimension: str, place: str) -> None:
    """Refuse an SI prefix on a unit outside :data:`METRIC_UNITS`, saying how pint would have read it.

    "40 kmph" is 40 kilo-(mile per hour) to pint, 64,374 km/h, where "40 km/h" was meant.
    """
    ureg = registry()
    for name, _ in quantity.unit_items():
        for prefix, unit, _suffix in ureg.parse_unit_name(name):
            if prefix and unit not in METRIC_UNITS:
                number = text.strip().split()[0] if text.strip()[:1].isdigit() else "1"
                metric = _METRIC_SPELLING.get((prefix, unit))
                instead = f"\"{number} {metric}\"" if metric else f"a metric unit, such as \"{EXAMPLES[dimension]}\""
                shown = show_si(float(quantity.to(DIMENSIONS[dimension][1]).magnitude), dimension)
                reading = f" would be read with the unit {prefix}-({unit.replace('_', ' ')}), as {shown};"
                raise UnitSpellingError(place, f"{text.strip()!r}{reading} an SI prefix on a non-metric unit is refused: "
                                        f"write {instead}")


def show_si(value: float, dimension: str) -> str:
    """An SI value of a dimension as people read it (speeds in km/h), for messages."""
    if dimension == "speed":
        return f"{float(f'{value * 3.6:.5g}'):.12g} km/h"  # 64374 km/h rather than 6.4374e+04
    unit = {"frequency": "Hz", "time": "s", "length": "m", "bitrate": "bit/s"}.get(dimension)
    return engineering(value, unit) if unit else f"{value:.6g}"


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
