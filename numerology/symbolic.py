"""The rules as sympy expressions: LaTeX for the design note, boundaries solved for one variable.

Imported only when a formula is printed or solved: sympy costs start-up time
that ``check`` and ``solve`` do not need. Everything derives from the
declarations in :mod:`numerology.rules` (no rule is written twice): the same
expression strings are parsed here with sympy and compiled there for numpy.
"""

from __future__ import annotations

from functools import lru_cache

import sympy as sp

from .rules import BY_NAME, DERIVED, FUNCTIONS, SYMBOLS, Rule

#: LaTeX names of the symbols.
LATEX_NAMES = {
    "df": r"\Delta f", "N": "N", "N_cp": r"N_{\mathrm{cp}}", "N_u": r"N_{\mathrm{u}}", "D_f": "D_f", "D_t": "D_t",
    "s_p": "s", "N_slot": r"N_{\mathrm{slot}}", "R_res": r"N_{\mathrm{res}}", "N_x": r"N_{\mathrm{x}}",
    "P_x": r"P_{\mathrm{x}}", "f_D": "f_D", "tau_max": r"\tau_{\max}", "T_allow": r"T_{\mathrm{allow}}",
    "T_c": "T_c", "B_c": "B_c", "B": "B", "occ": r"\eta", "sinr_eff": r"\mathrm{SINR}_{\mathrm{eff}}",
    "sinr_min": r"\mathrm{SINR}_{\min}", "F_qs": r"F_{\mathrm{qs}}", "F_ff": r"F_{\mathrm{ff}}",
    "rho_p": r"\rho_p", "ici_max": r"I_{\mathrm{D,max}}", "osc_max": r"I_{\mathrm{osc,max}}",
    "ovh_max": r"\Omega_{\max}", "R_goal": r"R_{\mathrm{goal}}", "L_max": r"L_{\max}",
    "T_u": "T_u", "T_cp": r"T_{\mathrm{cp}}", "T_s": "T_s", "T_m": r"\bar T_s", "pilot_frac": r"\pi_p",
    "overhead": r"\Omega", "rate": "R", "T_slot": r"T_{\mathrm{slot}}",
}

FUNCTION_LATEX = {
    "doppler_ici": r"I_{\mathrm{D}}", "oscillator_ici": r"I_{\mathrm{osc}}", "alias_scale": r"g_{\mathrm{alias}}",
    "efficiency": r"\mathrm{eff}", "clock_mismatch": r"\epsilon_{\mathrm{clk}}",
}


@lru_cache(maxsize=1)
def _namespace() -> dict:
    ns = {name: sp.Symbol(name, positive=True) for name in SYMBOLS}
    ns.update({name: sp.Symbol(name, positive=True) for name in DERIVED})
    ns.update({name: sp.Function(name) for name in FUNCTIONS})
    return ns


def parse(expression: str) -> sp.Expr:
    """A rule-language expression as a sympy expression (derived names kept as symbols)."""
    return sp.sympify(expression, locals=_namespace())


@lru_cache(maxsize=None)
def expand(expression: str) -> sp.Expr:
    """The expression with every derived quantity substituted by its definition."""
    expr = parse(expression)
    ns = _namespace()
    for _ in range(len(DERIVED)):
        subs = {ns[name]: parse(text) for name, (text, _meaning) in DERIVED.items()}
        new = expr.subs(subs)
        if new == expr:
            break
        expr = new
    return expr


def latex(expr: sp.Expr) -> str:
    names = {sym: LATEX_NAMES.get(str(sym), str(sym)) for sym in expr.free_symbols}
    text = sp.latex(expr, symbol_names=names, mul_symbol="dot")
    for name, tex in FUNCTION_LATEX.items():
        printed = sp.latex(sp.Function(name)(sp.Symbol("x"))).split(r"{\left(")[0]
        text = text.replace(printed, tex)
    return text


def rule_latex(rule: Rule) -> str:
    """The rule as an inequality, capacity >= demand, in LaTeX (derived names kept for readability)."""
    return f"{latex(parse(rule.capacity))} \\geq {latex(parse(rule.demand))}"


def derived_latex() -> list[tuple[str, str, str]]:
    """(name, LaTeX definition, meaning) for each derived quantity."""
    ns = _namespace()
    return [(name, f"{latex(ns[name])} = {latex(parse(text))}", meaning) for name, (text, meaning) in DERIVED.items()]


def boundary(rule_name: str, variable: str) -> list[sp.Expr]:
    """Solve capacity = demand for one variable (derived quantities expanded).

    Returns the list of solutions (empty when sympy finds no closed form, e.g.
    where a numeric function such as the exact Doppler integral is involved).

    Examples
    --------
    >>> boundary("flat_fading", "df")
    [B_c/F_ff]
    """
    rule = BY_NAME[rule_name]
    ns = _namespace()
    equation = sp.Eq(expand(rule.capacity), expand(rule.demand))
    try:
        return list(sp.solve(equation, ns[variable]))
    except NotImplementedError:
        return []
