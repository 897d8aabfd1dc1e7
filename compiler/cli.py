"""The `prespec` command line. Commands, options and exit codes are binding (DEVELOPERS.md).

Every command returns a :class:`Report`: an exit code, human lines, and a JSON payload
printed instead of the lines under `--json`. Problems from any pass arrive as
:class:`~compiler.problems.Stop` and are printed one per line, in the GNU form.
"""

from __future__ import annotations

import argparse
import json
import sys
from dataclasses import dataclass, field
from typing import Callable, Sequence

from . import __version__
from .problems import Exit, Problem, Stop


@dataclass
class Report:
    exit_code: int = Exit.OK
    lines: list[str] = field(default_factory=list)
    payload: dict = field(default_factory=dict)
    problems: tuple[Problem, ...] = ()


class _Parser(argparse.ArgumentParser):
    """argparse that exits 2 with a one-line message (binding: command-line errors exit 2)."""

    def error(self, message: str):  # type: ignore[override]
        self.exit(Exit.PLAN_INVALID, f"prespec: error: {message}\n")


def _cmd_check(args) -> Report:
    from .pipeline import compile_plan

    from .resolve_rules import plan_cautions

    plan = compile_plan(args.plan)
    report = Report(payload={"plan": args.plan, "study": plan.study.id},
                    problems=plan_cautions(plan))
    if args.explain:
        from .explain import explain, explain_json

        report.lines.append(explain(plan))
        report.payload["explain"] = explain_json(plan)
    else:
        report.lines.append(f"{args.plan}: ok: study {plan.study.id}, "
                            f"{len(plan.analyses)} analyses, {len(plan.decisions)} decisions")
    return report


def _cmd_freeze(args) -> Report:
    from .lock import freeze

    return freeze(args.plan)


def _cmd_amend(args) -> Report:
    from .lock import amend

    return amend(args.plan, args.reason, outcome_data_seen=args.outcome_data_seen)


def _cmd_run(args) -> Report:
    from .bundle import run

    return run(args.plan, data=args.data, out=args.out, unlocked=args.unlocked,
               stream=args.stream, sign_key=args.sign, progress=not args.json)


def _cmd_rehearse(args) -> Report:
    from .bundle import rehearse

    return rehearse(args.plan, data=args.data, scramble=args.scramble, out=args.out,
                    seed=args.seed, rows=args.rows, effects=args.effect or (),
                    progress=not args.json)


def _cmd_verify(args) -> Report:
    from .verify import verify

    return verify(args.dir, data=args.data, key=args.key)


def _cmd_qualify(args) -> Report:
    from .qualify import qualify

    return qualify(args.out, progress=not args.json)


def _cmd_compare(args) -> Report:
    from .compare import compare

    return compare(args.first, args.second)


