"""An OFDM design (numerology): its parameters, derived timing and overheads.

A :class:`Design` is one numerology, described by integer sample counts on a
sample clock plus a pilot lattice. :class:`DesignArrays` holds many designs as
numpy arrays (struct of arrays) for the vectorised model. Both compute every
derived quantity through the same formulas, written once in :class:`_Derived`.

Conventions
-----------
* All durations follow from sample counts on the sample clock
  ``f_s = fft_size * subcarrier_spacing``: the useful symbol is ``N / f_s``
  (equal to ``1 / df``), the cyclic prefix ``N_cp / f_s``.
* Pilots sit on the lattice ``i * (D_f, 0) + j * (shift, D_t)`` in
  (subcarrier, symbol) units, so their density is ``1 / (D_f * D_t)`` of the
  used resource elements.
* Some systems lengthen the CP of the first symbol of each period (LTE: 16
  extra samples each 0.5 ms slot; NR: 16 kappa per half subframe). That extra
  time is spread over the period in :attr:`_Derived.mean_symbol_s`.

A design file is TOML; keys are the JSON names without unit suffixes, and
every physical value carries its unit in a string::

    name = "example"
    subcarrier_spacing = "15 kHz"
    fft_size = 2048
    cp_samples = 144          # or: cp = "4.6875 us"
    used_subcarriers = 1200
    symbols_per_slot = 14

    [pilot]
    freq_spacing = 6
    time_spacing = 4
    shift = 3

References
----------
.. [1] 3GPP TS 36.211, sect. 6.12 and Table 6.12-1 (LTE CP lengths, the longer
   first-symbol CP).
.. [2] 3GPP TS 38.211, sect. 5.3.1 (NR CP lengths, 16 kappa per half subframe).
.. [3] P. Hoeher, S. Kaiser, P. Robertson, "Two-dimensional pilot-symbol-aided
   channel estimation by Wiener filtering", Proc. IEEE ICASSP 1997 (pilot
   lattices).
"""

from __future__ import annotations

import difflib
import json
import math
import re
import numbers
from dataclasses import dataclass, fields
from typing import Any, Mapping, Sequence

import numpy as np

from .errors import InputError
from .units import engineering, parse_quantity

#: A given sample rate must equal ``fft_size * subcarrier_spacing`` within this relative error.
SAMPLE_RATE_RTOL = 1e-9

#: A CP given as a duration must be a whole number of samples within this many samples.
CP_WHOLE_SAMPLES_ATOL = 1e-6

#: Counts beyond this are refused: they are typos, and floats could not hold them exactly.
MAX_COUNT = 2**53

#: Keys of :meth:`Design.to_json` that are derived, not parameters.
DERIVED_JSON_KEYS = ("cp_s", "useful_symbol_s", "symbol_s")


def non_pilot_subcarriers(used_subcarriers, pilot_freq_spacing, pilot_time_spacing):
    """Used subcarriers per symbol left after the pilot lattice, on average.

    ``used * (1 - 1 / (D_f * D_t))``. It is the one formula shared by
    :attr:`_Derived.data_subcarriers_per_symbol` and by presets that derive
    their reserved-carrier count from a published data-carrier count, so that
    the two agree to the last bit.

    Parameters
    ----------
    used_subcarriers : int or array_like
        Occupied subcarriers per symbol, pilots included.
    pilot_freq_spacing, pilot_time_spacing : int or array_like
        Pilot lattice spacings D_f (subcarriers) and D_t (symbols).

    Returns
    -------
    float or numpy.ndarray
        Subcarriers per symbol not taken by lattice pilots (a count).

    Examples
    --------
    >>> non_pilot_subcarriers(1705, 12, 1)  # DVB-T 2k: 1705 carriers, 1/12 scattered pilots
    1562.9166666666665
    """
    return used_subcarriers * (1.0 - 1.0 / (pilot_freq_spacing * pilot_time_spacing))


