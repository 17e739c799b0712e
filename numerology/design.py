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
* Pilots follow an *arrangement* (``numerology.arrangement``): a scope
  (``stream``, ``slot``, ``packet`` or ``differential``: what a receiver may
  use), the pilot-bearing symbols as a bit mask over a period of symbols,
  a comb of every D_f-th used subcarrier in each of them whose offset
  advances by ``shift`` from one pilot-bearing symbol to the next, a power
  boost, and whether data share the pilot-bearing symbols. Without a mask
  the pattern is the lattice ``i * (D_f, 0) + j * (shift, D_t)`` (one
  pilot-bearing symbol every D_t). ``pilot_time_spacing`` is always the
  largest gap between pilot-bearing symbols, D_t of the lattice that judges
  the pattern's sampling of the channel.
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
    scope = "stream"          # or "slot", "packet", "differential"
    freq_spacing = 6
    symbols = [0, 4]          # pilot-bearing symbols of each period (or: time_spacing = 4)
    period = 7                # symbols per period of the pattern
    shift = 3
    boost = "0 dB"            # optional
    data_shared = true        # optional: data on the other subcarriers of a pilot symbol

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

from . import arrangement
from .errors import InputError
from .units import engineering, parse_db, parse_quantity

#: A given sample rate must equal ``fft_size * subcarrier_spacing`` within this relative error.
SAMPLE_RATE_RTOL = 1e-9

#: A CP given as a duration must be a whole number of samples within this many samples.
CP_WHOLE_SAMPLES_ATOL = 1e-6

#: Counts beyond this are refused: they are typos, and floats could not hold them exactly.
MAX_COUNT = 2**53

#: Keys of :meth:`Design.to_json` that are derived, not parameters.
DERIVED_JSON_KEYS = ("cp_s", "useful_symbol_s", "symbol_s")


