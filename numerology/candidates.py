"""The candidate space and its analytic pruning.

Candidates are built in the order the physics allows pruning:

1. the subcarrier-spacing **window** (``numerology.spacing``): every rule
   evaluated on a *relaxed* design for each spacing (the shortest cyclic
   prefix that covers the delay, no pilot overhead, the densest pilots for
   the aliasing rule, the shortest slot, the SINR without estimation error or
   echoes). Each relaxed margin bounds the margin of every real design with
   that spacing from above, so a spacing outside the window can never pass;
2. FFT sizes and sample rates for each spacing in the family and window;
3. cyclic prefixes as whole samples from the shortest that covers the delay;
4. pilot arrangements (``numerology.arrangement``) up to the aliasing limit.

All functions here are pure and vectorised over arrays of candidates.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import arrangement, link
from .arrangement import SCOPE_CODE
from .design import DesignArrays
from .environment import Environment
from .requirements import Requirements
from .spacing import (Window, account_range, densest_pilots_alias_scale, relaxed_margins,  # noqa: F401 (re-exported)
                      spacing_window)

#: Cyclic prefixes tried, as multiples of the shortest that covers the delay.
CP_FACTORS = (1.0, 1.25, 1.5, 2.0, 3.0, 4.0)
#: Largest oversampling of the channel bandwidth by the sample rate (sizes beyond twice the smallest
#: usable FFT are dropped as well).
MAX_OVERSAMPLING = 4.0
#: Steps per octave of the finer lattice base x 2^(k/16) that the automatic family uses where the rules
#: allow no spacing base x 2^mu.
AUTO_STEPS_PER_OCTAVE = 16


# --- families --------------------------------------------------------------


def spacing_family(req: Requirements, environment: Environment | None = None, ignore=()) -> np.ndarray:
    """The subcarrier spacings the search may use (Hz), ascending.

    The automatic family (``search.spacing_family = "auto"``) follows the
    spacings the rules allow (those where every relaxed margin of
    ``numerology.spacing`` passes, the rules in ``ignore`` left out): the
    scalable family base x 2^mu when one of its spacings is allowed (or none
    is allowed anywhere, or no ``environment`` is given), else the allowed
    points of the finer lattice base x 2^(k/16) (a broadcast or acoustic
    window between two members of the cellular family, or beyond them), every
    second, fourth, ... point where more than ``search.spacing_steps`` are
    allowed. The lattice does not depend on the window's edges, so a spacing
    that stays allowed stays in the family.
    """
    return family_allowed(req, environment, ignore)[0]


def family_allowed(req: Requirements, environment: Environment | None = None, ignore=()):
    """(:func:`spacing_family`, where its relaxed margins all pass or None where they were not worked out).

    The mask comes free when the automatic family had to ask the rules (the scalable family, allowed
    somewhere); a caller that needs it then does not ask them again.
    """
    search = req.search
    if search.spacing_family == "auto":
        scalable = _scalable(req)
        if environment is None:
            return scalable, None
        allowed = _allowed(scalable, environment, req, ignore)
        if allowed.any():
            return scalable, allowed
        low, high = account_range(req)
        step = 1.0 / AUTO_STEPS_PER_OCTAVE
        base = search.spacing_base_hz
        k = np.arange(np.ceil(np.log2(low / base) / step), np.floor(np.log2(high / base) / step) + 1)
        lattice = base * 2.0 ** (k * step)
        fine = _allowed(lattice, environment, req, ignore)
        if not fine.any():
            return scalable, allowed
        k = k[fine]
        # At most spacing_steps spacings; a stride of a power of two keeps the points of a wider window's
        # family that a narrower window still allows.
        stride = 2 ** max(0, int(np.ceil(np.log2(k.size / search.spacing_steps))))
        keep = k % stride == 0
        return lattice[fine][keep], np.ones(int(np.count_nonzero(keep)), dtype=bool)
    if search.spacing_family == "scalable":
        return _scalable(req), None
    if search.spacing_family == "range":
        return np.geomspace(search.spacing_min_hz, search.spacing_max_hz, search.spacing_steps), None
    return np.unique(np.asarray(search.spacings_hz, dtype=float)), None


def _scalable(req: Requirements) -> np.ndarray:
    low, high = req.search.spacing_exponents
    return req.search.spacing_base_hz * 2.0 ** np.arange(low, high + 1)


def _allowed(spacings_hz, environment: Environment, req: Requirements, ignore=()) -> np.ndarray:
    """Where every relaxed margin passes (a NaN margin fails)."""
    margins = relaxed_margins(spacings_hz, environment, req, ignore)
    return np.all([m >= 0 for m in margins.values()], axis=0) if margins else np.ones(np.shape(spacings_hz), bool)


def smooth_numbers(low: int, high: int) -> np.ndarray:
    """Integers 2^a 3^b 5^c in [low, high], ascending (FFT-friendly sizes)."""
    out = []
    p2 = 1
    while p2 <= high:
        p3 = p2
        while p3 <= high:
            p5 = p3
            while p5 <= high:
                if p5 >= low:
                    out.append(p5)
                p5 *= 5
            p3 *= 3
        p2 *= 2
    return np.array(sorted(out), dtype=np.int64)


def fft_family(req: Requirements) -> np.ndarray:
    """The FFT sizes the search may use, ascending."""
    low, high = req.search.min_fft_size, req.search.max_fft_size
    if req.search.fft_sizes == "smooth":
        return smooth_numbers(low, high)
    powers = 2 ** np.arange(0, 31, dtype=np.int64)
    return powers[(powers >= low) & (powers <= high)]


@dataclass(frozen=True)
class Arrangements:
    """Pilot arrangements of the search space, one entry per arrangement (arrays).

    ``slot`` is the slot length an arrangement belongs to (slot and packet
    scopes), or -1 for stream pilots, which fit any slot. ``time`` is the
    largest gap between pilot-bearing symbols (the D_t of the lattice that
    judges the sampling).
    """

    scope: np.ndarray
    freq: np.ndarray
    time: np.ndarray
    shift: np.ndarray
    symbols: np.ndarray
    period: np.ndarray
    shared: np.ndarray
    slot: np.ndarray

    @property
    def size(self) -> int:
        return int(self.freq.size)

    def take(self, index) -> "Arrangements":
        return Arrangements(*(getattr(self, k)[index] for k in self.__dataclass_fields__))


def _combs(req: Requirements):
    """(D_f, shift) pairs: rectangular combs (shift 0) and staggered ones.

    Staggered combs move by D_f/2, D_f/3 or D_f/4 subcarriers per pilot-bearing
    symbol where that is a whole number (DVB-T: D_f = 12, shift 3; EN 300 744
    sect. 4.5.3; LTE cell reference signals: D_f = 6, shift 3).
    """
    f = np.arange(1, req.search.max_pilot_freq_spacing + 1)
    patterns = []
    if "rectangular" in req.search.pilot_patterns:
        patterns.append(np.stack([f, np.zeros_like(f)], axis=1))
    if "staggered" in req.search.pilot_patterns:
        for divisor in (2, 3, 4):
            ok = (f % divisor == 0) & (f // divisor > 0) & (f > 1)
            patterns.append(np.stack([f[ok], f[ok] // divisor], axis=1))
    combs = np.unique(np.concatenate(patterns), axis=0) if patterns else np.zeros((0, 2), dtype=np.int64)
    return combs[:, 0], combs[:, 1]


def pilot_arrangements(req: Requirements) -> Arrangements:
    """Every pilot arrangement of the search space (``search.pilot_scopes``).

    * ``stream``: lattices ``i (D_f, 0) + j (s, D_t)`` with D_t up to
      ``search.max_pilot_time_spacing``, for any slot;
    * ``slot``: for each slot length (up to 53 symbols), ``m`` pilot-bearing
      symbols (``search.pilot_symbols_per_slot``) spread evenly over the slot
      (``arrangement.evenly_spread``), a comb of every D_f-th subcarrier, data
      on the other subcarriers;
    * ``packet``: one or two full-band training symbols at the start of each
      packet (a slot), without data beside them, held over the packet or
      repeated every half or quarter packet (midambles).
    """
    d_f, shift = _combs(req)
    scopes = req.search.pilot_scopes
    slots = [int(n) for n in req.search.symbols_per_slot]
    rows = []  # (scope, D_f, D_t, shift, mask, period, shared, slot) blocks
    if "stream" in scopes:
        t = np.arange(1, req.search.max_pilot_time_spacing + 1)
        ff, tt = np.repeat(d_f, t.size), np.tile(t, d_f.size)
        ss = np.repeat(shift, t.size)
        one = np.ones_like(ff)
        rows.append((SCOPE_CODE["stream"] * one, ff, tt, ss, one, tt, one, -one))
    if "slot" in scopes:
        for slot in slots:
            if slot > arrangement.MAX_PATTERN_BITS:
                continue
            for count in req.search.pilot_symbols_per_slot:
                if count > slot:
                    continue
                mask = arrangement.evenly_spread(count, slot)
                gap = int(arrangement.max_gap(mask, slot))
                keep = (shift == 0) | (count > 1)  # a staggered comb needs two pilot-bearing symbols
                ff, ss = d_f[keep], shift[keep]
                one = np.ones_like(ff)
                rows.append((SCOPE_CODE["slot"] * one, ff, gap * one, ss, mask * one, slot * one, one, slot * one))
    if "packet" in scopes:
        for slot in slots:
            for count in (1, 2):
                for period in sorted({slot, slot // 2, slot // 4}):
                    if period <= count or count >= slot:
                        continue
                    mask = arrangement.mask_from_symbols(range(count))
                    gap = int(arrangement.max_gap(mask, period))
                    rows.append(tuple(np.array([v]) for v in (SCOPE_CODE["packet"], 1, gap, 0, mask, period, 0, slot)))
    if not rows:
        empty = np.zeros(0, dtype=np.int64)
        return Arrangements(*(empty,) * 8)
    columns = [np.concatenate([np.asarray(r[i], dtype=np.int64) for r in rows]) for i in range(8)]
    out = Arrangements(*columns)
    fraction = arrangement.pilot_fraction(out.symbols, out.period, out.freq, out.shared.astype(bool))
    return out.take(np.flatnonzero(fraction < 1))  # a pilot on every resource element leaves none for data


# --- enumeration -----------------------------------------------------------


@dataclass(frozen=True)
class Grid:
    """Flat candidate arrays (one entry per candidate design)."""

    spacing_hz: np.ndarray
    fft_size: np.ndarray
    cp_samples: np.ndarray
    used: np.ndarray
    pilot_f: np.ndarray
    pilot_t: np.ndarray
    pilot_s: np.ndarray
    slot: np.ndarray
    scope: np.ndarray
    symbols: np.ndarray
    period: np.ndarray
    shared: np.ndarray

    @property
    def size(self) -> int:
        return int(self.spacing_hz.size)

    def take(self, index) -> "Grid":
        return Grid(*(getattr(self, k)[index] for k in self.__dataclass_fields__))

    def designs(self) -> DesignArrays:
        n = self.size
        names = np.array([f"candidate {i + 1}" for i in range(n)], dtype=object) if n <= 10_000 else "candidate"
        return DesignArrays(name=names, subcarrier_spacing_hz=self.spacing_hz, fft_size=self.fft_size,
                            cp_samples=self.cp_samples, used_subcarriers=self.used,
                            pilot_freq_spacing=self.pilot_f, pilot_time_spacing=self.pilot_t,
                            pilot_shift=self.pilot_s, symbols_per_slot=self.slot, source="numerology solve",
                            pilot_scope=self.scope, pilot_symbols=self.symbols, pilot_period=self.period,
                            pilot_data_shared=self.shared.astype(bool))

    @classmethod
    def of_numerologies(cls, df, n, cp, used) -> "Grid":
        """Numerologies with their pilots and slot still open (placeholders)."""
        one = np.ones_like(n)
        return cls(df, n, cp, used, one, one, 0 * one, one, 0 * one, one, one, one)

    @classmethod
    def empty(cls) -> "Grid":
        return cls(np.zeros(0), *(np.zeros(0, dtype=np.int64) for _ in range(11)))


def numerologies(spacings_hz, environment: Environment, req: Requirements):
    """(spacing, FFT size, used subcarriers, CP samples) combinations, flat arrays.

    For each spacing: FFT sizes whose sample rate N df covers the channel
    bandwidth without oversampling it more than ``MAX_OVERSAMPLING`` times
    (and, with a base clock, whose rate derives from it); used subcarriers
    fill the usable bandwidth; CP lengths are whole samples from the
    shortest the guard rule accepts (``link.minimal_guard_s``), times
    ``CP_FACTORS``, and the one covering the whole delay plus allowance.
    """
    df = np.asarray(spacings_hz, dtype=float)[:, None]
    n = fft_family(req)[None, :]
    bandwidth = req.radio.bandwidth_hz
    used = np.floor(req.radio.occupancy * bandwidth / df + 1e-9).astype(np.int64)
    rate = n * df
    ok = (rate >= bandwidth * (1 - 1e-12)) & (rate <= MAX_OVERSAMPLING * bandwidth) & (used >= 1) & (used <= n - 1)
    if req.radio.sample_clock_hz is not None:
        ok &= link.clock_mismatch(req)(rate) == 0
    # An FFT more than twice the smallest usable one only costs computation (finer CP steps aside).
    smallest = np.min(np.where(ok, n, np.iinfo(np.int64).max), axis=1, keepdims=True)
    ok &= n <= 2 * smallest
    i, j = np.nonzero(ok)
    df_c, n_c, used_c = df[i, 0], n[0, j], np.broadcast_to(used, ok.shape)[i, j]
    guard_s = link.minimal_guard_s(environment, req, 1.0 / df_c)
    cp_min = np.ceil(guard_s * n_c * df_c - 1e-9).astype(np.int64)
    factors = np.asarray(CP_FACTORS)[None, :]
    cps = np.maximum(np.ceil(cp_min[:, None] * factors - 1e-9).astype(np.int64), cp_min[:, None])
    # and the prefix that covers the whole max excess delay, the strict rule's choice
    covering = np.ceil((environment.max_excess_delay_s + link.cp_allowance_s(req)) * n_c * df_c - 1e-9)
    cps = np.concatenate([cps, np.maximum(covering.astype(np.int64), cp_min)[:, None]], axis=1)
    cps = np.where(cps < n_c[:, None], cps, -1)
    rows = np.repeat(np.arange(df_c.size), cps.shape[1])
    cp_flat = cps.ravel()
    keep = cp_flat >= 0
    # The same CP may come from two factors when cp_min is small: keep each once.
    pairs = np.unique(np.stack([rows[keep], cp_flat[keep]], axis=1), axis=0)
    r, cp = pairs[:, 0], pairs[:, 1]
    df_c, n_c, used_c = df_c[r], n_c[r], used_c[r]
    # A larger FFT with the same spacing and the same CP duration is the same waveform, oversampled: drop it.
    cp_time = np.round(cp / (n_c * df_c) * 1e15).astype(np.int64)  # femtoseconds: exact for equal ratios
    order = np.lexsort((n_c, cp_time, df_c))
    key = np.stack([df_c[order], cp_time[order]], axis=1)
    first = np.ones(order.size, dtype=bool)
    first[1:] = np.any(key[1:] != key[:-1], axis=1)
    keep = np.sort(order[first])
    return df_c[keep], n_c[keep], used_c[keep], cp[keep]


def expand(numerology: Grid, pilots: Arrangements, slots) -> Grid:
    """Cross numerologies with pilot arrangements and slot lengths (numerology-major order).

    Stream pilots (``slot == -1``) are crossed with every slot length; slot
    and packet pilots come with their own slot.
    """
    slots = np.asarray(slots, dtype=np.int64)
    free = pilots.slot < 0
    # one row per (arrangement, slot): stream arrangements repeated over the slots, the others as they are
    a_index = np.concatenate([np.repeat(np.flatnonzero(free), slots.size), np.flatnonzero(~free)])
    a_slot = np.concatenate([np.tile(slots, int(free.sum())), pilots.slot[~free]])
    i = np.repeat(np.arange(numerology.size), a_index.size)
    j = np.tile(a_index, numerology.size)
    k = np.tile(a_slot, numerology.size)
    return Grid(numerology.spacing_hz[i], numerology.fft_size[i], numerology.cp_samples[i], numerology.used[i],
                pilots.freq[j], pilots.time[j], pilots.shift[j], k, pilots.scope[j], pilots.symbols[j],
                pilots.period[j], pilots.shared[j])


def with_slots(grid: Grid, slots) -> Grid:
    """Give every candidate its slot length: those still open (stream pilots, ``slot < 0``) once per slot."""
    slots = np.asarray(slots, dtype=np.int64)
    free = np.flatnonzero(grid.slot < 0)
    fixed = np.flatnonzero(grid.slot >= 0)
    index = np.concatenate([np.repeat(free, slots.size), fixed])
    out = grid.take(index)
    slot = np.concatenate([np.tile(slots, free.size), grid.slot[fixed]])
    out = Grid(*(slot if k == "slot" else getattr(out, k) for k in Grid.__dataclass_fields__))
    order = np.argsort(index, kind="stable")  # back to the input order (numerology-major)
    return out.take(order)


def enumerate_grid(req: Requirements, environment: Environment, spacings_hz) -> Grid:
    """Every candidate design for the given spacings (numerologies x pilot arrangements x slot lengths)."""
    df, n, used, cp = numerologies(spacings_hz, environment, req)
    return expand(Grid.of_numerologies(df, n, cp, used), pilot_arrangements(req), req.search.symbols_per_slot)