class _Derived:
    """Derived quantities, written once for a :class:`Design` and for :class:`DesignArrays`.

    The formulas use only arithmetic and ``numpy.where``, so they broadcast
    over arrays and work on Python scalars alike; ``_out`` turns the result
    into a float for a single design.
    """

    def _out(self, value):  # pragma: no cover - overridden
        raise NotImplementedError

    @property
    def useful_symbol_s(self):
        """Useful (FFT) symbol duration T_u = N / f_s = 1 / df, in s (66.67 us at 15 kHz)."""
        return self._out(self.fft_size / self.sample_rate_hz)

    @property
    def cp_s(self):
        """Ordinary cyclic prefix duration N_cp / f_s, in s."""
        return self._out(self.cp_samples / self.sample_rate_hz)

    @property
    def cp_extra_s(self):
        """Extra CP on the first symbol of each ``cp_extra_period_s``, in s."""
        return self._out(self.cp_extra_samples / self.sample_rate_hz)

    @property
    def symbol_s(self):
        """Ordinary symbol duration T_s = (N + N_cp) / f_s, in s."""
        return self._out((self.fft_size + self.cp_samples) / self.sample_rate_hz)

    @property
    def mean_symbol_s(self):
        """Mean symbol duration with the extra CP spread over its period, in s.

        A period P holds n symbols and one extra CP: ``n T_s + T_x = P``, so
        the mean is ``P / n = T_s P / (P - T_x)`` (LTE normal CP: 0.5 ms / 7).
        """
        symbol_s = (self.fft_size + self.cp_samples) / self.sample_rate_hz
        extra_s = self.cp_extra_samples / self.sample_rate_hz
        has_extra = (self.cp_extra_period_s > 0) & (self.cp_extra_samples > 0)
        # guard the denominator so that designs without an extra CP never divide by zero
        denominator_s = np.where(has_extra, self.cp_extra_period_s - extra_s, 1.0)
        stretch = np.where(has_extra, self.cp_extra_period_s / denominator_s, 1.0)
        return self._out(symbol_s * stretch)  # T_s P / (P - T_x)

    @property
    def symbols_per_second(self):
        """OFDM symbols per second, on average (1/s)."""
        return self._out(1.0 / self.mean_symbol_s)

    @property
    def slot_s(self):
        """Mean slot duration, symbols_per_slot x mean symbol, in s.

        Where the extra CP falls once every few slots (NR with mu >= 2) this
        is the average slot; individual slots differ by the extra CP.
        """
        return self._out(self.symbols_per_slot * self.mean_symbol_s)

    @property
    def occupied_bandwidth_hz(self):
        """Occupied bandwidth, used subcarriers x spacing, in Hz."""
        return self._out(self.used_subcarriers * self.subcarrier_spacing_hz)

    @property
    def pilot_density(self):
        """Fraction of used resource elements on the pilot lattice, 1 / (D_f D_t)."""
        return self._out(1.0 / (self.pilot_freq_spacing * self.pilot_time_spacing))

    @property
    def data_subcarriers_per_symbol(self):
        """Data subcarriers per symbol on average: used (1 - pilot density) - reserved."""
        return self._out(
            non_pilot_subcarriers(self.used_subcarriers, self.pilot_freq_spacing, self.pilot_time_spacing)
            - self.reserved_subcarriers
        )

    @property
    def cp_overhead(self):
        """Fraction of time spent in cyclic prefixes (extra CP included): 1 - T_u / mean symbol."""
        return self._out(1.0 - self.useful_symbol_s / self.mean_symbol_s)

    @property
    def pilot_overhead(self):
        """Fraction of used resource elements spent on pilots and reserved subcarriers."""
        return self._out(1.0 - self.data_subcarriers_per_symbol / self.used_subcarriers)

    @property
    def overhead(self):
        """Fraction of (time x used subcarriers) not carrying data: CP, pilots and reserved.

        ``1 - (1 - cp_overhead) (1 - pilot_overhead)``.
        """
        return self._out(1.0 - (1.0 - self.cp_overhead) * (1.0 - self.pilot_overhead))

    @property
    def data_re_per_second(self):
        """Data resource elements per second: data subcarriers per symbol / mean symbol (1/s)."""
        return self._out(self.data_subcarriers_per_symbol / self.mean_symbol_s)


