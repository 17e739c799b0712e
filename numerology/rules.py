"""The design rules, each declared once.

A rule compares a *capacity* with a *demand*: it passes when capacity >=
demand. Both are expressions written in a small common language: Python
arithmetic over the symbols in :data:`SYMBOLS` and the functions in
:data:`FUNCTIONS`, which is also valid sympy input. From this one
declaration we derive

* the numeric evaluation, vectorised over candidate arrays: each expression
  is compiled once per process (``compile``) and evaluated with numpy
  arrays bound to the symbols; no sympy import is needed for this;
* the symbolic form (``numerology.symbolic``): LaTeX for the design note and
  boundaries solved for one variable (windows, stretch limits);
* the margin, by the rule's convention:

  - ``ratio``: capacity / demand - 1 (a fraction; 0.25 = 25 % headroom),
  - ``db``: 10 log10(capacity / demand) (for interference powers).

Shared sub-expressions (symbol duration, overheads, rate) are declared once
in :data:`DERIVED` and used by name in the rules.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

#: Symbols of the rule language: name -> meaning (SI unit).
SYMBOLS = {
    # design
    "df": "subcarrier spacing (Hz)",
    "N": "FFT size",
    "N_cp": "cyclic prefix (samples)",
    "N_u": "used subcarriers",
    "D_f": "pilot spacing in frequency (subcarriers)",
    "D_t": "largest gap between pilot-bearing symbols (symbols)",
    "rho_pil": "fraction of used resource elements the pilots take from data",
    "s_p": "pilot shift per pilot-bearing symbol (subcarriers)",
    "N_slot": "symbols per slot",
    "R_res": "reserved non-data subcarriers per symbol",
    "N_x": "extra cyclic-prefix samples once per period",
    "P_x": "period of the extra cyclic prefix (s; inf if none)",
    # environment and radio
    "f_D": "maximum Doppler (Hz)",
    "tau_max": "max excess delay (s)",
    "T_allow": "cyclic-prefix allowance for timing and filters (s)",
    "echo_guard": "echo interference beyond the prefix less the allowance, over the useful power (linear)",
    "echo_max": "largest echo interference beyond the prefix (linear)",
    "T_c": "coherence time (s)",
    "B_c": "coherence bandwidth (Hz)",
    "B": "channel bandwidth (Hz)",
    "occ": "usable fraction of the bandwidth",
    "W_occ": "bandwidth the design claims (Hz): occupied subcarriers, or a standard design's channel times occ",
    "sinr_eff": "effective SINR from the link model (linear)",
    "sinr_min": "SINR needed by the most robust modulation and coding (linear)",
    # settings and goals
    "F_qs": "quasi-static factor",
    "F_ff": "flat-fading factor",
    "rho_p": "pilot oversampling",
    "ici_max": "largest Doppler ICI (linear)",
    "osc_max": "largest oscillator ICI (linear)",
    "ovh_max": "largest overhead fraction",
    "R_goal": "throughput goal (bit/s)",
    "L_max": "longest slot (s)",
}

#: Numeric functions the rule language may call; ``numerology.link`` binds
#: their implementations (the exact Doppler integral, the lattice test, ...).
FUNCTIONS = {
    "doppler_ici": "Doppler ICI power ratio at normalised Doppler f_D T_u, exact for the spectrum",
    "oscillator_ici": "phase-noise (after common-phase correction) plus frequency-offset ICI at spacing df",
    "alias_scale": "largest growth of the delay-Doppler support before pilot replicas overlap",
    "efficiency": "bits per resource element at an SINR",
    "clock_mismatch": "relative distance of a sample rate from the nearest rate derived from the clock",
}

#: Named sub-expressions, in dependency order.
DERIVED = {
    "T_u": ("1/df", "useful symbol duration (s)"),
    "T_cp": ("N_cp/(N*df)", "cyclic prefix (s)"),
    "T_s": ("T_u + T_cp", "symbol duration (s)"),
    "T_m": ("T_s/(1 - N_x/(N*df*P_x))", "mean symbol duration, extra prefixes included (s)"),
    "pilot_frac": ("rho_pil + R_res/N_u", "fraction of used subcarriers not carrying data"),
    "overhead": ("1 - T_u/T_m*(1 - pilot_frac)", "fraction of resources spent on cyclic prefix and pilots"),
    "rate": ("N_u*(1 - pilot_frac)*efficiency(sinr_eff)/T_m", "net throughput (bit/s)"),
    "T_slot": ("N_slot*T_m", "slot duration (s)"),
}


@dataclass(frozen=True)
class Rule:
    """One design rule: passes when ``capacity >= demand``."""

    name: str
    statement: str
    capacity: str
    demand: str
    convention: str  # "ratio" | "db"
    source: str
    setting: str = ""  # the requirement key that sets its threshold, if any
    gate: bool = False  # a yes/no rule: its margin says pass or fail, not how much headroom
    reads: str = "demand"  # which side is the design's value: "demand" (at most the limit) or "capacity" (at least)

    def margin(self, capacity, demand):
        """The margin by this rule's convention (>= 0 passes)."""
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            if self.convention == "ratio":
                return capacity / demand - 1.0
            return 10.0 * np.log10(capacity / demand)

    @property
    def unit(self) -> str:
        return {"ratio": "", "db": "dB"}[self.convention]

    @property
    def comparison(self) -> str:
        """How the design's value must compare with the limit: ``"<="`` (an upper limit) or ``">="``."""
        return "<=" if self.reads == "demand" else ">="

    def value_and_limit(self, capacity, demand):
        """(the design's value, the limit it is held to), read the right way round for this rule."""
        return (demand, capacity) if self.reads == "demand" else (capacity, demand)


