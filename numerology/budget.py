"""Work budgets: the size of a search, a simulation and a sweep, estimated before the work.

A request that is valid by the schema can still ask for more than a machine can
give (a million spacings, ten thousand slot lengths, a hundred thousand taps).
The functions here estimate, from the request alone and in microseconds, how
much a piece of work would build; beyond its budget they raise an
:class:`~numerology.errors.InputError` that says what to narrow and by how much,
instead of letting the run exhaust memory or time. They are called at the edge
(``api.solve``, ``verify.verify``, ``sweep.load_sites``, the file readers) before
the heavy work starts.

The estimates are upper bounds of what the current solver, simulator and sweep
build; the figures per candidate, per simulated sample and per site are measured
(DEVELOPERS.md, "Hardening"). When those internals change, re-measure them here:
nothing else depends on how the estimate is made.

Budgets (README, "Work budgets"):

========================  =============================================================
:data:`MEMORY_BYTES`      estimated working memory of one search, simulation or sweep
:data:`MAX_CANDIDATES`    candidate designs in the unpruned search space
:data:`MAX_SIMULATED_SAMPLES`  time-domain samples simulated by ``verify``
:data:`MAX_SIMULATED_TAP_SAMPLES`  the same times the channel's taps
:data:`MAX_TAPS`          taps of a profile file
:data:`MAX_MCS_ROWS`      entries of a modulation-and-coding table
:data:`MAX_SITES`         sites of one sweep
:data:`MAX_LIST_ITEMS`    entries of each list in a requirement file
:data:`MAX_FILE_BYTES`    size of each kind of input file
========================  =============================================================
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .errors import InputError

#: Working memory one search, simulation or sweep may be estimated to need, bytes.
MEMORY_BYTES = 2 << 30
#: Candidate designs in the unpruned search space (``search.candidates`` of ``solve --json``). The
#: shipped examples hold 1.5e5 to 1.6e7; screening prunes most of them cheaply.
MAX_CANDIDATES = 200_000_000
#: (spacing, FFT size) pairs the search tabulates before it drops unusable FFT sizes.
MAX_SPACING_FFT_PAIRS = 4_000_000
#: Time-domain samples ``verify`` simulates (frames x symbols x FFT size); the default run aims at 2^25.
MAX_SIMULATED_SAMPLES = 1 << 28
#: Samples times channel taps: the simulator spends about 35 ns per tap and sample (measured), so this is
#: two to three minutes of one core.
MAX_SIMULATED_TAP_SAMPLES = 1 << 32
#: Taps of a profile file (the catalogue's longest profile has 23; a sounder trace at 1 ns over 4 us, 4000).
MAX_TAPS = 4096
#: Entries of a modulation-and-coding table (LTE and NR tables have 15 to 32).
MAX_MCS_ROWS = 256
#: Sites of one sweep (and fewer when the per-site memory says so).
MAX_SITES = 1_000_000
#: Entries of each list in a requirement file.
MAX_LIST_ITEMS = {"search.spacings": 4096, "search.symbols_per_slot": 64, "search.spacing_exponents": 2,
                  "search.pilot_patterns": 8, "radio.phase_noise": 256}
#: Size of each kind of input file, bytes.
MAX_FILE_BYTES = {"requirements": 4 << 20, "design": 1 << 20, "profile": 4 << 20, "mcs": 1 << 20,
                  "sites": 256 << 20}

#: Peak memory of the cheap screening stage per candidate, bytes (measured: 550 B with numpy 2.4).
BYTES_PER_CANDIDATE = 600
#: Candidates the solver screens at a time (``solver.CHUNK``), which bounds its working memory.
SCREENED_AT_ONCE = 1 << 20
#: Simulator memory per tap and FFT sample (delays, source indices and phase ramps per tap), bytes.
BYTES_PER_TAP_SAMPLE = 150
#: Simulator memory per time-domain sample of one frame (about 18 complex arrays of a frame), bytes.
BYTES_PER_FRAME_SAMPLE = 300
#: Sweep memory per site: the batch of environments and margins; with --json the document too, bytes.
BYTES_PER_SITE = 3_000
BYTES_PER_SITE_JSON = 8_000
#: Memory of the interpreter and the scientific stack before any work, bytes.
BASE_BYTES = 200 << 20


def _gib(n_bytes: float) -> str:
    return f"{n_bytes / 2**30:.1f} GiB"


def check_list(dotted_key: str, items, place: str) -> None:
    """Refuse a list longer than its budget in :data:`MAX_LIST_ITEMS`, before its entries are read."""
    limit = MAX_LIST_ITEMS.get(dotted_key)
    if limit is not None and isinstance(items, list) and len(items) > limit:
        raise InputError(place, f"has {len(items)} entries; at most {limit} are read (work budget, README): "
                                f"keep the {limit} that matter")


def check_file_size(kind: str, size: int, place: str) -> None:
    """Refuse an input file larger than its budget in :data:`MAX_FILE_BYTES`."""
    limit = MAX_FILE_BYTES[kind]
    if size > limit:
        raise InputError(place, f"is larger than {limit >> 20} MiB, the budget for {_FILE_WORDS[kind]} "
                                f"(README, work budgets); is it the right file?")


_FILE_WORDS = {"requirements": "a requirement file", "design": "a design file", "profile": "a profile file",
               "mcs": "a modulation-and-coding table", "sites": "a sites file"}


def check_rows(kind: str, rows: int, place: str) -> None:
    """Refuse a profile of more than :data:`MAX_TAPS` taps or an MCS table of more than :data:`MAX_MCS_ROWS` rows."""
    if kind == "profile" and rows > MAX_TAPS:
        raise InputError(place, f"has {rows} taps; at most {MAX_TAPS} are read (work budget, README): merge "
                                f"neighbouring taps into bins {math.ceil(rows / MAX_TAPS)} times wider, or drop "
                                "the weakest")
    if kind == "mcs" and rows > MAX_MCS_ROWS:
        raise InputError(place, f"has {rows} entries; at most {MAX_MCS_ROWS} are read (work budget, README): keep "
                                "the entries a receiver would really switch between")


# --- the search ----------------------------------------------------------------------


@dataclass(frozen=True)
class SearchSize:
    """Upper bounds of what a search builds (see :func:`search_size`)."""

    spacings: int
    fft_sizes: int
    numerologies: int  # (spacing, FFT size, CP) combinations, at most
    lattices: int  # stream pilot lattices, each crossed with every slot length
    slots: int
    own_slot: int = 0  # slot and packet arrangements, each with its own slot length

    @property
    def candidates(self) -> int:
        return self.numerologies * (self.lattices * self.slots + self.own_slot)

    @property
    def memory_bytes(self) -> int:
        """The screening's working memory: all numerologies at once, then at most SCREENED_AT_ONCE candidates."""
        screened = min(SCREENED_AT_ONCE, self.candidates)
        return (BASE_BYTES + max(self.numerologies, screened) * BYTES_PER_CANDIDATE
                + self.spacings * self.fft_sizes * 64 + self.lattices * 64)


