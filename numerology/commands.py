"""The commands behind the CLI: load, compute, render. No physics here."""

from __future__ import annotations

import sys

from . import render_json
from .cli import EXIT_FAILS, EXIT_INCONCLUSIVE, EXIT_INTERRUPTED, EXIT_OK


def _emit(text: str) -> None:
    sys.stdout.write(text)


def version() -> int:
    from . import __version__
    from .profiles import CATALOGUE

    print(f"numerology {__version__}")
    print("bundled profiles: " + ", ".join(CATALOGUE))
    return EXIT_OK


def env(args) -> int:
    from .environment import derivations, derive_environment, rules_of_thumb
    from .requirements import load_requirements

    req = load_requirements(args.requirements)
    environment = derive_environment(req)
    if args.json:
        _emit(render_json.document("numerology.env", {"requirements": req.path, **environment.to_json()}))
        return EXIT_OK
    from . import render_terminal

    con = render_terminal.console()
    render_terminal.environment(con, environment, derivations(environment), rules_of_thumb(environment),
                                f"Channel environment - {req.path}")
    return EXIT_OK


def profiles(args) -> int:
    from .profiles import CATALOGUE

    if args.json:
        # A normalised profile's delays are in units of its rms spread, and its keys say so (_rms, not _s).
        unit = {True: "rms", False: "s"}
        body = {"profiles": [{
            "name": p.name,
            "source": p.source,
            "normalised": p.normalised,
            f"delays_{unit[p.normalised]}": list(p.delays_s),
            "powers_db": list(p.powers_db),
            f"rms_delay_spread_{unit[p.normalised]}": p.rms_delay_spread_s,
            "stated_rms_delay_spread_s": p.stated_rms_delay_spread_s,
            "los_k_factor_db": p.los_k_factor_db,
            "note": p.note,
        } for p in CATALOGUE.values()]}
        _emit(render_json.document("numerology.profiles", body))
        return EXIT_OK
    from . import render_terminal

    render_terminal.profiles(render_terminal.console(), CATALOGUE)
    return EXIT_OK


def presets(args) -> int:
    from .presets import FAMILIES, PINNED, PRESETS

    # families (following the requirement's bandwidth) first, then the names that pin one bandwidth
    listing = [(name, PRESETS[name], sorted(FAMILIES[name])) for name in FAMILIES]
    listing += [(name, PRESETS[name], [PRESETS[name].channel_bandwidth_hz]) for name in PINNED]
    if args.json:
        _emit(render_json.document("numerology.presets", {"presets": [
            {"name": name, "family": p.family, "source": p.source, "description": p.description,
             "channel_bandwidths_hz": list(bandwidths), "design": p.design.to_json()}
            for name, p, bandwidths in listing]}))
        return EXIT_OK
    from . import render_terminal

    render_terminal.presets(render_terminal.console(), listing)
    return EXIT_OK


def _what_if(args):
    from .units import parse_quantity

    speed = parse_quantity(args.speed, "speed", "--speed") if args.speed else None
    delay = parse_quantity(args.delay, "time", "--delay") if args.delay else None
    from .errors import InputError
    from .units import show_si

    if speed is not None and not 0 <= speed <= 2e4:
        raise InputError("--speed", f"expected a speed between 0 and 20 km/s, got {args.speed!r} "
                                    f"(read as {show_si(speed, 'speed')})")
    if delay is not None and not 0 <= delay <= 1:
        raise InputError("--delay", f"expected a delay between 0 and 1 s, got {args.delay!r} "
                                    f"(read as {show_si(delay, 'time')})")
    return speed, delay


def check(args) -> int:
    from . import api

    req = api.load(args.requirements)
    speed, delay = _what_if(args)
    planned = _planned_outputs(args, req)
    result = api.check(req, preset=args.preset, design_file=args.design, speed_mps=speed, max_excess_delay_s=delay)
    _write_files(planned, req, check=result)
    if args.json:
        _emit(render_json.document("numerology.check", {"requirements": req.path, **result.to_json()}))
    else:
        from . import render_terminal

        render_terminal.check(render_terminal.console(), result, req)
    return EXIT_OK if result.passed else EXIT_FAILS