def non_pilot_subcarriers(used_subcarriers, pilot_fraction):
    """Used subcarriers per symbol left after the pilots, on average: ``used * (1 - pilot fraction)``.

    It is the one formula shared by :attr:`_Derived.data_subcarriers_per_symbol`
    and by presets that derive their reserved-carrier count from a published
    data-carrier count, so that the two agree to the last bit.

    Parameters
    ----------
    used_subcarriers : int or array_like
        Occupied subcarriers per symbol, pilots included.
    pilot_fraction : float or array_like
        Fraction of the used resource elements the pilots take from data
        (``numerology.arrangement.pilot_fraction``).

    Returns
    -------
    float or numpy.ndarray
        Subcarriers per symbol not taken by pilots (a count).

    Examples
    --------
    >>> non_pilot_subcarriers(1705, 1 / 12)  # DVB-T 2k: 1705 carriers, 1/12 scattered pilots
    1562.9166666666665
    """
    return used_subcarriers * (1.0 - pilot_fraction)


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
        """Fraction of used resource elements the pilots take from data (see ``arrangement.pilot_fraction``)."""
        return self._out(arrangement.pilot_fraction(self.pilot_symbols, self.pilot_period, self.pilot_freq_spacing,
                                                    self.pilot_data_shared))

    @property
    def data_subcarriers_per_symbol(self):
        """Data subcarriers per symbol on average: used (1 - pilot density) - reserved."""
        return self._out(non_pilot_subcarriers(self.used_subcarriers, self.pilot_density) - self.reserved_subcarriers)

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
    "pilot_symbols",
    "pilot_period",
)
_FLOAT_FIELDS = ("subcarrier_spacing_hz", "sample_rate_hz", "reserved_subcarriers", "cp_extra_period_s",
                 "pilot_boost_db", "channel_bandwidth_hz")


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
        Pilot comb spacing D_f (subcarriers), the largest gap D_t between
        pilot-bearing symbols, and the comb's shift per pilot-bearing symbol
        (``0 <= shift < D_f``). Without ``pilot_symbols`` they are the lattice
        ``i (D_f, 0) + j (shift, D_t)`` in (subcarrier, symbol) units.
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
    pilot_scope : str, optional
        ``stream`` (default), ``slot``, ``packet`` or ``differential``: what a
        receiver may use (``numerology.arrangement``).
    pilot_symbols : int, optional
        Bit mask of the pilot-bearing symbols of each period (0: the lattice,
        one pilot-bearing symbol every ``pilot_time_spacing``).
    pilot_period : int, optional
        Symbols per period of the pattern (0: ``pilot_time_spacing``; for the
        ``slot`` scope it is the slot).
    pilot_boost_db : float, optional
        Pilot power per resource element over the data's, dB.
    pilot_data_shared : bool, optional
        Whether data use the other subcarriers of a pilot-bearing symbol.
    channel_bandwidth_hz : float, optional
        The channel a standard defines the design for, in Hz (0: none; the
        requirement's occupancy then applies to the occupied bandwidth).

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
    pilot_scope: str = "stream"
    pilot_symbols: int = 0
    pilot_period: int = 0
    pilot_boost_db: float = 0.0
    pilot_data_shared: bool = True
    channel_bandwidth_hz: float = 0.0

    def __post_init__(self):
        place = f"design {self.name!r}" if isinstance(self.name, str) else "design"
        for key in ("name", "source"):
            if not isinstance(getattr(self, key), str):
                raise InputError(f"{place}: {key}", f"expected text, got {getattr(self, key)!r}")
        if self.pilot_scope not in arrangement.SCOPES:
            raise InputError(f"{place}: pilot_scope",
                             f"expected one of {', '.join(arrangement.SCOPES)}, got {self.pilot_scope!r}")
        if not isinstance(self.pilot_data_shared, (bool, np.bool_)):
            raise InputError(f"{place}: pilot_data_shared", f"expected true or false, got {self.pilot_data_shared!r}")
        object.__setattr__(self, "pilot_data_shared", bool(self.pilot_data_shared))
        for key in _COUNT_FIELDS:
            value = getattr(self, key)
            if isinstance(value, bool) or not isinstance(value, numbers.Integral) or abs(value) > MAX_COUNT:
                raise InputError(f"{place}: {key}", f"expected a whole number below 2**53, got {value!r}")
            object.__setattr__(self, key, int(value))
        if self.pilot_symbols == 0 and self.pilot_time_spacing >= 1:  # the lattice: one pilot symbol per D_t
            object.__setattr__(self, "pilot_symbols", 1)
            object.__setattr__(self, "pilot_period", self.pilot_time_spacing)
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
            f"{self.used_subcarriers} used{reserved}, {pilot_label(self)}"
        )

    @property
    def is_lattice(self) -> bool:
        """True when the pilots form the lattice ``i (D_f, 0) + j (shift, D_t)`` of a stream."""
        return self.pilot_scope == "stream" and self.pilot_symbols == 1 and self.pilot_period == self.pilot_time_spacing

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
                "scope": self.pilot_scope,
                "freq_spacing": self.pilot_freq_spacing,
                "time_spacing": self.pilot_time_spacing,
                "shift": self.pilot_shift,
                "symbols": list(arrangement.symbols_of(self.pilot_symbols)),
                "period": self.pilot_period,
                "boost_db": self.pilot_boost_db,
                "data_shared": self.pilot_data_shared,
            },
            "reserved_subcarriers": self.reserved_subcarriers,
            "cp_extra_samples": self.cp_extra_samples,
            "cp_extra_period_s": self.cp_extra_period_s,
            "channel_bandwidth_hz": self.channel_bandwidth_hz,
            "source": self.source,
        }


def pilot_label(design) -> str:
    """A short label of a design's pilots, e.g. ``pilots 6x4/3`` (a lattice) or ``slot pilots 2,11/14, comb 2``."""
    if design.pilot_scope == "differential":
        return "differential (no pilots)"
    if design.is_lattice:
        text = f"pilots {design.pilot_freq_spacing}x{design.pilot_time_spacing}/{design.pilot_shift}"
    else:
        symbols = ",".join(str(b) for b in arrangement.symbols_of(design.pilot_symbols))
        shift = f" shift {design.pilot_shift}" if design.pilot_shift else ""
        text = f"{design.pilot_scope} pilots {symbols}/{design.pilot_period}, comb {design.pilot_freq_spacing}{shift}"
    if design.pilot_boost_db:
        text += f" {design.pilot_boost_db:+.3g} dB"
    return text


def _is_real(value) -> bool:
    return isinstance(value, numbers.Real) and not isinstance(value, bool)


