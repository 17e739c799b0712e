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

They add as independent noise-like powers (common practice for OFDM link
budgets): SINR_eff = 1 / sum(terms).

``evaluate`` also takes an :class:`~numerology.environment.EnvironmentBatch`
(one environment per site of a sweep or point of a map) and broadcasts the
designs against its shape; ``req.radio.snr_db`` may then be a per-site array.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from . import delay, doppler, mcs, oscillator, pilots
from .design import DesignArrays
from .environment import Environment
from .grouping import distinct_rows
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

    @property
    def sinr_eff_db(self):
        return _sinr_db(self.sinr_eff)

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
    return tuple(rule for rule in RULES if rule.name not in skip)


def cp_allowance_s(req: Requirements) -> float:
    """The CP allowance: given, or 4 sample periods at the channel bandwidth (see ``rules.cp_allowance``)."""
    if req.rules.cp_allowance_s is not None:
        return req.rules.cp_allowance_s
    return 4.0 / req.radio.bandwidth_hz


def mcs_table(req: Requirements):
    if req.rules.mcs_table is not None:
        return req.attached(req.rules.mcs_table, mcs.load_mcs_table)  # read once, when req was loaded
    return mcs.DEFAULT_TABLE


def efficiency_function(req: Requirements):
    """Bits per data resource element as a function of the linear SINR."""
    if req.rules.efficiency_model == "shannon":
        gap_db = req.rules.shannon_gap_db
        return lambda sinr: mcs.shannon_gap_efficiency(_sinr_db(sinr), gap_db)
    table = mcs_table(req)
    return lambda sinr: mcs.spectral_efficiency(_sinr_db(sinr), table)


def _sinr_db(sinr):
    """10 log10(SINR); an SINR of 0 (a design far outside its window, as on a plot's edge) is -inf dB."""
    with np.errstate(divide="ignore"):
        return 10 * np.log10(sinr)


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


def estimation_floor(req: Requirements, pilot_sinr):
    """A lower bound of the estimation error of any pilot lattice in any channel (for screening).

    LMMSE from W noisy pilots: at best every pilot sees the wanted channel
    itself, giving 1 / (1 + W SINR_p) (W = 16, the 4 x 4 window). Linear
    interpolation: the noise alone costs sum(w^2) / SINR_p >= 1 / (3 SINR_p)
    for three weights summing to one.
    """
    if req.rules.estimator == "lmmse":
        return 1.0 / (1.0 + 16.0 * pilot_sinr)
    return 1.0 / (3.0 * pilot_sinr)


def estimation_error(designs: DesignArrays, environment: Environment, req: Requirements, pilot_sinr):
    """Mean-square channel-estimation error of each design's pilot lattice (relative to channel power).

    With an :class:`~numerology.environment.EnvironmentBatch` (taps on an extra
    last axis) every site has its own frequency and time correlations. Each
    distinct case (lattice, numerology, pilot SINR, channel) is solved once,
    and each distinct correlation is tabulated once: a frequency correlation
    per (power-delay profile, subcarrier spacing), a time correlation per
    (maximum Doppler, symbol duration).
    """
    delays, powers = environment.taps
    spectrum, k = environment.doppler_spectrum, environment.k_factor
    batch = np.ndim(delays) > 1
    if batch:
        profile, profile_site = distinct_rows(np.concatenate([delays, powers], axis=-1))
        delays = delays.reshape(-1, delays.shape[-1])[profile_site]  # one row per distinct profile
        powers = powers.reshape(-1, powers.shape[-1])[profile_site]
    else:
        profile = 0
        delays, powers = np.asarray(delays, float)[None, :], np.asarray(powers, float)[None, :]
    columns = np.broadcast_arrays(designs.pilot_freq_spacing, designs.pilot_time_spacing, designs.pilot_shift,
                                  designs.subcarrier_spacing_hz, designs.symbol_s, pilot_sinr, profile,
                                  environment.max_doppler_hz)
    shape = columns[0].shape
    table = np.ascontiguousarray(np.stack([np.asarray(c, dtype=float).ravel() for c in columns], axis=1))
    unique, inverse = _unique_rows(table)  # one row per distinct case
    lattice = unique[:, :3].astype(np.int64)
    k_max, l_max = pilots.correlation_lags(*lattice.T, estimator=req.rules.estimator)
    f_keys, f_row = _unique_rows(np.ascontiguousarray(unique[:, [3, 6]]))  # (spacing, profile)
    site = f_keys[:, 1].astype(np.int64)
    f_table = _frequency_correlation_rows(np.arange(k_max + 1) * f_keys[:, :1], delays[site], powers[site])
    t_keys, t_row = _unique_rows(np.ascontiguousarray(unique[:, [4, 7]]))  # (symbol duration, Doppler)
    t_table = doppler.doppler_autocorrelation(np.arange(l_max + 1) * t_keys[:, :1], t_keys[:, 1:], spectrum, k)
    mse = pilots.estimation_mse_tabulated(*lattice.T, unique[:, 5], f_table, f_row, t_table, t_row,
                                          estimator=req.rules.estimator)
    return np.asarray(mse)[inverse].reshape(shape)


def _unique_rows(table):
    """The distinct rows of a 2-D float table and, per row, the index of its distinct row."""
    index, first = distinct_rows(table)
    return table[first], index


