"""Terminal renderer (rich): reports for people, in engineering units.

Only this module and ``commands`` touch ``rich``. Each function takes result
objects and a console and prints; none computes physics.
"""

from __future__ import annotations

import math

from rich import box
from rich.console import Console
from rich.table import Table
from rich.text import Text

from .units import db, engineering, speed_kmh

CAUTION = ("Caution: spectrum use is regulated. Check carrier, bandwidth and power against your local licence and "
           "regulator; safety-relevant links need certified equipment and review by a licensed engineer.")


class _Console(Console):
    """rich's console, except that a reader who has gone (``numerology ... | head``) is reported as the
    BrokenPipeError it is, which the command line turns into exit status 141; rich itself exits with 1,
    the status of "the answer is no"."""

    def on_broken_pipe(self) -> None:
        self.quiet = True
        raise BrokenPipeError


def console(stderr: bool = False) -> Console:
    """The report's console. Markup and emoji codes are off: names come from users' files, and a site called
    "[/x]" or ":fire:" is printed as written (markup in it made rich raise, or printed something else)."""
    con = _Console(highlight=False, soft_wrap=False, markup=False, emoji=False, stderr=stderr)
    if not con.is_terminal:
        con.width = 110  # piped into a file or a pager: tables need not wrap at 80
    return con


def plain(text) -> str:
    """Text from a user's file as it may reach a terminal: control characters (an escape sequence in a site
    name would restyle or move the terminal's cursor) are shown escaped, as in a Python string."""
    text = str(text)
    return text if text.isprintable() else "".join(c if c.isprintable() else repr(c)[1:-1] for c in text)


def fmt(value: float, unit: str) -> str:
    """Engineering format by SI unit: speeds in km/h, ratios as plain numbers."""
    if unit == "m/s":
        if value is None or math.isinf(value):
            return "unbounded"
        return f"{speed_kmh(value)} ({value:.4g} m/s)"
    if unit == "dB":
        return db(value)
    if unit == "":
        return f"{value:.4g}"
    return engineering(value, unit)


def environment(con: Console, env, rows, thumbs, title: str) -> None:
    table = _table(plain(title), "quantity", ">value", "formula", "~source")
    for row in rows:
        table.add_row(row.label, fmt(row.value, row.unit), row.formula, row.source)
    con.print(table)
    con.print(f"Profile: {plain(env.profile_name)} ({len(env.delays_s)} taps) - {plain(env.profile_source)}")
    if thumbs:
        alt = _table("Other definitions in use (for comparison)", "quantity", "rule of thumb", ">value", heavy=False)
        for quantity, label, value in thumbs:
            alt.add_row(quantity, label, engineering(value, "s" if "time" in quantity else "Hz"))
        con.print(alt)
    for note in env.notes:
        con.print(Text(f"note: {note}", style="yellow"))


def _table(title, *columns, heavy=True, **options) -> Table:
    """A report table: ``columns`` are headers, ``">name"`` right-justified, ``"~name"`` dimmed (sources)."""
    table = Table(title=title, box=box.SIMPLE_HEAVY if heavy else box.SIMPLE, title_justify="left", **options)
    for column in columns:
        if column.startswith(">"):
            table.add_column(column[1:], justify="right")
        elif column.startswith("~"):
            table.add_column(column[1:], style="dim")
        else:
            table.add_column(column)
    return table


def profiles(con: Console, catalogue) -> None:
    table = _table("Built-in power-delay profiles", "name", ">taps", ">rms (computed)", ">rms (stated)", ">span",
                   "~source")
    for profile in catalogue.values():
        if profile.normalised:
            computed = f"{profile.rms_delay_spread_s:.4f} x rms"
            stated = "1 x rms"
            span = f"{profile.max_excess_delay_s:.3f} x rms"
        else:
            computed = engineering(profile.rms_delay_spread_s, "s")
            stated = engineering(profile.stated_rms_delay_spread_s, "s") if profile.stated_rms_delay_spread_s else "-"
            span = engineering(max(profile.delays_s) - min(profile.delays_s), "s")
        table.add_row(profile.name, str(len(profile.delays_s)), computed, stated, span, profile.source)
    con.print(table)
    con.print("Normalised profiles (x rms) are scaled by environment.rms_delay_spread.")