_COUNT_FIELDS = (
    "fft_size",
    "cp_samples",
    "used_subcarriers",
    "pilot_freq_spacing",
    "pilot_time_spacing",
    "pilot_shift",
    "symbols_per_slot",
    "cp_extra_samples",
)
_FLOAT_FIELDS = ("subcarrier_spacing_hz", "sample_rate_hz", "reserved_subcarriers", "cp_extra_period_s")


@dataclass(frozen=True)
class Design(_Derived):
    """One OFDM numerology.

    Parameters
    ----------
    name : str
        A label.
    subcarrier_spacing_hz : float
        Subcarrier spacing df, in Hz.
    fft_size : int
        FFT size N (samples per useful symbol).
    cp_samples : int
        Ordinary cyclic prefix, in samples.
    used_subcarriers : int
        Occupied subcarriers including pilots, excluding DC and guard bands.
    pilot_freq_spacing, pilot_time_spacing, pilot_shift : int
        Pilot lattice ``i (D_f, 0) + j (shift, D_t)`` in (subcarrier, symbol)
        units; ``0 <= shift < D_f``.
    symbols_per_slot : int
        Symbols per slot (or frame, or packet: the scheduling unit).
    sample_rate_hz : float, optional
        Sample rate in Hz; ``None`` means ``fft_size * subcarrier_spacing_hz``.
        If given it must equal that product within 1e-9 relative.
    reserved_subcarriers : float, optional
        Other non-data subcarriers per symbol on average (continual pilots,
        signalling carriers such as DVB-T TPS, 802.11 fixed pilots).
    cp_extra_samples : int, optional
        Extra CP samples on the first symbol of each ``cp_extra_period_s``.
    cp_extra_period_s : float, optional
        Period of the extra CP, in s (LTE: 0.5 ms).
    source : str, optional
        Where the numbers come from.

    Raises
    ------
    InputError
        If a value is not physical (see :func:`design_problems`).

    References
    ----------
    3GPP TS 36.211 Table 6.12-1; 3GPP TS 38.211 sect. 5.3.1 (extra CP).

    Examples
    --------
    >>> d = Design("lte", 15e3, 2048, 144, 1200, 6, 4, 3, 7, cp_extra_samples=16, cp_extra_period_s=0.5e-3)
    >>> print(d)
    lte: 15 kHz x 2048, CP 144 (4.69 us) +16 per 500 us, 1200 used, pilots 6x4/3
    >>> round(d.slot_s * d.sample_rate_hz)  # 7 x 2048 + 6 x 144 + 160 samples at 30.72 MHz
    15360
    """

    name: str
    subcarrier_spacing_hz: float
    fft_size: int
    cp_samples: int
    used_subcarriers: int
    pilot_freq_spacing: int
    pilot_time_spacing: int
    pilot_shift: int
    symbols_per_slot: int
    sample_rate_hz: float | None = None
    reserved_subcarriers: float = 0
    cp_extra_samples: int = 0
    cp_extra_period_s: float = 0
    source: str = ""

    def __post_init__(self):
        place = f"design {self.name!r}" if isinstance(self.name, str) else "design"
        for key in ("name", "source"):
            if not isinstance(getattr(self, key), str):
                raise InputError(f"{place}: {key}", f"expected text, got {getattr(self, key)!r}")
        for key in _COUNT_FIELDS:
            value = getattr(self, key)
            if isinstance(value, bool) or not isinstance(value, numbers.Integral) or abs(value) > MAX_COUNT:
                raise InputError(f"{place}: {key}", f"expected a whole number below 2**53, got {value!r}")
            object.__setattr__(self, key, int(value))
        if self.sample_rate_hz is None and _is_real(self.subcarrier_spacing_hz):
            object.__setattr__(self, "sample_rate_hz", self.fft_size * float(self.subcarrier_spacing_hz))
        for key in _FLOAT_FIELDS:
            value = getattr(self, key)
            if not _is_real(value):
                raise InputError(f"{place}: {key}", f"expected a number, got {value!r}")
            object.__setattr__(self, key, float(value))
        problems = design_problems({f.name: getattr(self, f.name) for f in fields(self)})
        if problems:
            key, message = problems[0]
            raise InputError(f"{place}: {key}", message)

    def _out(self, value):
        return float(value)

    def __str__(self) -> str:
        extra = ""
        if self.cp_extra_samples and self.cp_extra_period_s:
            extra = f" +{self.cp_extra_samples} per {engineering(self.cp_extra_period_s, 's', 3)}"
        reserved = f", {self.reserved_subcarriers:.4g} reserved" if self.reserved_subcarriers else ""
        label = f"{self.name}: " if self.name else ""
        return (
            f"{label}{engineering(self.subcarrier_spacing_hz, 'Hz', 6)} x {self.fft_size}, "
            f"CP {self.cp_samples} ({engineering(self.cp_s, 's', 3)}){extra}, "
            f"{self.used_subcarriers} used{reserved}, "
            f"pilots {self.pilot_freq_spacing}x{self.pilot_time_spacing}/{self.pilot_shift}"
        )

    def to_json(self) -> dict:
        """The design as a JSON-ready dict of SI values whose keys carry their unit.

        Returns
        -------
        dict
            Parameters plus the derived ``cp_s``, ``useful_symbol_s`` and
            ``symbol_s`` (listed in :data:`DERIVED_JSON_KEYS`).
        """
        return {
            "name": self.name,
            "subcarrier_spacing_hz": self.subcarrier_spacing_hz,
            "fft_size": self.fft_size,
            "sample_rate_hz": self.sample_rate_hz,
            "cp_samples": self.cp_samples,
            "cp_s": self.cp_s,
            "useful_symbol_s": self.useful_symbol_s,
            "symbol_s": self.symbol_s,
            "used_subcarriers": self.used_subcarriers,
            "symbols_per_slot": self.symbols_per_slot,
            "pilot": {
                "freq_spacing": self.pilot_freq_spacing,
                "time_spacing": self.pilot_time_spacing,
                "shift": self.pilot_shift,
            },
            "reserved_subcarriers": self.reserved_subcarriers,
            "cp_extra_samples": self.cp_extra_samples,
            "cp_extra_period_s": self.cp_extra_period_s,
            "source": self.source,
        }


