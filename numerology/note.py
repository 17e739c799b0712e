"""The design note: a self-contained Markdown justification of one design.

Built from a :class:`~numerology.api.CheckResult` (``check --markdown``) or
a :class:`~numerology.api.SolveResult` (``solve --markdown``). A reviewer can
recompute every number from the note alone: the requirements as analysed
(what-ifs beside the file's values), the profile's taps, every setting and
default in force with its source, the modulation-and-coding table, the
receiver's estimation allowance, each rule with its numbers, and every
function and quantity the rules use, defined in LaTeX. Formulas come from the
declarations in :mod:`numerology.rules` (rules and definitions) through
:mod:`numerology.symbolic`; numbers from the same evaluation the terminal
report shows. Written atomically; an input file is never overwritten (see
:mod:`numerology.output`).
"""

from __future__ import annotations

import datetime as _dt
import math
import re

import numpy as np

from . import __version__, arrangement, estimation, link, mcs
from .environment import derivations, rules_of_thumb
from .output import write_atomic
from .render_terminal import (CAUTION, LIMIT_LABELS, TERM_LABELS, _quantity, design_line, fmt, relaxed_sentence,
                              setting, show_margin, what_if_text, window_sentence)
from .rules import BY_NAME, DEFINED, DEFINITION_SYMBOLS, DERIVED, FUNCTIONS, SYMBOLS
from .units import db, engineering, speed_kmh

#: The documents a note may cite: (what the text names, the full reference). A note lists those it names.
BIBLIOGRAPHY = (
    ("Clarke", "R. H. Clarke, \"A statistical theory of mobile-radio reception\", Bell Syst. Tech. J. 47(6), 1968."),
    ("Jakes", "W. C. Jakes (ed.), Microwave Mobile Communications, Wiley, 1974."),
    ("Rappaport", "T. S. Rappaport, Wireless Communications: Principles and Practice, 2nd ed., Prentice Hall, 2002, "
                  "ch. 5."),
    ("Tse & Viswanath", "D. Tse, P. Viswanath, Fundamentals of Wireless Communication, Cambridge University Press, "
                        "2005, ch. 2."),
    ("Bello", "P. A. Bello, \"Characterization of randomly time-variant linear channels\", IEEE Trans. Commun. Syst. "
              "11(4), 1963."),
    ("Russell & Stueber", "M. Russell, G. L. Stueber, \"Interchannel interference analysis of OFDM in a mobile "
                          "environment\", IEEE VTC 1995."),
    ("Pollet", "T. Pollet, M. Van Bladel, M. Moeneclaey, \"BER sensitivity of OFDM systems to carrier frequency "
               "offset and Wiener phase noise\", IEEE Trans. Commun. 43(2/3/4), 1995."),
    ("Moose", "P. H. Moose, \"A technique for orthogonal frequency division multiplexing frequency offset "
              "correction\", IEEE Trans. Commun. 42(10), 1994."),
    ("Hoeher", "P. Hoeher, S. Kaiser, P. Robertson, \"Two-dimensional pilot-symbol-aided channel estimation by "
               "Wiener filtering\", Proc. IEEE ICASSP 1997."),
    ("Kay", "S. M. Kay, Fundamentals of Statistical Signal Processing: Estimation Theory, Prentice Hall, 1993, "
            "ch. 12."),
    ("Proakis", "J. G. Proakis, Digital Communications, McGraw-Hill (differential detection in fading)."),
    ("Shannon", "C. E. Shannon, \"A mathematical theory of communication\", Bell Syst. Tech. J. 27, 1948."),
    ("Forney", "G. D. Forney Jr., G. Ungerboeck, \"Modulation and coding for linear Gaussian channels\", IEEE Trans. "
               "Inf. Theory 44(6), 1998."),
    ("EBU TR 024", "EBU TR 024, and ITU-R Report BT.2386: weighting of echoes beyond the guard interval."),
    ("ITU-R P.1407", "ITU-R Recommendation P.1407: multipath propagation and parameterization of its "
                     "characteristics."),
    ("TS 36.101", "3GPP TS 36.101 Annex B (LTE propagation conditions: EPA, EVA, ETU)."),
    ("TR 38.901", "3GPP TR 38.901 sect. 7.7 (tapped-delay-line models TDL-A to TDL-E, scaling)."),
    ("M.1225", "ITU-R Recommendation M.1225 Annex 2 (tapped-delay-line test profiles)."),
    ("802.11", "IEEE Std 802.11-2016 cl. 17 (OFDM PHY; Table 17-4, modulation-dependent parameters)."),
    ("TS 36.211", "3GPP TS 36.211 (LTE physical channels and modulation)."),
    ("TS 38.211", "3GPP TS 38.211 (NR physical channels and modulation)."),
    ("EN 300 744", "ETSI EN 300 744 (DVB-T framing, channel coding and modulation)."),
    ("EN 300 401", "ETSI EN 300 401 (DAB)."),
)

ASSUMPTIONS = (
    "Wide-sense stationary uncorrelated scattering: the channel's correlation between two resource elements is "
    "that of the Doppler spectrum in time times that of the power-delay profile in frequency (R_H above).",
    "The receiver's FFT window is synchronised to the first arrival; echoes beyond the guard are weighted as in "
    "EBU TR 024.",
    "Impairments add as independent noise-like powers (I_tot); the estimation error counts as noise and takes its "
    "share from the useful signal (SINR_eff).",
    "Phase noise is counted after common-phase correction in every symbol; the residual frequency error is a fixed "
    "offset.",
    "Pilots see the data's noise and interference, raised by the arrangement's pilot boost; the estimate uses "
    "exactly the pilots the arrangement and the receiver's allowance give (Settings in force).",
    "Throughput uses the modulation-and-coding table (or the Shannon-gap model) at the effective SINR of the edge "
    "of coverage.",
)