def presets(con: Console, listing) -> None:
    """The families (one row each, at their default bandwidth) with the channel bandwidths they define."""
    from .design import pilot_label

    table = _table("Published numerologies (use with --preset NAME; a family follows the requirement's bandwidth)",
                   "name", "~channels (MHz)", ">spacing", ">CP", "~pilots")
    for name, preset, bandwidths in listing:
        d = preset.design
        table.add_row(name, " ".join(f"{b / 1e6:g}" for b in bandwidths),
                      engineering(d.subcarrier_spacing_hz, "Hz"), engineering(d.cp_s, "s", 3), pilot_label(d))
    con.print(table)
    con.print("Spacing, CP and pilots at the first channel listed for pinned names, else the family's usual one; "
              "sources and modelling choices: numerology presets --json")


TERM_LABELS = {
    "noise": "thermal noise (1/SNR)",
    "echo": "echoes beyond the cyclic prefix",
    "doppler": "Doppler inter-carrier interference",
    "phase_noise": "phase noise after common-phase correction",
    "frequency_offset": "residual frequency offset",
    "estimation": "channel-estimation error",
}

LIMIT_LABELS = {
    "max_speed_mps": ("highest speed", "m/s"),
    "max_excess_delay_s": ("longest max excess delay", "s"),
    "max_rms_delay_spread_s": ("largest rms delay spread (profile stretched)", "s"),
    "min_snr_db": ("lowest SNR", "dB"),
    "max_oscillator_linewidth_hz": ("widest oscillator linewidth", "Hz"),
}


def design_line(d, req=None) -> str:
    """One line for a design: numerology, pilots (``design.pilot_label``), slot; with ``req``, the receiver's
    estimation allowance (``rules.estimator``, ``estimation_lookahead``, ``estimation_memory``)."""
    from .design import pilot_label

    allowance = ""
    if req is not None:
        from .arrangement import allowance_text
        from .estimation import MAX_PILOT_SYMBOLS

        rules = req.rules
        text = allowance_text(d.pilot_scope, rules.estimator, rules.estimation_lookahead, rules.estimation_memory,
                              MAX_PILOT_SYMBOLS)
        allowance = f" (estimate: {text})"
    return (f"{engineering(d.subcarrier_spacing_hz, 'Hz')} spacing, FFT {d.fft_size} at "
            f"{engineering(d.sample_rate_hz, 'Hz')} (T_u {engineering(d.useful_symbol_s, 's')}), "
            f"CP {d.cp_samples} samples = {engineering(d.cp_s, 's')}, {d.used_subcarriers} used "
            f"({engineering(d.occupied_bandwidth_hz, 'Hz')}), {pilot_label(d)}{allowance}, "
            f"{d.symbols_per_slot} symbols per slot ({engineering(d.slot_s, 's')})")


def what_if_text(what_if: dict, req) -> str:
    """"speed 350 km/h (the file: 300 km/h)" for the values a check analysed in place of the file's ("" if none)."""
    given = dict(req.given)
    parts = []
    if "speed_mps" in what_if:
        file_text = given.get("environment.max_speed") or (
            f"max_doppler {given['environment.max_doppler']}" if "environment.max_doppler" in given else "not given")
        parts.append(f"speed {speed_kmh(what_if['speed_mps'])} (the file: {file_text})")
    if "max_excess_delay_s" in what_if:
        file_text = given.get("environment.max_excess_delay", "from the profile")
        parts.append(f"max excess delay {engineering(what_if['max_excess_delay_s'], 's')} (the file: {file_text})")
    return ", ".join(parts)


def show_margin(rule) -> str:
    if rule.convention == "db":
        return db(rule.margin)
    if math.isinf(rule.margin):
        return "unbounded"
    return f"{100 * rule.margin:+.1f} %"


def _quantity(rule_name: str, value: float) -> str:
    """A rule's value or limit in its natural unit."""
    unit = {"cp_covers_delay": "s", "quasi_static": "s", "flat_fading": "Hz", "fits_channel": "Hz",
            "throughput": "bit/s", "latency": "s"}.get(rule_name)
    if math.isinf(value):
        return "unbounded" if value > 0 else "-inf"
    if unit:
        return engineering(value, unit)
    if rule_name in ("doppler_ici", "oscillator_ici", "link_closes", "guard_interval"):
        return db(10 * math.log10(value)) if value > 0 else "-inf dB"
    return f"{value:.4g}"