def _pattern_problems(v, need, slot_ok) -> bool:
    """Check the pilot pattern (mask, period, scope) against the time spacing and the slot; True if sound."""
    mask, period = v["pilot_symbols"], v["pilot_period"]
    if not need(period >= 1, "pilot_period", f"must be at least 1 symbol, got {period}"):
        return False
    if not need(0 < mask < 1 << min(period, arrangement.MAX_PATTERN_BITS), "pilot_symbols",
                f"expected pilot-bearing symbols within the period: 0 .. {min(period, arrangement.MAX_PATTERN_BITS) - 1}"):
        return False
    gap = int(arrangement.max_gap(mask, period))
    ok = need(v["pilot_time_spacing"] == gap, "pilot_time_spacing",
              f"must be the largest gap between pilot-bearing symbols of the pattern, {gap}; "
              f"got {v['pilot_time_spacing']}")
    if slot_ok and v["pilot_scope"] == "slot":
        ok &= need(period == v["symbols_per_slot"], "pilot_period",
                   f"slot pilots repeat with the slot: the period must be symbols_per_slot = {v['symbols_per_slot']}, "
                   f"got {period}")
    if slot_ok and v["pilot_scope"] == "packet":
        ok &= need(period <= v["symbols_per_slot"], "pilot_period",
                   f"packet training repeats within the packet: at most symbols_per_slot = {v['symbols_per_slot']}, "
                   f"got {period}")
    channel = v["channel_bandwidth_hz"]
    ok &= need(math.isfinite(channel) and channel >= 0, "channel_bandwidth_hz",
               f"expected a channel bandwidth >= 0 Hz (0: none), got {channel!r}")
    boost = v["pilot_boost_db"]
    ok &= need(math.isfinite(boost) and -20 <= boost <= 20, "pilot_boost_db",
               f"expected a pilot power boost between -20 and 20 dB, got {boost!r}")
    return ok


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
    slot_ok = need(v["symbols_per_slot"] >= 1, "symbols_per_slot", f"must be at least 1, got {v['symbols_per_slot']}")
    pattern_ok = dt_ok and _pattern_problems(v, need, slot_ok)
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
            f"must be a number of subcarriers >= 0, got {reserved!r}") and used_ok and df_ok and pattern_ok and shift_ok:
        fraction = arrangement.pilot_fraction(v["pilot_symbols"], v["pilot_period"], v["pilot_freq_spacing"],
                                              v["pilot_data_shared"])
        data = non_pilot_subcarriers(v["used_subcarriers"], float(fraction)) - reserved
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
    pilot_scope: Any = "stream"
    pilot_symbols: Any = 0
    pilot_period: Any = 0
    pilot_boost_db: Any = 0.0
    pilot_data_shared: Any = True
    channel_bandwidth_hz: Any = 0.0

    def __post_init__(self):
        for key in _COUNT_FIELDS:
            object.__setattr__(self, key, np.asarray(getattr(self, key), dtype=np.int64))
        lattice = self.pilot_symbols == 0  # one pilot-bearing symbol every D_t
        if np.any(lattice):
            object.__setattr__(self, "pilot_symbols", np.where(lattice, 1, self.pilot_symbols))
            object.__setattr__(self, "pilot_period", np.where(lattice, self.pilot_time_spacing, self.pilot_period))
        object.__setattr__(self, "pilot_data_shared", np.asarray(self.pilot_data_shared, dtype=bool))
        scope = np.asarray(self.pilot_scope)
        if scope.dtype.kind in "US":
            scope = np.vectorize(arrangement.SCOPE_CODE.__getitem__, otypes=[np.int64])(scope)
        object.__setattr__(self, "pilot_scope", np.asarray(scope, dtype=np.int64))
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
        return np.broadcast_shapes(*(getattr(self, key).shape for key in _COUNT_FIELDS + _FLOAT_FIELDS),
                                   self.pilot_scope.shape, self.pilot_data_shared.shape)

    @classmethod
    def from_designs(cls, designs: Sequence[Design]) -> "DesignArrays":
        """Stack a sequence of :class:`Design` into 1-D arrays, in order."""
        designs = list(designs)
        columns = {f.name: [getattr(d, f.name) for d in designs] for f in fields(Design)}
        columns["pilot_scope"] = [arrangement.SCOPE_CODE[d.pilot_scope] for d in designs]
        return cls(**columns)

    def design(self, index) -> Design:
        """The design at ``index`` of the broadcast arrays, as a checked :class:`Design`."""
        shape = np.broadcast_shapes(self.shape, self.name.shape, self.source.shape)
        values = {}
        for f in fields(Design):
            value = np.broadcast_to(getattr(self, f.name), shape)[index]
            values[f.name] = value.item() if isinstance(value, np.generic) else value
        values["pilot_scope"] = arrangement.SCOPES[values["pilot_scope"]]
        return Design(**values)


def designs_to_arrays(designs: Sequence[Design]) -> DesignArrays:
    """Stack designs into a :class:`DesignArrays` (same field names, 1-D arrays)."""
    return DesignArrays.from_designs(designs)


# --- reading design files ---------------------------------------------------

