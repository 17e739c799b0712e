"""What to change in an infeasible request: every key that can help, each re-solved before it is shown.

Keys and what they may become
-----------------------------
* **numeric keys** (:data:`KNOBS`): goals, environment bounds, radio settings and
  rule settings. A goal's nearest feasible value is an optimum (one search
  with the goal left out and its own quantity as the objective); any other
  key's is found by bisection between its value and its most relaxed sensible
  value (:func:`extreme`), first with the cheap test, then with exact tests;
* **the candidate space** (:func:`space_options`): the spacing family against
  the window, FFT sizes, the sample clock, slot lengths, pilot limits and the
  guard rule, each a short list of settings tried in order;
* **pairs**, only when no single change works: one key moving each side of the
  conflict, the second key's nearest value found with the first at its most
  relaxed, then the first's with the second fixed; the smallest pair (the
  least of the way to the keys' extremes) is kept.

The oracle (:class:`Oracle`)
----------------------------
A *cheap* test is a necessary condition of feasibility without any exact
evaluation (some numerology passes every rule with its best pilots and slot,
``solver.numerologies_pass``); an *exact* test asks the solver for one
feasible design, at most :data:`MAX_EXACT` candidates evaluated exactly,
:data:`MAX_TESTS` such tests per diagnosis (so the work is bounded; a test
cut short counts as "not shown to be feasible", which only moves a
suggestion towards the relaxed side). A feasible design found once is kept as
a witness and tried first in later tests: the same spacing, pilots and slot
with the edited request's FFT sizes and cyclic prefixes, evaluated at once
(``solver.transferred``); one that passes proves the edited request feasible
at the cost of one evaluation. Every suggestion is rounded towards the feasible side, as the
user will paste it, and that value is tested exactly before it is shown.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .environment import derive_environment
from .errors import InputError
from .requirements import Requirements, checked
from .units import engineering

#: Relative precision of a suggested value.
RELAX_RTOL = 0.01
#: Candidates evaluated exactly in one feasibility test (inside a bracket, where a design like one already
#: found usually settles it), and exact tests in one diagnosis.
MAX_EXACT = 64
BISECT_EXACT = 16
MAX_TESTS = 32
#: Halvings of a bracket with the cheap test, and with exact tests.
CHEAP_STEPS = 30
EXACT_STEPS = 5
#: Witnesses kept (the most recent first).
WITNESSES = 8


@dataclass(frozen=True)
class Setting:
    """One key set to one value, as written in a requirement file."""

    key: str
    text: str  # for people ("15.9 Mbit/s", "range", "[1, 7, 14]", "(left out)")
    value_si: object  # float, a tuple for a list key, or None (a choice, or the key left out)
    toml: object  # the value to write in the file (None: leave the key out)

    def to_json(self) -> dict:
        return {"key": self.key, "value": self.text, "value_si": _json_si(self.value_si), "toml_value": self.toml}

    def __str__(self) -> str:
        return f"{self.key} = {self.text}"


@dataclass(frozen=True)
class Relaxation:
    """One change that makes the request feasible (with the settings that come with it, ``also``)."""

    key: str  # dotted requirement key
    value: str  # as written in the file
    value_si: object  # float; a tuple for a list key; None for a choice or a key left out
    current_si: object
    direction: str  # "at most", "at least" or "="
    dimension: str = "ratio"  # how values are shown (see quantity_string)
    toml: object = None  # the value to write in the file
    current_text: str = ""
    also: tuple = ()  # Setting: companions of this change (the bounds of a free range)
    share: float = 0.0  # how far towards the key's most relaxed value (0: none; 1: all the way)

    @property
    def current(self) -> str:
        """The value the requirement file has now, written as the suggestion is."""
        if self.current_text:
            return self.current_text
        return quantity_string(self.current_si, self.dimension)

    def settings(self) -> tuple:
        return (Setting(self.key, self.value, self.value_si, self.toml), *self.also)

    def to_json(self) -> dict:
        return {"key": self.key, "value": self.value, "value_si": _json_si(self.value_si), "toml_value": self.toml,
                "current": self.current, "current_si": _json_si(self.current_si), "direction": self.direction,
                "also": [s.to_json() for s in self.also]}

    def __str__(self) -> str:
        text = f"{self.key} {self.direction} {self.value}"
        return text + "".join(f", {s}" for s in self.also)


def _json_si(value):
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, tuple):
        return list(value)
    return None


# --- showing values ----------------------------------------------------------------


def quantity_string(value, dimension: str) -> str:
    """A value as a user writes it in a requirement file."""
    if value is None:
        return "(not given)"
    if dimension == "speed":
        return f"{value * 3.6:.4g} km/h"
    if dimension == "db":
        return f"{value:.4g} dB"
    if dimension in ("ratio", "factor"):
        return f"{value:.4g}"
    unit = {"bitrate": "bit/s", "time": "s", "frequency": "Hz"}[dimension]
    return engineering(value, unit)


def _parse_back(text: str, dimension: str) -> float:
    """The SI value a user gets by pasting the suggested string (rounding included)."""
    from .units import parse_db, parse_quantity

    if dimension == "db":
        return parse_db(text, "relaxation")
    if dimension in ("ratio", "factor"):
        return float(text)
    return parse_quantity(text, dimension, "relaxation")


def _toml(text: str, dimension: str):
    return float(text) if dimension in ("ratio", "factor") else text


def _round_towards(good: float, bad: float, dimension: str, digits: int) -> str:
    """A short value on the feasible side of the boundary (``good`` is feasible, ``bad`` is not)."""
    up = good > bad
    if dimension in ("ratio", "factor"):
        if good == 0:
            return "0"
        step = 10.0 ** (math.floor(math.log10(abs(good))) - (digits - 1))
        value = math.ceil(good / step) * step if up else math.floor(good / step) * step
        if dimension == "ratio":
            value = min(value, 1.0)
        return f"{value:.{digits}g}"
    if dimension == "db":
        step = 0.1
        value = math.ceil(good / step) * step if up else math.floor(good / step) * step
        return f"{value:.1f} dB"
    scale = 3.6 if dimension == "speed" else 1.0
    x = good * scale
    if x <= 0:
        return quantity_string(0.0, dimension)
    step = 10.0 ** (math.floor(math.log10(abs(x))) - (digits - 1))
    x = math.ceil(x / step) * step if up else math.floor(x / step) * step
    return quantity_string(x / scale, dimension)


# --- the oracle ----------------------------------------------------------------------


class Oracle:
    """Feasibility of edited copies of one request (``changes``: a tuple of (key, SI value) pairs)."""

    def __init__(self, req: Requirements):
        self.req = req
        self.tests = 0  # exact tests run
        self.witnesses: list = []
        self._cheap: dict = {}
        self._exact: dict = {}

    def edited(self, changes):
        """(requirement, environment) with the changes, or None if they are out of range or beyond the
        search budget."""
        from . import budget

        req = self.req
        try:
            for key, value in changes:
                req = req.replace(key, value)
            req = checked(req)
            environment = derive_environment(req)
            budget.check_search(req)  # an automatic family counted at its largest
        except (InputError, ValueError):  # out of range, or a value the environment model does not accept
            return None
        return req, environment

    def cheap(self, changes=(), ignore=()) -> bool:
        """A necessary condition: some numerology passes the rules with its best pilots and slot."""
        from . import solver

        memo = (tuple(changes), tuple(ignore))
        if memo not in self._cheap:
            edited = self.edited(changes)
            self._cheap[memo] = edited is not None and solver.numerologies_pass(*edited, ignore)
        return self._cheap[memo]

    def exact(self, changes=(), ignore=(), search: bool = True, max_exact: int = None):
        """True if the solver finds a feasible design, False if none exists, None if not known (budget).

        ``search=False``: only the witnesses are tried (None if none transfers); ``max_exact``: candidates
        the search may evaluate exactly (default :data:`MAX_EXACT`).
        """
        from . import solver

        memo = (tuple(changes), tuple(ignore))
        if memo in self._exact and (self._exact[memo] is not None or not search):
            return self._exact[memo]
        verdict = False
        if self.cheap(changes, ignore):
            req, environment = self.edited(changes)
            found = next((row for row in (solver.transferred(req, environment, w, ignore) for w in self.witnesses)
                          if row is not None), None)
            if found is not None:
                verdict = True
                self.witness(found)
            elif self.tests >= MAX_TESTS or not search:
                verdict = None
            else:
                self.tests += 1
                verdict, row = solver.first_feasible(req, environment, ignore, max_exact or MAX_EXACT)
                if row is not None:
                    self.witness(row)
        self._exact[memo] = verdict
        return verdict

    def witness(self, row) -> None:
        self.witnesses = [row, *self.witnesses][:WITNESSES]


# --- numeric keys -----------------------------------------------------------------------


@dataclass(frozen=True)
class Knob:
    """A numeric key a user may move: raising it helps (direction +1) or lowering it does (-1)."""

    key: str
    dimension: str
    direction: int
    moves: tuple  # the rules it relaxes (for choosing pairs)


SPEED_MOVES = ("doppler_ici", "quasi_static", "pilot_aliasing", "link_closes", "throughput", "overhead")
DELAY_MOVES = ("guard_interval", "cp_covers_delay", "flat_fading", "pilot_aliasing", "link_closes", "throughput",
               "overhead")
SINR_MOVES = ("link_closes", "throughput")

KNOBS = (
    Knob("goals.throughput", "bitrate", -1, ("throughput",)),
    Knob("goals.max_latency", "time", +1, ("latency",)),
    Knob("goals.max_overhead", "ratio", +1, ("overhead",)),
    Knob("environment.max_speed", "speed", -1, SPEED_MOVES),
    Knob("environment.max_doppler", "frequency", -1, SPEED_MOVES),
    Knob("environment.max_excess_delay", "time", -1, DELAY_MOVES),
    Knob("environment.rms_delay_spread", "time", -1, DELAY_MOVES),
    Knob("radio.snr", "db", +1, SINR_MOVES),
    Knob("radio.bandwidth", "frequency", +1, ("throughput",)),
    Knob("radio.oscillator_linewidth", "frequency", -1, ("oscillator_ici", *SINR_MOVES)),
    Knob("radio.frequency_error", "frequency", -1, ("oscillator_ici", *SINR_MOVES)),
    Knob("rules.max_doppler_ici", "db", +1, ("doppler_ici",)),
    Knob("rules.max_oscillator_ici", "db", +1, ("oscillator_ici",)),
    Knob("rules.max_echo_interference", "db", +1, ("guard_interval",)),
    Knob("rules.quasi_static_factor", "factor", -1, ("quasi_static",)),
    Knob("rules.flat_fading_factor", "factor", -1, ("flat_fading",)),
    Knob("rules.pilot_oversampling", "factor", -1, ("pilot_aliasing",)),
    Knob("rules.cp_allowance", "time", -1, ("guard_interval", "cp_covers_delay", "overhead")),
)

#: Goals whose nearest feasible value is an optimum: (rule, objective, sign of the objective's key).
GOAL_OBJECTIVES = {"goals.throughput": ("throughput", "throughput", 1.0),
                   "goals.max_latency": ("latency", "latency", -1.0),
                   "goals.max_overhead": ("overhead", "overhead", -1.0)}


def current_value(req: Requirements, key: str):
    """The SI value of a key now (the CP allowance's default worked out); None if the key is not in use."""
    if key == "rules.cp_allowance":
        from .link import cp_allowance_s

        return cp_allowance_s(req)
    value = req.value(key)
    if key == "goals.throughput" and not (value or 0) > 0:
        return None
    if key == "goals.max_overhead" and not value < 1:
        return None
    if key in ("radio.oscillator_linewidth", "radio.frequency_error") and not (value or 0) > 0:
        return None
    return None if value is None else float(value)


def extreme(req: Requirements, knob: Knob, current: float):
    """The most relaxed sensible value of a key (None when there is none)."""
    key = knob.key
    if key in ("rules.max_doppler_ici", "rules.max_oscillator_ici", "rules.max_echo_interference"):
        return 0.0 if current < 0 else None
    if key == "radio.snr":
        return min(current + 40.0, 80.0) if current < 80 else None
    if key == "radio.bandwidth":
        return min(current * 10.0, 1.999 * req.environment.carrier_hz, 1e11)
    if key == "rules.pilot_oversampling":
        return 1.0 if current > 1 else None
    if key in ("rules.quasi_static_factor", "rules.flat_fading_factor"):
        return max(current / 100.0, 0.01) if current > 0.01 else None
    if key == "goals.max_overhead":
        return 0.999
    if knob.direction > 0:
        return current * 1e3
    return current * 1e-3 if current > 0 else None


def _close(bad: float, good: float, dimension: str) -> bool:
    if dimension == "db":
        return abs(good - bad) < 0.05
    return abs(good - bad) <= RELAX_RTOL * abs(good)


def _middle(bad: float, good: float, dimension: str) -> float:
    if dimension != "db" and bad > 0 and good > 0:
        return math.sqrt(bad * good)
    return 0.5 * (bad + good)


#: Steps beyond the cheap boundary, as fractions of the way to the most relaxed value.
GALLOP = (1 / 16, 1 / 4, 1.0)


def _towards(start: float, far: float, fraction: float, dimension: str) -> float:
    if fraction >= 1:
        return far
    if dimension != "db" and start > 0 and far > 0:
        return start * (far / start) ** fraction
    return start + (far - start) * fraction


def _share(current: float, value: float, far: float, dimension: str) -> float:
    """How far ``value`` is from ``current`` towards ``far`` (0 .. 1; log scale for positive quantities)."""
    if dimension != "db" and current > 0 and value > 0 and far > 0:
        a, b, c = math.log(current), math.log(value), math.log(far)
    else:
        a, b, c = current, value, far
    return abs(b - a) / abs(c - a) if c != a else 1.0


class Searcher:
    """The relaxations of one request (see the module docstring)."""

    def __init__(self, req: Requirements, oracle: Oracle):
        self.req = req
        self.oracle = oracle

    def knobs(self):
        """(knob, current, extreme) for each numeric key in use."""
        for knob in KNOBS:
            current = current_value(self.req, knob.key)
            if current is None:
                continue
            far = extreme(self.req, knob, current)
            if far is not None and far != current:
                yield knob, current, far

    def nearest(self, knob: Knob, current: float, far: float, base=()) -> Relaxation | None:
        """The nearest value of one key that makes the request (with ``base`` changes) feasible."""
        oracle, key, dim = self.oracle, knob.key, knob.dimension
        if knob.key in GOAL_OBJECTIVES and not base:
            return self._goal(knob, current, far)
        if not oracle.cheap((*base, (key, far))):
            return None
        bad, good = current, far
        for _ in range(CHEAP_STEPS):  # the cheap boundary: no value short of it can be feasible
            if _close(bad, good, dim):
                break
            mid = _middle(bad, good, dim)
            if oracle.cheap((*base, (key, mid))):
                good = mid
            else:
                bad = mid
        # Exact tests: designs like those already found first, then a short search (one that finds nothing
        # costs the most, and inside the bracket a miss only moves the suggestion towards the relaxed side).
        if oracle.exact((*base, (key, good)), max_exact=BISECT_EXACT) is not True:
            # Beyond the cheap boundary, in growing steps towards the most relaxed value, then back by bisection.
            start, bad = good, good
            for fraction in GALLOP:
                trial = _towards(start, far, fraction, dim)
                if oracle.exact((*base, (key, trial)), max_exact=BISECT_EXACT if fraction < 1 else None) is True:
                    good = trial
                    break
                bad = trial
            else:
                return None
            for _ in range(EXACT_STEPS):
                if _close(bad, good, dim):
                    break
                mid = _middle(bad, good, dim)
                if oracle.exact((*base, (key, mid)), max_exact=BISECT_EXACT) is True:
                    good = mid
                else:
                    bad = mid
        return self._rounded(knob, current, far, good, bad, base)

    def _goal(self, knob: Knob, current: float, far: float) -> Relaxation | None:
        """A goal's best achievable value with the goal left out (one search), rounded and verified."""
        from . import solver

        rule, objective, sign = GOAL_OBJECTIVES[knob.key]
        if not self.oracle.cheap((), ignore=(rule,)):
            return None
        req, environment = self.oracle.edited(())
        found = solver.search(req, environment, objective=objective, top=1, ignore=(rule,), pareto=False)
        if not found.feasible:
            return None
        self.oracle.witness(found.witness)
        best = sign * float(found.ranked.keys[0])  # the witness's own value: it proves the rounded one
        return self._rounded(knob, current, far, best, current, ())

    def _rounded(self, knob, current, far, good, bad, base) -> Relaxation | None:
        """The value as pasted (rounded towards the feasible side), if an exact test confirms it."""
        for digits in (3, 4, 6):
            text = _round_towards(good, bad, knob.dimension, digits)
            value = _parse_back(text, knob.dimension)
            if value == current:
                continue
            if self.oracle.exact((*base, (knob.key, value))) is True:
                return Relaxation(knob.key, text, value, current, "at least" if knob.direction > 0 else "at most",
                                  knob.dimension, _toml(text, knob.dimension),
                                  share=_share(current, value, far, knob.dimension))
        return None

    def singles(self, options, options_first: bool = False) -> list:
        """Every numeric key and every option of the candidate space that alone makes the request feasible."""
        if options_first:
            first = working_options(self.oracle, options)
            return first + self.singles(())
        out = []
        for knob, current, far in self.knobs():
            found = self.nearest(knob, current, far)
            if found is not None:
                out.append(found)
        return out + working_options(self.oracle, options)

    def pairs(self, sides, options, limit: int = 2) -> list:
        """The smallest pairs of changes that make the request feasible when no single one does.

        ``sides``: groups of rule names (the two crossing rules, or each rule of a conflict set); a pair
        moves two different groups. Options of the candidate space pair with any numeric key.
        """
        knobs = list(self.knobs())
        groups = [[k for k in knobs if set(k[0].moves) & set(side)] for side in sides]
        found = []
        tried = set()
        for i, first in enumerate(groups):
            for second in groups[i + 1:]:
                for a in first:
                    for b in second:
                        if a[0].key == b[0].key or (a[0].key, b[0].key) in tried:
                            continue
                        tried.add((a[0].key, b[0].key))
                        pair = self._pair(a, b)
                        if pair is not None:
                            found.append(pair)
        for option in options:
            for knob in knobs:
                relaxation = self.nearest(*knob, base=option.changes())
                if relaxation is not None:
                    found.append((option.relaxation, relaxation))
        found.sort(key=lambda pair: (sum(r.share for r in pair), pair[0].key, pair[1].key))
        return found[:limit]

    def _pair(self, a, b):
        (knob_a, current_a, far_a), (knob_b, current_b, far_b) = a, b
        both = ((knob_a.key, far_a), (knob_b.key, far_b))
        if not self.oracle.cheap(both) or self.oracle.exact(both) is not True:
            return None
        second = self.nearest(knob_b, current_b, far_b, base=((knob_a.key, far_a),))
        if second is None:
            return None
        first = self.nearest(knob_a, current_a, far_a, base=((knob_b.key, second.value_si),))
        if first is None:
            return None
        # the first key was found with the second at its pasted value; confirm the two together
        if self.oracle.exact(((knob_a.key, first.value_si), (knob_b.key, second.value_si))) is not True:
            return None
        return first, second


# --- the candidate space -------------------------------------------------------------------


@dataclass(frozen=True)
class Option:
    """A change of the candidate space (or a rule's choice) to try as a whole."""

    relaxation: Relaxation

    def changes(self) -> tuple:
        return tuple((s.key, s.value_si) for s in self.relaxation.settings())


def _choice(key: str, value, current, text: str | None = None, toml=None, also=()) -> Option:
    """An option setting a key to a choice, a whole number or a list."""
    shown = text if text is not None else (str(list(value)) if isinstance(value, tuple) else str(value))
    current_text = str(list(current)) if isinstance(current, tuple) else str(current)
    toml = toml if toml is not None else (list(value) if isinstance(value, tuple) else value)
    return Option(Relaxation(key, shown, value, current if isinstance(current, (int, float)) else None, "=", "ratio",
                             toml, current_text, tuple(also)))


def _inward(value: float, up: bool) -> tuple[str, float]:
    """A frequency rounded to 3 digits towards the inside of a window: (text, SI value)."""
    text = _round_towards(value, value * (0.5 if up else 2.0), "frequency", 3)
    return text, _parse_back(text, "frequency")


def auto_option(req: Requirements) -> Option:
    """The automatic family, which follows the window (the default)."""
    return _choice("search.spacing_family", "auto", req.search.spacing_family, '"auto"', "auto")


def family_options(req: Requirements, window) -> list:
    """Families that put spacings inside an open window: a wider exponent range, another base, a free range."""
    if window.empty:
        return []
    search = req.search
    family = search.spacing_family
    out = [auto_option(req)] if family != "auto" else []
    if family in ("scalable", "auto"):
        low, high = search.spacing_exponents
        base = search.spacing_base_hz
        inside = [mu for mu in range(-20, 21) if window.contains(base * 2.0**mu)]
        outside = [mu for mu in inside if not low <= mu <= high]
        if outside and not [mu for mu in inside if low <= mu <= high]:
            mu = min(outside, key=lambda m: min(abs(m - low), abs(m - high)))
            out.append(_choice("search.spacing_exponents", (min(low, mu), max(high, mu)), (low, high)))
        # the nearest base whose family has a member in the window, rounded inside
        choices = []
        for mu in range(low, high + 1):
            lo_base, hi_base = window.min_hz / 2.0**mu, window.max_hz / 2.0**mu
            nearest = min(max(base, lo_base), hi_base)
            text, value = _inward(nearest, up=nearest <= lo_base * (1 + 1e-12))
            if window.contains(value * 2.0**mu) and value != base:
                choices.append((abs(math.log(value / base)), text, value))
        if choices:
            _, text, value = min(choices)
            out.append(Option(Relaxation("search.spacing_base", text, value, base, "=", "frequency", text)))
    if family == "list":
        middle = math.sqrt(window.min_hz * window.max_hz)
        text, value = _inward(middle, up=True)
        listed = tuple(sorted({*search.spacings_hz, value}))
        shown = "[" + ", ".join(f'"{engineering(s, "Hz")}"' for s in listed) + "]"
        out.append(_choice("search.spacings", listed, tuple(search.spacings_hz), shown,
                           [engineering(s, "Hz") for s in listed]))
    if family != "range" or not (search.spacing_min_hz <= window.min_hz and window.max_hz <= search.spacing_max_hz):
        low_text, low = _inward(window.min_hz, up=True)
        high_text, high = _inward(window.max_hz, up=False)
        if low < high:
            also = (Setting("search.spacing_min", low_text, low, low_text),
                    Setting("search.spacing_max", high_text, high, high_text))
            out.append(_choice("search.spacing_family", "range", family, f'"range"', "range", also))
    elif family == "range":  # the range covers the window, but its steps jump over it
        low_text, low = _inward(window.min_hz, up=True)
        high_text, high = _inward(window.max_hz, up=False)
        if low < high:
            out.append(Option(Relaxation("search.spacing_min", low_text, low, search.spacing_min_hz, "=", "frequency",
                                         low_text, also=(Setting("search.spacing_max", high_text, high, high_text),))))
    return out


def space_options(req: Requirements, window) -> list:
    """Options of the candidate space to try: the family against the window, FFT sizes, the sample clock,
    slot lengths, pilot limits and the guard rule (each only where it widens the space)."""
    search = req.search
    out = family_options(req, window)
    if search.max_fft_size < 2**22:
        size = search.max_fft_size
        for factor in (2, 4, 8, 16):
            if size * factor <= 2**22:
                out.append(_choice("search.max_fft_size", int(size * factor), int(size)))
    if search.min_fft_size > 8:
        out.append(_choice("search.min_fft_size", 8, int(search.min_fft_size)))
    if search.fft_sizes == "powers_of_two":
        out.append(_choice("search.fft_sizes", "smooth", "powers_of_two", '"smooth"'))
    if req.radio.sample_clock_hz is not None:
        out.append(Option(Relaxation("radio.sample_clock", "(leave the key out)", None, req.radio.sample_clock_hz,
                                     "=", "frequency")))
    slots = tuple(int(n) for n in search.symbols_per_slot)
    shorter = tuple(sorted({*slots, *(n for n in (1, 2, 4) if n < min(slots))}))
    if shorter != slots:
        out.append(_choice("search.symbols_per_slot", shorter, slots))
    longer = tuple(sorted({*slots, *(n for n in (2 * max(slots), 4 * max(slots)) if n <= 10_000)}))
    if longer != slots:
        out.append(_choice("search.symbols_per_slot", longer, slots))
    scopes = ("slot", "stream", "packet")
    if set(search.pilot_scopes) != set(scopes):
        out.append(_choice("search.pilot_scopes", scopes, tuple(search.pilot_scopes),
                           '["slot", "stream", "packet"]', list(scopes)))
    for key, limit in (("search.max_pilot_freq_spacing", search.max_pilot_freq_spacing),
                       ("search.max_pilot_time_spacing", search.max_pilot_time_spacing)):
        for factor in (2, 4):
            if limit * factor <= 4096:
                out.append(_choice(key, int(limit * factor), int(limit)))
    if req.rules.guard_rule == "coverage":
        out.append(_choice("rules.guard_rule", "energy", "coverage", '"energy"'))
    return _first_per_key(out)


def _first_per_key(options) -> list:
    """Options of one key are tried in order: keep them together, the first key order kept."""
    keys = list(dict.fromkeys(o.relaxation.key for o in options))
    return [o for key in keys for o in options if o.relaxation.key == key]


def working_options(oracle: Oracle, options) -> list:
    """The first option of each key that makes the request feasible (tested exactly)."""
    out, done = [], set()
    for option in options:
        key = option.relaxation.key
        if key == "search.spacing_family":  # each family is a change of its own
            key = (key, option.relaxation.value)
        if key in done:
            continue
        if oracle.cheap(option.changes()) and oracle.exact(option.changes()) is True:
            out.append(option.relaxation)
            done.add(key)
    return out


__all__ = ["Relaxation", "Setting", "Oracle", "Searcher", "KNOBS", "space_options", "family_options",
           "working_options", "quantity_string", "np"]
