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

@dataclass(frozen=True)
class Definition:
    """What a function or quantity of the rules stands for, written in the rule language.

    ``head`` and ``expression`` (or, where a setting picks one of several
    forms, ``cases``: (case, expression) pairs and ``case_of``, what picks
    it) are sympy-parsable strings, like the rules': ``numerology.symbolic``
    prints them in LaTeX for the design note, and the tests evaluate them
    numerically against the functions ``numerology.link`` binds, so that the
    text a reviewer reads and the code cannot drift apart. ``implicit``
    definitions are equations (``head = expression`` solved for a quantity in
    the head: its smallest positive root).
    """

    name: str
    head: str
    expression: str
    meaning: str
    source: str
    cases: tuple = ()
    case_of: str = ""
    implicit: bool = False
    refers: tuple = ()  # definitions its expression's vectors and matrices are made of (they name no function)

    def form(self, case: str = "") -> str:
        """The expression of one case (the only one when there are no cases)."""
        if not self.cases:
            return self.expression
        for name, expression in self.cases:
            if name == case:
                return expression
        raise KeyError(f"{self.name}: no case {case!r}; expected one of {[c for c, _ in self.cases]}")


#: Symbols the definitions use beyond :data:`SYMBOLS` and :data:`DERIVED`: name -> meaning. Indexed names
#: (a tap, a table entry) are written ``name[m]``; ``r_d``, ``a_d``, ``R_d`` and ``Id`` are vectors and
#: matrices (products keep their order).
DEFINITION_SYMBOLS = {
    "b": "normalised Doppler f_D T_u",
    "u": "time across the FFT window, in units of T_u",
    "x": "normalised lag f_D tau",
    "z": "an inter-carrier interference (a fraction of the received power)",
    "tau": "delay of a tap after the first arrival (s)",
    "p": "power of a tap, line of sight included (fraction of the channel power)",
    "p_s": "scattered power of a tap (the line of sight taken from the first)",
    "M": "number of taps",
    "m": "index (a tap, a reciprocal lattice point)",
    "T_g": "guard interval (s)",
    "K": "Rician K-factor: line-of-sight power over all scattered power (linear)",
    "P_los": "line-of-sight share of the channel power",
    "beta_o": "oscillator 3-dB linewidth (Hz)",
    "f_o": "residual carrier-frequency error (Hz)",
    "L": "phase-noise mask, single sideband (linear power per Hz)",
    "f": "offset from the carrier (Hz)",
    "f_1": "first offset of the phase-noise mask (Hz)",
    "f_n": "last offset of the phase-noise mask (Hz)",
    "SNR": "signal-to-noise ratio at the edge of coverage (linear)",
    "E_est": "channel-estimation error (fraction of the channel power)",
    "I_tot": "noise and interference over the useful power (linear)",
    "sinr_p": "SINR of a pilot before its boost (linear)",
    "sigma2": "noise and interference on a pilot relative to its power",
    "beta_p": "pilot power boost (linear)",
    "d": "a data resource element of the evaluation span",
    "N_d": "data resource elements in the evaluation span",
    "e_d": "estimation error of one data resource element",
    "r_d": "correlations of the usable pilots with the data element (vector)",
    "R_d": "correlations of the usable pilots with each other (matrix)",
    "a_d": "weights of the linear interpolator (vector)",
    "Id": "identity matrix",
    "dn": "distance in symbols",
    "dk": "distance in subcarriers",
    "m_p": "pilot-bearing symbols per period of the pattern",
    "P_p": "symbols per period of the pattern",
    "B_ch": "the channel a standard defines the design for (Hz; 0: none)",
    "f_s": "sample rate (Hz)",
    "f_clk": "base clock (Hz)",
    "S": "an SINR (linear)",
    "gamma": "SINR threshold of a table entry (dB), ascending",
    "ebar": "highest bits per resource element (bits x code rate) among the entries up to a threshold (0 before the first)",
    "n_mcs": "entries of the modulation-and-coding table",
    "j": "index of a threshold",
    "Gamma": "gap to capacity (linear)",
    "eta_max": "highest bits per resource element of the table",
    "rho_c": "correlation level that defines coherence (rules.coherence_correlation)",
}