#: Model constants that shape a result beside the requirement keys: (label, value as text, source).
MODEL_CONSTANTS = (
    ("pilot-bearing symbols in one data symbol's estimate, at most (the nearest usable ones)",
     str(estimation.MAX_PILOT_SYMBOLS),
     "numerology.estimation.MAX_PILOT_SYMBOLS; common practice: time interpolation over a few pilot symbols"),
    ("band eigenmodes of the scattered taps dropped while together below (counted as estimation error)",
     f"{estimation.MODE_ENERGY_TOL:g} of the channel power", "numerology.estimation.MODE_ENERGY_TOL"),
)

#: What each rule setting that is not a rule's threshold sets.
SETTING_USE = {
    "rules.cp_allowance": "T_allow",
    "rules.guard_rule": "which guard rule applies (energy: `guard_interval`; coverage: `cp_covers_delay`)",
    "rules.coherence_correlation": "rho_c (coherence time and bandwidth)",
    "rules.delay_threshold": "tau_max from the taps",
    "rules.estimator": "e_d",
    "rules.estimation_lookahead": "the pilots a stream's receiver uses",
    "rules.estimation_memory": "the pilots a stream's receiver uses",
    "rules.efficiency_model": "efficiency",
    "rules.shannon_gap": "Gamma",
    "rules.mcs_table": "efficiency, sinr_min",
    "environment.propagation_speed": "f_D",
    "environment.doppler_spectrum": "rho_sc, rho_los",
    "environment.k_factor": "P_los",
    "radio.occupancy": "occ",
    "radio.oscillator_linewidth": "beta_o",
    "radio.frequency_error": "f_o",
    "goals.max_overhead": "ovh_max",
    "goals.throughput": "R_goal",
    "goals.max_latency": "L_max",
}

#: Defaults of keys outside [rules] that enter the result when the file leaves them out.
OTHER_DEFAULTS = ("environment.propagation_speed", "environment.doppler_spectrum", "radio.occupancy",
                  "radio.oscillator_linewidth", "radio.frequency_error", "goals.max_overhead", "goals.throughput")

#: The unit each symbol's value is shown in ("ratio": a power ratio, linear and in dB).
VALUE_UNITS = {
    "df": "Hz", "f_D": "Hz", "B_c": "Hz", "B": "Hz", "W_occ": "Hz", "beta_o": "Hz", "f_o": "Hz", "B_ch": "Hz",
    "f_s": "Hz", "f_clk": "Hz", "tau_max": "s", "T_allow": "s", "T_c": "s", "T_u": "s", "T_cp": "s", "T_s": "s",
    "T_m": "s", "T_slot": "s", "L_max": "s", "P_x": "s", "R_goal": "bit/s", "rate": "bit/s",
    "echo_guard": "ratio", "echo_max": "ratio", "sinr_eff": "ratio", "sinr_min": "ratio", "ici_max": "ratio",
    "osc_max": "ratio", "SNR": "ratio", "E_est": "ratio", "I_tot": "ratio", "sinr_p": "ratio", "sigma2": "ratio",
    "beta_p": "ratio", "K": "ratio",
}


def _md_table(header, rows) -> list[str]:
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(str(c).replace("|", "\\|") for c in row) + " |" for row in rows]
    return lines


def definition_cases(req, design, environment) -> dict:
    """The case of each definition that applies to this design in this environment (``Definition.case_of``)."""
    spectrum = environment.doppler_spectrum
    oscillator = "mask" if req.radio.phase_noise is not None else "wiener"
    scope = "differential" if design.pilot_scope == "differential" else "pilots"
    return {"rho_sc": spectrum, "rho_los": spectrum, "I_PN": oscillator, "phi_osc": oscillator, "E_est": scope,
            "sigma2": scope, "e_d": req.rules.estimator, "efficiency": req.rules.efficiency_model,
            "rho_pil": "shared" if design.pilot_data_shared else "alone"}


def render_note(req, check=None, solution=None, verification=None) -> str:
    """The design note as Markdown text."""
    from .symbolic import definition_latex, derived_latex, rule_latex

    if solution is not None and solution.feasible:
        check = solution.designs[0].check
    env = check.environment if check is not None else solution.environment
    out = _opening(req) + _requirements_section(req, check)
    out += _environment_section(env)
    if solution is not None:
        out += _solution_section(solution)
    if check is None:
        out += _infeasible_section(solution)
        out += _settings_section(req, None, env)
    else:
        out += _design_section(check, req, solution is not None)
        out += _settings_section(req, check.design, env, check)
        out += _rules_section(check, rule_latex, definition_cases(req, check.design, check.environment))
        out += _definitions_section(check, req, definition_latex, derived_latex)
        out += _budget_section(check, req)
        out += _limits_section(check)
    if verification is not None:
        out += ["## Verification by simulation", ""]
        out += _verification_lines(verification)
    return "\n".join(_closing(out))


def _opening(req) -> list[str]:
    """Title, date and caution."""
    return [f"# Design note: {req.path}", "",
            f"Generated by numerology {__version__} on {_dt.date.today().isoformat()}.", "", f"> {CAUTION}", ""]


