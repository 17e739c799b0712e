"""The link-quality model: every impairment on one scale, the SINR, the rules.

``evaluate`` takes designs (as :class:`~numerology.design.DesignArrays`), an
:class:`~numerology.environment.Environment` and the requirement set, and
returns an :class:`Evaluation` of arrays: each impairment as a power ratio to
the signal, the effective SINR, the spectral efficiency and net throughput,
and every rule's capacity, demand and margin. ``check`` and ``solve`` both
use exactly this function.

Impairment terms, each relative to the useful signal power:

* ``noise``: 1 / SNR at the edge of coverage;
* ``echo``: power of echoes beyond the cyclic prefix, weighted as in EBU TR
  024 sect. 2.4 (interference over useful part);
* ``doppler``: Doppler inter-carrier interference, exact for the spectrum;
* ``phase_noise``: residual after common-phase correction (Wiener linewidth
  or a measured mask);
* ``frequency_offset``: residual carrier-frequency error, 1 - sinc^2;
* ``estimation``: mean-square error of the pilot-based channel estimate at
  the pilot SINR, for the estimator named in ``rules.estimator``.

The noise and interference terms add as independent noise-like powers (common
practice for OFDM link budgets), N + I = sum of the terms; with the
estimation error E (a fraction of the channel power) the detector sees

    SINR_eff = (1 - E) / (E + N + I)

(the estimate h_hat = h - e with e uncorrelated with h_hat under LMMSE keeps
1 - E of the channel power as useful signal; common practice). The reported
estimation term is E / (1 - E), so that 1 / SINR_eff = E/(1-E) + (N + I)/(1 - E).

``evaluate`` also takes an :class:`~numerology.environment.EnvironmentBatch`
(one environment per site of a sweep or point of a map) and broadcasts the
designs against its shape; ``req.radio.snr_db`` may then be a per-site array.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from . import arrangement, delay, doppler, error_table, estimation, mcs, oscillator, pilots
from .arrangement import SCOPE_CODE, SCOPES
from .design import DesignArrays
from .environment import Environment
from .grouping import distinct_rows, members, remembered
from .requirements import Requirements
from .rules import RULES, Rule, evaluate as evaluate_rule, evaluate_derived, normalised_margin

TERMS = ("noise", "echo", "doppler", "phase_noise", "frequency_offset", "estimation")


@dataclass(frozen=True)
class Evaluation:
    """Arrays over designs (broadcast shape of the inputs)."""

    terms: dict  # term name -> power ratio to the signal (linear)
    sinr_eff: np.ndarray  # linear
    efficiency: np.ndarray  # bit per data resource element
    rate_bps: np.ndarray
    overhead: np.ndarray
    rules: tuple  # the applicable Rule objects, in declaration order
    capacity: dict = field(repr=False, default_factory=dict)
    demand: dict = field(repr=False, default_factory=dict)
    margin: dict = field(default_factory=dict)  # rule name -> margin array (rule's convention)
    normalised: dict = field(repr=False, default_factory=dict)  # rule name -> capacity/demand - 1
    slot_s: np.ndarray = field(repr=False, default=None)  # mean slot duration
    step_margin_db: np.ndarray = field(repr=False, default=None)  # SINR above the threshold of the MCS in use
    goal_margin_db: np.ndarray = field(repr=False, default=None)  # SINR above what the throughput goal needs
    #: True where the estimation error is the comb bound, not the exact error (``evaluate(..., comb_bound=True)``);
    #: None: exact everywhere
    bounded: np.ndarray = field(repr=False, default=None)
    #: How the estimation error was obtained where a table gave part of it (``evaluate(..., tabulate=True)``)
    table: "error_table.Tabulated | None" = field(repr=False, default=None)

    @property
    def sinr_eff_db(self):
        return _sinr_db(self.sinr_eff)

    @property
    def estimation_error(self) -> np.ndarray:
        """The channel-estimation error behind the estimation term (a fraction of the channel power)."""
        term = self.terms["estimation"]
        with np.errstate(invalid="ignore"):
            return np.where(np.isfinite(term), term / (1.0 + term), 1.0)

    @property
    def passed(self) -> np.ndarray:
        """True where every applicable rule passes."""
        ok = np.ones(np.shape(self.sinr_eff), dtype=bool)
        for rule in self.rules:
            ok &= self.margin[rule.name] >= 0
        return ok

    @property
    def worst_normalised(self) -> np.ndarray:
        return np.min(np.stack([self.normalised[r.name] for r in self.rules]), axis=0)

    @property
    def robustness(self) -> np.ndarray:
        """The worst normalised margin of the rules and of the SINR above what the throughput goal needs.

        The SINR margin of the throughput goal, 10^(m/10) - 1 for m dB, counts: a rate margin of 49 % can
        sit 0.2 dB above the modulation step the goal depends on. The ranking by robustness uses this.
        """
        worst = self.worst_normalised
        if self.goal_margin_db is None:
            return worst
        return np.minimum(worst, 10 ** (np.asarray(self.goal_margin_db) / 10) - 1.0)

    @property
    def binding(self) -> np.ndarray:
        """Index (into ``rules``) of the rule with the smallest normalised margin."""
        return np.argmin(np.stack([self.normalised[r.name] for r in self.rules]), axis=0)


def applicable_rules(req: Requirements) -> tuple[Rule, ...]:
    """The rules that apply to this requirement set (goals not set are not rules)."""
    skip = set()
    if req.radio.sample_clock_hz is None:
        skip.add("sample_clock")
    if not req.goals.throughput_bps > 0:
        skip.add("throughput")
    if req.goals.max_latency_s is None:
        skip.add("latency")
    if not req.goals.max_overhead < 1:
        skip.add("overhead")
    if req.rules.efficiency_model == "shannon":
        skip.add("link_closes")
    skip.add("cp_covers_delay" if req.rules.guard_rule == "energy" else "guard_interval")
    return tuple(rule for rule in RULES if rule.name not in skip)


def guard_echo(delays_s, powers, cp_s, useful_symbol_s, allowance_s):
    """Echo interference over useful power with the prefix less the allowance (the guard rule's demand)."""
    return _guard_echo(delay.echo_interference_of(delays_s, powers), cp_s, useful_symbol_s, allowance_s)


def _guard_echo(fractions, cp_s, useful_symbol_s, allowance_s):
    """:func:`guard_echo` of a profile prepared by ``delay.echo_interference_of``."""
    useful, interference = fractions(np.maximum(cp_s - allowance_s, 0.0), useful_symbol_s)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(useful > 0, interference / useful, np.inf)


def minimal_guard_s(environment: Environment, req: Requirements, useful_symbol_s):
    """The shortest cyclic prefix (s) the guard rule accepts, for each useful symbol duration.

    Coverage: the max excess delay plus the allowance. Energy: the allowance
    plus the shortest guard whose echo interference meets the budget (the
    interference only falls as the guard grows: bisection, 60 halvings of
    [0, last tap]).
    """
    t_u = np.asarray(useful_symbol_s, dtype=float)
    allowance = cp_allowance_s(req)
    if req.rules.guard_rule == "coverage":
        return np.broadcast_to(environment.max_excess_delay_s + allowance, t_u.shape).astype(float)
    delays, powers = environment.taps
    budget = 10 ** (req.rules.max_echo_interference_db / 10)
    if np.ndim(delays) != 1:
        return _energy_guard_s(delays, powers, budget, t_u) + allowance
    # One profile: remembered per useful symbol duration (the spacing grids of a diagnosis repeat them).
    known = _GUARD_CACHE.setdefault((np.asarray(delays, float).tobytes(), np.asarray(powers, float).tobytes(),
                                     budget), {})
    if len(_GUARD_CACHE) > 256 or len(known) > 100_000:
        _GUARD_CACHE.clear()
        known = _GUARD_CACHE.setdefault((np.asarray(delays, float).tobytes(), np.asarray(powers, float).tobytes(),
                                         budget), {})
    flat = t_u.ravel().tolist()
    missing = sorted({t for t in flat if t not in known})
    if missing:
        known.update(zip(missing, _energy_guard_s(delays, powers, budget, np.array(missing)).tolist()))
    return np.array([known[t] for t in flat], dtype=float).reshape(t_u.shape) + allowance


#: (profile, budget) -> {useful symbol s: shortest guard s}, within a process.
_GUARD_CACHE: dict = {}


def _energy_guard_s(delays, powers, budget, t_u):
    """The shortest guard whose echo interference meets the budget: bisection, 60 halvings of [0, last tap]."""
    lo = np.zeros(t_u.shape)
    hi = np.full(t_u.shape, float(np.max(delays)) if np.size(delays) else 0.0)
    fractions = delay.echo_interference_of(delays, powers)  # the profile sorted and summed once
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        ok = _guard_echo(fractions, mid, t_u, 0.0) <= budget
        hi = np.where(ok, mid, hi)
        lo = np.where(ok, lo, mid)
    return hi


def cp_allowance_s(req: Requirements) -> float:
    """The CP allowance: given, or 4 sample periods at the channel bandwidth (see ``rules.cp_allowance``)."""
    if req.rules.cp_allowance_s is not None:
        return req.rules.cp_allowance_s
    return 4.0 / req.radio.bandwidth_hz


def mcs_table(req: Requirements):
    if req.rules.mcs_table is not None:
        return req.attached(req.rules.mcs_table, mcs.load_mcs_table)  # read once, when req was loaded
    return mcs.DEFAULT_TABLE


def _sinr_db(sinr):
    """10 log10 of a linear SINR; a zero SINR (a link lost entirely) is -inf dB, without a warning."""
    with np.errstate(divide="ignore"):
        return 10 * np.log10(sinr)


def efficiency_function(req: Requirements):
    """Bits per data resource element as a function of the linear SINR."""
    if req.rules.efficiency_model == "shannon":
        gap_db = req.rules.shannon_gap_db
        return lambda sinr: mcs.shannon_gap_efficiency(_sinr_db(sinr), gap_db)
    table = mcs_table(req)
    return lambda sinr: mcs.spectral_efficiency(_sinr_db(sinr), table)


def step_margin_db(req: Requirements, sinr):
    """SINR above the threshold of the modulation and coding in use, dB (inf for the Shannon-gap model)."""
    if req.rules.efficiency_model == "shannon":
        return np.full(np.shape(sinr), np.inf)
    return np.asarray(mcs.step_margin_db(_sinr_db(sinr), mcs_table(req)), dtype=float)


def goal_margin_db(req: Requirements, sinr, ns):
    """SINR above the least the throughput goal needs with these resources, dB (None without a goal).

    The goal needs ``R_goal T_m / (N_u (1 - pilot_frac))`` bits per data
    element; the table's lowest entry giving that (or the Shannon-gap SINR)
    sets the SINR it needs. A design that cannot meet it at any SINR gets -inf.
    """
    if not req.goals.throughput_bps > 0:
        return None
    with np.errstate(divide="ignore", invalid="ignore"):
        needed = req.goals.throughput_bps * ns["T_m"] / (ns["N_u"] * (1 - ns["pilot_frac"]))
    sinr_db = _sinr_db(sinr)
    if req.rules.efficiency_model == "shannon":
        gap = 10 ** (req.rules.shannon_gap_db / 10)
        with np.errstate(over="ignore"):
            required = 10 * np.log10(gap * (2.0 ** np.asarray(needed, float) - 1.0))
        required = np.where(needed <= mcs.DEFAULT_MAX_EFFICIENCY, required, np.inf)
    else:
        required = mcs.required_sinr_for_db(np.broadcast_to(needed, np.shape(sinr_db)), mcs_table(req))
    return np.asarray(sinr_db - required, dtype=float)


def minimum_sinr(req: Requirements) -> float:
    """Linear SINR below which no modulation and coding works."""
    if req.rules.efficiency_model == "shannon":
        return 0.0  # the Shannon-gap model has no floor (link_closes does not apply)
    return 10 ** (min(e.required_sinr_db for e in mcs_table(req)) / 10)


def clock_mismatch(req: Requirements):
    """Relative distance of a sample rate from a rate made from the base clock by an integer ratio."""
    clock = req.radio.sample_clock_hz
    if clock is None:
        return lambda rate: np.zeros(np.shape(rate))

    def mismatch(rate):
        rate = np.asarray(rate, dtype=float)
        up = rate / clock  # integer multiple of the clock
        down = clock / rate  # integer divisor of the clock
        err_up = np.abs(up - np.maximum(np.round(up), 1)) / np.maximum(np.round(up), 1)
        err_down = np.abs(down - np.maximum(np.round(down), 1)) / np.maximum(np.round(down), 1)
        err = np.minimum(err_up, err_down)
        return np.where(err < 1e-9, 0.0, err)

    return mismatch


def oscillator_terms(req: Requirements, useful_symbol_s, subcarrier_spacing_hz):
    """(phase-noise ICI, frequency-offset ICI) at the given numerology."""
    radio = req.radio
    if radio.phase_noise is not None:
        offsets, levels = radio.phase_noise
        # The mask integral is the costly one: once per distinct symbol duration.
        pn = _on_distinct(lambda t: _mask_ici(offsets, levels, t), useful_symbol_s)
    else:  # a closed form: cheap, and the linewidth may be an array (stretch limits)
        pn = np.asarray(oscillator.wiener_phase_noise_ici(radio.oscillator_linewidth_hz, useful_symbol_s), float)
    # a closed form: cheap, and the offset may be an array (one per site of a sweep)
    cfo = np.asarray(oscillator.cfo_ici(radio.frequency_error_hz, subcarrier_spacing_hz), dtype=float)
    return np.asarray(pn, dtype=float), np.asarray(cfo, dtype=float)


#: Lowest pilot SINR the estimators are given (-120 dB: an error of 1 to 1e-11).
PILOT_SINR_FLOOR = 1e-12


def estimation_floor(designs: DesignArrays, environment: Environment, req: Requirements, shape):
    """A lower bound of each design's estimation error, far cheaper than the error itself (for screening).

    For every data symbol of the design's span, a genie that knew the channel
    without noise on every subcarrier of the pilot-bearing symbols the
    receiver may use still interpolates in time
    (``estimation.interpolation_floor``), with the line of sight and the
    scattered part weighted by their power. The exact error
    (:func:`estimation_error`, any estimator) averages over the span's data
    elements; the bound averages the genie's error over its data symbols,
    counting those that carry pilots of their own (their genie error is
    about zero; their data elements at most a full symbol) as error-free
    full symbols, which can only lower the average. So the SINR it gives
    bounds the exact SINR from above. It depends on the arrangement's
    pilot-bearing symbols only (not on the comb), so many candidates share
    it; the pilot SINR does not enter (a noiseless genie). Differential
    detection: 0.

    Returns
    -------
    array of the evaluation's shape
    """
    delays, _ = environment.taps
    batch = np.ndim(delays) > 1
    site_index = np.arange(int(np.prod(environment.shape))).reshape(environment.shape) if batch else np.zeros(())
    radio = req.radio
    stream = np.asarray(designs.pilot_scope) == SCOPE_CODE["stream"]
    columns = np.broadcast_arrays(  # the time pattern only: a stream's slot does not change its pilots
        designs.pilot_scope, designs.pilot_symbols, designs.pilot_period, np.where(stream, 0, designs.symbols_per_slot),
        np.asarray(designs.pilot_data_shared, dtype=bool) & (np.asarray(designs.pilot_freq_spacing) > 1),
        designs.symbol_s, site_index, radio.oscillator_linewidth_hz, radio.frequency_error_hz,
        np.broadcast_to(0.0, shape))
    unique, inverse = _distinct_columns(columns)
    doppler_all = np.broadcast_to(environment.max_doppler_hz, environment.shape if batch else ()).ravel()
    los_all = np.broadcast_to(environment.los_fraction, environment.shape if batch else ()).ravel()
    site = unique[:, 6].astype(np.int64)
    params = np.stack([unique[:, 5], doppler_all[site], los_all[site], unique[:, 7], unique[:, 8]], axis=1)
    patterns, pattern_of = _unique_rows(unique[:, :5])
    rules = req.rules
    # every (distinct row, data symbol without pilots of its own): the target's pilot lags, and its weight
    pair_row, pair_lags, pair_weight = [], [], []
    of_pattern = members(pattern_of, patterns.shape[0])
    for p, key in enumerate(patterns):
        scope, mask, period, slot, shared = (int(v) for v in key)
        if SCOPES[scope] == "differential":
            continue
        lag_ids, symbols = _floor_targets(scope, mask, period, slot, bool(shared), rules.estimation_lookahead,
                                          rules.estimation_memory)
        rows = of_pattern[p]
        pair_row.append(np.repeat(rows, lag_ids.size))
        pair_lags.append(np.tile(lag_ids, rows.size))
        pair_weight.append(np.full(rows.size * lag_ids.size, 1.0 / symbols))
    floor = np.zeros(unique.shape[0])
    if pair_row:
        pair_row, pair_lags, pair_weight = (np.concatenate(v) for v in (pair_row, pair_lags, pair_weight))
        keys = np.column_stack([pair_lags, params[pair_row]])
        distinct, first = distinct_rows(keys)
        first_keys = keys[first]
        per_distinct = np.empty(first.size)
        mask = None if radio.phase_noise is None else (tuple(radio.phase_noise[0]), tuple(radio.phase_noise[1]))
        count = np.array([len(lags) for lags in _FLOOR_LAGS])[first_keys[:, 0].astype(np.int64)]
        for u in np.unique(count):  # cases with as many pilot symbols at once
            which = np.flatnonzero(count == u)
            k = first_keys[which]
            lags = np.array([_FLOOR_LAGS[i] for i in k[:, 0].astype(np.int64)], dtype=float).reshape(which.size, u)
            kinds = estimation.interpolation_floor(lags, k[:, 1], k[:, 2], environment.doppler_spectrum, k[:, 3],
                                                   (k[:, 4], k[:, 5], mask))
            per_distinct[which] = (1.0 - k[:, 3]) * kinds[:, 0] + k[:, 3] * kinds[:, 1]
        floor = np.bincount(pair_row, weights=pair_weight * per_distinct[distinct], minlength=unique.shape[0])
    return floor[inverse].reshape(shape)


#: Pilot-lag tuples met by :func:`_floor_targets`, numbered in order of first appearance within a process.
_FLOOR_LAGS: list = []
_FLOOR_LAG_ID: dict = {}


@lru_cache(maxsize=4096)
def _floor_targets(scope, mask, period, slot, shared, lookahead, memory):
    """The lag-tuple numbers of the data symbols without pilots of their own, and the data symbols' count.

    The comb does not move a pilot-bearing symbol in time, so a comb of 2 subcarriers stands for every
    comb (1 when pilot-bearing symbols carry no data); a stream's lags repeat every period, so one period
    stands for its span.
    """
    plan = _schedule(SCOPES[scope], mask, period, 0, 2 if shared else 1, slot, shared, lookahead, memory)
    ids = [_lag_id(t.pilot_lags) for t in plan.targets if t.data_offset < 0]
    return np.array(ids, dtype=np.int64), max(len(plan.targets), 1)


def _lag_id(lags) -> int:
    if lags not in _FLOOR_LAG_ID:
        _FLOOR_LAG_ID[lags] = len(_FLOOR_LAGS)
        _FLOOR_LAGS.append(lags)
    return _FLOOR_LAG_ID[lags]


#: Structures (arrangement x numerology x channel) whose estimation weights are kept within a process.
_WEIGHTS_CACHE: dict = {}
_WEIGHTS_CACHE_SIZE = 20_000


def estimation_error(designs: DesignArrays, environment: Environment, req: Requirements, pilot_sinr,
                     comb_bound: bool = False):
    """Mean channel-estimation error of each design (a fraction of the channel power).

    The receiver uses the pilots of the design's arrangement that its
    allowance (``rules.estimation_lookahead``, ``rules.estimation_memory``)
    makes available, with the estimator ``rules.estimator``
    (``numerology.estimation``). Each distinct structure (arrangement,
    numerology, channel) is decomposed once; the pilot SINR (times the
    pilot boost) then enters as one noise level per design.

    With an :class:`~numerology.environment.EnvironmentBatch` every site has
    its own channel (taps on an extra last axis).

    ``comb_bound``: an arrangement whose pilot symbols sit on different combs
    gets a lower bound of its LMMSE error instead (``estimation.staggered_bound``,
    a few times cheaper; the solver's refinement before exact evaluation).
    Other arrangements or the linear estimator: the exact error.
    """
    return _estimation_error(designs, environment, req, pilot_sinr, comb_bound)[0]


def _estimation_error(designs: DesignArrays, environment: Environment, req: Requirements, pilot_sinr,
                      comb_bound: bool = False, tabulate: bool = False):
    """(:func:`estimation_error`, True for each design whose error is the comb bound rather than exact,
    the ``error_table.Tabulated`` account when ``tabulate`` (else None)).

    ``tabulate`` (an environment batch, no comb bound): sites sharing a channel, or stretching one profile
    shape, take their error from a table over the Doppler and the stretch (``numerology.error_table``).
    """
    delays, powers = environment.taps
    batch = np.ndim(delays) > 1
    shape = np.broadcast_shapes(designs.shape, np.shape(pilot_sinr), np.shape(environment.max_doppler_hz))
    if batch:
        site_index = np.arange(int(np.prod(environment.shape))).reshape(environment.shape)
    else:
        site_index = np.zeros(())
    radio = req.radio
    columns = np.broadcast_arrays(
        designs.pilot_scope, designs.pilot_freq_spacing, designs.pilot_shift, designs.pilot_symbols,
        designs.pilot_period, designs.symbols_per_slot, designs.pilot_data_shared, designs.subcarrier_spacing_hz,
        designs.used_subcarriers, designs.symbol_s, site_index, np.broadcast_to(0.0, shape),
        radio.oscillator_linewidth_hz, radio.frequency_error_hz)
    unique, inverse = _distinct_columns(columns)
    boost = np.broadcast_to(10 ** (np.asarray(designs.pilot_boost_db, float) / 10), shape).ravel()
    noise = 1.0 / (np.broadcast_to(pilot_sinr, shape).ravel() * boost)
    scope_of = np.broadcast_to(designs.pilot_scope, shape).ravel()
    noise = np.where(scope_of == SCOPE_CODE["differential"], 1.0 / np.broadcast_to(pilot_sinr, shape).ravel(), noise)
    out = np.empty(noise.size)
    flat_delays = np.reshape(delays, (-1, np.shape(delays)[-1])) if batch else np.asarray(delays, float)[None, :]
    flat_powers = np.reshape(powers, (-1, np.shape(powers)[-1])) if batch else np.asarray(powers, float)[None, :]
    doppler_hz = np.broadcast_to(environment.max_doppler_hz, environment.shape if batch else ()).ravel()
    los_all = np.broadcast_to(environment.los_fraction, environment.shape if batch else ()).ravel()
    rules = req.rules
    mask = None if radio.phase_noise is None else (tuple(radio.phase_noise[0]), tuple(radio.phase_noise[1]))
    of_row = members(inverse, unique.shape[0])
    tabled, account, guard = np.zeros(unique.shape[0], dtype=bool), None, np.full(noise.size, np.nan)
    if tabulate and batch and not comb_bound:
        family = np.broadcast_to(environment.shape_id, environment.shape).ravel()
        scale = np.broadcast_to(environment.delay_scale, environment.shape).ravel()
        tabled, account = _tabulated(unique, of_row, noise, out, guard, flat_delays, flat_powers, doppler_hz,
                                     los_all, family, scale, environment.doppler_spectrum, rules, mask)
    rows = np.flatnonzero(~tabled)
    weights, bounded = _structure_weights(unique[rows], flat_delays, flat_powers, doppler_hz, los_all,
                                          environment.doppler_spectrum, rules, mask, comb_bound)
    # every structure's levels at once (the coupled LMMSE per noise level, spectral weights stacked)
    for row, error in zip(rows, estimation.estimation_errors([(w, noise[of_row[row]])
                                                              for w, row in zip(weights, rows)])):
        out[of_row[row]] = error
    flags = np.zeros(unique.shape[0], dtype=bool)
    flags[rows] = bounded
    if account is not None:
        interpolated = tabled[inverse]
        account = error_table.Tabulated(account, interpolated.reshape(shape),
                                        np.where(interpolated, guard, np.nan).reshape(shape)) if account.nodes else None
    return out.reshape(shape), flags[inverse].reshape(shape), account


#: Column of the site index in ``_estimation_error``'s table of structures.
_SITE_COLUMN = 10


def _tabulated(unique, of_row, noise, out, guard, flat_delays, flat_powers, doppler_hz, los_all, family_all,
               scale_all, spectrum, rules, mask):
    """The structures (rows of ``unique``) whose error a table gives (``numerology.error_table``): (mask, report).

    Rows that differ only in their site form a group when their sites are of one channel family: a profile
    shape that each site stretches by its own delay factor (``family_all`` >= 0, the sweep's shapes,
    ``scale_all`` the factors), or else the sites sharing one channel exactly (taps and line of sight).
    A family whose sites are cheaper to tabulate channel by channel (few distinct factors, each of many
    Dopplers: rounded delay spreads; :func:`_few_factors`) is grouped by channel instead, a table over the
    Doppler per channel. A group with many distinct (factor, Doppler) points gets a table
    over them, its nodes evaluated exactly as structures of their own (the eigen form: every noise level in
    closed form) and at most as many as the group has distinct points. The errors go into ``out`` and their
    guards (``error_table.tabulate``) into ``guard``; a row is in the mask when all its elements were
    interpolated.
    """
    site = unique[:, _SITE_COLUMN].astype(np.int64)
    channel, _ = distinct_rows(np.ascontiguousarray(np.concatenate(
        [flat_delays * (flat_powers > 0), flat_powers, np.reshape(los_all, (-1, 1))], axis=1)))
    stretched = family_all >= 0
    family = np.where(stretched, family_all, family_all.max(initial=-1) + 1 + channel)
    scale = np.where(stretched, scale_all, 1.0)
    key = unique.copy()
    key[:, _SITE_COLUMN] = family[site]
    group, first = distinct_rows(np.ascontiguousarray(key))
    groups = []  # (head row, rows, the table's width across the factor)
    for head, rows in zip(first, members(group, first.size)):
        if SCOPES[int(unique[head, 0])] == "differential":
            continue  # a closed form per site already
        ref = site[head]
        band = float(unique[head, 7]) * float(unique[head, 8])  # spacing x used subcarriers
        latest = float(np.max(flat_delays[ref] * (flat_powers[ref] > 0))) / scale[ref]  # of the unit shape
        width = error_table.factor_resolution(band, latest)
        if _few_factors(scale[site[rows]], doppler_hz[site[rows]], width):
            by_channel, heads = distinct_rows(channel[site[rows]][:, None])
            groups += [(rows[part[0]], rows[part], width) for part in members(by_channel, heads.size)]
        else:
            groups.append((head, rows, width))
    done = np.zeros(unique.shape[0], dtype=bool)
    report = error_table.TableReport(0, 0, 0, 0, 0.0)
    for head, rows, width in groups:
        points = distinct_rows(np.stack([scale[site[rows]], doppler_hz[site[rows]]], axis=1))[1].size
        if points < error_table.MIN_POINTS:
            continue
        counts = np.array([of_row[r].size for r in rows])
        elements = np.concatenate([of_row[r] for r in rows])
        ref = site[head]
        unit_delays = flat_delays[ref] / scale[ref]  # the family's shape

        def weights_at(nodes, head=head, ref=ref, unit_delays=unit_delays):
            n = len(nodes)
            factor, dopplers = np.array(nodes, dtype=float).reshape(n, 2).T
            template = np.repeat(unique[head:head + 1], n, axis=0)
            template[:, _SITE_COLUMN] = np.arange(n)  # node i: the family's shape stretched, at its own Doppler
            found, _ = _structure_weights(template, unit_delays[None, :] * factor[:, None],
                                          np.repeat(flat_powers[ref:ref + 1], n, axis=0), dopplers,
                                          np.full(n, los_all[ref]), spectrum, rules, mask, coupled="eigen")
            return found

        at_sites = site[np.repeat(rows, counts)]
        error, guard[elements], part = error_table.tabulate(scale[at_sites], doppler_hz[at_sites], noise[elements],
                                                            weights_at, budget=points, max_width=width)
        out[elements] = error
        row_given_up = np.add.reduceat(np.isnan(error), np.r_[0, np.cumsum(counts)[:-1]]) > 0
        done[rows[~row_given_up]] = True
        report = report.merged(part)
    return done, report


#: Exact evaluations a table across the delay factor has needed per factor of its first grid (its corners and
#: edge midpoints, 2 c + 1 for c cells), the Doppler and the refinement included: 9.5 on 10^5 harbour_crane
#: sites (1,390 nodes for 147 factors, 0-60 km/h), where a table over the Doppler of one channel needed 3.
FAMILY_NODES_PER_FACTOR, CHANNEL_NODES = 9.5, 3


def _few_factors(factors, dopplers, width) -> bool:
    """Whether sites of these delay factors and Dopplers are better tabulated channel by channel.

    A table across the factor needs cells no wider than ``width`` (``error_table.factor_resolution``), so
    about :data:`FAMILY_NODES_PER_FACTOR` exact evaluations for each of the ``2 c + 1`` factors of its first
    grid of ``c`` cells. Channel by channel, a channel with at least ``error_table.MIN_POINTS`` Dopplers needs
    about :data:`CHANNEL_NODES` (a table over the Doppler) and any other one evaluation per distinct Doppler.
    Where the second is no more, the sites are tabulated per channel (nothing interpolated across channels).
    """
    span = float(np.max(factors) - np.min(factors))
    if span == 0:
        return True
    cells = max(int(np.ceil(span / width)), 1)
    _, first = distinct_rows(np.stack([factors, dopplers], axis=1))
    per_channel = np.bincount(distinct_rows(factors[first][:, None])[0])  # distinct Dopplers of each channel
    cost = np.sum(np.where(per_channel >= error_table.MIN_POINTS, CHANNEL_NODES, per_channel))
    return cost <= FAMILY_NODES_PER_FACTOR * (2 * cells + 1)


def _structure_weights(unique, flat_delays, flat_powers, doppler_hz, los_all, spectrum, rules, phase_mask,
                       comb_bound: bool = False, coupled: str = "direct") -> list:
    """(estimation weights of each distinct structure (a row of ``unique``), from the cache or computed,
    True for each row whose weights are the comb bound).

    Rows that share everything but the symbol duration and the Doppler (a pattern, a numerology's band, a
    channel, an oscillator) are computed together. ``comb_bound``: see :func:`estimation_error`; ``coupled``:
    see ``estimation.spectral_weights`` ("eigen": weights that answer every noise level in closed form).
    """
    out = [None] * unique.shape[0]
    bound_rows = np.zeros(unique.shape[0], dtype=bool)
    todo: dict = {}
    channels: dict = {}  # site -> its channel (taps with power, line of sight) as a key
    for row, key in enumerate(unique.tolist()):
        scope, d_f, shift, mask, period, slot, shared, spacing, used, symbol_s, site, _, linewidth, offset = key
        site = int(site)
        channel = channels.get(site)
        if channel is None:
            keep = flat_powers[site] > 0
            channel = channels[site] = (tuple(flat_delays[site][keep].tolist()),
                                        tuple(flat_powers[site][keep].tolist()), float(los_all[site]))
        pattern = (int(scope), int(d_f), int(shift), int(mask), int(period), int(slot), bool(shared))
        oscillator = (linewidth, offset, phase_mask)
        bounded = comb_bound and rules.estimator == "lmmse" and _staggered(pattern, rules)
        cache_key = (pattern, spacing, int(used), symbol_s, channel, float(doppler_hz[site]), spectrum, oscillator,
                     rules.estimator, rules.estimation_lookahead, rules.estimation_memory, bounded, coupled)
        found = _WEIGHTS_CACHE.get(cache_key)
        if found is not None:
            out[row] = found
            bound_rows[row] = bounded
            continue
        todo.setdefault((pattern, spacing, int(used), channel, oscillator, bounded), []).append(
            (row, symbol_s, float(doppler_hz[site]), cache_key))

    def remember(rows, found, bounded):
        if len(_WEIGHTS_CACHE) + len(found) > _WEIGHTS_CACHE_SIZE:
            _WEIGHTS_CACHE.clear()
        for (row, _, _, cache_key), weights in zip(rows, found):
            out[row] = _WEIGHTS_CACHE[cache_key] = weights
            bound_rows[row] = bounded

    on_band: dict = {}  # (spacing, used, channel, oscillator) -> the patterns' jobs on that band
    for (pattern, spacing, used, channel, oscillator, bounded), rows in todo.items():
        scope, d_f, shift, mask, period, slot, shared = pattern
        symbol_s = np.array([r[1] for r in rows])
        doppler = np.array([r[2] for r in rows])
        if SCOPES[scope] == "differential":
            los = channel[2]
            kinds = np.array([estimation.SCATTERED, estimation.LINE_OF_SIGHT])
            rho = estimation.time_correlation(kinds, symbol_s, doppler, spectrum, los, oscillator)
            r = (1 - los) * rho[:, 0] + los * rho[:, 1]  # the whole channel's autocorrelation at one symbol
            remember(rows, [estimation.SpectralWeights("differential", np.zeros(0), np.zeros(0), 1.0,
                                                       bias=abs(v) ** 2) for v in r], bounded)
            continue
        plan = _schedule(SCOPES[scope], mask, period, shift, d_f, slot, shared, rules.estimation_lookahead,
                         rules.estimation_memory)
        on_band.setdefault((spacing, used, channel, oscillator), []).append((plan, symbol_s, doppler, bounded, rows))
    for (spacing, used, channel, oscillator), jobs in on_band.items():
        found = estimation.pattern_weights([job[:4] for job in jobs], _band(channel, spacing, used), spectrum,
                                           channel[2], rules.estimator, oscillator, coupled)
        for (_, _, _, bounded, rows), weights in zip(jobs, found):
            remember(rows, weights, bounded)
    return out, bound_rows


#: Bands (channel x spacing x used subcarriers) kept within a process: see ``estimation.Band``.
_BANDS: dict = {}


def _band(channel, spacing, used) -> estimation.Band:
    key = (channel, spacing, used)
    found = _BANDS.get(key)
    if found is None:
        if len(_BANDS) >= _WEIGHTS_CACHE_SIZE:
            _BANDS.clear()
        delays, powers, los = channel
        found = _BANDS[key] = estimation.Band(np.asarray(delays), np.asarray(powers), los, spacing, used)
    return found


def _staggered(pattern, rules) -> bool:
    """Whether the pilot symbols of a pattern (as ``_structure_weights`` keys it) sit on more than one comb."""
    return _staggered_schedule(pattern, rules.estimation_lookahead, rules.estimation_memory)


@lru_cache(maxsize=4096)
def _staggered_schedule(pattern, lookahead, memory) -> bool:
    """:func:`_staggered` for a receiver's look-ahead and memory, remembered per pattern."""
    scope, d_f, shift, mask, period, slot, shared = pattern
    if SCOPES[scope] == "differential":
        return False
    return len(_schedule(SCOPES[scope], mask, period, shift, d_f, slot, shared, lookahead, memory).comb_offsets) > 1


@lru_cache(maxsize=4096)
def _schedule(scope, mask, period, shift, d_f, slot, shared, lookahead, memory):
    return arrangement.schedule(scope, mask, period, shift, d_f, slot, shared, lookahead, memory,
                                estimation.MAX_PILOT_SYMBOLS)


def _distinct_columns(columns):
    """The distinct rows of equally shaped columns read side by side, and per row the index of its distinct row."""
    return _unique_rows(np.ascontiguousarray(np.stack([np.asarray(c, dtype=float).ravel() for c in columns], axis=1)))


def _unique_rows(table):
    """The distinct rows of a 2-D float table and, per row, the index of its distinct row."""
    index, first = distinct_rows(table)
    return table[first], index


_MASK_CACHE: dict = {}  # (offsets, levels) -> {useful symbol s: ICI}; the mask integral is costly


def _mask_ici(offsets, levels, useful_symbol_s):
    """oscillator.mask_phase_noise_ici, remembered per mask and symbol duration within a process."""
    t_u = np.asarray(useful_symbol_s, dtype=float)
    values = remembered(_MASK_CACHE.setdefault((tuple(offsets), tuple(levels)), {}), t_u.ravel().tolist(),
                        lambda missing: np.atleast_1d(oscillator.mask_phase_noise_ici(offsets, levels,
                                                                                    np.array(missing))).tolist())
    return np.array(values, dtype=float).reshape(t_u.shape)


def _doppler_ici(x, spectrum, k_factor):
    """doppler.doppler_ici at normalised Doppler x = f_D T_u, once per distinct (x, K) (K may be per site)."""
    x, k = np.broadcast_arrays(np.asarray(x, dtype=float), np.asarray(k_factor, dtype=float))
    if x.size == 0:  # no candidate left (an empty stage of the screening)
        return np.zeros(x.shape)
    if k.ndim == 0 or np.all(k == k.flat[0]):
        k0 = float(k.flat[0]) if k.size else 0.0
        return _on_distinct(lambda u: doppler.doppler_ici(u, 1.0, spectrum, k0), x)
    index, first = distinct_rows(np.stack([x.ravel(), k.ravel()], axis=1))
    values = doppler.doppler_ici(x.ravel()[first], 1.0, spectrum, k.ravel()[first])
    return np.asarray(values, dtype=float)[index].reshape(x.shape)


def _on_distinct(function, x):
    """Apply an elementwise function once per distinct value (candidates share few spacings)."""
    x = np.asarray(x, dtype=float)
    distinct, inverse = np.unique(x, return_inverse=True)
    return np.asarray(function(distinct), dtype=float)[np.ravel(inverse)].reshape(x.shape)


def namespace(designs: DesignArrays, environment: Environment, req: Requirements) -> dict:
    """Bind the rule language's symbols to arrays for these designs (sinr_eff is added by ``evaluate``)."""
    radio, rules, goals = req.radio, req.rules, req.goals
    period = np.asarray(designs.cp_extra_period_s, dtype=float)
    spectrum, k = environment.doppler_spectrum, environment.k_factor
    return {
        "df": np.asarray(designs.subcarrier_spacing_hz, dtype=float),
        "N": designs.fft_size.astype(float),
        "N_cp": designs.cp_samples.astype(float),
        "N_u": designs.used_subcarriers.astype(float),
        "D_f": designs.pilot_freq_spacing.astype(float),
        "D_t": designs.pilot_time_spacing.astype(float),
        "s_p": designs.pilot_shift.astype(float),
        "N_slot": designs.symbols_per_slot.astype(float),
        "R_res": np.asarray(designs.reserved_subcarriers, dtype=float),
        "N_x": np.where(period > 0, designs.cp_extra_samples, 0).astype(float),
        "rho_pil": np.asarray(designs.pilot_density, dtype=float),
        "P_x": np.where(period > 0, period, np.inf),
        "f_D": environment.max_doppler_hz,
        "tau_max": environment.max_excess_delay_s,
        "T_allow": cp_allowance_s(req),
        "echo_max": 10 ** (rules.max_echo_interference_db / 10),
        "T_c": environment.coherence_time_s,
        "B_c": environment.coherence_bandwidth_hz,
        "B": radio.bandwidth_hz,
        "occ": radio.occupancy,
        "W_occ": np.where(designs.channel_bandwidth_hz > 0, designs.channel_bandwidth_hz * radio.occupancy,
                          designs.used_subcarriers * np.asarray(designs.subcarrier_spacing_hz, dtype=float)),
        "sinr_min": minimum_sinr(req),
        "F_qs": rules.quasi_static_factor,
        "F_ff": rules.flat_fading_factor,
        "rho_p": rules.pilot_oversampling,
        "ici_max": 10 ** (rules.max_doppler_ici_db / 10),
        "osc_max": 10 ** (rules.max_oscillator_ici_db / 10),
        "ovh_max": goals.max_overhead,
        "R_goal": goals.throughput_bps,
        "L_max": np.inf if goals.max_latency_s is None else goals.max_latency_s,
        # functions of the rule language, bound to this environment
        "doppler_ici": lambda x: _doppler_ici(x, spectrum, k),
        "oscillator_ici": lambda df: np.add(*oscillator_terms(req, 1.0 / np.asarray(df, float), df)),
        "alias_scale": _alias_scale_for(designs),
        "efficiency": efficiency_function(req),
        "clock_mismatch": clock_mismatch(req),
    }


def _alias_scale_for(designs: DesignArrays):
    """The lattice test, inapplicable (infinite) for differential designs, which interpolate no channel."""
    differential = np.asarray(designs.pilot_scope) == SCOPE_CODE["differential"]

    def alias_scale(*args):
        scale = pilots.aliasing_scale(*args)
        return np.where(differential, np.inf, scale) if differential.any() else scale

    return alias_scale


def evaluate(designs: DesignArrays, environment: Environment, req: Requirements, *, estimation: bool = True,
             overrides: dict | None = None, given_error=None, error_floor: bool = False,
             comb_bound: bool = False, tabulate: bool = False) -> Evaluation:
    """Evaluate designs against an environment and a requirement set.

    Parameters
    ----------
    designs : DesignArrays
        One or many designs (any broadcast shape).
    environment : Environment or EnvironmentBatch
        One environment, or a batch (one per site) whose shape broadcasts
        with the designs'.
    req : Requirements
        ``req.radio.snr_db`` may be an array broadcasting with the batch (a
        per-site SNR, as ``numerology.sweep`` passes it).
    estimation : bool
        False replaces the channel-estimation error by zero (or by a lower
        bound, ``error_floor``): every SINR-dependent margin is then an upper
        bound (the solver's screening).
    overrides : dict, optional
        Symbols of the rule language replaced by given values (best cases
        while a design is incomplete; see ``numerology.solver``).
    error_floor : bool
        With ``estimation=False``, use :func:`estimation_floor` (a lower bound
        of the estimation error, from time interpolation alone) instead of
        zero: the SINR-dependent margins are still upper bounds, and tighter.
    comb_bound : bool
        With ``estimation=True``, arrangements whose pilot symbols sit on
        different combs get a lower bound of their estimation error
        (:func:`estimation_error`): their SINR-dependent margins are then upper
        bounds, close to the exact ones, at a fraction of the cost.
    given_error : array_like, optional
        The channel-estimation error (a fraction of the channel power) to use
        instead of computing it, broadcasting with the result (a picture that
        knows it from nearby points: ``numerology.plots``).
    tabulate : bool
        With an environment batch: sites sharing a channel (many Dopplers of
        it) or stretching one profile shape take the estimation error from a
        table over the Doppler and the stretch (``numerology.error_table``;
        within its guard, not exact).
        ``Evaluation.table`` then says which elements were interpolated.

    Returns
    -------
    Evaluation

    Notes
    -----
    The interference terms of the SINR are relative to the *useful* signal
    power: an inter-carrier interference I (a fraction of the received
    power, as the rules state it) leaves 1 - I useful, so its term is
    I / (1 - I), like the echo term's interference over useful part.
    """
    ns = namespace(designs, environment, req)
    if overrides:
        ns.update(overrides)
    ns = evaluate_derived({**ns, "sinr_eff": np.nan})  # time and overhead quantities first
    delays, powers = environment.taps
    fractions = delay.echo_interference_of(delays, powers)
    useful, interference = fractions(ns["T_cp"], ns["T_u"])
    if "echo_guard" not in ns and req.rules.guard_rule == "energy":
        ns["echo_guard"] = _guard_echo(fractions, ns["T_cp"], ns["T_u"], ns["T_allow"])
    pn, cfo = oscillator_terms(req, ns["T_u"], ns["df"])
    ns["oscillator_ici"] = lambda _df: pn + cfo  # the rule sees the same spacings: computed once
    # An environment batch and a per-site SNR (arrays) broadcast against the designs.
    shape = np.broadcast_shapes(np.shape(ns["df"]), np.shape(ns["N_cp"]), np.shape(ns["D_f"]),
                                np.shape(environment.max_doppler_hz), np.shape(req.radio.snr_db), np.shape(pn),
                                np.shape(cfo))
    doppler_ici = ns["doppler_ici"](environment.max_doppler_hz * ns["T_u"])
    terms = {
        "noise": np.full(shape, 10 ** (-req.radio.snr_db / 10)),
        "echo": np.broadcast_to(interference / useful, shape),
        "doppler": np.broadcast_to(_over_useful(doppler_ici), shape),
        "phase_noise": np.broadcast_to(_over_useful(pn), shape),
        "frequency_offset": np.broadcast_to(_over_useful(cfo), shape),
    }
    impairments = sum(terms.values())  # noise and interference over the useful power
    # Pilots see the same noise and interference as data (the boost enters the estimation). An interference of
    # the whole signal (ICI -> 1: an infinite term) leaves the pilots an SINR of 0, where the estimate knows
    # nothing (error 1, its limit); the floor keeps the estimators' arithmetic finite.
    pilot_sinr = np.maximum(1.0 / impairments, PILOT_SINR_FLOOR)
    bounded = table = None
    if given_error is not None:
        mse = np.broadcast_to(np.asarray(given_error, dtype=float), shape)
    elif estimation:
        mse, bounded, table = _estimation_error(designs, environment, req, pilot_sinr, comb_bound, tabulate)
        mse, bounded = np.broadcast_to(mse, shape), np.broadcast_to(bounded, shape) if comb_bound else None
    else:
        mse = np.zeros(shape) if not error_floor else estimation_floor(designs, environment, req, shape)
    with np.errstate(divide="ignore"):
        terms["estimation"] = np.where(mse < 1, mse / (1 - mse), np.inf)
    # An LMMSE estimate h_hat = h - e with e uncorrelated with h_hat keeps 1 - MSE of the channel power as
    # useful signal and adds the error as noise (unit channel power).
    sinr_eff = np.maximum(1.0 - mse, 0.0) / (mse + impairments)
    ns["sinr_eff"] = sinr_eff
    ns = evaluate_derived(ns)  # now the rate, which needs the SINR
    applicable = applicable_rules(req)
    capacity, demand, margin, normalised = {}, {}, {}, {}
    for rule in applicable:
        cap, dem, mar = evaluate_rule(rule, ns)
        capacity[rule.name] = _read_only(cap, shape)
        demand[rule.name] = _read_only(dem, shape)
        margin[rule.name] = _read_only(mar, shape)
        normalised[rule.name] = _read_only(normalised_margin(rule, cap, dem), shape)
    efficiency = ns["efficiency"](sinr_eff)
    return Evaluation(terms=terms, sinr_eff=sinr_eff, efficiency=np.asarray(efficiency, float),
                      rate_bps=np.broadcast_to(ns["rate"], shape), overhead=np.broadcast_to(ns["overhead"], shape),
                      rules=applicable, capacity=capacity, demand=demand, margin=margin, normalised=normalised,
                      slot_s=np.broadcast_to(ns["T_slot"], shape), step_margin_db=step_margin_db(req, sinr_eff),
                      goal_margin_db=_shaped(goal_margin_db(req, sinr_eff, ns), shape), bounded=bounded,
                      table=table)


def _read_only(values, shape):
    """``np.broadcast_to(values, shape)`` (a read-only view), cheaper for an array that has the shape already."""
    if type(values) is np.ndarray and values.shape == shape:
        view = values.view()
        view.flags.writeable = False
        return view
    return np.broadcast_to(values, shape)


def _shaped(values, shape):
    return None if values is None else np.broadcast_to(values, shape)


def _over_useful(ici):
    """An inter-carrier interference (fraction of the received power) relative to the useful power."""
    ici = np.asarray(ici, dtype=float)
    with np.errstate(divide="ignore"):
        return np.where(ici < 1.0, ici / (1.0 - ici), np.inf)