#: What each function and quantity of the rules stands for (see :class:`Definition`), in the order the
#: design note gives them. Every name the rules use that is not a plain input has its definition here.
DEFINITIONS: tuple[Definition, ...] = (
    Definition("doppler_ici", "doppler_ici(b)", "1 - Integral((1 - Abs(u))*re(rho_D(b*u)), (u, -1, 1))",
               "Doppler inter-carrier interference: the fraction of a subcarrier's power lost because the channel "
               "changes within the FFT window, at the normalised Doppler b = f_D T_u",
               "Russell & Stueber, IEEE VTC 1995 (classical spectrum); the same window average of the "
               "autocorrelation holds for any wide-sense stationary channel"),
    Definition("rho_D", "rho_D(x)", "(1 - P_los)*rho_sc(x) + P_los*rho_los(x)",
               "the channel's time autocorrelation R(tau) at the normalised lag x = f_D tau",
               "Wiener-Khinchin: the autocorrelation of the Doppler spectrum; Rician: a line of sight beside the "
               "scattered power"),
    Definition("rho_sc", "rho_sc(x)", "", "autocorrelation of the scattered power", "Clarke, Bell Syst. Tech. J. "
               "47(6), 1968; Jakes 1974 (J_0 of the classical spectrum); sinc of the flat spectrum; tracked: the "
               "receiver removes the mean shift P_los f_D",
               cases=(("classical", "besselj(0, 2*pi*x)"), ("flat", "sinc(2*pi*x)"),
                      ("rician", "besselj(0, 2*pi*x)"), ("tracked", "besselj(0, 2*pi*x)*exp(-2*I*pi*P_los*x)")),
               case_of="environment.doppler_spectrum"),
    Definition("rho_los", "rho_los(x)", "", "autocorrelation of the line of sight, a line at f_D (less the "
               "removed mean shift when tracked)", "definition of a Doppler-shifted line",
               cases=(("classical", "exp(2*I*pi*x)"), ("flat", "exp(2*I*pi*x)"), ("rician", "exp(2*I*pi*x)"),
                      ("tracked", "exp(2*I*pi*(1 - P_los)*x)")),
               case_of="environment.doppler_spectrum"),
    Definition("P_los", "P_los", "K/(K + 1)", "line-of-sight share of the channel power, at the first arrival "
               "(0 for the classical and flat spectra)", "definition of the Rician K-factor"),
    Definition("oscillator_ici", "oscillator_ici(df)", "I_PN(1/df) + I_FO(df)",
               "oscillator inter-carrier interference at the spacing df: phase noise after common-phase "
               "correction plus the residual frequency error",
               "Pollet, Van Bladel & Moeneclaey, IEEE Trans. Commun. 43(2/3/4), 1995; Moose, IEEE Trans. Commun. "
               "42(10), 1994"),
    Definition("I_PN", "I_PN(T_u)", "", "phase-noise ICI over a window T_u once the common phase is removed: a "
               "Wiener phase of 3-dB linewidth beta_o (I_PN = 0 for beta_o = 0), or a mask L(f) interpolated "
               "linearly in dB against log f between its points f_1 .. f_n and zero outside them",
               "Wiener phase: the mean of exp(j theta) over the window, 1 - (1/T_u^2) times the double integral of "
               "exp(-pi beta_o |t - s|) (the model of Pollet, Van Bladel & Moeneclaey 1995); mask: the "
               "small-angle phase-noise integral (common practice)",
               cases=(("wiener", "1 - 2*(pi*beta_o*T_u - 1 + exp(-pi*beta_o*T_u))/(pi*beta_o*T_u)**2"),
                      ("mask", "2*Integral(L(f)*(1 - sinc(pi*f*T_u)**2), (f, f_1, f_n))")),
               case_of="radio.phase_noise"),
    Definition("I_FO", "I_FO(df)", "1 - sinc(pi*f_o/df)**2",
               "ICI of a residual carrier-frequency error f_o at the spacing df (sinc(y) = sin(y)/y)",
               "Moose, IEEE Trans. Commun. 42(10), 1994"),
    Definition("w_echo", "w_echo(tau, T_g)",
               "Piecewise((1, tau <= T_g), ((1 - (tau - T_g)/T_u)**2, tau <= T_g + T_u), (0, True))",
               "useful fraction of an echo arriving tau after the first path (the FFT window starts with it) "
               "with a guard T_g; the rest, 1 - w_echo, interferes", "EBU TR 024 sect. 2.4; ITU-R Report BT.2386"),
    Definition("I_echo", "I_echo(T_g)",
               "Sum((1 - w_echo(tau[m], T_g))*p[m], (m, 0, M - 1))/Sum(w_echo(tau[m], T_g)*p[m], (m, 0, M - 1))",
               "interference of the echoes beyond a guard T_g over the useful power, over the M taps of the "
               "profile (line of sight included)", "EBU TR 024 sect. 2.4"),
    Definition("echo_guard", "echo_guard", "I_echo(Max(T_cp - T_allow, 0))",
               "the echo interference the guard rule judges: the cyclic prefix less the timing and filter "
               "allowance", "EBU TR 024 sect. 2.4 (the allowance: rules.cp_allowance)"),
    Definition("sinr_eff", "sinr_eff", "(1 - E_est)/(E_est + I_tot)",
               "effective SINR of the data: an estimate with error E_est keeps 1 - E_est of the channel power "
               "and adds E_est as noise", "common practice (an LMMSE estimate's error is uncorrelated with it)"),
    Definition("I_tot", "I_tot", "1/SNR + I_echo(T_cp) + z_u(doppler_ici(f_D*T_u)) + z_u(I_PN(1/df)) + z_u(I_FO(df))",
               "noise and interference over the useful power", "common practice for OFDM link budgets: "
               "independent noise-like powers add"),
    Definition("z_u", "z_u(z)", "z/(1 - z)", "an inter-carrier interference z (a fraction of the received "
               "power) over the useful power, which it leaves at 1 - z", "definition"),
    Definition("E_est", "E_est", "", "mean estimation error over the N_d data resource elements of the "
               "evaluation span (a slot, a packet, or one period of a stream's pattern), from exactly the pilots "
               "the arrangement and the receiver's allowance make available (see the estimation allowance); the "
               "channel's weakest band eigenmodes, together under 1e-6 of its power, are counted as error; "
               "differential detection has no estimate: its reference is the previous symbol",
               "Kay, Fundamentals of Statistical Signal Processing: Estimation Theory, ch. 12 (LMMSE); Hoeher, "
               "Kaiser & Robertson, ICASSP 1997 (2-D pilot-aided estimation); differential: Proakis, Digital "
               "Communications (DPSK in fading; from memory)",
               cases=(("pilots", "Sum(e_d(d), (d, 1, N_d))/N_d"),
                      ("differential", "1 - Abs(R_H(1, 0))**2/(1 + sigma2)")),
               case_of="design.pilot_scope"),
    Definition("e_d", "e_d(d)", "", "estimation error of one data element d = (n_d, k_d) from its usable pilots "
               "(n_i, k_i): LMMSE, or least squares at the pilots with weights a_d of linear interpolation (across "
               "frequency within each pilot symbol, then in time between the nearest usable pilot symbols before and "
               "after, or the nearest one held); R_d[i, l] = R_H(n_i - n_l, k_i - k_l) and r_d[i] = R_H(n_i - n_d, "
               "k_i - k_d)", "Kay, Estimation Theory, ch. 12: the error of a linear estimate and of the LMMSE one",
               cases=(("lmmse", "1 - Dagger(r_d)*(R_d + sigma2*Id)**(-1)*r_d"),
                      ("linear", "1 - 2*re(Dagger(a_d)*r_d) + Dagger(a_d)*(R_d + sigma2*Id)*a_d")),
               case_of="rules.estimator", refers=("R_H",)),
    Definition("R_H", "R_H(dn, dk)",
               "phi_osc(dn*T_s)*(rho_sc(f_D*dn*T_s)*Sum(p_s[m]*exp(-2*I*pi*dk*df*tau[m]), (m, 0, M - 1)) "
               "+ P_los*rho_los(f_D*dn*T_s)*exp(-2*I*pi*dk*df*tau[0]))",
               "correlation of the channel at two resource elements dn symbols and dk subcarriers apart (unit "
               "channel power): the entries of R_d and r_d", "wide-sense stationary uncorrelated scattering "
               "(Bello 1963); the receiver estimates the channel times the oscillator's phase"),
    Definition("phi_osc", "phi_osc(tau)", "", "autocorrelation of the oscillator's phase over a lag tau",
               "Wiener phase noise: a Brownian phase of increment variance 2 pi beta_o tau (common practice); a mask: "
               "a Gaussian phase difference (small angle)",
               cases=(("wiener", "exp(-pi*beta_o*Abs(tau) + 2*I*pi*f_o*tau)"),
                      ("mask", "exp(2*I*pi*f_o*tau - 4*Integral(L(f)*sin(pi*f*tau)**2, (f, f_1, f_n)))")),
               case_of="radio.phase_noise"),
    Definition("sigma2", "sigma2", "", "noise and interference on a pilot relative to its power (pilots see "
               "the data's impairments; a boost beta_p raises them above the data)", "definition",
               cases=(("pilots", "1/(beta_p*sinr_p)"), ("differential", "1/sinr_p")), case_of="design.pilot_scope"),
    Definition("sinr_p", "sinr_p", "1/I_tot", "SINR a pilot of the data's power would have", "definition"),
    Definition("alias_scale", "alias_scale(D_f, D_t, s_p, df, T_s, tau_max, f_D)",
               "range_min(Max(m/(D_f*df*tau_max), r_alias(m)/(2*f_D*D_f*D_t*T_s)), m, 0, D_f)",
               "how far the channel's delay-Doppler support [0, tau_max] x [-f_D, f_D] can grow before the "
               "pilot lattice's replicas overlap it (0/0 counts as 0, y/0 as infinity; infinite for differential "
               "designs)", "Hoeher, Kaiser & Robertson, ICASSP 1997 (2-D sampling of the channel); the nearest "
               "reciprocal lattice points (numerology.pilots)"),
    Definition("r_alias", "r_alias(m)", "Piecewise((D_f, Eq(m, 0)), (Min(Mod(m*s_p, D_f), D_f - Mod(m*s_p, D_f)), True))",
               "Doppler offset of the reciprocal lattice point nearest the delay axis in column m, in units of "
               "1/(D_f D_t T_s)", "the reciprocal of the lattice i (D_f, 0) + j (s_p, D_t)"),
    Definition("efficiency", "efficiency(S)", "", "bits per data resource element at the SINR S: the best entry "
               "of the modulation-and-coding table whose threshold S reaches (0 below the lowest), or capacity "
               "less a gap", "link adaptation (common practice); Shannon, Bell Syst. Tech. J. 27, 1948 and "
               "Forney & Ungerboeck, IEEE Trans. Inf. Theory 44(6), 1998 (the gap)",
               cases=(("table", "Sum((ebar[j] - ebar[j - 1])*step(10*log10(S) - gamma[j]), (j, 1, n_mcs))"),
                      ("shannon", "Min(log2(1 + S/Gamma), eta_max)")),
               case_of="rules.efficiency_model"),
    Definition("sinr_min", "sinr_min", "10**(gamma[1]/10)", "SINR the most robust table entry needs (its "
               "threshold in dB, the lowest)", "the modulation-and-coding table"),
    Definition("rho_pil", "rho_pil", "", "fraction of the used resource elements the pilots take from data",
               "the arrangement (numerology.arrangement.pilot_fraction)",
               cases=(("shared", "m_p/(P_p*D_f)"), ("alone", "m_p/P_p")), case_of="design.pilot_data_shared"),
    Definition("W_occ", "W_occ", "Piecewise((B_ch*occ, B_ch > 0), (N_u*df, True))",
               "bandwidth the design claims: a standard's channel (the usable fraction of it), else its "
               "occupied subcarriers", "definition"),
    Definition("clock_mismatch", "clock_mismatch(f_s)",
               "Min(Abs(f_s/(f_clk*Max(floor(f_s/f_clk + 1/2), 1)) - 1), Abs(f_clk/(f_s*Max(floor(f_clk/f_s + 1/2), 1)) - 1))",
               "relative distance of the sample rate from the nearest integer multiple or divisor of the base "
               "clock (0 below 1e-9)", "common practice (hardware rate plans)"),
    Definition("T_c", "re(rho_D(f_D*T_c))", "rho_c", "coherence time: the first lag at which the real part of "
               "the autocorrelation falls to rho_c (holding a channel value that long costs "
               "E|h(t + tau) - h(t)|^2 = 2 (1 - Re R(tau)))", "Rappaport, Wireless Communications 2nd ed., sect. "
               "5.4.3 (definition by correlation; the exact root here)", implicit=True),
    Definition("B_c", "Abs(Sum(p[m]*exp(-2*I*pi*B_c*tau[m]), (m, 0, M - 1)))", "rho_c",
               "coherence bandwidth: the first frequency offset at which the channel's frequency correlation "
               "falls to rho_c (unbounded if it never does)", "Jakes 1974; Rappaport 2nd ed., sect. 5.4.2 (the "
               "exact root of the profile's correlation)", implicit=True),
)

DEFINED = {definition.name: definition for definition in DEFINITIONS}


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
         "ovh_max", "overhead", "ratio", "a goal of the requirement (goals.max_overhead), not a physical limit",
         "goals.max_overhead"),
    Rule("throughput", "The net throughput meets the goal.",
         "rate", "R_goal", "ratio", "a goal of the requirement (goals.throughput)", "goals.throughput",
         reads="capacity"),
    Rule("latency", "The slot is no longer than the latency goal.",
         "L_max", "T_slot", "ratio", "a goal of the requirement (goals.max_latency)", "goals.max_latency"),
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