def _closing(out: list[str]) -> list[str]:
    """The note's lines followed by the assumptions, the documents the lines cite and the cautions."""
    out = out + ["## Assumptions", ""] + [f"- {a}" for a in ASSUMPTIONS] + [""]
    body = "\n".join(out)
    cited = [reference for tag, reference in BIBLIOGRAPHY if tag in body]
    out += ["## Sources", "", "The documents cited above:", ""] + [f"- {reference}" for reference in cited] + [""]
    out += ["## Cautions", "", CAUTION, "",
            "This note is an engineering aid. The margins are only as good as the channel bounds given: "
            "measure the deployment's delay spread and speeds, and confirm the design on hardware.", ""]
    return out


# --- 1. requirements ---------------------------------------------------------------------


def _requirements_section(req, check) -> list[str]:
    what_if = dict(getattr(check, "what_if", None) or {})
    out = ["## 1. Requirements", ""]
    if not what_if:
        out += _md_table(("key", "value"), [(k, f"`{v}`") for k, v in req.given])
        out += ["", "Keys not listed take their defaults (section 5, Settings in force, lists those that matter).",
                ""]
        return out
    analysed = {}
    if "speed_mps" in what_if:
        analysed["environment.max_speed"] = f"**{speed_kmh(what_if['speed_mps'])}** (what-if, --speed)"
        analysed["environment.max_doppler"] = "replaced by the what-if speed"
    if "max_excess_delay_s" in what_if:
        analysed["environment.max_excess_delay"] = (f"**{engineering(what_if['max_excess_delay_s'], 's')}** "
                                                     "(what-if, --delay; the profile stretched to it)")
    given = dict(req.given)
    rows = [(k, f"`{v}`", analysed.get(k, f"`{v}`")) for k, v in req.given]
    for key, text in analysed.items():
        if key not in given and not text.startswith("replaced"):
            rows.append((key, "not given" if key != "environment.max_excess_delay" else "from the profile", text))
    out += _md_table(("key", "in the file", "analysed"), rows)
    out += ["", f"What-if: {what_if_text(what_if, req)}. Everything below is for the values analysed.",
            "Keys not listed take their defaults (section 5, Settings in force, lists those that matter).", ""]
    return out


# --- 2. environment and taps ----------------------------------------------------------------


def _environment_section(env) -> list[str]:
    out = ["## 2. Derived channel environment", ""]
    rows = [(d.label, fmt(d.value, d.unit), d.formula, d.source) for d in derivations(env)]
    out += _md_table(("quantity", "value", "formula", "source"), rows)
    out.append("")
    kind = "assumed" if env.profile_source.startswith("assumed") else "given"
    out.append(f"### Power-delay profile: {env.profile_name} ({len(env.delays_s)} taps, {kind})")
    out.append("")
    out.append(f"Source: {env.profile_source}. Delays from the first arrival; powers as fractions of the channel "
               "power (line of sight included, at the first arrival).")
    out.append("")
    delays, powers = env.taps
    first = int(np.argmin(delays))
    rows = []
    for m, (tau, p) in enumerate(zip(delays, powers)):
        los = env.los_fraction if m == first else 0.0
        rows.append((m, engineering(float(tau), "s", 6), f"{p:.6g}", f"{los:.6g}", f"{p - los:.6g}",
                     f"{10 * math.log10(p):.2f}" if p > 0 else "-inf"))
    out += _md_table(("m", "delay tau_m", "power p_m", "line of sight", "scattered p^s_m", "power (dB)"), rows)
    out.append("")
    thumbs = rules_of_thumb(env)
    if thumbs:
        out.append("Other definitions in use, for comparison (this note uses the exact values above):")
        out.append("")
        out += _md_table(("quantity", "rule of thumb", "value"),
                         [(q, lbl, engineering(v, "s" if "time" in q else "Hz")) for q, lbl, v in thumbs])
    for note in env.notes:
        out += ["", f"Note: {note}."]
    out.append("")
    return out


# --- 3. search -----------------------------------------------------------------------------------


def _solution_section(solution) -> list[str]:
    from .design import pilot_label

    w = solution.window
    out = ["## 3. Search", ""]
    if w.empty:
        out.append(window_sentence(w) + " This holds even with the most favourable cyclic prefix, pilots and slot.")
    else:
        out.append(f"Subcarrier-spacing window: {engineering(w.min_hz, 'Hz')} to {engineering(w.max_hz, 'Hz')}; "
                   f"bounded below by `{w.lower_bound_rule or 'the largest FFT'}` and above by "
                   f"`{w.upper_bound_rule or 'one subcarrier filling the band'}`.")
    s = solution.stats
    out.append("")
    out.append(f"{s.candidates:,} candidate designs were in the search space; {s.after_cheap_rules:,} passed the "
               f"rules that need no estimation error, {s.evaluated_exactly:,} were evaluated exactly, "
               f"{s.feasible_found:,} were found feasible. Objective: {solution.objective}.")
    if s.stopped_at_budget:
        out.append("The exact evaluation stopped at its work budget: the designs below are the best found, "
                   "not proven best.")
    out.append("")
    if solution.feasible:
        rows = []
        for r in solution.designs:
            c = r.check
            d = c.design
            b = c.binding_rule
            rows.append((r.rank, engineering(d.subcarrier_spacing_hz, "Hz"), d.fft_size, d.cp_samples,
                         pilot_label(d), d.symbols_per_slot, engineering(c.net_throughput_bps, "bit/s"),
                         f"{b.name} ({show_margin(b)})"))
        out += _md_table(("rank", "spacing", "FFT", "CP samples", "pilots", "slot symbols", "net rate", "binding"),
                         rows)
        out.append("")
        if solution.relaxed is not None:
            out.append(relaxed_sentence(solution.relaxed, solution.objective, code=lambda key: f"`{key}`"))
            out.append("")
        if solution.neighbours:
            out.append("Designs one step away from the chosen one:")
            out.append("")
            for n in solution.neighbours:
                verdict = f"rejected by `{n.failing_rule}`" if n.failing_rule else "also feasible"
                out.append(f"- {n.change}: {verdict}")
            out.append("")
    return out


