"""The rules as sympy expressions: LaTeX for the design note, boundaries solved for one variable.

Imported only when a formula is printed or solved: sympy costs start-up time
that ``check`` and ``solve`` do not need. Everything derives from the
declarations in :mod:`numerology.rules` (no rule is written twice): the same
expression strings are parsed here with sympy and compiled there for numpy.
"""

from __future__ import annotations

from functools import lru_cache

import sympy as sp

from .rules import BY_NAME, DEFINED, DEFINITION_SYMBOLS, DERIVED, FUNCTIONS, SYMBOLS, Definition, Rule

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

LATEX_NAMES.update({
    "echo_guard": r"I_{\mathrm{guard}}", "echo_max": r"I_{\mathrm{echo,max}}", "W_occ": r"W_{\mathrm{occ}}",
    "rho_pil": r"\rho_{\mathrm{pil}}",
    # the definitions' own symbols (rules.DEFINITION_SYMBOLS)
    "b": "b", "u": "u", "x": "x", "z": "z", "tau": r"\tau", "p": "p", "p_s": r"p^{\mathrm{s}}", "M": "M", "m": "m",
    "T_g": "T_g", "K": "K", "P_los": r"P_{\mathrm{LOS}}", "beta_o": r"\beta", "f_o": "f_o", "f": "f", "f_1": "f_1",
    "f_n": "f_n", "SNR": r"\mathrm{SNR}", "E_est": r"E_{\mathrm{est}}", "I_tot": r"I_{\mathrm{tot}}",
    "sinr_p": r"\mathrm{SINR}_{\mathrm{p}}", "sigma2": r"\sigma^2", "beta_p": r"\beta_{\mathrm{p}}", "d": "d",
    "N_d": r"N_{\mathrm{d}}", "r_d": r"\mathbf{r}_d", "R_d": r"\mathbf{R}_d", "a_d": r"\mathbf{a}_d",
    "Id": r"\mathbf{I}", "dn": r"\Delta n", "dk": r"\Delta k", "m_p": r"m_{\mathrm{p}}", "P_p": r"P_{\mathrm{p}}",
    "B_ch": r"B_{\mathrm{ch}}", "f_s": "f_s", "f_clk": r"f_{\mathrm{clk}}", "S": "S", "gamma": r"\gamma",
    "ebar": r"\bar e", "n_mcs": r"n_{\mathrm{MCS}}", "j": "j", "Gamma": r"\Gamma", "eta_max": r"\eta_{\max}",
    "rho_c": r"\rho_c",
})

FUNCTION_LATEX = {
    "doppler_ici": r"I_{\mathrm{D}}", "oscillator_ici": r"I_{\mathrm{osc}}", "alias_scale": r"g_{\mathrm{alias}}",
    "efficiency": r"\mathrm{eff}", "clock_mismatch": r"\epsilon_{\mathrm{clk}}",
    # functions of the definitions
    "rho_D": r"\rho_{\mathrm{D}}", "rho_sc": r"\rho_{\mathrm{sc}}", "rho_los": r"\rho_{\mathrm{LOS}}",
    "I_PN": r"I_{\mathrm{PN}}", "I_FO": r"I_{\mathrm{FO}}", "w_echo": "w", "I_echo": r"I_{\mathrm{echo}}",
    "z_u": r"\tilde z", "e_d": "e", "R_H": r"R_H", "phi_osc": r"\phi", "r_alias": "r", "L": "L",
}

#: Definitions whose head is a function call, and the functions of the rule language: sympy functions that
#: print with the LaTeX names above.
_DEFINED_FUNCTIONS = tuple(name for name, d in DEFINED.items() if "(" in d.head and not d.implicit)


def _printed_function(name: str):
    """A sympy function class named ``name`` that prints as FUNCTION_LATEX[name](args) in LaTeX."""
    tex = FUNCTION_LATEX.get(name, name)

    def _latex(self, printer, exp=None):
        args = ", ".join(printer._print(a) for a in self.args)
        head = tex if exp is None else f"{tex}^{{{exp}}}"
        return rf"{head}\left({args}\right)"

    return type(name, (sp.Function,), {"_latex": _latex})


class step(sp.Function):  # noqa: N801 - a name of the rule language
    """The unit step that includes 0: 1 for y >= 0, else 0 (a threshold reached)."""

    def _latex(self, printer, exp=None):
        return rf"\mathbb{{1}}\left[{printer._print(self.args[0])} \geq 0\right]"


class range_min(sp.Function):  # noqa: N801 - a name of the rule language
    """``range_min(expr, m, low, high)``: the least value of expr over the whole numbers m = low .. high."""

    def _latex(self, printer, exp=None):
        expr, var, low, high = (printer._print(a) for a in self.args)
        return rf"\min_{{{var} = {low}, \dots, {high}}} {expr}"

    def doit(self, **hints):
        expr, var, low, high = self.args
        if low.is_Integer and high.is_Integer:
            return sp.Min(*[expr.subs(var, value).doit(**hints) for value in range(int(low), int(high) + 1)])
        return self