#: How the comparison of a rule's value with its limit is printed.
COMPARISON_SIGNS = {"<=": "\u2264", ">=": "\u2265"}


def rules_table(rules, title="Rules") -> Table:
    """PASS/FAIL, the rule, the design's value, the limit it is held to (with the comparison), the margin."""
    binding = min(rules, key=lambda r: r.normalised)
    table = _table(title, "", "rule", ">value", ">limit", ">margin")
    for r in rules:
        mark = Text("PASS", style="green") if r.passed else Text("FAIL", style="bold red")
        name = Text(r.name + ("  <- binding" if r is binding else ""), style="bold" if r is binding else "")
        limit = f"{COMPARISON_SIGNS[r.comparison]} {_quantity(r.name, r.limit)}"
        table.add_row(mark, name, _quantity(r.name, r.value), limit, show_margin(r))
    return table


def sinr_table(result) -> Table:
    table = _table("SINR budget (each term relative to the signal)", "term", ">power", heavy=False)
    for name, value in result.sinr_terms.items():
        table.add_row(TERM_LABELS[name], db(10 * math.log10(value)) if value > 0 else "none")
    table.add_row(Text("effective SINR", style="bold"), Text(db(result.effective_sinr_db), style="bold"))
    return table


def limits_table(limits) -> Table:
    table = _table("Stretch limits (each alone, the rest as required)", "stress", ">limit", "rule that fails first",
                   heavy=False)
    for key, limit in limits.items():
        label, unit = LIMIT_LABELS[key]
        if math.isinf(limit.value):
            value = "beyond the searched range"
        elif unit == "dB":
            value = f"{limit.value:.2f} dB"
        else:
            value = fmt(limit.value, unit)
        table.add_row(label, value, limit.rule or "-")
    return table


def modulation_text(result) -> str:
    """ " (64-QAM 3/4, SINR 0.24 dB above its threshold; the goal holds to 2.1 dB less)" for a check result."""
    if not result.modulation:
        return ""
    parts = [result.modulation]
    if not math.isinf(result.step_margin_db):
        parts.append(f"SINR {result.step_margin_db:.2f} dB above its threshold")
    if result.goal_margin_db is not None and math.isfinite(result.goal_margin_db):
        parts.append(f"the throughput goal holds to {result.goal_margin_db:.2f} dB less SINR")
    return " (" + "; ".join(parts) + ")"


def check(con: Console, result, req) -> None:
    d = result.design
    verdict = Text("PASSES", style="bold green") if result.passed else Text("FAILS", style="bold red")
    b = result.binding_rule
    con.print(Text.assemble(("Design ", ""), (plain(d.name), "bold"), " ", verdict, f" against {plain(req.path)}"))
    if result.origin:
        con.print(f"Checked: {plain(result.origin)}")
    con.print(design_line(d, req))
    if result.what_if:
        con.print(Text("What-if: " + what_if_text(result.what_if, req), style="bold"))
    env = result.environment
    con.print(f"Channel: f_D {engineering(env.max_doppler_hz, 'Hz')} at {speed_kmh(env.speed_mps)}, "
              f"max excess delay {engineering(env.max_excess_delay_s, 's')}, "
              f"rms {engineering(env.rms_delay_spread_s, 's')} ({env.profile_name})")
    con.print(Text.assemble("Binding rule: ", (b.name, "bold"), f" (margin {show_margin(b)}) - {b.statement}"))
    con.print(rules_table(result.rules))
    con.print(sinr_table(result))
    con.print(f"Net throughput {engineering(result.net_throughput_bps, 'bit/s')} at "
              f"{result.efficiency:.3g} bit per data resource element{modulation_text(result)}; "
              f"overhead {100 * result.overhead:.1f} %")
    if result.limits:
        con.print(limits_table(result.limits))
    for note in (*result.notes, *env.notes):
        con.print(Text(f"note: {note}", style="yellow"))
    con.print(Text(CAUTION, style="dim"))


OBJECTIVE_LABELS = {"throughput": "most net throughput", "robustness": "most robust (largest worst margin)",
                    "overhead": "least overhead", "latency": "shortest slot"}