def _is_real(value) -> bool:
    return isinstance(value, numbers.Real) and not isinstance(value, bool)


def design_problems(values: Mapping[str, Any]) -> list[tuple[str, str]]:
    """Check the physical sense of design parameters; return (field, advice) pairs.

    Parameters
    ----------
    values : mapping
        The :class:`Design` fields by name, already typed (ints and floats),
        with ``sample_rate_hz`` filled in.

    Returns
    -------
    list of (str, str)
        One entry per problem, in field order; empty if the design is sound.
        Range checks are written so that NaN fails them.
    """
    v = values
    problems: list[tuple[str, str]] = []

    def need(ok: bool, key: str, message: str) -> bool:
        if not ok:
            problems.append((key, message))
        return ok

    df = v["subcarrier_spacing_hz"]
    n = v["fft_size"]
    spacing_ok = need(math.isfinite(df) and df > 0, "subcarrier_spacing_hz",
                      f"must be a positive frequency, got {df!r} Hz")
    fft_ok = need(n >= 8, "fft_size", f"must be at least 8, got {n}")
    cp_ok = need(0 <= v["cp_samples"] < n or not fft_ok, "cp_samples",
                 f"must be at least 0 and shorter than the FFT ({n} samples), got {v['cp_samples']}")
    used_ok = need(1 <= v["used_subcarriers"] <= n - 1 or not fft_ok, "used_subcarriers",
                   f"must be between 1 and fft_size - 1 = {n - 1} (DC is not used), got {v['used_subcarriers']}")
    df_ok = need(v["pilot_freq_spacing"] >= 1, "pilot_freq_spacing",
                 f"must be at least 1 subcarrier, got {v['pilot_freq_spacing']}")
    dt_ok = need(v["pilot_time_spacing"] >= 1, "pilot_time_spacing",
                 f"must be at least 1 symbol, got {v['pilot_time_spacing']}")
    shift_ok = need(0 <= v["pilot_shift"] < v["pilot_freq_spacing"] or not df_ok, "pilot_shift",
                    f"must be at least 0 and less than the pilot frequency spacing "
                    f"({v['pilot_freq_spacing']}), got {v['pilot_shift']}")
    need(v["symbols_per_slot"] >= 1, "symbols_per_slot", f"must be at least 1, got {v['symbols_per_slot']}")
    fs = v["sample_rate_hz"]
    fs_ok = need(math.isfinite(fs) and fs > 0, "sample_rate_hz", f"must be a positive frequency, got {fs!r} Hz")
    if fs_ok and spacing_ok and fft_ok:
        product = n * df
        fs_ok = need(
            abs(fs - product) <= SAMPLE_RATE_RTOL * product,
            "sample_rate_hz",
            f"{engineering(fs, 'Hz', 10)} does not equal fft_size x subcarrier spacing = {n} x "
            f"{engineering(df, 'Hz', 10)} = {engineering(product, 'Hz', 10)}; the spacing is fixed by "
            f"the sample rate and the FFT size, so change one of the three",
        )
    reserved = v["reserved_subcarriers"]
    if need(math.isfinite(reserved) and reserved >= 0, "reserved_subcarriers",
            f"must be a number of subcarriers >= 0, got {reserved!r}") and used_ok and df_ok and dt_ok and shift_ok:
        data = non_pilot_subcarriers(v["used_subcarriers"], v["pilot_freq_spacing"], v["pilot_time_spacing"]) - reserved
        need(data > 0, "reserved_subcarriers",
             f"pilots and {reserved:g} reserved subcarriers leave no data subcarriers "
             f"out of {v['used_subcarriers']} used")
    extra = v["cp_extra_samples"]
    period = v["cp_extra_period_s"]
    extra_ok = need(extra >= 0, "cp_extra_samples", f"must be at least 0, got {extra}")
    period_ok = need(math.isfinite(period) and period >= 0, "cp_extra_period_s",
                     f"must be a duration >= 0, got {period!r} s")
    if extra_ok and period_ok and extra > 0:
        if need(period > 0, "cp_extra_period_s",
                 f"needed because cp_extra_samples = {extra}: give the period at which the longer CP recurs"):
            if fs_ok and cp_ok and fft_ok:
                shortest_s = (extra + n + v["cp_samples"]) / fs
                need(period >= shortest_s, "cp_extra_period_s",
                     f"{engineering(period, 's')} is shorter than one symbol with its extra CP "
                     f"({engineering(shortest_s, 's')})")
    return problems