def _infeasible_section(solution) -> list[str]:
    out = ["## 4. Why no design fits", ""]
    diag = solution.diagnosis
    if diag is None:
        return out + ["(no diagnosis was run)", ""]
    what = "Conflict" if diag.cause == "rules" else "The candidate space is the cause"
    out.append(f"{what} ({', '.join(f'`{c}`' for c in diag.conflict)}): {diag.statement}.")
    out.append("")
    if diag.relaxations:
        out.append("Any one of these changes makes the request feasible (each was checked by solving again):")
        out.append("")
        out += [f"- {_change(r)}" for r in diag.relaxations]
    elif diag.pairs:
        out.append("No single change is enough; either of these pairs makes the request feasible (each was "
                   "checked by solving again):")
        out.append("")
        out += [f"- {_change(a)}, together with {_change(b)}" for a, b in diag.pairs]
    else:
        out.append("No single change, nor any pair of the keys tried, makes the request feasible within the "
                   "diagnosis's work budget.")
    out.append("")
    return out


def _change(relaxation) -> str:
    text = f"`{relaxation.key}` {relaxation.direction} `{relaxation.value}` (now `{relaxation.current}`)"
    return text + "".join(f", `{s.key}` = `{s.text}`" for s in relaxation.also)


# --- 4. the design ---------------------------------------------------------------------------------


def _design_section(check, req, solved: bool) -> list[str]:
    from .design import pilot_label

    d = check.design
    title = f"Chosen design: {check.origin or d.name}" if solved else f"Design checked: {check.origin or d.name}"
    out = [f"## 4. {title}", "", design_line(d, req) + ".", ""]
    rows = [
        ("name", d.name),
        ("source", d.source or "-"),
        ("subcarrier spacing", engineering(d.subcarrier_spacing_hz, "Hz", 9)),
        ("FFT size / sample rate", f"{d.fft_size} / {engineering(d.sample_rate_hz, 'Hz', 9)}"),
        ("useful symbol", engineering(d.useful_symbol_s, "s", 6)),
        ("cyclic prefix", f"{d.cp_samples} samples = {engineering(d.cp_s, 's', 6)}"),
        ("extra cyclic prefix", f"{d.cp_extra_samples} samples once per {engineering(d.cp_extra_period_s, 's', 6)}"
         if d.cp_extra_samples and d.cp_extra_period_s else "none"),
        ("used subcarriers", f"{d.used_subcarriers} ({engineering(d.occupied_bandwidth_hz, 'Hz', 6)})"),
        ("reserved subcarriers", f"{d.reserved_subcarriers:.6g} per symbol on average"),
        ("channel of the standard", engineering(d.channel_bandwidth_hz, "Hz") if d.channel_bandwidth_hz else "none"),
        ("pilots", pilot_label(d)),
        ("pilot scope", f"{d.pilot_scope}: {arrangement.SCOPE_MEANING[d.pilot_scope]}"),
    ]
    if d.pilot_scope != "differential":
        symbols = ", ".join(str(b) for b in arrangement.symbols_of(d.pilot_symbols))
        rows += [
            ("pilot-bearing symbols", f"{symbols} of each period of {d.pilot_period} symbols"),
            ("pilot comb", f"every {d.pilot_freq_spacing} used subcarriers, advancing {d.pilot_shift} per "
                           f"pilot-bearing symbol; largest gap {d.pilot_time_spacing} symbols"),
            ("pilot boost", f"{d.pilot_boost_db:g} dB"),
            ("data beside the pilots", "yes" if d.pilot_data_shared else "no (a pilot-bearing symbol carries no data)"),
        ]
    rows.append(("slot", f"{d.symbols_per_slot} symbols = {engineering(d.slot_s, 's', 6)}"))
    out += _md_table(("parameter", "value"), rows)
    out.append("")
    for note in check.notes:
        out += [f"Note: {note}.", ""]
    return out


# --- 5. settings in force --------------------------------------------------------------------------


def _settings_section(req, design, env, check=None) -> list[str]:
    from .requirements import SCHEMA, key as declared

    out = ["## 5. Settings in force", "",
           "Every rule setting and default that shaped the result. A reviewer recomputing a rule needs these with "
           "the design (section 4) and the taps (section 2).", ""]
    given = dict(req.given)
    rows = []
    skipped = _settings_not_in_force(req)
    keys = [k.path for k in SCHEMA if k.section == "rules"] + [k for k in OTHER_DEFAULTS if k not in given]
    for path in keys:
        if path in skipped:
            continue
        key = declared(path)
        value = _setting_value(req, path)
        origin = "given" if path in given else "default"
        source = "the requirement file" if path in given else (key.source or "-")
        rows.append((f"`{path}`", value, origin, source, _used_by(path)))
    out += _md_table(("setting", "value in force", "given or default", "source", "enters"), rows)
    out += ["", "Model constants:", ""]
    out += _md_table(("constant", "value", "source"), MODEL_CONSTANTS)
    out.append("")
    out += _mcs_lines(req, check)
    if design is not None:
        out += _allowance_lines(req, design, env)
    return out