def window_sentence(window) -> str:
    """The spacing window and its bounding rules, or the bounds that cross, in engineering units."""
    if window.empty:
        if window.lower_bound_rule == window.upper_bound_rule or not math.isfinite(window.min_hz):
            rules = sorted({window.lower_bound_rule, window.upper_bound_rule} - {None})
            return f"No subcarrier spacing fits: {' and '.join(rules)} {'rule' if len(rules) > 1 else 'rules'} " \
                   f"out every spacing."
        return (f"No subcarrier spacing fits: {window.lower_bound_rule} needs >= "
                f"{engineering(window.min_hz, 'Hz')}; {window.upper_bound_rule} allows <= "
                f"{engineering(window.max_hz, 'Hz')}.")
    lower = window.lower_bound_rule or "the largest FFT"
    upper = window.upper_bound_rule or "one subcarrier filling the band"
    return (f"Subcarrier-spacing window: {engineering(window.min_hz, 'Hz')} .. {engineering(window.max_hz, 'Hz')}"
            f"  (below: {lower}; above: {upper})")


def _window_line(window) -> Text:
    text = window_sentence(window)
    if window.empty:
        head, _, rest = text.partition(": ")
        return Text.assemble((head + ": ", "bold red"), rest)
    head, _, rest = text.partition(": ")
    values, _, bounds = rest.partition("  ")
    return Text.assemble(head + ": ", (values, "bold"), "  " + bounds)


def relaxation_rows(relaxation) -> list:
    """(key, now, change to) rows of one relaxation and the settings that come with it."""
    rows = [(relaxation.key, relaxation.current, f"{relaxation.direction} {relaxation.value}")]
    rows += [(s.key, "", f"= {s.text}") for s in relaxation.also]
    return rows


def designs_table(result) -> Table:
    from .design import pilot_label

    table = _table(f"Ranked designs - objective: {OBJECTIVE_LABELS[result.objective]}", ">#", ">spacing", ">FFT/CP",
                   ">pilots", ">slot", ">net rate", "binding rule", pad_edge=False)
    for ranked in result.designs:
        c = ranked.check
        d = c.design
        b = c.binding_rule
        table.add_row(str(ranked.rank) + ("*" if ranked.pareto else ""), engineering(d.subcarrier_spacing_hz, "Hz"),
                      f"{d.fft_size}/{d.cp_samples}", pilot_label(d),
                      engineering(d.slot_s, "s"), engineering(c.net_throughput_bps, "bit/s"),
                      f"{b.name} {show_margin(b)}")
    return table


def relaxed_sentence(relaxed, objective, code=str) -> str:
    """What relaxing the binding setting buys, in words and engineering units (``code`` marks up the key)."""
    def show(value):
        if value is None:
            return "still infeasible"
        if objective == "throughput":
            return engineering(value, "bit/s")
        if objective == "robustness":
            return f"worst margin {100 * value:+.1f} %"
        if objective == "overhead":
            return f"overhead {100 * -value:.1f} %"
        return f"slot {engineering(-value, 's')}"

    return (f"Relaxing {code(relaxed.key)} from {setting(relaxed.key, relaxed.from_si)} to "
            f"{setting(relaxed.key, relaxed.to_si)} would take the best design from {show(relaxed.best_before)} "
            f"to {show(relaxed.best_after)}.")


def setting(dotted_key: str, value_si: float) -> str:
    """A requirement value in the unit a user writes it in."""
    from .requirements import key as declared

    key = declared(dotted_key)
    if key.kind == "db":
        return f"{value_si:g} dB"
    if key.kind == "quantity":
        unit = {"frequency": "Hz", "time": "s", "bitrate": "bit/s", "length": "m"}.get(key.dimension)
        if key.dimension == "speed":
            return speed_kmh(value_si)
        return engineering(value_si, unit) if unit else f"{value_si:.4g}"
    return f"{value_si:.4g}"


