"""Units at the edge: parse quantity strings to SI floats, format SI for people.

This is the only module that knows about unit strings. Everything inside the
package is SI (Hz, s, m, m/s, bit/s) or a plain ratio; decibel values are
floats whose names end in ``_db``.

pint parses ordinary units. Logarithmic values ("18 dB", "-25 dB",
"-90 dBc/Hz") are read here directly, because a ratio in dB is a plain number
for our purposes and pint's offset-unit algebra only gets in the way.

Importing pint costs about a fifth of a second, a large part of a short run.
The SI values pint gave for the quantity strings of earlier runs are therefore
kept in a small cache file (see :func:`cache_path`), valid for one version of
this package and one installation of pint; a run whose strings are all known
never imports pint. Only strings pint read successfully are kept, and the
command line saves the cache only after a run that did not fail on bad input.
"""

from __future__ import annotations

import json
import math
import os
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
        cache_key = f"{dimension}|{text.strip()}"
        value = _known().get(cache_key)
        if value is None:
            value = _pint_value(text, dimension, place)
            if math.isfinite(value):
                _LEARNED[cache_key] = value
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
        if f"{dimension}|{stripped}" in _known():
            return dimension, parse_quantity(text, dimension, place)
    error = None
    for dimension in dimensions:
        try:
            return dimension, parse_quantity(text, dimension, place)
        except InputError as exc:
            error = exc
    raise error


def _pint_value(text: str, dimension: str, place: str) -> float:
    """The SI value of a quantity string, read by pint, with the dimension checked."""
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
        raise InputError(place, f"expected a {dimension} with its unit, such as \"{example}\", got {text!r}")
    # pint treats "bit" as dimensionless, so "50 Mbit/s" is a frequency.
    if not quantity.check(dims or "[]"):
        raise InputError(
            place, f"expected a {dimension} such as \"{example}\", got {text!r} ({quantity.dimensionality})"
        )
    try:
        return float(quantity.to(si_unit).magnitude)
    except Exception:
        raise InputError(place, f"expected a {dimension} such as \"{example}\", could not read {text!r}") from None


# --- the cache of values pint gave in earlier runs -----------------------------------

#: Most entries kept; past it the cache starts again from this run's strings.
CACHE_ENTRIES = 4096


def cache_path():
    """The cache file: ``$NUMEROLOGY_CACHE_DIR`` (empty: no cache), else ``$XDG_CACHE_HOME`` or ``~/.cache``."""
    from pathlib import Path

    folder = os.environ.get("NUMEROLOGY_CACHE_DIR")
    if folder == "":
        return None
    if folder is None:
        base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
        folder = os.path.join(base, "numerology")
    return Path(folder) / "quantities.json"


def _fingerprint() -> str:
    """This package's version and the installed pint (its location, size and time), without importing pint."""
    from importlib.util import find_spec

    from . import __version__

    try:
        spec = find_spec("pint")
        stat = os.stat(spec.origin)
        pint_id = f"{spec.origin}:{stat.st_size}:{stat.st_mtime_ns}"
    except (AttributeError, TypeError, ValueError, OSError):
        pint_id = "unknown"
    return f"numerology {__version__}; pint {pint_id}"


@lru_cache(maxsize=1)
def _known() -> dict:
    """Values from the cache file (empty when there is none, or it is unreadable or from another installation)."""
    path = cache_path()
    if path is None:
        return {}
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        values = data["values"] if data.get("fingerprint") == _fingerprint() else {}
        return {str(k): float(v) for k, v in values.items() if isinstance(v, (int, float))}
    except (OSError, ValueError, TypeError, AttributeError, KeyError):
        return {}


#: Values pint gave in this process, not yet in the cache file.
_LEARNED: dict = {}


def save_cache() -> None:
    """Add this run's new values to the cache file (atomically; any failure only means no cache)."""
    import tempfile

    path = cache_path()
    if path is None or not _LEARNED:
        return
    values = {**_known(), **_LEARNED}
    if len(values) > CACHE_ENTRIES:
        values = dict(_LEARNED)
    temporary = None
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=".quantities-", suffix=".tmp")
        with os.fdopen(handle, "w", encoding="utf-8") as stream:
            json.dump({"fingerprint": _fingerprint(), "values": values}, stream, sort_keys=True)
        os.replace(temporary, path)
    except OSError:
        if temporary is not None and os.path.exists(temporary):
            os.unlink(temporary)
        return
    _known.cache_clear()
    _LEARNED.clear()


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