def _settings_not_in_force(req) -> set:
    out = set()
    if req.rules.efficiency_model == "table":
        out.add("rules.shannon_gap")
    else:
        out.add("rules.mcs_table")
    if req.rules.guard_rule == "coverage":
        out.add("rules.max_echo_interference")
    return out


def _setting_value(req, path: str) -> str:
    from .requirements import key as declared

    value = req.value(path)
    if path == "rules.cp_allowance" and value is None:
        allowance = link.cp_allowance_s(req)
        return f"{engineering(allowance, 's', 6)} (4 sample periods at the {engineering(req.radio.bandwidth_hz, 'Hz')} " \
               "bandwidth)"
    if path == "rules.mcs_table":
        return "built-in table" if value is None else f"`{value}`"
    if value is None:
        return "none"
    key = declared(path)
    if path == "environment.propagation_speed":
        return f"{value:.9g} m/s"
    if key.kind in ("db", "quantity"):
        if key.kind == "quantity" and key.dimension not in ("speed",):
            unit = {"frequency": "Hz", "time": "s", "bitrate": "bit/s"}.get(key.dimension)
            return engineering(value, unit, 6) if unit else f"{value:.6g}"
        return setting(path, value)
    if key.kind == "offset":
        return engineering(value, "Hz", 6)
    return f"{value:g}" if isinstance(value, float) else str(value)


def _used_by(path: str) -> str:
    rules = [f"`{r.name}`" for r in BY_NAME.values() if r.setting == path and path != "rules.guard_rule"]
    use = SETTING_USE.get(path)
    parts = rules + ([use] if use else [])
    return ", ".join(parts) or "-"


def _mcs_lines(req, check) -> list[str]:
    if req.rules.efficiency_model == "shannon":
        gap = req.rules.shannon_gap_db
        return ["### Efficiency mapping: Shannon capacity less a gap", "",
                f"Gap Gamma = {gap:g} dB ({10 ** (gap / 10):.6g} linear); capped at eta_max = "
                f"{mcs.DEFAULT_MAX_EFFICIENCY:.6g} bits per resource element (the highest entry of the built-in "
                "table). Source: Shannon 1948; Forney & Ungerboeck 1998 (the gap).", ""]
    table = link.mcs_table(req)
    if req.rules.mcs_table is None:
        origin = (f"built-in: the modulation and code rates of IEEE Std 802.11-2016 Table 17-4 plus 256-QAM 3/4 and "
                  f"5/6 (802.11ac); thresholds derived, not measured: gamma = 10 log10(2^(bits x rate) - 1) + "
                  f"{mcs.SHANNON_GAP_DB:g} dB, a gap to capacity of {mcs.SHANNON_GAP_DB:g} dB being common practice "
                  "for a constraint-length-7 convolutional code with soft decisions near a bit error ratio of 1e-5 "
                  "(from memory; Forney & Ungerboeck 1998 for the gap)")
    else:
        origin = f"from the file `{req.rules.mcs_table}` (thresholds as given there)"
    in_use = check.modulation if check is not None else ""
    order = sorted(range(len(table)), key=lambda i: table[i].required_sinr_db)
    rows, best = [], 0.0
    for j, i in enumerate(order, start=1):
        entry = table[i]
        best = max(best, entry.efficiency)
        rows.append((j, entry.name + (" **(in use)**" if entry.name == in_use else ""), entry.bits_per_symbol,
                     f"{entry.code_rate:.6g}", f"{entry.efficiency:.6g}", f"{entry.required_sinr_db:.4f}",
                     f"{best:.6g}"))
    out = ["### Modulation and coding table", "", f"{len(table)} entries, {origin}. Sorted by threshold: gamma_j "
           "ascending, ebar_j the most bits per resource element among entries 1 .. j (the efficiency function "
           "below sums its steps).", ""]
    out += _md_table(("j", "entry", "bits per symbol", "code rate", "bits per RE", "gamma_j (dB)", "ebar_j"), rows)
    out.append("")
    return out


def _allowance_lines(req, design, env) -> list[str]:
    rules = req.rules
    out = ["### The receiver's estimation allowance", ""]
    text = arrangement.allowance_text(design.pilot_scope, rules.estimator, rules.estimation_lookahead,
                                      rules.estimation_memory, estimation.MAX_PILOT_SYMBOLS)
    if design.pilot_scope == "differential":
        return out + [f"Scope `differential`: {text}; E_est is that of a one-symbol-old, noisy reference.", ""]
    out.append(f"Scope `{design.pilot_scope}` ({arrangement.SCOPE_MEANING[design.pilot_scope]}); the receiver "
               f"uses {text}.")
    out.append("")
    plan, total = _schedule(req, design)
    span = {"stream": "one full period of the pattern (comb offsets included)", "slot": "one slot",
            "packet": "one packet"}[design.pilot_scope]
    out.append(f"Evaluation span: {span}, {plan.span} symbols; N_d = {total} data resource elements. For each data "
               "symbol, the pilot-bearing symbols it may use (relative position, their comb offset):")
    out.append("")
    rows = []
    shown = plan.targets[:24]
    for t in shown:
        pairs = list(zip(t.pilot_lags, t.pilot_offsets))
        used = ", ".join(f"{lag:+d} (offset {offset}" + (f", {pairs.count((lag, offset))} symbols averaged)"
                                                        if pairs.count((lag, offset)) > 1 else ")")
                         for lag, offset in dict.fromkeys(pairs))
        own = "all used subcarriers" if t.data_offset < 0 else f"all but its own comb (offset {t.data_offset})"
        rows.append((t.symbol, used or "none", own,
                     estimation.data_count(design.used_subcarriers, design.pilot_freq_spacing, t)))
    out += _md_table(("data symbol", "pilots used", "data on", "data REs"), rows)
    if len(plan.targets) > len(shown):
        out += ["", f"({len(plan.targets) - len(shown)} more data symbols follow the same pattern.)"]
    if design.pilot_scope == "packet":
        out += ["", "A training block's symbols are averaged into one estimate, held until the next block."]
    out.append("")
    return out