def solve(con: Console, result) -> None:
    req, env = result.requirements, result.environment
    con.print(Text.assemble(("numerology solve ", "bold"), plain(req.path)))
    con.print(f"Channel: f_D {engineering(env.max_doppler_hz, 'Hz')} at {speed_kmh(env.speed_mps)} "
              f"({env.doppler_spectrum}), coherence time {engineering(env.coherence_time_s, 's')}; "
              f"max excess delay {engineering(env.max_excess_delay_s, 's')}, rms {engineering(env.rms_delay_spread_s, 's')}, "
              f"coherence bandwidth {engineering(env.coherence_bandwidth_hz, 'Hz')} ({env.profile_name})")
    con.print(_window_line(result.window))
    stats = result.stats
    con.print(f"Searched {stats.candidates:,} candidate designs; {stats.after_cheap_rules:,} survived the fast rules, "
              f"{stats.evaluated_exactly:,} were evaluated exactly, {stats.feasible_found:,} feasible found.",
              style="dim")
    if stats.stopped_at_budget:
        con.print(f"The exact evaluation stopped at its work budget ({stats.evaluated_exactly:,} designs): the designs "
                  "below are the best found, not proven best; narrow the search (fewer spacings or FFT sizes) for a "
                  "proof.", style="yellow")
    if not result.feasible:
        con.print(Text("INFEASIBLE: no design meets every rule and goal.", style="bold red"))
        diag = result.diagnosis
        if diag is not None:
            label = "Conflict" if diag.cause == "rules" else "The candidate space is the cause"
            con.print(Text.assemble(f"{label}: ", (diag.statement, "bold")))
            if diag.relaxations:
                table = _table("Any one of these makes the request feasible (each solved again)", "key",
                               ">now", ">change to", heavy=False)
                for r in diag.relaxations:
                    for key, now, change in relaxation_rows(r):
                        table.add_row(key, now, change)
                con.print(table)
            elif diag.pairs:
                table = _table("No single change is enough; each pair does (solved again)", "#", "key",
                               ">now", ">change to", heavy=False)
                for i, pair in enumerate(diag.pairs, start=1):
                    for r in pair:
                        for key, now, change in relaxation_rows(r):
                            table.add_row(str(i), key, now, change)
                con.print(table)
            else:
                con.print("No single change, nor any pair of the keys tried, makes the request feasible within the "
                          "diagnosis's work budget.")
        con.print(Text(CAUTION, style="dim"))
        return
    con.print(designs_table(result))
    con.print("* on the Pareto front over (throughput, speed margin, delay margin)", style="dim")
    best = result.designs[0].check
    con.print(Text.assemble(("Best: ", "bold"), design_line(best.design, req)))
    b = best.binding_rule
    con.print(Text.assemble("Binding rule: ", (b.name, "bold"), f" (margin {show_margin(b)}) - {b.statement}"))
    con.print(rules_table(best.rules, title="Rules for the best design"))
    if result.relaxed is not None:
        con.print(relaxed_sentence(result.relaxed, result.objective))
    if result.neighbours:
        table = _table("One step away from the best design", "change", "verdict", heavy=False)
        for n in result.neighbours:
            verdict = (Text(f"rejected by {n.failing_rule} ({n.margin:+.3g})", style="red") if n.failing_rule
                       else Text("also feasible", style="green"))
            table.add_row(n.change, verdict)
        con.print(table)
    if best.limits:
        con.print(limits_table(best.limits))
    for note in env.notes:
        con.print(Text(f"note: {note}", style="yellow"))
    con.print(Text(CAUTION, style="dim"))


def with_progress(con: Console, run):
    """Run ``run(progress)`` under a rich progress bar; ``progress(done, total)`` advances it.

    The bar is shown only on a terminal (a piped report stays clean).
    """
    if not con.is_terminal:
        return run(None)
    from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn

    with Progress(TextColumn("simulating frames (Ctrl-C keeps what is measured)"), BarColumn(),
                  TextColumn("{task.completed}/{task.total}"), TimeRemainingColumn(), console=con,
                  transient=True) as bar:
        task = bar.add_task("frames", total=None)

        def progress(done, total):
            bar.update(task, completed=done, total=total)

        return run(progress)


_VERDICT_STYLE = {"agree": "bold green", "disagree": "bold red", "inconclusive": "bold yellow"}
_FIGURE_LABEL = {"interference": "Doppler + echo interference", "estimation": "channel-estimation error",
                 "sinr_eff": "effective SINR"}


def _interval(low, high) -> str:
    """A confidence interval of power ratios in dB, the unit once."""
    def one(value):
        return "0" if value == 0 else ("inf" if not math.isfinite(value) else f"{10 * math.log10(value):+.2f}")

    return f"{one(low)} .. {one(high)} dB"


