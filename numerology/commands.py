"""The commands behind the CLI: load, compute, render. No physics here."""

from __future__ import annotations

import sys

from . import render_json
from .cli import EXIT_FAILS, EXIT_OK


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
        body = {"profiles": [{
            "name": p.name,
            "source": p.source,
            "normalised": p.normalised,
            "delays_s": list(p.delays_s),
            "powers_db": list(p.powers_db),
            "rms_delay_spread_s": p.rms_delay_spread_s,
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
    from .presets import PRESETS

    if args.json:
        _emit(render_json.document("numerology.presets", {"presets": [
            {"name": p.name, "source": p.source, "description": p.description, "design": p.design.to_json()}
            for p in PRESETS.values()]}))
        return EXIT_OK
    from . import render_terminal

    render_terminal.presets(render_terminal.console(), PRESETS)
    return EXIT_OK


def _what_if(args):
    from .units import parse_quantity

    speed = parse_quantity(args.speed, "speed", "--speed") if args.speed else None
    delay = parse_quantity(args.delay, "time", "--delay") if args.delay else None
    if speed is not None and not 0 <= speed <= 2e4:
        from .errors import InputError

        raise InputError("--speed", f"expected a speed between 0 and 20 km/s, got {args.speed!r}")
    if delay is not None and not 0 <= delay <= 1:
        from .errors import InputError

        raise InputError("--delay", f"expected a delay between 0 and 1 s, got {args.delay!r}")
    return speed, delay


def check(args) -> int:
    from . import api

    req = api.load(args.requirements)
    speed, delay = _what_if(args)
    design = api.design_from(preset=args.preset, path=args.design)
    outputs = _check_outputs(args, req)
    result = api.check(req, design, speed_mps=speed, max_excess_delay_s=delay)
    if args.json:
        _emit(render_json.document("numerology.check", {"requirements": req.path, **result.to_json()}))
    else:
        from . import render_terminal

        render_terminal.check(render_terminal.console(), result, req)
    _write_outputs(outputs, req, check=result)
    return EXIT_OK if result.passed else EXIT_FAILS


def _check_outputs(args, req):
    """Validate output paths before any work, so bad options write nothing."""
    from .output import output_path

    return {
        "markdown": output_path(getattr(args, "markdown", None), "--markdown", (".md", ".markdown"), req),
        "plot": output_path(getattr(args, "plot", None), "--plot", (".png", ".svg"), req),
    }


def _write_outputs(outputs, req, check=None, solution=None):
    if outputs["markdown"]:
        from .note import write_note

        write_note(outputs["markdown"], req, check=check, solution=solution)
    if outputs["plot"]:
        from .plots import write_plot

        write_plot(outputs["plot"], req, check=check, solution=solution)


def solve(args) -> int:
    from . import api

    req = api.load(args.requirements)
    if args.top is not None and not 1 <= args.top <= 100:
        from .errors import InputError

        raise InputError("--top", f"expected a whole number from 1 to 100, got {args.top}")
    outputs = _check_outputs(args, req)
    result = api.solve(req, objective=args.objective, top=args.top)
    if args.json:
        _emit(render_json.document("numerology.solve", {"requirements": req.path, **result.to_json()}))
    else:
        from . import render_terminal

        render_terminal.solve(render_terminal.console(), result)
    _write_outputs(outputs, req, solution=result)
    return EXIT_OK if result.feasible else EXIT_FAILS


def _chosen_design(args, req):
    """The design named by --design, --preset or --best (None when --best finds nothing)."""
    from . import api

    if getattr(args, "best", False):
        result = api.solve(req, explain=False, with_limits=False, top=1)
        return result.designs[0].check.design if result.feasible else None
    return api.design_from(preset=args.preset, path=args.design)


def verify(args) -> int:
    from . import api
    from .errors import InputError

    req = api.load(args.requirements)
    if args.frames is not None and not 1 <= args.frames <= 100_000:
        raise InputError("--frames", f"expected a whole number from 1 to 100000, got {args.frames}")
    if not 0 <= args.seed < 2**63:
        raise InputError("--seed", f"expected a whole number from 0 to 2^63 - 1, got {args.seed}")
    outputs = _check_outputs(args, req)
    design = _chosen_design(args, req)
    if design is None:
        print("numerology: --best: the request is infeasible, so there is no design to verify "
              "(run numerology solve for the diagnosis)", file=sys.stderr)
        return EXIT_FAILS
    from .verify import verify as run_verify

    if args.json:
        verification = run_verify(req, design, seed=args.seed, frames=args.frames)
        _emit(render_json.document("numerology.verify", {"requirements": req.path, **verification.to_json(),
                                                         "design": design.to_json(), "seed": args.seed}))
    else:
        from . import render_terminal

        con = render_terminal.console()
        verification = render_terminal.with_progress(
            con, lambda progress: run_verify(req, design, seed=args.seed, frames=args.frames, progress=progress))
        render_terminal.verification(con, design, verification)
    if outputs["markdown"]:
        from .note import write_note

        write_note(outputs["markdown"], req, check=api.check(req, design), verification=verification)
    return EXIT_OK if verification.agree else EXIT_FAILS


def sweep(args) -> int:
    from . import api
    from .output import output_path
    from .sweep import load_sites, sweep as run_sweep, write_sweep_csv

    req = api.load(args.requirements)
    out = output_path(args.out, "--out", (".csv",), req)
    if out is not None and out.resolve() == __import__("pathlib").Path(args.sites).resolve():
        from .errors import InputError

        raise InputError("--out", f"refusing to overwrite the sites file {args.sites!r}")
    sites = load_sites(args.sites, req)
    design = _chosen_design(args, req)
    if design is None:
        print("numerology: --best: the request is infeasible, so there is no design to sweep "
              "(run numerology solve for the diagnosis)", file=sys.stderr)
        return EXIT_FAILS
    result = run_sweep(req, design, sites)
    if out is not None:
        write_sweep_csv(out, result)
    if args.json:
        _emit(render_json.document("numerology.sweep", {"requirements": req.path, "sites_file": args.sites,
                                                        "design": design.to_json(), **result.to_json()}))
    else:
        from . import render_terminal

        render_terminal.sweep(render_terminal.console(), design, result, out)
    for line, message in getattr(sites, "problems", ()):
        print(f"numerology: {args.sites}:{line}: {message}", file=sys.stderr)
    summary = result.summary()
    return EXIT_OK if summary.failed == 0 and not getattr(sites, "problems", ()) else EXIT_FAILS


def plan(args) -> int:
    from . import api
    from .errors import InputError
    from .plan import DEFAULT_OBJECTIVE, plan as run_plan
    from .sweep import load_sites

    req = api.load(args.requirements)
    if args.modes is not None and not 1 <= args.modes <= 26:
        raise InputError("--modes", f"expected a whole number from 1 to 26, got {args.modes}")
    outputs = _check_outputs(args, req)
    sites = load_sites(args.sites, req)
    if sites.size == 0:
        line, message = sites.problems[0]
        raise InputError(f"{args.sites}:{line}", f"no site could be read ({message})")
    result = run_plan(req, sites, modes=args.modes, objective=args.objective or DEFAULT_OBJECTIVE)
    if args.json:
        _emit(render_json.document("numerology.plan", result.to_json()))
    else:
        from . import render_terminal

        render_terminal.plan(render_terminal.console(), result)
    if outputs["markdown"]:
        from .note import write_plan_note

        write_plan_note(outputs["markdown"], req, result)
    if outputs["plot"]:
        from .plan_plot import write_plan_plot

        write_plan_plot(outputs["plot"], req, result)
    for line, message in sites.problems:
        print(f"numerology: {args.sites}:{line}: {message}", file=sys.stderr)
    return EXIT_OK if result.served_all and not sites.problems else EXIT_FAILS