def _schedule(req, design):
    """The evaluation span's schedule (``arrangement.schedule``) and its data resource elements N_d."""
    rules = req.rules
    plan = arrangement.schedule(design.pilot_scope, design.pilot_symbols, design.pilot_period, design.pilot_shift,
                                design.pilot_freq_spacing, design.symbols_per_slot, design.pilot_data_shared,
                                rules.estimation_lookahead, rules.estimation_memory, estimation.MAX_PILOT_SYMBOLS)
    total = sum(estimation.data_count(design.used_subcarriers, design.pilot_freq_spacing, t) for t in plan.targets)
    return plan, total


# --- 6. rules ---------------------------------------------------------------------------------------------


def _rules_section(check, rule_latex, cases) -> list[str]:
    out = ["## 6. Rules", "",
           "Each rule holds when its capacity (left) is at least its demand (right). Margins: ratio rules give "
           "capacity/demand - 1; interference rules give 10 log10(capacity/demand) in dB. Every symbol and "
           "function is defined in section 7.", ""]
    binding = check.binding_rule
    for r in check.rules:
        rule = BY_NAME[r.name]
        mark = " **(binding)**" if r is binding else ""
        out.append(f"### `{r.name}`{mark}: {'passes' if r.passed else 'FAILS'}, margin {show_margin(r)}")
        out.append("")
        out.append(rule.statement)
        out.append("")
        out.append(f"$$ {rule_latex(rule)} $$")
        out.append("")
        out.append(f"With the numbers: capacity {_quantity(r.name, r.capacity)}, demand "
                   f"{_quantity(r.name, r.demand)}. Source: {rule.source}.")
        used = _definitions_in_use(check, cases, [r.name])
        if used:
            out.append("")
            out.append("Defined in section 7: " + ", ".join(f"`{d.name}`" for d in used) + ".")
        out.append("")
    return out


# --- 7. definitions --------------------------------------------------------------------------------------


_NAME = re.compile(r"[A-Za-z_][A-Za-z_0-9]*")


def _names(text: str) -> set:
    return set(_NAME.findall(text))


def _definitions_in_use(check, cases, rules=None) -> list:
    """The definitions the applicable rules (or the given ones) reach, with the SINR's, in declaration order."""
    wanted = set()
    for name in (rules if rules is not None else [r.name for r in check.rules]):
        rule = BY_NAME[name]
        wanted |= _names(rule.capacity) | _names(rule.demand)
    if rules is None:
        wanted |= {"sinr_eff"}
    for _ in range(len(DERIVED) + 1):  # the derived quantities' own names
        for name, (text, _meaning) in DERIVED.items():
            if name in wanted:
                wanted |= _names(text)
    todo = [n for n in wanted if n in DEFINED]
    seen = set()
    while todo:
        name = todo.pop()
        if name in seen:
            continue
        seen.add(name)
        definition = DEFINED[name]
        form = definition.form(cases.get(name, "")) if definition.cases else definition.expression
        named = _names(form) | _names(definition.head) | set(definition.refers)
        todo += [n for n in named if n in DEFINED and n not in seen]
    return [d for d in DEFINED.values() if d.name in seen]


def _definitions_section(check, req, definition_latex, derived_latex) -> list[str]:
    from .symbolic import LATEX_NAMES

    cases = definition_cases(req, check.design, check.environment)
    used = _definitions_in_use(check, cases)
    out = ["## 7. Definitions", "",
           "Every function and quantity the rules above use, as the code evaluates it (the same declarations; the "
           "tests evaluate each against the code). Where a setting picks one of several forms, the form in force "
           "is given.", ""]
    out += ["Derived quantities:", ""]
    out += [f"- $ {tex} $: {meaning}" for _name, tex, meaning in derived_latex()]
    out.append("")
    for d in used:
        case = cases.get(d.name, "")
        picked = f" ({d.case_of} = {case})" if d.cases else ""
        out.append(f"**{d.name}**{picked}: {d.meaning}.")
        out.append("")
        out.append(f"$$ {definition_latex(d, case)} $$")
        out.append("")
        out.append(f"Source: {d.source}.")
        out.append("")
    values = note_values(check, req)
    texts = [d.head + " " + (d.form(cases.get(d.name, "")) if d.cases else d.expression) for d in used]
    texts += [BY_NAME[r.name].capacity + " " + BY_NAME[r.name].demand for r in check.rules]
    texts += [text for text, _meaning in DERIVED.values()]
    named = set().union(*(_names(t) for t in texts))
    rows = []
    meanings = {**SYMBOLS, **{k: m for k, (_t, m) in DERIVED.items()}, **DEFINITION_SYMBOLS}
    for name in [*SYMBOLS, *DERIVED, *DEFINITION_SYMBOLS]:
        if name in named and name in values:
            rows.append((f"$ {LATEX_NAMES.get(name, name)} $", f"`{name}`", meanings[name],
                         _show_value(name, values[name])))
    out += ["Symbols and their values for this design and channel:", ""]
    out += _md_table(("symbol", "name", "meaning", "value"), rows)
    out.append("")
    return out