def verification(con: Console, result, req=None) -> None:
    """The verification for people: the verdict, each figure against its prediction, the rate margin, the rules."""
    design, sim = result.design, result.simulation
    verdict = result.verdict
    con.print(Text.assemble("Verification of ", (plain(design.name), "bold"), ": model and simulation ",
                            (verdict.upper(), _VERDICT_STYLE[verdict])))
    con.print(design_line(design, req))
    if result.what_if:
        con.print("What-if: " + (what_if_text(result.what_if, req) if req is not None else
                                 ", ".join(f"{k} {v:g}" for k, v in result.what_if.items())))
    level = f"{100 * sim.confidence:g} %"
    table = _table(f"Measured ({sim.frames} frames, {sim.frames * sim.data_per_frame:,} data resource elements, "
                   f"seed {result.seed}) against predicted", "figure", ">measured", f">{level} interval",
                   ">predicted", ">difference", ">tolerance", "verdict")
    for check in result.checks:
        low, high = check.ci
        diff = check.difference_db
        table.add_row(_FIGURE_LABEL.get(check.name, check.name), _db_or_na(check.measured),
                      _interval(low, high), _db_or_na(check.predicted),
                      f"{diff:+.2f} dB" if diff is not None else "n/a", f"{check.tolerance_db:.1f} dB",
                      Text(check.verdict, style=_VERDICT_STYLE[check.verdict]))
    con.print(table)
    rate = result.rate
    if rate is not None:
        low, high = (db(v, 2) if v is not None else "unbounded" for v in rate.ci_db)
        outcome = ("resolved: the rate holds in the simulation" if rate.holds else
                   "resolved: the simulation falls short of it" if rate.resolved else
                   "NOT resolved by this run: the interval straddles the threshold")
        con.print(Text.assemble("Rate ", (rate.name, "bold"), f" needs {db(rate.required_sinr_db, 2)}; measured SINR "
                                f"{db(rate.measured_db, 2)} ({low} .. {high}), margin {db(rate.margin_db, 2)}: ",
                                (outcome, "green" if rate.holds else "yellow" if not rate.resolved else "red")))
    if result.rules_passed:
        con.print(Text("Rules: every rule passes.", style="green"))
    else:
        failing = ", ".join(f"{name} ({db(margin) if convention == 'db' else f'{100 * margin:+.1f} %'})"
                            for name, margin, convention in result.failing_rules)
        con.print(Text.assemble(("Rules: the design FAILS ", "bold red"), failing))
    if result.interrupted:
        con.print(Text(f"Interrupted after {sim.frames} frames: the figures are what was measured until then.",
                       style="bold yellow"))
    if verdict == "inconclusive":
        needed = result.frames_needed
        advice = (f"run about {needed:,} frames (--frames {needed})" if needed is not None
                  else "a prediction sits on the edge of its tolerance: no run length decides it")
        con.print(Text(f"Inconclusive: the run is too short to decide; {advice}.", style="yellow"))
    for note in result.notes:
        con.print(Text(f"note: {note}", style="dim"))


def _db_or_na(value) -> str:
    if value is None or not value > 0 or not math.isfinite(value):
        return "n/a" if value is None or not math.isfinite(value or 0.0) else "-inf dB"
    return db(10 * math.log10(value), 2)


def sweep(con: Console, design, result, out) -> None:
    summary = result.summary()
    con.print(Text.assemble("Sweep of ", (plain(design.name), "bold"), f" over {summary.sites} sites: ",
                            (f"{summary.passed} pass", "bold green" if summary.passed == summary.sites else "bold"),
                            f", {summary.sites - summary.passed} fail"))
    con.print(design_line(design))
    table = _table(None, "site", "", "binding rule", ">margin", ">net rate", ">SINR")
    names = result.binding_rule
    shown = range(min(summary.sites, 40))
    for i in shown:
        rule = next(r for r in result.rules if r.name == names[i])
        margin = result.margin[rule.name][i]
        margin_text = (db(margin) if rule.convention == "db" else f"{100 * margin:+.1f} %") if math.isfinite(margin) \
            else "unbounded"
        table.add_row(plain(result.sites.names[i]), Text("PASS", style="green") if result.passed[i]
                      else Text("FAIL", style="bold red"), names[i], margin_text,
                      engineering(float(result.net_throughput_bps[i]), "bit/s"), db(float(result.effective_sinr_db[i])))
    con.print(table)
    if summary.sites > 40:
        con.print(f"({summary.sites - 40} more sites: use --out FILE.csv or --json)", style="dim")
    if summary.failures:
        con.print("Rules failing most: " + ", ".join(f"{k} at {v} site{'s' if v != 1 else ''}" for k, v in summary.failures.items()))
    if summary.worst_site is not None:
        con.print(f"Worst site: {plain(summary.worst_site)} (line {summary.worst_line}), binding {summary.worst_rule}")
    table_report = result.estimation_table
    if table_report is not None:
        con.print(f"Estimation error of {_count(table_report.interpolated, 'site')} interpolated from "
                  f"{_count(table_report.nodes, 'exact evaluation')} (checked within {table_report.tolerance_db:g} dB); "
                  f"{table_report.exact} exact, {table_report.settled} of them because their verdict or rate was "
                  f"within the table's guard (at most {table_report.guard_db:.2g} dB)", style="dim")
    if out is not None:
        con.print(f"Per-site results written to {out} (columns, units and rows not evaluated in {out}.json)")
    con.print(Text(CAUTION, style="dim"))