def _planned_outputs(args, req) -> dict:
    """Every output option checked before any work (see ``output.output_path``), and the modules it needs.

    Returns ``{option: path}``; the inputs protected from every output are the requirement file, the
    files it names, and the design and sites files.
    """
    from .output import optional_module, output_path

    inputs = [getattr(args, "design", None), getattr(args, "sites", None)]
    planned = {}
    if getattr(args, "plot", None) is not None:
        optional_module("matplotlib", "--plot", "plot")
    for option, suffixes in (("markdown", (".md", ".markdown")), ("plot", (".png", ".svg")), ("out", (".csv",))):
        if getattr(args, option, None) is not None:
            planned[option] = output_path(getattr(args, option), f"--{option}", suffixes, req, inputs)
    if "out" in planned:
        from .sweep import metadata_path

        planned["out metadata"] = output_path(metadata_path(planned["out"]), "--out", (".json",), req, inputs)
    return planned


def _write_files(planned: dict, req, check=None, solution=None, verification=None, plan=None) -> None:
    """Render every planned file in memory, then write them all together (nothing is written if one fails)."""
    from .output import write_all

    files = {}
    fmt = planned["plot"].suffix.lower().lstrip(".") if "plot" in planned else None
    if "markdown" in planned:
        from .note import render_note, render_plan_note

        text = render_plan_note(req, plan) if plan is not None else render_note(req, check, solution, verification)
        files[planned["markdown"]] = text.encode("utf-8")
    if fmt is not None and plan is not None:
        from .plan_plot import plan_plot_bytes

        files[planned["plot"]] = plan_plot_bytes(req, plan, fmt)
    elif fmt is not None:
        from .plots import plot_bytes

        files[planned["plot"]] = plot_bytes(req, fmt, check, solution)
    if files:
        write_all(files)


def solve(args) -> int:
    from . import api

    req = api.load(args.requirements)
    if args.top is not None and not 1 <= args.top <= 100:
        from .errors import InputError

        raise InputError("--top", f"expected a whole number from 1 to 100, got {args.top}")
    planned = _planned_outputs(args, req)
    result = api.solve(req, objective=args.objective, top=args.top)
    _write_files(planned, req, solution=result)
    if args.json:
        _emit(render_json.document("numerology.solve", {"requirements": req.path, **result.to_json()}))
    else:
        from . import render_terminal

        render_terminal.solve(render_terminal.console(), result)
    return EXIT_OK if result.feasible else EXIT_FAILS


def _chosen_design(args, req):
    """The design named by --design, --preset or --best (None when --best finds nothing)."""
    from . import api

    if getattr(args, "best", False):
        result = api.solve(req, explain=False, with_limits=False, top=1)
        return result.designs[0].check.design if result.feasible else None
    return api.design_from(preset=args.preset, path=args.design, bandwidth_hz=req.radio.bandwidth_hz)