@dataclass(frozen=True, eq=False)
class DesignArrays(_Derived):
    """Many designs as numpy arrays (struct of arrays) with the derived values vectorised.

    The fields have the names of :class:`Design`; any broadcastable shapes are
    accepted, so a solver can pass a grid of candidates directly. No physical
    validation is done here: build from checked :class:`Design` objects with
    :meth:`from_designs`, or make sure the grid is sound.

    Examples
    --------
    >>> arrays = DesignArrays.from_designs([
    ...     Design("a", 15e3, 2048, 144, 1200, 6, 4, 3, 7, cp_extra_samples=16, cp_extra_period_s=5e-4),
    ...     Design("b", 30e3, 1024, 72, 600, 6, 4, 3, 7, cp_extra_samples=16, cp_extra_period_s=5e-4)])
    >>> arrays.sample_rate_hz / 1e6
    array([30.72, 30.72])
    >>> arrays.slot_s * 1e3  # (7 x (2048 + 144) + 16) / 30.72 MHz, and half that
    array([0.5 , 0.25])
    """

    name: Any
    subcarrier_spacing_hz: Any
    fft_size: Any
    cp_samples: Any
    used_subcarriers: Any
    pilot_freq_spacing: Any
    pilot_time_spacing: Any
    pilot_shift: Any
    symbols_per_slot: Any
    sample_rate_hz: Any = None
    reserved_subcarriers: Any = 0.0
    cp_extra_samples: Any = 0
    cp_extra_period_s: Any = 0.0
    source: Any = ""

    def __post_init__(self):
        for key in _COUNT_FIELDS:
            object.__setattr__(self, key, np.asarray(getattr(self, key), dtype=np.int64))
        if self.sample_rate_hz is None:
            object.__setattr__(self, "sample_rate_hz", self.fft_size * np.asarray(self.subcarrier_spacing_hz, float))
        for key in _FLOAT_FIELDS:
            object.__setattr__(self, key, np.asarray(getattr(self, key), dtype=float))
        for key in ("name", "source"):
            object.__setattr__(self, key, np.asarray(getattr(self, key), dtype=object))

    def _out(self, value):
        return np.asarray(value)

    @property
    def shape(self) -> tuple[int, ...]:
        """Broadcast shape of all numeric fields."""
        return np.broadcast_shapes(*(getattr(self, key).shape for key in _COUNT_FIELDS + _FLOAT_FIELDS))

    @classmethod
    def from_designs(cls, designs: Sequence[Design]) -> "DesignArrays":
        """Stack a sequence of :class:`Design` into 1-D arrays, in order."""
        designs = list(designs)
        columns = {f.name: [getattr(d, f.name) for d in designs] for f in fields(Design)}
        return cls(**columns)

    def design(self, index) -> Design:
        """The design at ``index`` of the broadcast arrays, as a checked :class:`Design`."""
        shape = np.broadcast_shapes(self.shape, self.name.shape, self.source.shape)
        values = {}
        for f in fields(Design):
            value = np.broadcast_to(getattr(self, f.name), shape)[index]
            values[f.name] = value.item() if isinstance(value, np.generic) else value
        return Design(**values)


