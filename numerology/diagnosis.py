"""Why a request is infeasible, and what to change: one account, told the same way everywhere.

1. **The spacing axis** (``numerology.spacing``): every rule's relaxed margin
   at every spacing. An empty window is explained by the rules whose bounds
   cross, with the crossing values ("oscillator_ici needs >= 16.5 kHz;
   flat_fading allows <= 15.2 kHz"), or by a rule that passes at no spacing.
2. **The candidate space**, when the window is open: a spacing family with no
   member in the window, or FFT sizes and a sample clock that give no
   numerology at the window's spacings, is the cause, named by its key.
3. **Rules beyond the window**, when candidates exist but none passes: a
   smallest set of rules that no design passes together (a deletion filter
   with the solver as oracle: drop each rule in turn and keep it out while
   the rest stays infeasible).
4. **Relaxations** (``numerology.relaxation``): every key that alone makes the
   request feasible, with its nearest value; where none does, the smallest
   pairs. Each is re-solved, as pasted, before it is shown.

The window, the conflict and the relaxations come from the same account and
the same oracle, so the terminal, the JSON and the design note agree.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import link
from .environment import derive_environment
from .errors import InputError
from .relaxation import (KNOBS, Oracle, Relaxation, Searcher, auto_option, family_options,  # noqa: F401
                         quantity_string, space_options)
from .requirements import Requirements
from .spacing import Window, spacing_account
from .units import engineering

CAUSES = ("rules", "candidates")


@dataclass(frozen=True)
class Diagnosis:
    """The diagnosis of an infeasible request (see the module docstring)."""

    cause: str  # "rules" or "candidates"
    conflict: tuple  # rule names; for the candidate space, the key that empties it
    statement: str  # the conflict in one sentence, in engineering units
    window: Window
    bounds: tuple = ()  # spacing.Bound of each rule of a conflict on the spacing axis
    relaxations: tuple = ()  # Relaxation: each alone makes the request feasible
    pairs: tuple = ()  # (Relaxation, Relaxation): where no single change does

    def to_json(self) -> dict:
        return {"cause": self.cause, "statement": self.statement, "conflict": list(self.conflict),
                "bounds": [b.to_json() for b in self.bounds],
                "relaxations": [r.to_json() for r in self.relaxations],
                "relaxation_pairs": [[r.to_json() for r in pair] for pair in self.pairs]}


def diagnose(req: Requirements) -> Diagnosis:
    """The conflict and the relaxations of an infeasible request."""
    try:
        environment = derive_environment(req)
    except (InputError, ValueError):
        return Diagnosis("rules", (), "the environment cannot be derived", Window(np.inf, -np.inf, None, None, 0, 0))
    account = spacing_account(environment, req)
    window = account.window
    oracle = Oracle(req)
    searcher = Searcher(req, oracle)
    options = space_options(req, window)
    if window.empty:
        conflict = tuple(b.rule for b in account.conflict)
        statement = account.summary()
        if any(b.nowhere for b in account.conflict):
            statement += " (even with the most favourable cyclic prefix, pilots and slot)"
        diagnosis = Diagnosis("rules", conflict, statement, window, account.conflict)
        sides = [(b.rule,) for b in account.conflict] if len(account.conflict) > 1 else [conflict, conflict]
        # a family that cannot follow the window may need to, once a key has moved it
        follow = [auto_option(req)] if req.search.spacing_family != "auto" else []
        return _with_relaxations(diagnosis, searcher, options, sides, follow)
    finding = space_finding(req, environment, window)
    if finding is not None:
        key, statement = finding
        diagnosis = Diagnosis("candidates", (key,), statement, window)
        own = [o for o in options if o.relaxation.key == key or (key == "search.spacing_family"
                                                                  and o.relaxation.key.startswith("search.spacing"))]
        rest = [o for o in options if o not in own]
        singles = searcher.singles(own + rest, options_first=True)
        return _finish(diagnosis, searcher, singles, [], own[:3])
    conflict = rule_conflict(req, oracle)
    statement = (f"no design with a spacing in the window ({account.summary()}) passes these together: "
                 + ", ".join(conflict))
    diagnosis = Diagnosis("rules", conflict, statement, window)
    return _with_relaxations(diagnosis, searcher, options, [(name,) for name in conflict], [])


def _with_relaxations(diagnosis, searcher, options, sides, pair_options) -> Diagnosis:
    return _finish(diagnosis, searcher, searcher.singles(options), sides, pair_options)


def _finish(diagnosis, searcher, singles, sides, pair_options) -> Diagnosis:
    import dataclasses

    pairs = () if singles else tuple(searcher.pairs(sides, pair_options))
    return dataclasses.replace(diagnosis, relaxations=tuple(singles), pairs=pairs)


def describe_family(req: Requirements) -> str:
    """The spacing family as the requirement file sets it, in words."""
    search = req.search
    name = search.spacing_family
    if name in ("scalable", "auto"):
        low, high = search.spacing_exponents
        return (f'search.spacing_family = "{name}": {engineering(search.spacing_base_hz, "Hz")} x 2^mu, '
                f"mu = {low} .. {high}")
    if name == "range":
        return (f'search.spacing_family = "range": {search.spacing_steps} spacings from '
                f"{engineering(search.spacing_min_hz, 'Hz')} to {engineering(search.spacing_max_hz, 'Hz')}")
    return f'search.spacing_family = "list": {len(set(search.spacings_hz))} spacings'


def space_finding(req: Requirements, environment, window: Window):
    """(key, statement) when the candidate space has nothing in an open window, else None."""
    from . import candidates as cand

    family = cand.spacing_family(req, environment)
    inside = family[window.contains(family)]
    span = f"{engineering(window.min_hz, 'Hz')} .. {engineering(window.max_hz, 'Hz')}"
    if inside.size == 0:
        below, above = family[family < window.min_hz], family[family > window.max_hz]
        nearest = [f"{engineering(below[-1], 'Hz')} below"] if below.size else []
        nearest += [f"{engineering(above[0], 'Hz')} above"] if above.size else []
        return "search.spacing_family", (f"the spacing family ({describe_family(req)}) has no spacing in the "
                                         f"window {span}" + (f"; nearest: {', '.join(nearest)}" if nearest else ""))
    if cand.numerologies(inside, environment, req)[0].size:
        return None
    wide = req.replace("search.max_fft_size", 2**22).replace("search.min_fft_size", 8)
    _, sizes, _, _ = cand.numerologies(inside, environment, wide)
    search = req.search
    have = f"search.min_fft_size = {search.min_fft_size}, search.max_fft_size = {search.max_fft_size}"
    if sizes.size and sizes.min() > search.max_fft_size:
        return "search.max_fft_size", (f"the window's spacings ({span}) need an FFT of at least {int(sizes.min())} "
                                       f"points for the sample rate to cover the bandwidth ({have})")
    if sizes.size and sizes.max() < search.min_fft_size:
        return "search.min_fft_size", (f"the window's spacings ({span}) need an FFT of at most {int(sizes.max())} "
                                       f"points ({have})")
    if req.radio.sample_clock_hz is not None:
        return "radio.sample_clock", (f"no FFT size at the window's spacings ({span}) gives a sample rate derived "
                                      f"from the clock of {engineering(req.radio.sample_clock_hz, 'Hz')}")
    return "search.fft_sizes", f"no FFT size gives a numerology at the window's spacings ({span}) ({have})"


def rule_conflict(req: Requirements, oracle: Oracle) -> tuple:
    """A smallest set of rules (goals included) that no design passes together (deletion filter).

    A rule is dropped only where the rest is shown infeasible without it; where a test is cut short by the
    work budget the rule stays (the set is then not necessarily the smallest).
    """
    names = [rule.name for rule in link.applicable_rules(req) if not rule.gate]
    if oracle.exact((), ignore=tuple(names)) is False:
        # Even with every graded rule left out nothing fits: the yes/no rules conflict.
        return tuple(rule.name for rule in link.applicable_rules(req) if rule.gate)
    keep = list(names)
    for name in names:
        trial = [n for n in keep if n != name]
        if oracle.exact((), ignore=tuple(n for n in names if n not in trial)) is False:
            keep = trial  # still infeasible without it: it is not needed for the conflict
    return tuple(keep)


def relaxations(req: Requirements) -> list:
    """The relaxations of :func:`diagnose` (each alone makes the request feasible)."""
    return list(diagnose(req).relaxations)


def conflict_set(req: Requirements) -> tuple:
    """The conflict of :func:`diagnose`."""
    return diagnose(req).conflict


__all__ = ["Diagnosis", "Relaxation", "diagnose", "conflict_set", "relaxations", "describe_family",
           "space_finding", "rule_conflict", "quantity_string", "KNOBS", "family_options"]
