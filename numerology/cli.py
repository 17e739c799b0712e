"""Command line: parse options, call the library, hand results to a renderer.

Exit status: 0 = answer found (every rule passes), 1 = valid input but the
request is infeasible or a rule fails (an answer, with a diagnosis),
2 = bad input or usage (one line on stderr, nothing written); ``verify`` also
exits 1 when model and simulation disagree, 3 when the run is inconclusive.
Never 1 for anything else: 130 = interrupted (Ctrl-C; ``verify`` reports what
it measured), 141 = stdout closed before the output was written (as a shell
reports a process ended by SIGPIPE), 70 = an internal error (one line asking
for a report; ``NUMEROLOGY_DEBUG=1`` shows the traceback).
"""

from __future__ import annotations

import argparse
import sys
from typing import Sequence

from .errors import InputError

EXIT_OK, EXIT_FAILS, EXIT_BAD_INPUT, EXIT_INCONCLUSIVE = 0, 1, 2, 3
EXIT_INTERNAL, EXIT_INTERRUPTED, EXIT_CLOSED_PIPE = 70, 130, 141

VERIFY_EPILOG = ("exit status: 0 = model and simulation agree and every rule passes; 1 = they disagree, or the design "
                 "fails a rule (the report names it); 2 = bad input; 3 = inconclusive (the run was too short to "
                 "decide: the report says how many frames would); 130 = interrupted by Ctrl-C (what was measured "
                 "is reported)")
