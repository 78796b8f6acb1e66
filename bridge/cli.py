"""The `biasbridge` command: argument handling and exit status, nothing else.

Exit status: 0 fine, 1 findings or disagreement, 2 unusable input.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Sequence
from importlib import resources
from pathlib import Path

from rich.console import Console

from . import __version__
from .netlist import NetlistError, read_netlist

EXIT_OK, EXIT_FINDINGS, EXIT_INPUT = 0, 1, 2
DEMO_NETLIST = "cs_divider.cir"


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # argparse's own errors: exit 2, one clear line
        self.print_usage(sys.stderr)
        self.exit(EXIT_INPUT, f"biasbridge: error: {message}\n")


def _console() -> Console:
    return Console(highlight=False, soft_wrap=False)


def _error_console() -> Console:
    return Console(stderr=True, highlight=False)


def example_path(name: str) -> Path:
    """A bundled example netlist, from the installed package data or the source tree."""
    try:
        candidate = Path(str(resources.files("bridge._examples").joinpath(name)))
        if candidate.is_file():
            return candidate
    except ModuleNotFoundError:
        pass
    return Path(__file__).resolve().parents[1] / "netlists" / name


def command_parse(args: argparse.Namespace) -> int:
    from .report.circuit_view import circuit_json, circuit_renderable

    status = EXIT_OK
    for path in args.files:
        try:
            circuit = read_netlist(path)
        except NetlistError as exc:
            print(exc.render(), file=sys.stderr)
            status = EXIT_INPUT
            continue
        if args.json:
            sys.stdout.write(json.dumps(circuit_json(circuit)) + "\n")
        else:
            _console().print(circuit_renderable(circuit))
    return status


def _tolerance(text: str) -> float:
    try:
        value = float(text[:-1]) / 100 if text.endswith("%") else float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"`{text}` is not a tolerance (e.g. 5% or 0.05)") from None
    if not 0 < value < 10:
        raise argparse.ArgumentTypeError(f"tolerance {text} is out of range")
    return value


def _positive_seconds(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"`{text}` is not a number of seconds") from None
    if value <= 0:
        raise argparse.ArgumentTypeError("the timeout must be positive")
    return value


def command_check(args: argparse.Namespace) -> int:
    from .check import NotASingleStage, check_circuit
    from .expect import check_against_circuit, read_expectations
    from .report.check_view import check_json, check_renderable
    from .sim.client import NgspiceSession, ngspice_available

    console = _console()
    expectations = None
    if args.expect:
        try:
            expectations = read_expectations(args.expect, args.tol)
        except NetlistError as exc:
            print(exc.render(), file=sys.stderr)
            return EXIT_INPUT
    available, hint = ngspice_available()
    session = NgspiceSession() if available else None
    if session is None:
        print(f"biasbridge: {hint}", file=sys.stderr)
    status = EXIT_OK
    progress = None
    if len(args.files) > 3 and console.is_terminal and not args.json:
        from rich.progress import Progress

        progress = Progress(console=Console(stderr=True), transient=True)
        progress.start()
        task = progress.add_task("checking", total=len(args.files))
    try:
        for path in args.files:
            try:
                circuit = read_netlist(path)
                if expectations is not None:
                    check_against_circuit(
                        expectations, set(circuit.nodes()), {e.name.lower() for e in circuit.elements}
                    )
                result = check_circuit(
                    circuit, session, tolerance=args.tol, sim_timeout=args.sim_timeout,
                    expect=expectations, unavailable_hint=None if available else hint,
                )
            except NetlistError as exc:
                print(exc.render(), file=sys.stderr)
                status = EXIT_INPUT
                continue
            except NotASingleStage as exc:
                print(f"{path}:1:1: {exc}", file=sys.stderr)
                status = EXIT_INPUT
                continue
            if args.json:
                sys.stdout.write(json.dumps(check_json(result), allow_nan=False) + "\n")
            else:
                console.print(check_renderable(result, steps=args.steps))
                console.print()
            if not result.agree and status == EXIT_OK:
                status = EXIT_FINDINGS
            if progress is not None:
                progress.advance(task)
    finally:
        if progress is not None:
            progress.stop()
        if session is not None:
            session.close()
    return status


def command_demo(args: argparse.Namespace) -> int:
    path = example_path(DEMO_NETLIST)
    _console().print(f"[bold]biasbridge demo[/bold]: check --steps on the bundled example {path.name}\n")
    demo_args = argparse.Namespace(
        files=[str(path)], json=False, steps=True, tol=0.05, sim_timeout=10.0, expect=None
    )
    status = command_check(demo_args)
    return EXIT_OK if status == EXIT_FINDINGS else status


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="biasbridge",
        description="Cross-check a single-transistor stage's bias point: hand analysis, "
        "level-1 solver and ngspice side by side.",
    )
    parser.add_argument("--version", action="version", version=f"biasbridge {__version__}")
    verbs = parser.add_subparsers(dest="verb", required=True, parser_class=_Parser)
    parse = verbs.add_parser("parse", help="show the circuit as biasbridge understood it")
    parse.add_argument("files", nargs="+", metavar="FILE", help="SPICE netlist(s)")
    parse.add_argument("--json", action="store_true", help="one JSON object per netlist")
    parse.set_defaults(run=command_parse)
    check = verbs.add_parser(
        "check", help="hand analysis, level-1 solver and ngspice side by side for each netlist"
    )
    check.add_argument("files", nargs="+", metavar="FILE", help="SPICE netlist(s) of single-transistor stages")
    check.add_argument("--json", action="store_true", help="one JSON object per netlist, one per line")
    check.add_argument("--steps", action="store_true", help="show the hand derivation")
    check.add_argument("--tol", type=_tolerance, default=0.05, metavar="TOL",
                       help="hand-vs-simulator tolerance, e.g. 5%% or 0.05 (default 5%%)")
    check.add_argument("--sim-timeout", type=_positive_seconds, default=10.0, metavar="SECONDS",
                       help="give up on ngspice for one netlist after this long (default 10)")
    check.add_argument("--expect", metavar="FILE.toml", help="the designer's own targets (see README)")
    check.set_defaults(run=command_check)
    demo = verbs.add_parser("demo", help="run the main job on a bundled example")
    demo.set_defaults(run=command_demo)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        return args.run(args)
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:
        return EXIT_OK


if __name__ == "__main__":
    sys.exit(main())