def _show_value(name: str, value: float) -> str:
    unit = VALUE_UNITS.get(name)
    if isinstance(value, str):
        return value
    if math.isinf(value):
        return "unbounded" if value > 0 else "-unbounded"
    if unit == "ratio":
        return f"{value:.6g} ({10 * math.log10(value):+.3f} dB)" if value > 0 else f"{value:.6g}"
    if unit:
        return engineering(value, unit, 6)
    return f"{value:.6g}"


def note_values(check, req) -> dict:
    """The value of every symbol of the rules and definitions for a checked design (SI, linear)."""
    from .design import DesignArrays
    from .rules import evaluate_derived

    design, env = check.design, check.environment
    ns = link.namespace(DesignArrays.from_designs([design]), env, req)
    values = {k: float(np.ravel(v)[0]) for k, v in ns.items() if not callable(v)}
    sinr = 10 ** (check.effective_sinr_db / 10)
    derived = evaluate_derived({**ns, "sinr_eff": sinr})
    values.update({k: float(np.ravel(derived[k])[0]) for k in DERIVED})
    values["sinr_eff"] = sinr
    if req.rules.guard_rule == "energy":
        values["echo_guard"] = float(np.ravel(link.guard_echo(*env.taps, values["T_cp"], values["T_u"],
                                                                values["T_allow"]))[0])
    terms = check.sinr_terms
    t_est = terms["estimation"]
    values["E_est"] = t_est / (1 + t_est) if math.isfinite(t_est) else 1.0
    values["I_tot"] = sum(v for k, v in terms.items() if k != "estimation")
    values["sinr_p"] = 1 / values["I_tot"] if values["I_tot"] > 0 else math.inf
    values["beta_p"] = 10 ** (design.pilot_boost_db / 10)
    boost = 1.0 if design.pilot_scope == "differential" else values["beta_p"]
    values["sigma2"] = values["I_tot"] / boost
    values["SNR"] = 10 ** (req.radio.snr_db / 10)
    values["K"] = env.k_factor
    values["P_los"] = env.los_fraction
    values["beta_o"] = req.radio.oscillator_linewidth_hz
    values["f_o"] = req.radio.frequency_error_hz
    values["M"] = float(len(env.delays_s))
    values["m_p"] = float(arrangement.popcount(design.pilot_symbols))
    values["P_p"] = float(design.pilot_period)
    values["B_ch"] = design.channel_bandwidth_hz
    values["f_s"] = design.sample_rate_hz
    values["rho_c"] = env.coherence_correlation
    if design.pilot_scope != "differential":
        values["N_d"] = float(_schedule(req, design)[1])
    if req.radio.sample_clock_hz is not None:
        values["f_clk"] = req.radio.sample_clock_hz
    if req.rules.efficiency_model == "shannon":
        values["Gamma"] = 10 ** (req.rules.shannon_gap_db / 10)
        values["eta_max"] = mcs.DEFAULT_MAX_EFFICIENCY
    else:
        values["n_mcs"] = float(len(link.mcs_table(req)))
    return values


# --- 8. SINR, rate and overhead -------------------------------------------------------------------------


def _budget_section(check, req) -> list[str]:
    d = check.design
    values = note_values(check, req)
    out = ["## 8. SINR budget, rate and overhead", ""]
    rows = [(TERM_LABELS[k], f"{v:.6g}", db(10 * math.log10(v), 2) if v > 0 else "none")
            for k, v in check.sinr_terms.items()]
    rows.append(("**effective SINR**", f"{values['sinr_eff']:.6g}", f"**{db(check.effective_sinr_db, 2)}**"))
    out += _md_table(("term (relative to the useful signal)", "linear", "dB"), rows)
    out += ["", "The estimation term is E_est / (1 - E_est), so that 1 / SINR_eff = E_est / (1 - E_est) + "
                "I_tot / (1 - E_est).", ""]
    cp = 1 - values["T_u"] / values["T_m"]
    pilots = values["rho_pil"]
    reserved = values["R_res"] / values["N_u"]
    out += _md_table(("overhead", "fraction", "from"), [
        ("cyclic prefix (of the time)", f"{cp:.6g}", "1 - T_u / mean symbol duration"),
        ("pilots (of the used resource elements)", f"{pilots:.6g}", "rho_pil"),
        ("reserved subcarriers (of the used resource elements)", f"{reserved:.6g}",
         f"{d.reserved_subcarriers:.6g} of {d.used_subcarriers} per symbol"),
        ("**total**", f"**{check.overhead:.6g}**", "1 - (1 - prefix) (1 - pilots - reserved)"),
    ])
    data_per_symbol = d.used_subcarriers * (1 - pilots - reserved)
    out += ["", f"Net throughput: {data_per_symbol:.6g} data resource elements per symbol x "
                f"{check.efficiency:.6g} bits each ({check.modulation or 'no entry'}) / {engineering(values['T_m'], 's', 6)} "
                f"per symbol = {engineering(check.net_throughput_bps, 'bit/s', 6)}.", ""]
    return out


# --- 9. stretch limits ------------------------------------------------------------------------------------


def _limits_section(check) -> list[str]:
    if not check.limits:
        return []
    out = ["## 9. Stretch limits", "", "Each stress alone, everything else as analysed:", ""]
    rows = []
    for key, limit in check.limits.items():
        label, unit = LIMIT_LABELS[key]
        if math.isinf(limit.value):
            value = "beyond the searched range"
        elif unit == "dB":
            value = f"{limit.value:.2f} dB"
        elif unit == "m/s":
            value = speed_kmh(limit.value)
        else:
            value = engineering(limit.value, unit)
        rows.append((label, value, f"`{limit.rule}`" if limit.rule else "-"))
    out += _md_table(("stress", "limit", "rule that fails first"), rows) + [""]
    return out