@lru_cache(maxsize=1)
def _namespace() -> dict:
    ns = {name: sp.Symbol(name, positive=True) for name in SYMBOLS}
    ns.update({name: sp.Symbol(name, positive=True) for name in DERIVED})
    ns.update({name: _printed_function(name) for name in FUNCTIONS})
    return ns


#: Kinds of the definitions' symbols that are not positive reals.
_REAL, _INTEGER, _INDEXED, _MATRIX = ("u", "x", "z", "f", "dn", "dk"), ("m", "j", "d", "M", "N_d", "n_mcs"), \
    ("tau", "p", "p_s", "gamma", "ebar"), ("r_d", "R_d", "a_d", "Id")


@lru_cache(maxsize=1)
def _definition_namespace() -> dict:
    """Everything a definition may name: the rule language, the definitions' symbols and functions."""
    from sympy.codegen.cfunctions import log2, log10
    from sympy.physics.quantum import Dagger

    ns = dict(_namespace())
    for name in DEFINITION_SYMBOLS:
        if name in _REAL:
            ns[name] = sp.Symbol(name, real=True)
        elif name in _INTEGER:
            ns[name] = sp.Symbol(name, integer=True)
        elif name in _INDEXED:
            ns[name] = sp.IndexedBase(name)
        elif name in _MATRIX:
            ns[name] = sp.Symbol(name, commutative=False)
        else:  # real, not positive: a Piecewise's condition on it must stay as written
            ns[name] = sp.Symbol(name, real=True)
    ns.update({name: _printed_function(name) for name in _DEFINED_FUNCTIONS if name not in FUNCTIONS})
    ns["L"] = _printed_function("L")
    ns.update({name: sp.Symbol(name, positive=True) for name, d in DEFINED.items() if "(" not in d.head})
    ns.update({"step": step, "range_min": range_min, "Dagger": Dagger, "log2": log2, "log10": log10,
               "I": sp.I, "pi": sp.pi})
    return ns


def parse_definition(text: str) -> sp.Expr:
    """A definition's head or expression as written (not simplified: it prints as declared)."""
    from sympy.parsing.sympy_parser import parse_expr

    return _tidy(parse_expr(text, local_dict=dict(_definition_namespace()), evaluate=False))


def _tidy(expr):
    """Drop the factors 1 that an unevaluated parse leaves (``1/x`` is parsed as ``1 * x**-1``)."""
    if not expr.args:
        return expr
    args = [_tidy(a) for a in expr.args]
    if isinstance(expr, sp.Mul):
        kept = [a for a in args if a != 1]
        if len(kept) == 1:
            return kept[0]
        if kept:
            return sp.Mul(*kept, evaluate=False)
        return sp.S.One
    try:
        return expr.func(*args, evaluate=False)
    except TypeError:
        return expr.func(*args)


def definition_latex(definition: Definition, case: str = "") -> str:
    """``head = expression`` of a definition (one case) in LaTeX."""
    return f"{latex(parse_definition(definition.head))} = {latex(parse_definition(definition.form(case)))}"


def expanded(name: str, cases: dict | None = None, quantities: tuple = ()) -> sp.Expr:
    """A definition's expression with every function it calls replaced by that function's own definition.

    ``cases`` picks the case of each definition that has cases (``{definition name: case}``); the defined
    quantities named in ``quantities`` (``sinr_p``, ...) are replaced by their definitions too. Used to
    evaluate a definition numerically, as the tests do against the functions the link model binds.
    """
    cases = cases or {}
    definition = DEFINED[name]
    expr = parse_definition(definition.form(cases.get(name, "")))
    ns = _definition_namespace()
    for _ in range(12):
        before = expr
        for other in _DEFINED_FUNCTIONS:
            function = ns[other]
            if expr.has(function):
                head = parse_definition(DEFINED[other].head)
                body = expanded(other, cases, quantities)
                expr = expr.replace(function, sp.Lambda(head.args, body))
        for other in quantities:
            if other != name and expr.has(ns[other]):
                expr = expr.subs(ns[other], expanded(other, cases, quantities))
        if expr == before:
            break
    return expr


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
    names = {sym: LATEX_NAMES.get(str(sym), str(sym)) for sym in expr.free_symbols if isinstance(sym, sp.Symbol)}
    text = sp.latex(expr, symbol_names=names, mul_symbol="dot")
    for name, tex in LATEX_NAMES.items():  # indexed bases print by their own name
        if isinstance(_definition_namespace().get(name), sp.IndexedBase):
            text = text.replace("{" + sp.latex(sp.Symbol(name)) + "}_", "{" + tex + "}_")
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