#: Objectives of ``plan`` (numerology.plan.OBJECTIVES, listed here so that --help needs no import).
PLAN_OBJECTIVES = ("weakest-margin", "weakest-throughput", "total-throughput")


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as one line (InputError) instead of exiting."""

    def error(self, message):  # noqa: D401 - argparse API
        # main() prefixes "numerology: ", so the place is the subcommand alone ("check"), or none.
        raise InputError(self.prog.removeprefix("numerology").strip(), message)


def _parser() -> argparse.ArgumentParser:
    p = _Parser(prog="numerology", description="Choose and justify OFDM numerologies from channel bounds and goals.")
    p.add_argument("--version", action="store_true", help="print the version and the bundled tables, then exit")
    sub = p.add_subparsers(dest="command", parser_class=_Parser, metavar="COMMAND")

    env = sub.add_parser("env", help="derive the channel environment from a requirement file")
    env.add_argument("requirements", metavar="REQ.toml")
    _output_options(env, markdown=False, plot=False)

    prof = sub.add_parser("profiles", help="list the built-in power-delay profiles")
    prof.add_argument("--json", action="store_true", help="machine-readable output")

    pre = sub.add_parser("presets", help="list the published numerologies that serve as ready designs")
    pre.add_argument("--json", action="store_true", help="machine-readable output")

    chk = sub.add_parser("check", help="evaluate one fixed design against the requirement file")
    chk.add_argument("requirements", metavar="REQ.toml")
    _design_options(chk, best=False)
    chk.add_argument("--speed", metavar="QTY", help="what-if: override the max speed, e.g. \"250 km/h\"")
    chk.add_argument("--delay", metavar="QTY", help="what-if: override the max excess delay, e.g. \"8 us\"")
    _output_options(chk)

    sol = sub.add_parser("solve", help="search the design space and rank the feasible numerologies")
    sol.add_argument("requirements", metavar="REQ.toml")
    sol.add_argument("--top", type=int, default=5, metavar="N", help="how many designs to show (default 5)")
    sol.add_argument("--objective", choices=("throughput", "robustness", "overhead", "latency"),
                     help="ranking objective (default: goals.objective)")
    _output_options(sol)

    ver = sub.add_parser("verify", help="confirm a design's analytic budget by simulating the OFDM link",
                         epilog=VERIFY_EPILOG)
    ver.add_argument("requirements", metavar="REQ.toml")
    _design_options(ver, best=True)
    ver.add_argument("--speed", metavar="QTY", help="what-if: override the max speed, e.g. \"250 km/h\"")
    ver.add_argument("--delay", metavar="QTY", help="what-if: override the max excess delay, e.g. \"8 us\"")
    ver.add_argument("--seed", type=int, default=0, metavar="N", help="random seed (default 0); same seed, same JSON")
    ver.add_argument("--frames", type=int, metavar="N",
                     help="frames to simulate (default: until every figure is decided, within a sample budget)")
    ver.add_argument("--json", action="store_true", help="machine-readable output on stdout")
    ver.add_argument("--markdown", metavar="FILE", help="write a design note with the verification to FILE")

    swp = sub.add_parser("sweep", help="check one design at every site of a deployment")
    swp.add_argument("requirements", metavar="REQ.toml")
    swp.add_argument("--sites", required=True, metavar="FILE.csv", help="one site per row; header: key [unit]")
    _design_options(swp, best=True)
    swp.add_argument("--out", metavar="FILE.csv", help="write the per-site results to FILE.csv")
    swp.add_argument("--json", action="store_true", help="machine-readable output on stdout")

    pln = sub.add_parser("plan", help="the fewest designs (modes) that serve every site of a deployment")
    pln.add_argument("requirements", metavar="REQ.toml")
    pln.add_argument("--sites", required=True, metavar="FILE.csv", help="one site per row (the columns of sweep)")
    pln.add_argument("--modes", type=int, metavar="K",
                     help="at most this many modes: those serving the most sites, then the best objective "
                          "(default: the fewest that serve every site a design can serve)")
    pln.add_argument("--objective", choices=PLAN_OBJECTIVES,
                     help="among plans serving as many sites: weakest-margin (default: the smallest worst margin of "
                          "a site, as large as possible), weakest-throughput or total-throughput")
    _output_options(pln)
    return p


def _design_options(p, best: bool):
    group = p.add_mutually_exclusive_group(required=True)
    group.add_argument("--design", metavar="FILE", help="a design file (TOML)")
    group.add_argument("--preset", metavar="NAME", help="a published numerology (see: numerology presets)")
    if best:
        group.add_argument("--best", action="store_true", help="the solver's best design")


def _output_options(p, markdown=True, plot=True):
    p.add_argument("--json", action="store_true", help="machine-readable output on stdout")
    if markdown:
        p.add_argument("--markdown", metavar="FILE", help="write a design note (Markdown) to FILE")
    if plot:
        p.add_argument("--plot", metavar="FILE", help="write a picture (PNG or SVG) to FILE")


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    argv = list(sys.argv[1:] if argv is None else argv)
    try:
        args = _parser().parse_args(argv)
        if args.version:
            from .commands import version

            return version()
        if args.command is None:
            raise InputError("", "expected a command: env, profiles, presets, check, solve, verify, "
                                           "sweep or plan (numerology --help lists them)")
        from . import commands

        status = getattr(commands, args.command)(args)
        from .quantity_cache import save

        save()  # quantity strings pint read in this run: later runs skip importing pint
        return status
    except InputError as exc:
        print("numerology: " + " ".join(str(exc).splitlines()), file=sys.stderr)  # always one line
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("numerology: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        _silence_stdout()  # the reader has gone (numerology ... | head): nothing more to say to it
        return EXIT_CLOSED_PIPE
    except Exception as exc:  # a bug: one line, never a traceback with exit 1 ("the answer is no")
        import os

        if os.environ.get("NUMEROLOGY_DEBUG"):
            raise
        what = " ".join(str(exc).split())[:200]
        print(f"numerology: internal error ({type(exc).__name__}: {what}); please report it with the command "
              "and its input files (NUMEROLOGY_DEBUG=1 shows the traceback)", file=sys.stderr)
        return EXIT_INTERNAL


def _silence_stdout() -> None:
    """Point stdout at the null device, so that the interpreter's last flush finds no closed pipe."""
    import os

    try:
        sys.stdout = open(os.devnull, "w")  # noqa: SIM115 - lives until the process ends
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, 1)
    except (OSError, ValueError):
        pass