def _count(n: int, noun: str) -> str:
    return f"{n} {noun}{'' if n == 1 else 's'}"


def _percent(value) -> str:
    return "-" if value is None or not math.isfinite(value) else f"{100 * value:+.1f} %"


def _rate(value) -> str:
    return "-" if value is None or not math.isfinite(value) else engineering(value, "bit/s")


def plan_figures_row(label: str, figures) -> tuple:
    """One row of the plan comparison: sites served, weakest margin, smallest and total throughput, overhead."""
    overhead = "-" if figures.mean_overhead is None else f"{100 * figures.mean_overhead:.1f} %"
    return (label, f"{figures.served} of {figures.sites}", _percent(figures.weakest_margin),
            _rate(figures.min_throughput_bps), _rate(figures.total_throughput_bps), overhead)


PLAN_COMPARISON = ("", ">sites served", ">weakest margin", ">smallest rate", ">total rate", ">mean overhead")


def plan_comparison(result) -> list:
    """(label, figures) rows: the best single design, one mode fewer, the plan, one mode more."""
    count = result.figures.modes
    rows = [("best single design", result.single)]
    if result.fewer is not None and count - 1 > 1:
        rows.append((f"{count - 1} modes (one fewer)", result.fewer))
    rows.append((f"this plan: {count} mode{'s' if count != 1 else ''}", result.figures))
    if result.more is not None:  # one more allowed, not always used (it may buy nothing)
        used = result.more.modes
        rows.append((f"{count + 1} modes (one more)" if used == count + 1 else f"up to {count + 1} modes: {used} used",
                     result.more))
    return rows


def _objective_figure(objective: str, figures):
    """(label, value, text) of the figure an objective maximises, for a plan's figures."""
    if objective == "weakest-margin":
        return "the weakest margin", figures.weakest_margin, _percent(figures.weakest_margin)
    if objective == "weakest-throughput":
        return "the smallest net throughput", figures.min_throughput_bps, _rate(figures.min_throughput_bps)
    return "the total net throughput", figures.total_throughput_bps, _rate(figures.total_throughput_bps)


def plan_change_sentences(result) -> list[str]:
    """What one design, one mode fewer and one mode more would change, in words."""
    f = result.figures
    label, _, now = _objective_figure(result.objective, f)
    out = []
    for name, other in (("The best single design", result.single if len(result.modes) > 1 else None),
                        ("With one mode fewer", result.fewer if len(result.modes) > 2 else None),
                        ("With one mode more", result.more)):
        if other is None:
            continue
        _, value, text = _objective_figure(result.objective, other)
        if other.served != f.served:
            lost = f.served - other.served
            change = (f"{abs(lost)} site{'s' if abs(lost) != 1 else ''} "
                      f"{'would go unserved' if lost > 0 else 'more would be served'}")
        elif value is None or not math.isfinite(value):
            change = "as many sites would be served"
        elif text == now:
            change = f"as many sites would be served, with the same {label.removeprefix('the ')} ({now})"
        else:
            change = f"as many sites would be served, with {label} {text} instead of {now}"
        out.append(f"{name}: {change}.")
    return out


def plan_mode_cells(mode) -> tuple:
    """The cells of one mode in the plan's table (also used by the design note)."""
    from .design import pilot_label

    d = mode.design
    return (mode.name.removeprefix("mode "), engineering(d.subcarrier_spacing_hz, "Hz"), str(d.fft_size),
            f"{engineering(d.cp_s, 's')} ({d.cp_samples})",
            pilot_label(d).removeprefix("pilots "), engineering(d.slot_s, "s"),
            str(mode.sites), str(mode.only_here), f"{100 * mode.overhead:.1f} %")