def search_size(req, spacings: int | None = None) -> SearchSize:
    """What the search of a requirement set would build, counted without building it.

    Parameters
    ----------
    req : Requirements
    spacings : int, optional
        The family's size where it is known (an automatic family, once the environment is derived);
        by default counted from the request (for an automatic family, its largest possible size).

    Returns
    -------
    SearchSize
        The family's spacings and FFT sizes, at most ``spacings x k x len(CP_FACTORS)``
        numerologies (``k``: the most FFT sizes within a factor 2, since the solver keeps
        sizes up to twice the smallest usable one), the pilot lattices and the slot lengths.
    """
    import numpy as np

    from . import candidates as cand

    search = req.search
    if spacings is not None:
        spacings = int(spacings)
    elif search.spacing_family == "scalable":
        spacings = int(search.spacing_exponents[1] - search.spacing_exponents[0] + 1)
    elif search.spacing_family == "auto":  # the scalable family, or at most spacing_steps of the finer lattice
        spacings = max(int(search.spacing_exponents[1] - search.spacing_exponents[0] + 1), int(search.spacing_steps))
    elif search.spacing_family == "range":
        spacings = int(search.spacing_steps)
    else:
        spacings = len(set(search.spacings_hz))
    ffts = cand.fft_family(req)
    within_octave = int(np.max(np.searchsorted(ffts, 2 * ffts, side="right") - np.arange(ffts.size))) if ffts.size else 0
    numerologies = spacings * within_octave * len(cand.CP_FACTORS)
    lattices, own_slot = _arrangement_count(req)
    return SearchSize(spacings, int(ffts.size), numerologies, lattices, len(search.symbols_per_slot), own_slot)


