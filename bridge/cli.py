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


def command_demo(args: argparse.Namespace) -> int:
    path = example_path(DEMO_NETLIST)
    _console().print(f"[bold]biasbridge demo[/bold]: reading the bundled example {path.name}\n")
    return command_parse(argparse.Namespace(files=[str(path)], json=False))


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