def designs_to_arrays(designs: Sequence[Design]) -> DesignArrays:
    """Stack designs into a :class:`DesignArrays` (same field names, 1-D arrays)."""
    return DesignArrays.from_designs(designs)


# --- reading design files ---------------------------------------------------

_TEXT, _COUNT, _NUMBER, _TABLE = "text", "count", "number", "table"

#: Mapping key -> (kind, required). Kinds other than the four above are
#: dimensions for :func:`numerology.units.parse_quantity`.
_KEYS = {
    "name": (_TEXT, False),
    "subcarrier_spacing": ("frequency", True),
    "fft_size": (_COUNT, True),
    "sample_rate": ("frequency", False),
    "cp_samples": (_COUNT, False),
    "cp": ("time", False),
    "used_subcarriers": (_COUNT, True),
    "symbols_per_slot": (_COUNT, True),
    "pilot": (_TABLE, True),
    "reserved_subcarriers": (_NUMBER, False),
    "cp_extra_samples": (_COUNT, False),
    "cp_extra_period": ("time", False),
    "source": (_TEXT, False),
}
_PILOT_KEYS = {
    "freq_spacing": (_COUNT, True),
    "time_spacing": (_COUNT, True),
    "shift": (_COUNT, False),
}
_EXAMPLES = {
    "name": '"my design"',
    "subcarrier_spacing": '"15 kHz"',
    "fft_size": "2048",
    "sample_rate": '"30.72 MHz"',
    "cp_samples": "144",
    "cp": '"4.6875 us"',
    "used_subcarriers": "1200",
    "symbols_per_slot": "14",
    "reserved_subcarriers": "4",
    "cp_extra_samples": "16",
    "cp_extra_period": '"0.5 ms"',
    "source": '"where the numbers come from"',
    "freq_spacing": "6",
    "time_spacing": "4",
    "shift": "3",
}
#: Design field -> key path in a design mapping (``cp_samples`` may come from ``cp``).
_FIELD_KEYS = {
    "name": "name",
    "subcarrier_spacing_hz": "subcarrier_spacing",
    "fft_size": "fft_size",
    "cp_samples": "cp_samples",
    "used_subcarriers": "used_subcarriers",
    "pilot_freq_spacing": "pilot.freq_spacing",
    "pilot_time_spacing": "pilot.time_spacing",
    "pilot_shift": "pilot.shift",
    "symbols_per_slot": "symbols_per_slot",
    "sample_rate_hz": "sample_rate",
    "reserved_subcarriers": "reserved_subcarriers",
    "cp_extra_samples": "cp_extra_samples",
    "cp_extra_period_s": "cp_extra_period",
    "source": "source",
}
_SUFFIXES = ("_hz", "_s")