#: Pilot arrangements of the default search (3199 stream lattices, 696 slot arrangements): the scale against
#: which the advice judges how far a search's pilots were widened.
DEFAULT_ARRANGEMENTS = 3895


def _arrangement_count(req) -> tuple[int, int]:
    """Pilot arrangements of ``candidates.pilot_arrangements``, counted without building them (upper bounds):
    (stream lattices, crossed with every slot length; slot and packet arrangements, each with its slot)."""
    from .arrangement import MAX_PATTERN_BITS

    search = req.search
    f_max = search.max_pilot_freq_spacing
    rectangular = f_max if "rectangular" in search.pilot_patterns else 0
    staggered = sum(f_max // divisor for divisor in (2, 3, 4)) if "staggered" in search.pilot_patterns else 0
    lattices = 0
    if "stream" in search.pilot_scopes:  # a pilot on every resource element carries no data
        lattices = (rectangular + staggered) * search.max_pilot_time_spacing - (1 if rectangular else 0)
    own_slot = 0
    for slot in search.symbols_per_slot:
        if "slot" in search.pilot_scopes and slot <= MAX_PATTERN_BITS:
            for count in search.pilot_symbols_per_slot:  # a staggered comb needs two pilot-bearing symbols
                own_slot += 0 if count > slot else (rectangular + staggered if count > 1 else rectangular)
        if "packet" in search.pilot_scopes:
            own_slot += 2 * 3  # one or two training symbols, repeated every packet, half or quarter packet
    return lattices, own_slot


def check_search(req, spacings: int | None = None) -> SearchSize:
    """Refuse a search beyond :data:`MAX_CANDIDATES`, :data:`MAX_SPACING_FFT_PAIRS` or :data:`MEMORY_BYTES`.

    The message names the setting to narrow and the value that would fit.
    """
    size = search_size(req, spacings)
    place = f"{req.path}: search"
    pairs = size.spacings * size.fft_sizes
    if pairs > MAX_SPACING_FFT_PAIRS:
        factor = pairs / MAX_SPACING_FFT_PAIRS
        raise InputError(place, f"{size.spacings} spacings x {size.fft_sizes} FFT sizes = {pairs:.3g} pairs, beyond "
                                f"the budget of {MAX_SPACING_FFT_PAIRS:.3g} (README, work budgets): "
                                f"{_narrowing(req, size, factor, ffts=True)}")
    if size.candidates > MAX_CANDIDATES:
        factor = size.candidates / MAX_CANDIDATES
        raise InputError(place, f"the search space holds up to {size.candidates:.3g} candidate designs, beyond the "
                                f"budget of {MAX_CANDIDATES:.3g} (README, work budgets): "
                                f"{_narrowing(req, size, factor)}")
    if size.memory_bytes > MEMORY_BYTES:
        factor = (size.memory_bytes - BASE_BYTES) / (MEMORY_BYTES - BASE_BYTES)
        raise InputError(place, f"the search would need about {_gib(size.memory_bytes)} of memory, beyond the budget "
                                f"of {_gib(MEMORY_BYTES)} (README, work budgets): {_narrowing(req, size, factor)}")
    return size


def _narrowing(req, size: SearchSize, factor: float, ffts: bool = False) -> str:
    """Advice: the setting whose count is furthest above its default, narrowed by ``factor``."""
    search = req.search
    knobs = []  # (how far above its default, advice, enough on its own)
    fit = max(1, math.floor(size.spacings / factor))
    if search.spacing_family == "scalable":
        advice = f"narrow search.spacing_exponents to at most {fit} exponents (now {size.spacings})"
    elif search.spacing_family in ("range", "auto"):
        advice = f"lower search.spacing_steps from {size.spacings} to at most {fit}"
    else:
        advice = f"list at most {fit} spacings in search.spacings (now {size.spacings})"
    knobs.append((size.spacings / 11, advice, size.spacings >= factor))
    if ffts:
        knobs.append((size.fft_sizes / 10, f"narrow min_fft_size..max_fft_size to about "
                                            f"{max(1, math.floor(size.fft_sizes / factor))} FFT sizes "
                                            f"(now {size.fft_sizes})", size.fft_sizes >= factor))
    else:
        f_max = search.max_pilot_freq_spacing
        knobs.append(((size.lattices + size.own_slot) / DEFAULT_ARRANGEMENTS,
                      f"lower search.max_pilot_freq_spacing from {f_max} to at most "
                                            f"{max(1, math.floor(f_max / factor))} (or max_pilot_time_spacing)",
                      f_max >= factor))
        knobs.append((size.slots / 2, f"list at most {max(1, math.floor(size.slots / factor))} slot lengths in "
                                      f"search.symbols_per_slot (now {size.slots})", size.slots >= factor))
    knobs.sort(key=lambda k: -k[0])
    enough = [advice for _, advice, fits in knobs if fits]
    if enough:
        return enough[0]
    return " and ".join(advice for _, advice, _ in knobs)


# --- the simulation ---------------------------------------------------------------------------


@dataclass(frozen=True)
class SimulationSize:
    frames: int
    symbols: int  # per frame, with the estimator's margins
    fft_size: int
    taps: int

    @property
    def samples(self) -> int:
        return self.frames * self.symbols * self.fft_size

    @property
    def tap_samples(self) -> int:
        return self.samples * max(self.taps, 1)

    @property
    def memory_bytes(self) -> int:
        frame = self.symbols * self.fft_size * BYTES_PER_FRAME_SAMPLE
        from .simulate import BATCH_BYTES

        return BASE_BYTES + self.taps * self.fft_size * BYTES_PER_TAP_SAMPLE + max(frame, BATCH_BYTES)


def simulation_size(design, environment, frames=None, rules=None) -> SimulationSize:
    """What ``verify`` would simulate for a design in an environment (frames: given, or the most a default run
    takes). The frame follows the simulator's layout: the symbols a late echo reaches back, then the arrangement's
    span (a slot or packet; a stream's pattern period with the pilots before and after it that the receiver may
    use, ``rules.estimation_memory`` and ``estimation_lookahead``, their defaults without ``rules``)."""
    import numpy as np

    from . import arrangement
    from .requirements import key
    from .simulate import DIFFERENTIAL_SYMBOLS, RECEIVER_PILOT_SYMBOLS
    from .verify import MAX_FRAMES, MIN_FRAMES, SAMPLE_BUDGET

    lookahead = key("rules.estimation_lookahead").default if rules is None else rules.estimation_lookahead
    memory = key("rules.estimation_memory").default if rules is None else rules.estimation_memory
    n, ncp = design.fft_size, design.cp_samples
    delays = np.asarray(environment.delays_s, dtype=float)[np.asarray(environment.powers) > 0]
    late_s = float(delays.max(initial=0.0) - delays.min(initial=0.0)) - ncp / design.sample_rate_hz
    before = max(0, math.ceil(late_s * design.sample_rate_hz / (n + ncp))) if late_s > 0 else 0
    if design.pilot_scope == "differential":
        symbols = min(max(design.symbols_per_slot, 2), DIFFERENTIAL_SYMBOLS)
    elif design.pilot_scope == "stream":
        plan = arrangement.schedule("stream", design.pilot_symbols, design.pilot_period, design.pilot_shift,
                                    design.pilot_freq_spacing, design.symbols_per_slot, design.pilot_data_shared,
                                    lookahead, memory, RECEIVER_PILOT_SYMBOLS)
        low = min([0] + [t.symbol + min(t.pilot_lags) for t in plan.targets if t.pilot_lags])
        high = max([plan.span - 1] + [t.symbol + max(t.pilot_lags) for t in plan.targets if t.pilot_lags])
        symbols = high - low + 1
    else:
        symbols = design.symbols_per_slot
    symbols += before
    taps = int(np.count_nonzero(np.asarray(environment.powers) > 0))
    if frames is None:
        frames = int(np.clip(SAMPLE_BUDGET // max(symbols * (n + ncp), 1), MIN_FRAMES, MAX_FRAMES))
    return SimulationSize(int(frames), int(symbols), int(n), taps)


def check_simulation(design, environment, frames=None, rules=None) -> SimulationSize:
    """Refuse a simulation beyond :data:`MAX_SIMULATED_SAMPLES` or :data:`MEMORY_BYTES`, saying what would fit."""
    size = simulation_size(design, environment, frames, rules)
    per_frame = size.symbols * size.fft_size
    where = "--frames" if frames is not None else "verify (default frames)"
    if size.samples > MAX_SIMULATED_SAMPLES:
        fit = MAX_SIMULATED_SAMPLES // per_frame
        advice = (f"use --frames {fit} or fewer" if fit >= 2 else
                  "choose a design with a smaller FFT size or shorter slots")
        raise InputError(where, f"{size.frames} frames of {size.symbols} symbols x {size.fft_size} samples are "
                                     f"{size.samples:.3g} samples, beyond the budget of {MAX_SIMULATED_SAMPLES:.3g} "
                                     f"(README, work budgets): {advice}")
    if size.tap_samples > MAX_SIMULATED_TAP_SAMPLES:
        fit = MAX_SIMULATED_TAP_SAMPLES // (per_frame * size.taps)
        advice = (f"use --frames {fit} or fewer, or a profile with fewer taps" if fit >= 2 else
                  f"use a profile with at most {MAX_SIMULATED_TAP_SAMPLES // (2 * per_frame)} taps")
        raise InputError(where, f"{size.frames} frames of {size.symbols} symbols x {size.fft_size} samples "
                                     f"through {size.taps} taps are {size.tap_samples:.3g} tap-samples, beyond the "
                                     f"budget of {MAX_SIMULATED_TAP_SAMPLES:.3g} (README, work budgets): {advice}")
    if size.memory_bytes > MEMORY_BYTES:
        raise InputError(f"design {design.name!r}", f"simulating {size.taps} taps with an FFT of {size.fft_size} "
                                                    f"needs about {_gib(size.memory_bytes)} of memory, beyond the "
                                                    f"budget of {_gib(MEMORY_BYTES)} (README, work budgets): "
                                                    f"use a profile with at most "
                                                    f"{_taps_that_fit(size)} taps or a smaller FFT")
    return size


def _taps_that_fit(size: SimulationSize) -> int:
    from .simulate import BATCH_BYTES

    room = MEMORY_BYTES - BASE_BYTES - max(size.symbols * size.fft_size * BYTES_PER_FRAME_SAMPLE, BATCH_BYTES)
    return max(0, room // (size.fft_size * BYTES_PER_TAP_SAMPLE))


# --- the sweep ---------------------------------------------------------------------------------


def sites_that_fit(with_json: bool = False) -> int:
    """Most sites of one sweep: :data:`MAX_SITES`, fewer when their memory would pass :data:`MEMORY_BYTES`."""
    per_site = BYTES_PER_SITE + (BYTES_PER_SITE_JSON if with_json else 0)
    return min(MAX_SITES, (MEMORY_BYTES - BASE_BYTES) // per_site)


def check_sites(rows: int, place: str, limit: int) -> None:
    """Refuse a sites file of more rows than ``limit`` (see :func:`sites_that_fit`)."""
    if rows > limit:
        parts = math.ceil(rows / limit)
        raise InputError(place, f"has {rows} sites; one sweep takes at most {limit} (work budget, README): split the "
                                f"file into {parts} parts" + ("" if limit == MAX_SITES else
                                                              ", or write --out FILE.csv instead of --json"))