def build_parser() -> argparse.ArgumentParser:
    def add_common(p: argparse.ArgumentParser, default) -> None:
        p.add_argument("--json", action="store_true", default=default,
                       help="print findings as one JSON document")
        p.add_argument("--debug", action="store_true", default=default,
                       help="show the traceback of an internal fault")

    # The subcommands repeat the options with SUPPRESS defaults, so that `prespec --json check`
    # and `prespec check --json` mean the same and neither overwrites the other.
    common = _Parser(add_help=False)
    add_common(common, argparse.SUPPRESS)

    parser = _Parser(
        prog="prespec",
        description="Check, freeze, rehearse and run a pre-specified analysis plan; "
                    "seal the results for audit.")
    add_common(parser, False)
    parser.add_argument("--version", action="version", version=f"prespec {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    p = sub.add_parser("check", parents=[common], help="check a plan and report every problem",
                       description="Load, validate and resolve PLAN; print every problem.")
    p.add_argument("plan", metavar="PLAN")
    p.add_argument("--explain", action="store_true",
                   help="print the compiled plan in plain words")
    p.set_defaults(handler=_cmd_check)

    p = sub.add_parser("freeze", parents=[common], help="freeze a plan by hash",
                       description="Write PLAN.lock.json beside the plan.")
    p.add_argument("plan", metavar="PLAN")
    p.set_defaults(handler=_cmd_freeze)

    p = sub.add_parser("amend", parents=[common], help="re-freeze a changed plan, logging why",
                       description="Re-freeze a changed plan and append to its amendment log.")
    p.add_argument("plan", metavar="PLAN")
    p.add_argument("--reason", required=True, metavar="TEXT", help="why the plan changed")
    seen = p.add_mutually_exclusive_group()  # one is required: lock.amend says so, with a hint
    seen.add_argument("--before-unblinding", dest="outcome_data_seen", action="store_false",
                      default=None, help="no outcome data had been seen when the plan changed")
    seen.add_argument("--after-unblinding", dest="outcome_data_seen", action="store_true",
                      default=None, help="outcome data had been seen; later reports are "
                                         "stamped AMENDED AFTER UNBLINDING on every page")
    p.set_defaults(handler=_cmd_amend)

    p = sub.add_parser("run", parents=[common], help="the confirmatory run: fit, decide, seal",
                       description="Run a frozen plan on the final data and write a sealed bundle.")
    p.add_argument("plan", metavar="PLAN")
    p.add_argument("--data", metavar="FILE", help="the data file (overrides data.path)")
    p.add_argument("--out", metavar="DIR", help="bundle folder (default out/<study id>)")
    p.add_argument("--unlocked", action="store_true",
                   help="run without a matching lock; the bundle is stamped NOT PRE-REGISTERED")
    p.add_argument("--stream", action="store_true",
                   help="stream the data in batches even when it would fit in memory")
    p.add_argument("--sign", metavar="KEY", help="sign the manifest with an Ed25519 private key (PEM)")
    p.set_defaults(handler=_cmd_run)

    p = sub.add_parser("rehearse", parents=[common], help="rehearse the plan before unblinding",
                       description="Run the whole pipeline on synthetic data made from the "
                                   "dictionary, or on real data with the exposure column "
                                   "scrambled.")
    p.add_argument("plan", metavar="PLAN")
    p.add_argument("--out", metavar="DIR", help="bundle folder (default out/<study id>-rehearsal)")
    p.add_argument("--data", metavar="FILE", help="blinded real data (with --scramble)")
    p.add_argument("--scramble", metavar="VAR",
                   help="the exposure column to permute (every analysis must have it)")
    p.add_argument("--seed", type=int, default=0, metavar="N", help="random seed (default 0)")
    p.add_argument("--rows", type=int, metavar="N", help="synthetic rows (default data.expected_rows or 500)")
    p.add_argument("--effect", action="append", metavar="ID[:LEVEL]=X",
                   help="plant an exposure effect in analysis ID (or one level of its "
                        "exposure) on its natural scale: a difference, odds ratio or rate "
                        "ratio; repeatable; default none")
    p.set_defaults(handler=_cmd_rehearse)

    p = sub.add_parser("verify", parents=[common], help="check a sealed bundle offline",
                       description="Check every artifact of DIR against its manifest.")
    p.add_argument("dir", metavar="DIR")
    p.add_argument("--data", metavar="FILE", help="re-run the bundled plan on FILE and compare")
    p.add_argument("--key", metavar="PUB", help="check the manifest signature with this public key")
    p.set_defaults(handler=_cmd_verify)

    p = sub.add_parser("qualify", parents=[common],
                       help="run certified reference problems on this installation; seal the evidence",
                       description="Run the certified reference problems through the run "
                                   "pipeline and seal the evidence as a bundle; exit 7 when a "
                                   "check misses its tolerance.")
    p.add_argument("--out", metavar="DIR", help="bundle folder (default out/qualification)")
    p.set_defaults(handler=_cmd_qualify)

    p = sub.add_parser("compare", parents=[common], help="name every difference between two bundles",
                       description="Name every difference between bundles A and B: plan, data, "
                                   "values beyond rounding, verdicts, amendments.")
    p.add_argument("first", metavar="A")
    p.add_argument("second", metavar="B")
    p.set_defaults(handler=_cmd_compare)
    return parser