def _unknown_key_advice(key: str, known) -> str:
    for suffix in _SUFFIXES:
        if isinstance(key, str) and key.endswith(suffix) and key[: -len(suffix)] in known:
            bare = key[: -len(suffix)]
            return f"unknown key; write {bare} = {_EXAMPLES.get(bare, '...')} (the unit goes in the value)"
    close = difflib.get_close_matches(str(key), list(known), n=1, cutoff=0.6) if len(str(key)) < 100 else []
    if close:
        return f"unknown key; did you mean {close[0]!r}?"
    return "unknown key; expected one of " + ", ".join(known)


def _read_value(value, kind: str, key: str, place: str, problems: list):
    """Read one value of the given kind; on failure record a problem and return None."""
    example = _EXAMPLES.get(key.rsplit(".", 1)[-1], "")
    if kind == _TEXT:
        if isinstance(value, str):
            return value
        problems.append((key, f"expected text such as {example}, got {value!r}"))
    elif kind == _COUNT:
        if isinstance(value, int) and not isinstance(value, bool) and abs(value) <= MAX_COUNT:
            return value
        problems.append((key, f"expected a whole number such as {example}, got {value!r}"))
    elif kind == _NUMBER:
        if _is_real(value):
            return float(value)
        problems.append((key, f"expected a number such as {example}, got {value!r}"))
    else:
        try:
            return parse_quantity(value, kind, f"{place}{key}")
        except InputError as error:
            problems.append((key, error.message))
    return None


def _key_text(key) -> str:
    """A key as it would be written in TOML: bare if it can be, else quoted (no raw newlines)."""
    if isinstance(key, str) and re.fullmatch(r"[A-Za-z0-9_-]+", key):
        return key
    return json.dumps(str(key))


def _read_table(mapping, schema, prefix: str, place: str, problems: list) -> dict:
    values = {}
    for key in mapping:
        if key not in schema:
            problems.append((f"{prefix}{_key_text(key)}", _unknown_key_advice(key, schema)))
    for key, (kind, required) in schema.items():
        if key not in mapping:
            if required:
                hint = (f"add a [{prefix}{key}] table with freq_spacing, time_spacing and shift"
                        if kind == _TABLE else f"add {key} = {_EXAMPLES.get(key, '...')}")
                problems.append((f"{prefix}{key}", f"missing; {hint}"))
            continue
        if kind == _TABLE:
            if isinstance(mapping[key], Mapping):
                values[key] = _read_table(mapping[key], _PILOT_KEYS, f"{prefix}{key}.", place, problems)
            else:
                problems.append((f"{prefix}{key}",
                                 f"expected a table [{key}] with freq_spacing, time_spacing and shift, "
                                 f"got {mapping[key]!r}"))
            continue
        read = _read_value(mapping[key], kind, f"{prefix}{key}", place, problems)
        if read is not None:
            values[key] = read
    return values


def _cp_from_duration(cp_s: float, sample_rate_hz: float) -> tuple[int | None, str]:
    """Whole CP samples for a duration, or None and advice naming the nearest counts."""
    samples = cp_s * sample_rate_hz
    if not math.isfinite(samples):
        return None, f"cannot be expressed in samples at {engineering(sample_rate_hz, 'Hz')}"
    nearest = round(samples)
    if abs(samples - nearest) <= CP_WHOLE_SAMPLES_ATOL:
        return int(nearest), ""
    low, high = math.floor(samples), math.ceil(samples)
    options = " or ".join(
        f"cp_samples = {count} ({engineering(count / sample_rate_hz, 's', 6)})" for count in (low, high) if count >= 0
    )
    return None, (
        f"{engineering(cp_s, 's', 6)} is {samples:.4f} samples at {engineering(sample_rate_hz, 'Hz', 8)}; "
        f"the cyclic prefix must be whole samples: use {options}"
    )