def _verification_lines(verification) -> list[str]:
    data = verification.to_json()
    lines = [f"Monte-Carlo link simulation ({data['frames']} frames, seed {data['seed']}), an independent receiver: "
             f"model and simulation **{data['verdict']}**.", ""]
    rows = []
    for name, figure in data["figures"].items():
        def show(v):
            return "n/a" if v is None else f"{v:.2f} dB"

        rows.append((name, show(figure["measured_db"]), f"{show(figure['ci_low_db'])} .. {show(figure['ci_high_db'])}",
                     show(figure["predicted_db"]), f"{figure['tolerance_db']:g} dB", figure["verdict"]))
    lines += _md_table(("figure", "measured", "interval", "predicted", "tolerance", "verdict"), rows) + [""]
    rate = data["rate"]
    if rate is not None:
        state = "holds" if rate["holds"] else ("falls short" if rate["resolved"] else "is not resolved by the run")
        lines += [f"Rate {rate['name']} needs {rate['required_sinr_db']:.2f} dB; the measured SINR margin is "
                  f"{rate['margin_db']:+.2f} dB: the rate {state}.", ""]
    for note in data.get("notes", []):
        lines.append(f"- {note}")
    lines.append("")
    return lines


def write_note(path, req, check=None, solution=None, verification=None) -> None:
    """Write the note atomically to ``path``."""
    write_atomic(path, render_note(req, check, solution, verification).encode("utf-8"))


# --- mode plans -----------------------------------------------------------------------------


def plan_section(result, heading: str = "## 2. Mode plan") -> list[str]:
    """The Markdown section that explains a mode plan (``numerology.plan.PlanResult``)."""
    from .plan import OBJECTIVE_WORDS
    from .render_terminal import (PLAN_COMPARISON, PLAN_MODE_COLUMNS, plan_change_sentences, plan_comparison,
                                  plan_figures_row, plan_hardest_sentence, plan_mode_cells, rule_margin)

    f, o, s = result.figures, result.optimisation, result.search
    out = [heading, ""]
    asked = f"at most {result.modes_asked} modes" if result.modes_asked else "the fewest modes"
    out.append(f"Sites: `{result.sites.path}`, {f.sites} sites ({s.channels} distinct channels). Asked for {asked} "
               f"serving the most sites, then {OBJECTIVE_WORDS[result.objective]}. "
               f"**{len(result.modes)} modes serve {f.served} of {f.sites} sites.**")
    out.append("")
    if result.modes:
        out += _md_table([c.lstrip(">") for c in PLAN_MODE_COLUMNS], [plan_mode_cells(m) for m in result.modes])
        out.append("")
        for mode in result.modes:
            out.append(f"- {plan_hardest_sentence(mode, lambda name: f'`{name}`')} {design_line(mode.design)}.")
        out.append("")
        out += ["What the modes buy, over the sites each plan serves:", ""]
        out += _md_table([c.lstrip(">") or "plan" for c in PLAN_COMPARISON],
                         [plan_figures_row(label, figures) for label, figures in plan_comparison(result)])
        out += ["", " ".join(plan_change_sentences(result)), ""]
    if result.fewest_for_all and result.fewest_for_all != len(result.modes):
        out += [f"{result.fewest_for_all} modes serve every site a design can serve.", ""]
    if result.unserved:
        out += [f"Sites no mode serves ({len(result.unserved)}):", ""]
        out += _md_table(("site", "line", "closest mode", "failing rule", "margin", "why"),
                         [(u.site, u.line or "-", u.closest_mode or "-", f"`{u.rule}`" if u.rule else "-",
                           rule_margin(u.rule, u.margin), u.reason) for u in result.unserved])
        out.append("")
    exact = (f"proved optimal ({o.method}; the integer programmes by HiGHS through scipy.optimize.milp)"
             if o.status == "optimal"
             else f"the best found within the time limit of {o.time_limit_s:g} s per integer programme "
                  f"(relative gap {o.gap:.2g})")
    out.append(f"The plan is {exact}; the greedy plan beside it uses {o.greedy_modes} modes and serves "
               f"{o.greedy_served} sites. Candidates: designs that pass every rule at one of {s.anchors} anchor "
               f"environments (the harsh corners of groups of sites), {s.candidates} in all, {s.exact_rows} of them evaluated "
               "exactly at every site; every figure above is from the same link model as `numerology check` "
               "at each site's own values.")
    out.append("")
    return out


def render_plan_note(req, result) -> str:
    """A design note whose body is a mode plan."""
    rules = sorted({m.hardest_rule for m in result.modes} | {u.rule for u in result.unserved if u.rule})
    sources = [f"- `{name}`: {BY_NAME[name].source}." for name in rules if name in BY_NAME]
    out = _opening(req) + ["## 1. Requirements", ""] + _md_table(("key", "value"), [(k, f"`{v}`") for k, v in req.given])
    out += ["", "Keys not listed take their documented defaults (README, requirement keys).", ""]
    out += plan_section(result)
    if sources:
        out += ["Sources of the rules named above:", ""] + sources + [""]
    return "\n".join(_closing(out))


def write_plan_note(path, req, result) -> None:
    """Write the plan's design note atomically to ``path``."""
    write_atomic(path, render_plan_note(req, result).encode("utf-8"))
