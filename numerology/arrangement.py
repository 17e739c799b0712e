"""Pilot arrangements: where the pilots are, and which of them a receiver may use.

A pilot *arrangement* says more than a lattice density. It names

* the **scope** of the pilots, i.e. what a receiver may combine:

  ``slot``
      reference signals repeated in every slot and usable only inside their
      own slot (user-specific, precoded reference signals such as the NR
      DM-RS: 3GPP TS 38.211 sect. 7.4.1.1). The slot is decoded once it has
      been received, so every pilot of the slot serves every symbol of it,
      but never a pilot of the next or the previous slot;
  ``stream``
      a pattern broadcast in every symbol stream (cell-wide or broadcast
      pilots: LTE cell reference signals, TS 36.211 sect. 6.10.1.2; DVB-T
      scattered pilots, EN 300 744 sect. 4.5.3). A receiver may use past
      pilots (up to ``memory`` symbols back) and future ones up to the
      look-ahead (latency) it accepts;
  ``packet``
      training symbols at the start of each packet (a preamble), optionally
      repeated within the packet (midambles). The receiver averages the
      symbols of a training block into one estimate and holds it until the
      next block (IEEE 802.11-2016 cl. 17: two long training symbols, then
      SIGNAL and data): it does not extrapolate from the training symbols as
      separate samples in time, nor wait for a later midamble;
  ``differential``
      no channel estimate: each symbol is detected against the previous one
      (DAB, ETSI EN 300 401: differential QPSK with a phase reference symbol
      per frame).

* the **pattern**: pilot-bearing symbols, given as a bit mask over a period
  of ``period`` symbols (bit ``l`` set: symbol ``l`` of the period carries
  pilots; the pattern repeats every ``period`` symbols), and in each
  pilot-bearing symbol a comb of every ``freq_spacing`` D_f-th used
  subcarrier whose offset advances by ``shift`` subcarriers from one
  pilot-bearing symbol to the next (the j-th pilot-bearing symbol has its
  comb at offset ``(j * shift) mod D_f``; j counts from the start of the
  slot or packet for those scopes, and over the whole stream for ``stream``).

  A lattice ``i (D_f, 0) + j (s, D_t)`` is the stream pattern with period
  D_t and only symbol 0 set. LTE cell reference signals of antenna port 0
  (normal cyclic prefix) are period 7, symbols 0 and 4, D_f = 6, shift 3;
  DVB-T scattered pilots are period 1, D_f = 12, shift 3; the NR DM-RS of
  type 1 with one additional position (14-symbol slot) is period 14,
  symbols 2 and 11, D_f = 2, shift 0.

* whether the other subcarriers of a pilot-bearing symbol carry data
  (``data_shared``; NR DM-RS with two CDM groups without data and 802.11
  training symbols do not), and the pilots' power over the data's
  (``boost_db``).

This module holds only the declaration and the bookkeeping that follows from
it (which symbols carry pilots, which pilots a receiver may use for each
data symbol); the link model (``numerology.estimation``) and the simulator
both read the same declaration, never each other's arithmetic.

Bits beyond :data:`MAX_PATTERN_BITS` are not allowed, so a period longer than
53 symbols (a long packet) can hold pilots only in its first 53 symbols, and
slot pilots need slots of at most 53 symbols.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

#: Pilot scopes (see the module docstring), in the order of their integer codes.
SCOPES = ("stream", "slot", "packet", "differential")
SCOPE_CODE = {name: code for code, name in enumerate(SCOPES)}

#: What each scope lets a receiver use, in words (reports and the design note).
SCOPE_MEANING = {
    "stream": "pilots broadcast in every symbol: the receiver may use past pilots and a stated look-ahead",
    "slot": "reference signals of each slot, usable only inside their own slot",
    "packet": "training symbols of each packet (preamble, midambles): the estimate is held over the packet",
    "differential": "no channel estimate: each symbol is detected against the previous one",
}

#: The estimators a receiver may use (``rules.estimator``), in words.
ESTIMATOR_NAMES = {"lmmse": "LMMSE", "linear": "least squares and linear interpolation"}


def allowance_text(scope: str, estimator: str, lookahead: int, memory: int, max_pilot_symbols: int) -> str:
    """What the receiver may use to estimate the channel of a data symbol, in words (reports and the note).

    It follows :func:`schedule`: the look-ahead and memory bound only a stream's pilots.

    Examples
    --------
    >>> allowance_text("stream", "lmmse", 3, 7, 4)
    'LMMSE from at most 4 pilot-bearing symbols, up to 7 symbols back and 3 ahead'
    """
    if scope == "differential":
        return "no estimate: each symbol is detected against the previous one"
    how = f"{ESTIMATOR_NAMES.get(estimator, estimator)} from at most {max_pilot_symbols} pilot-bearing symbols"
    if scope == "stream":
        return f"{how}, up to {memory} symbols back and {lookahead} ahead"
    if scope == "slot":
        return f"{how} of the symbol's own slot"
    return f"{ESTIMATOR_NAMES.get(estimator, estimator)} from the packet's latest training block, averaged and held"


#: Bits of a pilot-symbol mask: masks are held in int64 arrays and grouped through float64 tables, which
#: hold whole numbers exactly up to 2^53.
MAX_PATTERN_BITS = 53


def mask_from_symbols(symbols) -> int:
    """Bit mask of the given pilot-bearing symbols (indices within the period).

    Examples
    --------
    >>> mask_from_symbols([0, 4])
    17
    """
    mask = 0
    for symbol in symbols:
        mask |= 1 << int(symbol)
    return mask


def symbols_of(mask: int) -> tuple[int, ...]:
    """Indices of the set bits of a mask, ascending.

    Examples
    --------
    >>> symbols_of(17)
    (0, 4)
    """
    mask = int(mask)
    return tuple(bit for bit in range(MAX_PATTERN_BITS) if mask >> bit & 1)


def popcount(mask) -> np.ndarray:
    """Pilot-bearing symbols per period, vectorised over int64 masks."""
    # the bits below MAX_PATTERN_BITS, counted in parallel within each word (SWAR): a few passes, not one per bit
    x = (np.asarray(mask, dtype=np.int64) & ((1 << MAX_PATTERN_BITS) - 1)).astype(np.uint64)
    x = x - ((x >> np.uint64(1)) & np.uint64(0x5555555555555555))
    x = (x & np.uint64(0x3333333333333333)) + ((x >> np.uint64(2)) & np.uint64(0x3333333333333333))
    x = (x + (x >> np.uint64(4))) & np.uint64(0x0F0F0F0F0F0F0F0F)
    for shift in (8, 16, 32):  # the bytes' counts summed into the lowest byte (no carry: each is at most 8)
        x = x + (x >> np.uint64(shift))
    return np.asarray(x & np.uint64(0x7F), dtype=np.int64)


def max_gap(mask, period) -> np.ndarray:
    """Largest distance in symbols between successive pilot-bearing symbols of the repeated pattern.

    The pattern is taken as repeating every ``period`` symbols (also across
    slots and packets: the rule of 2-D sampling judges the density, not the
    scope). A single pilot-bearing symbol per period gives ``period``. This is
    the time spacing D_t of the lattice that judges the pattern's sampling
    (``numerology.pilots.aliasing_scale``); for an exact lattice it is its D_t.

    Examples
    --------
    >>> int(max_gap(17, 7))  # LTE port 0: symbols 0 and 4 of 7, gaps 4 and 3
    4
    >>> int(max_gap(1 << 2 | 1 << 11, 14))  # NR DM-RS at 2 and 11: gaps 9 and 5
    9
    """
    mask = np.asarray(mask, dtype=np.int64)
    period = np.asarray(period, dtype=np.int64)
    if mask.ndim == 0 and period.ndim == 0:  # one pattern (a design's check): plain integers
        bits = [bit for bit in symbols_of(int(mask)) if bit < period]
        gaps = [b - a for a, b in zip(bits, bits[1:])]
        return np.int64(max(max(gaps, default=0), bits[0] + int(period) - bits[-1]) if bits else max(int(period), 0))
    mask, period = np.broadcast_arrays(mask, period)
    first = np.full(mask.shape, -1, dtype=np.int64)
    last = np.full(mask.shape, -1, dtype=np.int64)
    gap = np.zeros(mask.shape, dtype=np.int64)
    for bit in range(MAX_PATTERN_BITS):
        on = ((mask >> bit) & 1).astype(bool) & (bit < period)
        gap = np.where(on & (last >= 0), np.maximum(gap, bit - last), gap)
        first = np.where(on & (first < 0), bit, first)
        last = np.where(on, bit, last)
    wrap = np.where(first >= 0, first + period - last, period)
    return np.maximum(gap, wrap)


def pilot_fraction(mask, period, freq_spacing, data_shared) -> np.ndarray:
    """Fraction of used resource elements that carry no data because of the pilots.

    ``m / (P D_f)`` when data shares the pilot-bearing symbols, ``m / P``
    when those symbols carry no data (m pilot-bearing symbols per period P).

    Examples
    --------
    >>> float(pilot_fraction(1, 1, 12, True))  # DVB-T scattered pilots: 1/12
    0.08333333333333333
    >>> round(float(pilot_fraction(1 << 2 | 1 << 11, 14, 2, False)), 4)  # NR DM-RS, no data beside it
    0.1429
    """
    m = popcount(mask).astype(float)
    period = np.asarray(period, dtype=float)
    per_symbol = np.where(np.asarray(data_shared, dtype=bool), 1.0 / np.asarray(freq_spacing, dtype=float), 1.0)
    return m * per_symbol / period


def evenly_spread(count: int, slot: int) -> int:
    """Mask of ``count`` pilot-bearing symbols spread evenly over a slot of ``slot`` symbols.

    Symbol ``round((j + 1/2) slot / count - 1/2)`` for j = 0 .. count - 1: the
    pilots sit in the middle of equal parts of the slot, so that no data
    symbol is far from a pilot inside the slot.

    Examples
    --------
    >>> symbols_of(evenly_spread(2, 14))
    (3, 10)
    >>> symbols_of(evenly_spread(1, 7))
    (3,)
    """
    if not 1 <= count <= slot:
        raise ValueError(f"count must be between 1 and the slot length {slot}, got {count}")
    positions = {int(math.floor((j + 0.5) * slot / count - 0.5 + 0.5)) for j in range(count)}
    return mask_from_symbols(sorted(positions))


@dataclass(frozen=True)
class Target:
    """One data-bearing symbol of the evaluation span and the pilots usable for it.

    ``pilot_lags`` are the pilot-bearing symbols the receiver may use, in
    symbols relative to the target (negative: earlier); ``pilot_offsets`` the
    comb offset of each (subcarriers). ``data_offset`` is -1 when every used
    subcarrier of the target carries data, else the comb offset of the
    target's own pilots (its data are the other subcarriers).
    """

    symbol: int
    data_offset: int
    pilot_lags: tuple[int, ...]
    pilot_offsets: tuple[int, ...]


@dataclass(frozen=True)
class Schedule:
    """The data symbols of one evaluation span (a slot, a packet or a pattern period), each with its pilots."""

    scope: str
    freq_spacing: int
    targets: tuple[Target, ...]
    span: int  # symbols in the span

    @cached_property
    def comb_offsets(self) -> tuple[int, ...]:
        """The distinct comb offsets of the pilots the targets use, ascending (more than one: staggered)."""
        return tuple(sorted({o for t in self.targets for o in t.pilot_offsets}))


def _offset(j: int, shift: int, freq_spacing: int) -> int:
    return (j * shift) % freq_spacing


def _pilot_index(t: int, mask_bits: tuple[int, ...], period: int) -> int | None:
    """Global index j of the pilot-bearing symbol at stream time t (None if t carries no pilots)."""
    per, r = divmod(t, period)
    if r not in mask_bits:
        return None
    return per * len(mask_bits) + mask_bits.index(r)


def schedule(scope: str, mask: int, period: int, shift: int, freq_spacing: int, slot: int, data_shared: bool,
             lookahead: int, memory: int, max_pilot_symbols: int) -> Schedule:
    """The data symbols of one evaluation span and the pilots a receiver may use for each.

    Parameters
    ----------
    scope : {"stream", "slot", "packet"}
        See the module docstring (``differential`` has no pilots to schedule).
    mask, period, shift, freq_spacing : int
        The pattern.
    slot : int
        Symbols per slot (``slot`` scope: the period; ``packet``: the packet length).
    data_shared : bool
        Whether a pilot-bearing symbol carries data on its other subcarriers.
    lookahead : int
        Symbols after the data symbol whose pilots the receiver may still use
        (``stream``; a slot is decoded whole, a packet's training is held).
    memory : int
        Symbols before the data symbol whose pilots the receiver may use (``stream``).
    max_pilot_symbols : int
        At most this many usable pilot-bearing symbols, the nearest in time
        (earlier first on ties), enter the estimate of one data symbol.

    Returns
    -------
    Schedule
        For ``stream`` the span is one full period of the pattern (the comb
        offsets included), for ``slot`` the slot, for ``packet`` the packet.

    Examples
    --------
    LTE port 0 with a look-ahead of 3 symbols: symbol 1 uses the pilots of
    symbols 0 and 4 (and those of the previous slot within memory):

    >>> s = schedule("stream", 17, 7, 3, 6, 7, True, 3, 7, 6)
    >>> s.span, s.targets[1].pilot_lags, s.targets[1].pilot_offsets
    (7, (-4, -1, 3), (3, 0, 3))
    """
    bits = tuple(b for b in symbols_of(mask) if b < period)
    if not bits:
        raise ValueError("the pattern has no pilot-bearing symbol within its period")
    targets = []
    if scope == "stream":
        m = len(bits)
        cycle = freq_spacing // math.gcd(m * shift % freq_spacing or freq_spacing, freq_spacing)
        span = period * cycle
        for n in range(span):
            usable = []
            for t in range(n - memory, n + lookahead + 1):
                j = _pilot_index(t, bits, period)
                if j is not None:
                    usable.append((t - n, _offset(j, shift, freq_spacing)))
            targets.append(_target(n, _pilot_index(n, bits, period), shift, freq_spacing, data_shared, usable,
                                   max_pilot_symbols))
        return Schedule(scope, freq_spacing, tuple(t for t in targets if t is not None), span)
    if scope not in ("slot", "packet"):
        raise ValueError(f"scope {scope!r} has no pilot schedule")
    pilots = [t for t in range(slot) if (t % period) in bits]
    index = {t: j for j, t in enumerate(pilots)}
    blocks = _runs(pilots)
    for n in range(slot):
        if scope == "slot":
            usable = [(t - n, _offset(index[t], shift, freq_spacing)) for t in pilots]
        else:  # the latest training block, averaged and held: all its symbols count at its last symbol
            started = [block for block in blocks if block[0] <= n]
            block = started[-1] if started else []
            usable = [(block[-1] - n, _offset(index[t], shift, freq_spacing)) for t in block]
        targets.append(_target(n, index.get(n), shift, freq_spacing, data_shared, usable, max_pilot_symbols))
    return Schedule(scope, freq_spacing, tuple(t for t in targets if t is not None), slot)


def _runs(symbols):
    """Runs of consecutive symbol indices: [[0, 1], [64, 65]] for [0, 1, 64, 65]."""
    runs = []
    for t in symbols:
        if runs and t == runs[-1][-1] + 1:
            runs[-1].append(t)
        else:
            runs.append([t])
    return runs


def _target(n, pilot_j, shift, freq_spacing, data_shared, usable, max_pilot_symbols):
    """A Target for symbol n, or None when it carries no data."""
    if pilot_j is not None and (not data_shared or freq_spacing == 1):
        return None  # a pilot-bearing symbol without data
    data_offset = -1 if pilot_j is None else _offset(pilot_j, shift, freq_spacing)
    usable = sorted(usable, key=lambda lag_offset: (abs(lag_offset[0]), lag_offset[0]))[:max_pilot_symbols]
    usable.sort()
    return Target(n, data_offset, tuple(lag for lag, _ in usable), tuple(offset for _, offset in usable))