def design_from_mapping(
    mapping: Mapping[str, Any], place: str, *, key_prefix: str = "", default_name: str | None = None
) -> Design:
    """Build a :class:`Design` from a mapping such as a parsed TOML table.

    Parameters
    ----------
    mapping : mapping
        Keys as in a design file (see the module docstring); physical values
        are unit strings (``"15 kHz"``, ``"4.6875 us"``).
    place : str
        Where the mapping came from, usually the file name; errors read
        ``"{place}: {key_prefix}{key}: advice"``.
    key_prefix : str, optional
        Prefix for key paths when the design is a table inside a larger file,
        e.g. ``"design."``.
    default_name : str, optional
        Name to use when the mapping has no ``name``.

    Returns
    -------
    Design

    Raises
    ------
    InputError
        For unknown keys (with a did-you-mean), missing or mistyped keys,
        non-integers, and non-physical values. All problems are reported in one
        line: the first names the place, the others follow in the message.

    Examples
    --------
    >>> d = design_from_mapping({"name": "x", "subcarrier_spacing": "15 kHz", "fft_size": 2048,
    ...     "cp": "4.6875 us", "used_subcarriers": 1200, "symbols_per_slot": 14,
    ...     "pilot": {"freq_spacing": 6, "time_spacing": 4, "shift": 3}}, "example")
    >>> d.cp_samples
    144
    """
    if not isinstance(mapping, Mapping):
        raise InputError(place, f"expected a table of design keys, got {type(mapping).__name__}")
    problems: list[tuple[str, str]] = []
    values = _read_table(mapping, _KEYS, "", f"{place}: {key_prefix}", problems)
    if "name" not in mapping and default_name is None:
        problems.append(("name", f"missing; add name = {_EXAMPLES['name']}"))
    cp_key = "cp_samples"
    if "cp" in mapping and "cp_samples" in mapping:
        problems.append(("cp", "give either cp (a duration) or cp_samples (a count), not both"))
    elif "cp" not in mapping and "cp_samples" not in mapping:
        problems.append(("cp_samples", f"missing; add cp_samples = {_EXAMPLES['cp_samples']} "
                                       f"or cp = {_EXAMPLES['cp']}"))
    elif "cp" in values and "subcarrier_spacing" in values and "fft_size" in values:
        cp_key = "cp"
        rate_hz = values.get("sample_rate", values["fft_size"] * values["subcarrier_spacing"])
        samples, advice = _cp_from_duration(values["cp"], rate_hz)
        if samples is None:
            problems.append(("cp", advice))
        else:
            values["cp_samples"] = samples
    pilot = values.get("pilot", {})
    if not problems:
        fields_ = {
            "name": values.get("name", default_name),
            "subcarrier_spacing_hz": values["subcarrier_spacing"],
            "fft_size": values["fft_size"],
            "cp_samples": values["cp_samples"],
            "used_subcarriers": values["used_subcarriers"],
            "pilot_freq_spacing": pilot["freq_spacing"],
            "pilot_time_spacing": pilot["time_spacing"],
            "pilot_shift": pilot.get("shift", 0),
            "symbols_per_slot": values["symbols_per_slot"],
            "sample_rate_hz": values.get("sample_rate", values["fft_size"] * values["subcarrier_spacing"]),
            "reserved_subcarriers": values.get("reserved_subcarriers", 0.0),
            "cp_extra_samples": values.get("cp_extra_samples", 0),
            "cp_extra_period_s": values.get("cp_extra_period", 0.0),
            "source": values.get("source", ""),
        }
        key_of = dict(_FIELD_KEYS, cp_samples=cp_key)
        problems = [(key_of[field], message) for field, message in design_problems(fields_)]
        if not problems:
            if "sample_rate" not in values:
                fields_["sample_rate_hz"] = None
            return Design(**fields_)
    key, message = problems[0]
    if len(problems) > 1:
        others = "; ".join(f"{k}: {m}" for k, m in problems[1:])
        message = f"{message} (also {others})"
    raise InputError(f"{place}: {key_prefix}{key}", message)


def load_design(path) -> Design:
    """Read a design from a TOML file (read only; the file is never written).

    Parameters
    ----------
    path : str or os.PathLike
        The design file. Its stem is the default name.

    Returns
    -------
    Design

    Raises
    ------
    InputError
        If the file cannot be read, is not UTF-8 TOML, or describes an
        invalid design; the message names the file and the key.
    """
    from .errors import file_path
    from .requirements import read_toml

    path = file_path(path)
    return design_from_mapping(read_toml(path, "a TOML design file", "design"), str(path), default_name=path.stem)