PLAN_MODE_COLUMNS = ("mode", ">spacing", ">FFT", ">CP (samples)", ">pilots", ">slot", ">sites",
                     ">only it serves", ">overhead")


def plan_hardest_sentence(mode, code=str) -> str:
    """Which site presses a mode hardest and the rule that binds there (``code`` marks up names)."""
    return (f"{mode.name[:1].upper()}{mode.name[1:]}: hardest site {mode.hardest_site}, where "
            f"{code(mode.hardest_rule)} binds ({rule_margin(mode.hardest_rule, mode.hardest_margin)}).")


def rule_margin(rule_name: str, normalised) -> str:
    """A normalised margin (capacity/demand - 1) in its rule's convention: dB for interference rules, else %."""
    from .rules import BY_NAME

    if normalised is None or not math.isfinite(normalised):
        return "-" if normalised is None or math.isnan(normalised) else "unbounded"
    if rule_name in BY_NAME and BY_NAME[rule_name].convention == "db":
        return db(10 * math.log10(1 + normalised)) if normalised > -1 else "-inf dB"
    return _percent(normalised)


def plan(con: Console, result) -> None:
    from .plan import OBJECTIVE_WORDS

    f = result.figures
    verdict = (Text(f"{_count(len(result.modes), 'mode')} serve{'s' if len(result.modes) == 1 else ''} "
                    f"{'all ' if result.served_all else ''}{f.served} of {f.sites} sites",
                    style="bold green" if result.served_all else "bold red"))
    con.print(Text.assemble(("Mode plan ", "bold"), f"for {result.requirements_path} at {result.sites.path}: ",
                            verdict))
    asked = f"at most {_count(result.modes_asked, 'mode')}; " if result.modes_asked else "the fewest modes; "
    con.print(f"Asked for {asked}then {OBJECTIVE_WORDS[result.objective]}.", style="dim")
    if result.modes:
        table = _table(None, *PLAN_MODE_COLUMNS, pad_edge=False)
        for mode in result.modes:
            table.add_row(*plan_mode_cells(mode))
        con.print(table)
        for mode in result.modes:
            con.print(plain(plan_hardest_sentence(mode)))
    if result.modes:
        comparison = _table("What the modes buy (throughput and margin over the served sites)", *PLAN_COMPARISON,
                            heavy=False)
        for label, figures in plan_comparison(result):
            comparison.add_row(*plan_figures_row(label, figures))
        con.print(comparison)
        for sentence in plan_change_sentences(result):
            con.print(sentence)
    if result.fewest_for_all != len(result.modes) and result.fewest_for_all:
        con.print(f"{_count(result.fewest_for_all, 'mode')} serve every site a design can serve.")
    if result.unserved:
        table = _table(f"Sites no mode serves ({len(result.unserved)})", "site", ">line", "closest mode",
                       "failing rule", ">margin", "why", heavy=False)
        for u in result.unserved[:40]:
            table.add_row(plain(u.site), str(u.line or "-"), u.closest_mode or "-", u.rule or "-",
                          rule_margin(u.rule, u.margin), u.reason)
        con.print(table)
        if len(result.unserved) > 40:
            con.print(f"({len(result.unserved) - 40} more: use --json)", style="dim")
    o, s = result.optimisation, result.search
    exact = (f"proved optimal ({o.method})" if o.status == "optimal"
             else f"best found within the time limit ({o.time_limit_s:g} s per programme; gap {100 * o.gap:.2g} %)")
    con.print(f"Plan {exact}; the greedy plan beside it: {_count(o.greedy_modes, 'mode')} serving "
              f"{_count(o.greedy_served, 'site')}.", style="dim")
    con.print(f"{s.sites:,} sites in {s.channels:,} distinct channels; candidates from {s.anchors} anchor "
              f"environments: {s.candidates:,}, {s.exact_rows:,} of them evaluated exactly "
              f"({s.exact_pairs:,} site channels).", style="dim")
    for note in result.notes:
        con.print(Text(f"note: {note}", style="yellow"))
    con.print(Text(CAUTION, style="dim"))