RULES: tuple[Rule, ...] = (
    Rule("guard_interval", "Echoes beyond the cyclic prefix (less the timing and filter allowance) stay below the "
         "interference budget.",
         "echo_max", "echo_guard", "db",
         "EBU TR 024 sect. 2.4 (weight of echoes beyond the guard interval); common practice: guards are sized "
         "by interference, as LTE's normal prefix is specified against ETU (3GPP TS 36.101 Annex B)",
         "rules.max_echo_interference"),
    Rule("cp_covers_delay", "The cyclic prefix covers the max excess delay plus the timing and filter allowance "
         "(the strict guard rule: rules.guard_rule = \"coverage\").",
         "T_cp", "tau_max + T_allow", "ratio",
         "common practice; guard-interval sizing as in ETSI EN 300 744 sect. 4.4 and 3GPP TS 36.211 sect. 6.12",
         "rules.guard_rule", reads="capacity"),
    Rule("doppler_ici", "Doppler inter-carrier interference stays below its limit.",
         "ici_max", "doppler_ici(f_D*T_u)", "db",
         "Russell & Stueber, IEEE VTC 1995 (classical spectrum); exact integral of the spectrum's autocorrelation",
         "rules.max_doppler_ici"),
    Rule("quasi_static", "The symbol is short against the coherence time.",
         "T_c/F_qs", "T_s", "ratio", "common practice; coherence time as in Rappaport 2nd ed. sect. 5.4.3",
         "rules.quasi_static_factor"),
    Rule("flat_fading", "Each subcarrier is narrow against the coherence bandwidth.",
         "B_c/F_ff", "df", "ratio", "common practice; coherence bandwidth as in Rappaport 2nd ed. sect. 5.4.2",
         "rules.flat_fading_factor"),
    Rule("oscillator_ici", "Phase-noise and frequency-offset interference stay below their limit.",
         "osc_max", "oscillator_ici(df)", "db",
         "Pollet, Van Bladel & Moeneclaey, IEEE Trans. Commun. 43(2/3/4), 1995; Moose, IEEE Trans. Commun. 42(10), 1994",
         "rules.max_oscillator_ici"),
    Rule("pilot_aliasing", "The pilot lattice samples the channel's delay-Doppler support without aliasing, with margin.",
         "alias_scale(D_f, D_t, s_p, df, T_s, tau_max, f_D)", "rho_p", "ratio",
         "Hoeher, Kaiser & Robertson, ICASSP 1997 (2-D sampling of the channel)", "rules.pilot_oversampling",
         reads="capacity"),
    Rule("fits_channel", "The design fits the licensed channel: a standard's channel as a whole, other designs' "
         "occupied subcarriers within the usable fraction.",
         "occ*B", "W_occ", "ratio", "definition; a standard design keeps its own occupancy (its channel)",
         "radio.occupancy", gate=True),
    Rule("sample_clock", "The sample rate derives from the base clock by an integer ratio.",
         "1", "1 + clock_mismatch(N*df)", "ratio", "common practice (hardware rate plans)", "radio.sample_clock",
         gate=True),
    Rule("link_closes", "The effective SINR supports the most robust modulation and coding.",
         "sinr_eff", "sinr_min", "db", "modulation-and-coding table (numerology.mcs)", "rules.efficiency_model",
         reads="capacity"),
    Rule("overhead", "Cyclic prefix and pilots stay within the overhead goal.",
         "ovh_max", "overhead", "ratio", "goal", "goals.max_overhead"),
    Rule("throughput", "The net throughput meets the goal.",
         "rate", "R_goal", "ratio", "goal", "goals.throughput", reads="capacity"),
    Rule("latency", "The slot is no longer than the latency goal.",
         "L_max", "T_slot", "ratio", "goal", "goals.max_latency"),
)

RULE_NAMES = tuple(rule.name for rule in RULES)
BY_NAME = {rule.name: rule for rule in RULES}


@lru_cache(maxsize=None)
def _compiled(expression: str):
    return compile(expression, f"<rule {expression}>", "eval")


def evaluate_derived(namespace: dict) -> dict:
    """Add the :data:`DERIVED` quantities to a namespace of numpy arrays."""
    ns = dict(namespace)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for name, (expression, _meaning) in DERIVED.items():
            ns[name] = eval(_compiled(expression), {"__builtins__": {}}, ns)  # noqa: S307 - our own declarations
    return ns


def evaluate(rule: Rule, namespace: dict):
    """Capacity, demand and margin of one rule over broadcast arrays."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        capacity = eval(_compiled(rule.capacity), {"__builtins__": {}}, namespace)  # noqa: S307
        demand = eval(_compiled(rule.demand), {"__builtins__": {}}, namespace)  # noqa: S307
    capacity = np.asarray(capacity, dtype=float)
    demand = np.asarray(demand, dtype=float)
    return capacity, demand, np.asarray(rule.margin(capacity, demand), dtype=float)


def normalised_margin(rule: Rule, capacity, demand):
    """A margin on one scale for every rule: capacity / demand - 1.

    A gate rule has no headroom to speak of: +inf where it passes, -1 where it fails.
    """
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        if rule.gate:
            return np.where(capacity >= demand, np.inf, -1.0)
        return capacity / demand - 1.0