def _frequency_correlation_rows(lag_hz, delays_s, powers):
    """delay.frequency_correlation with one profile per row: lags (n, L), taps (n, K) -> (n, L).

    The pilot estimator asks for whole multiples of a unit lag (``l * df``):
    then R(l df) = sum_k p_k w_k^l with w_k = exp(-j 2 pi df tau_k), built up
    by one multiplication per lag (round-off grows as l times the machine
    epsilon, about 1e-14 at 50 lags). Other lags: cos and sin in row blocks.
    """
    lag_hz = np.asarray(lag_hz, dtype=float)
    p = powers / powers.sum(axis=-1, keepdims=True)
    n, width = lag_hz.shape
    unit = lag_hz[:, 1:2] if width > 1 else np.zeros((n, 1))
    if np.array_equal(lag_hz, np.arange(width) * unit):
        out = np.empty((width, n), dtype=complex)
        step = np.exp(-2j * np.pi * (unit * delays_s).T)  # w_k, taps first: (K, n)
        term = p.T.astype(complex)
        for lag in range(width):  # a loop over the few lags, vectorised over taps and rows
            out[lag] = term.sum(axis=0)
            term *= step
        return out.T
    out = np.empty(lag_hz.shape, dtype=complex)
    block = max(1, (1 << 21) // max(1, width * delays_s.shape[1]))
    for start in range(0, n, block):
        rows = slice(start, start + block)
        phase = (2.0 * np.pi) * lag_hz[rows, :, None] * delays_s[rows, None, :]
        out.real[rows] = np.einsum("nlk,nk->nl", np.cos(phase), p[rows])  # R = sum_k p_k exp(-j 2 pi f tau_k)
        out.imag[rows] = -np.einsum("nlk,nk->nl", np.sin(phase), p[rows])
    return out


_MASK_CACHE: dict = {}  # (offsets, levels) -> {useful symbol s: ICI}; the mask integral is costly


def _mask_ici(offsets, levels, useful_symbol_s):
    """oscillator.mask_phase_noise_ici, remembered per mask and symbol duration within a process."""
    known = _MASK_CACHE.setdefault((tuple(offsets), tuple(levels)), {})
    if len(known) > 100_000:
        known.clear()
    t_u = np.asarray(useful_symbol_s, dtype=float)
    missing = [t for t in t_u.ravel().tolist() if t not in known]
    if missing:
        values = np.atleast_1d(oscillator.mask_phase_noise_ici(offsets, levels, np.array(missing)))
        known.update(zip(missing, values.tolist()))
    return np.array([known[t] for t in t_u.ravel().tolist()]).reshape(t_u.shape)


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
        "P_x": np.where(period > 0, period, np.inf),
        "f_D": environment.max_doppler_hz,
        "tau_max": environment.max_excess_delay_s,
        "T_allow": cp_allowance_s(req),
        "T_c": environment.coherence_time_s,
        "B_c": environment.coherence_bandwidth_hz,
        "B": radio.bandwidth_hz,
        "occ": radio.occupancy,
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
        "doppler_ici": lambda x: _on_distinct(lambda u: doppler.doppler_ici(u, 1.0, spectrum, k), x),
        "oscillator_ici": lambda df: np.add(*oscillator_terms(req, 1.0 / np.asarray(df, float), df)),
        "alias_scale": pilots.aliasing_scale,
        "efficiency": efficiency_function(req),
        "clock_mismatch": clock_mismatch(req),
    }


def evaluate(designs: DesignArrays, environment: Environment, req: Requirements, *, estimation: bool = True,
             overrides: dict | None = None) -> Evaluation:
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
        False replaces the channel-estimation error by its lower bound
        (``estimation_floor``): every SINR-dependent margin is then an upper
        bound (the solver's screening).
    overrides : dict, optional
        Symbols of the rule language replaced by given values (best cases
        while a design is incomplete; see ``numerology.solver``).

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
    useful, interference = delay.echo_interference(delays, powers, ns["T_cp"], ns["T_u"])
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
    pilot_sinr = 1.0 / sum(terms.values())  # pilots see the same noise and interference as data
    # An interference of the whole signal (ICI -> 1: an infinite term) leaves the pilots an SINR of 0, where the
    # estimate knows nothing (error 1, its limit); the floor keeps the estimators' arithmetic finite.
    pilot_sinr = np.maximum(pilot_sinr, PILOT_SINR_FLOOR)
    if estimation:
        terms["estimation"] = np.broadcast_to(estimation_error(designs, environment, req, pilot_sinr), shape)
    else:
        terms["estimation"] = np.broadcast_to(estimation_floor(req, pilot_sinr), shape)
    sinr_eff = 1.0 / sum(terms.values())
    ns["sinr_eff"] = sinr_eff
    ns = evaluate_derived(ns)  # now the rate, which needs the SINR
    applicable = applicable_rules(req)
    capacity, demand, margin, normalised = {}, {}, {}, {}
    for rule in applicable:
        cap, dem, mar = evaluate_rule(rule, ns)
        capacity[rule.name] = np.broadcast_to(cap, shape)
        demand[rule.name] = np.broadcast_to(dem, shape)
        margin[rule.name] = np.broadcast_to(mar, shape)
        normalised[rule.name] = np.broadcast_to(normalised_margin(rule, cap, dem), shape)
    efficiency = ns["efficiency"](sinr_eff)
    return Evaluation(terms=terms, sinr_eff=sinr_eff, efficiency=np.asarray(efficiency, float),
                      rate_bps=np.broadcast_to(ns["rate"], shape), overhead=np.broadcast_to(ns["overhead"], shape),
                      rules=applicable, capacity=capacity, demand=demand, margin=margin, normalised=normalised,
                      slot_s=np.broadcast_to(ns["T_slot"], shape))


def _over_useful(ici):
    """An inter-carrier interference (fraction of the received power) relative to the useful power."""
    ici = np.asarray(ici, dtype=float)
    with np.errstate(divide="ignore"):
        return np.where(ici < 1.0, ici / (1.0 - ici), np.inf)