def verify(args) -> int:
    from . import api
    from .errors import InputError

    req = api.load(args.requirements)
    speed, delay = _what_if(args)
    if args.frames is not None and not 2 <= args.frames <= 100_000:
        raise InputError("--frames", f"expected a whole number from 2 to 100000, got {args.frames}")
    if not 0 <= args.seed < 2**63:
        raise InputError("--seed", f"expected a whole number from 0 to 2^63 - 1, got {args.seed}")
    planned = _planned_outputs(args, req)
    design = _chosen_design(args, req)
    if design is None:
        print("numerology: --best: the request is infeasible, so there is no design to verify "
              "(run numerology solve for the diagnosis)", file=sys.stderr)
        return EXIT_FAILS
    from .verify import verify as run_verify

    def run(progress=None):
        return run_verify(req, design, seed=args.seed, frames=args.frames, speed_mps=speed, max_excess_delay_s=delay,
                          progress=progress)

    if args.json and not sys.stderr.isatty():
        verification = run()
    else:  # a long run shows its progress on a terminal (on stderr under --json), never in the JSON
        from . import render_terminal

        con = _stderr_console() if args.json else render_terminal.console()
        verification = render_terminal.with_progress(con, run)
    if planned and not verification.interrupted:
        import dataclasses

        check = api.check(req, design, speed_mps=speed, max_excess_delay_s=delay)
        if not args.best:  # the design named as the user named it (the file is not read again)
            check = dataclasses.replace(check, origin=api.describe_origin(design, args.preset, args.design))
        _write_files(planned, req, check=check, verification=verification)
    if args.json:
        _emit(render_json.document("numerology.verify", {"requirements": req.path, **verification.to_json()}))
    else:
        render_terminal.verification(con, verification, req)
    return verify_status(verification)


def verify_status(verification) -> int:
    """Exit status of a verification (see ``cli.VERIFY_EPILOG``)."""
    if verification.interrupted:
        return EXIT_INTERRUPTED
    if verification.verdict == "disagree" or not verification.rules_passed:
        return EXIT_FAILS
    if verification.verdict == "inconclusive":
        return EXIT_INCONCLUSIVE
    return EXIT_OK


def _stderr_console():
    from .render_terminal import console

    return console(stderr=True)


def sweep(args) -> int:
    from . import api
    from .budget import sites_that_fit
    from .sweep import load_sites, sweep as run_sweep, write_sweep_csv

    req = api.load(args.requirements)
    planned = _planned_outputs(args, req)
    sites = load_sites(args.sites, req, sites_that_fit(with_json=args.json))
    design = _chosen_design(args, req)
    if design is None:
        print("numerology: --best: the request is infeasible, so there is no design to sweep "
              "(run numerology solve for the diagnosis)", file=sys.stderr)
        return EXIT_FAILS
    result = run_sweep(req, design, sites)
    if "out" in planned:
        write_sweep_csv(planned["out"], result, args.sites)  # and its metadata, checked as planned["out metadata"]
    if args.json:
        _emit(render_json.document("numerology.sweep", {"requirements": req.path, "sites_file": args.sites,
                                                        "design": design.to_json(), **result.to_json()}))
    else:
        from . import render_terminal

        render_terminal.sweep(render_terminal.console(), design, result, args.out)
    for line, message in getattr(sites, "problems", ()):
        print(f"numerology: {args.sites}:{line}: {message}", file=sys.stderr)
    summary = result.summary()
    return EXIT_OK if summary.failed == 0 and not getattr(sites, "problems", ()) else EXIT_FAILS


def plan(args) -> int:
    from . import api
    from .budget import sites_that_fit
    from .errors import InputError
    from .plan import DEFAULT_OBJECTIVE, plan as run_plan
    from .sweep import load_sites

    req = api.load(args.requirements)
    if args.modes is not None and not 1 <= args.modes <= 26:
        raise InputError("--modes", f"expected a whole number from 1 to 26, got {args.modes}")
    planned = _planned_outputs(args, req)
    sites = load_sites(args.sites, req, sites_that_fit(with_json=args.json))
    if sites.size == 0:
        line, message = sites.problems[0]
        raise InputError(f"{args.sites}:{line}", f"no site could be read ({message})")
    result = run_plan(req, sites, modes=args.modes, objective=args.objective or DEFAULT_OBJECTIVE)
    _write_files(planned, req, plan=result)
    if args.json:
        _emit(render_json.document("numerology.plan", result.to_json()))
    else:
        from . import render_terminal

        render_terminal.plan(render_terminal.console(), result)
    for line, message in sites.problems:
        print(f"numerology: {args.sites}:{line}: {message}", file=sys.stderr)
    return EXIT_OK if result.served_all and not sites.problems else EXIT_FAILS