def _emit(report: Report, as_json: bool, command: str) -> None:
    if as_json:
        doc = {"command": command, "exit_code": int(report.exit_code),
               "problems": [p.as_json() for p in report.problems], **report.payload}
        sys.stdout.write(json.dumps(doc, sort_keys=True, ensure_ascii=False) + "\n")
        return
    for p in report.problems:
        print(p.format(), file=sys.stderr if p.is_error else sys.stdout)
    for line in report.lines:
        print(line)


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    handler: Callable[[argparse.Namespace], Report] = args.handler
    try:
        report = handler(args)
    except Stop as stop:
        report = Report(exit_code=stop.exit_code, problems=stop.problems)
    except KeyboardInterrupt:  # Ctrl-C or SIGTERM: whatever was being written is removed
        _say_quietly("prespec: interrupted (no bundle or lock was left half-written)")
        return INTERRUPTED
    except BrokenPipeError:  # a progress line to a closed stderr
        return _closed_pipe(Exit.INTERNAL)
    except Exception as exc:  # an internal fault: one line unless --debug
        if args.debug:
            raise
        _say_quietly(f"prespec: internal error: {type(exc).__name__}: {exc} "
                     "(rerun with --debug)")
        return Exit.INTERNAL
    try:
        _emit(report, args.json, args.command)
        sys.stdout.flush()
    except BrokenPipeError:  # the reader went away (`prespec check --explain | head`)
        return _closed_pipe(report.exit_code)
    return int(report.exit_code)


INTERRUPTED = 130  # 128 + SIGINT, as shells report a command ended by Ctrl-C


def _say_quietly(line: str) -> None:
    try:
        print(line, file=sys.stderr)
    except (BrokenPipeError, ValueError):  # stderr closed too: the exit code says it
        pass


def _closed_pipe(code: int) -> int:
    """A closed stdout or stderr ends the command quietly with its own exit code: the rest
    of the output goes nowhere (not even the interpreter's complaint at its final flush)."""
    import os

    devnull = os.open(os.devnull, os.O_WRONLY)
    for stream in (sys.stdout, sys.stderr):
        try:
            os.dup2(devnull, stream.fileno())
        except (OSError, ValueError):
            pass
    os.close(devnull)
    return int(code)


def _interrupt_on_signals() -> None:
    """Ctrl-C and SIGTERM raise KeyboardInterrupt, so the seal removes its temporary folder
    and the command ends with exit 130. Set even when SIGINT is ignored: a shell script
    starts its background commands so, and `kill -INT` must still stop a run before it
    seals, not let it seal anyway."""
    import signal

    def interrupted(signum, frame):
        raise KeyboardInterrupt

    signal.signal(signal.SIGINT, signal.default_int_handler)
    signal.signal(signal.SIGTERM, interrupted)


def command() -> None:
    """The `prespec` executable: ``main``, then the process ends at once. Every file a
    command writes is closed (and a bundle renamed into place) before ``main`` returns, so
    the orderly interpreter shutdown — numpy, pyarrow, scipy and their threads torn down one
    by one, about 0.15 s on a run — has nothing left to do but be slow."""
    import os

    _interrupt_on_signals()
    try:
        code = main()
    except SystemExit as stop:  # argparse's --help, --version and usage errors
        code = stop.code if isinstance(stop.code, int) else (0 if stop.code is None else 2)
        if stop.code is not None and not isinstance(stop.code, int):
            _say_quietly(str(stop.code))
    except BrokenPipeError:  # --help or --version into a closed pipe
        code = _closed_pipe(0)
    except KeyboardInterrupt:  # between main's own guards
        code = INTERRUPTED
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (BrokenPipeError, ValueError):
            pass
    os._exit(code)


if __name__ == "__main__":
    command()