_TEXT, _COUNT, _NUMBER, _TABLE = "text", "count", "number", "table"
_SCOPE, _COUNTS, _FLAG, _DB = "scope", "counts", "flag", "db"

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
    "channel_bandwidth": ("frequency", False),
    "source": (_TEXT, False),
}
_PILOT_KEYS = {
    "scope": (_SCOPE, False),
    "freq_spacing": (_COUNT, True),
    "time_spacing": (_COUNT, False),
    "symbols": (_COUNTS, False),
    "period": (_COUNT, False),
    "shift": (_COUNT, False),
    "boost": (_DB, False),
    "data_shared": (_FLAG, False),
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
    "channel_bandwidth": '"20 MHz"',
    "source": '"where the numbers come from"',
    "freq_spacing": "6",
    "time_spacing": "4",
    "shift": "3",
    "scope": '"stream"',
    "symbols": "[0, 4]",
    "period": "7",
    "boost": '"0 dB"',
    "data_shared": "true",
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
    "channel_bandwidth_hz": "channel_bandwidth",
    "source": "source",
    "pilot_scope": "pilot.scope",
    "pilot_symbols": "pilot.symbols",
    "pilot_period": "pilot.period",
    "pilot_boost_db": "pilot.boost",
    "pilot_data_shared": "pilot.data_shared",
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
    elif kind == _SCOPE:
        if value in arrangement.SCOPES:
            return value
        problems.append((key, f"expected one of {', '.join(repr(s) for s in arrangement.SCOPES)}, got {value!r}"))
    elif kind == _COUNTS:
        if (isinstance(value, list) and value and len(value) <= arrangement.MAX_PATTERN_BITS
                and all(isinstance(v, int) and not isinstance(v, bool) and 0 <= v < arrangement.MAX_PATTERN_BITS
                        for v in value) and len(set(value)) == len(value)):
            return value
        problems.append((key, f"expected a list of distinct symbol indices from 0 to "
                              f"{arrangement.MAX_PATTERN_BITS - 1} such as {example}, got {value!r}"))
    elif kind == _FLAG:
        if isinstance(value, bool):
            return value
        problems.append((key, f"expected true or false, got {value!r}"))
    elif kind == _DB:
        try:
            return parse_db(value, f"{place}{key}")
        except InputError as error:
            problems.append((key, error.message))
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


def _pattern_from_keys(pilot: Mapping, slot: int) -> dict:
    """Design fields of the pilot pattern from the keys of a ``[pilot]`` table (see the module docstring).

    ``symbols`` (with ``period``, default the slot) gives the pattern and
    ``time_spacing`` defaults to its largest gap; ``time_spacing`` alone is a
    lattice for a stream, and every ``time_spacing``-th symbol of the slot
    (from symbol 0) for slot and packet pilots.
    """
    scope = pilot.get("scope", "stream")
    if "symbols" in pilot:
        period = pilot.get("period", slot)
        mask = arrangement.mask_from_symbols(pilot["symbols"])
        spacing = pilot.get("time_spacing", int(arrangement.max_gap(mask, period)) if 0 < mask < 1 << period else 1)
    elif scope in ("slot", "packet") and pilot["time_spacing"] >= 1:
        spacing = pilot["time_spacing"]
        period = pilot.get("period", slot)
        mask = arrangement.mask_from_symbols(range(0, min(period, arrangement.MAX_PATTERN_BITS), spacing))
    else:
        spacing = pilot["time_spacing"]
        period = pilot.get("period", spacing)
        mask = 1
    return {"pilot_scope": scope, "pilot_time_spacing": spacing, "pilot_symbols": mask, "pilot_period": period,
            "pilot_boost_db": pilot.get("boost", 0.0), "pilot_data_shared": pilot.get("data_shared", True)}


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
    if "pilot" in values and "time_spacing" not in pilot and "symbols" not in pilot:
        problems.append(("pilot.time_spacing", f"missing; add time_spacing = {_EXAMPLES['time_spacing']} "
                                               f"or symbols = {_EXAMPLES['symbols']}"))
    if not problems:
        pattern = _pattern_from_keys(pilot, values["symbols_per_slot"])
        fields_ = {
            "name": values.get("name", default_name),
            "subcarrier_spacing_hz": values["subcarrier_spacing"],
            "fft_size": values["fft_size"],
            "cp_samples": values["cp_samples"],
            "used_subcarriers": values["used_subcarriers"],
            "pilot_freq_spacing": pilot["freq_spacing"],
            "pilot_shift": pilot.get("shift", 0),
            **pattern,
            "symbols_per_slot": values["symbols_per_slot"],
            "sample_rate_hz": values.get("sample_rate", values["fft_size"] * values["subcarrier_spacing"]),
            "reserved_subcarriers": values.get("reserved_subcarriers", 0.0),
            "cp_extra_samples": values.get("cp_extra_samples", 0),
            "cp_extra_period_s": values.get("cp_extra_period", 0.0),
            "channel_bandwidth_hz": values.get("channel_bandwidth", 0.0),
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
