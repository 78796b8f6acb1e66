"""The `biasbridge` command: argument handling and exit status, nothing else.

Exit status: 0 fine, 1 findings or disagreement (or, for `check`, a stage out of saturation
without --allow-region), 2 unusable input.

The netlist front end and rich are imported inside the commands, not here: `check` starts the
ngspice worker first, so the worker's start-up runs beside those imports.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import re
import signal
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from . import __version__

if TYPE_CHECKING:
    from rich.console import Console

    from .compare import CheckResult
    from .netlist import Location, NetlistError
    from .netlist.circuit import Circuit

EXIT_OK, EXIT_FINDINGS, EXIT_INPUT = 0, 1, 2
DEMO_NETLIST = "cs_divider.cir"
SWEEP_NEGATIVE_VALUE = re.compile(r"^-\.?\d")
MAX_SIM_TIMEOUT = 86400.0


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # argparse's own errors: exit 2, one clear line
        self.print_usage(sys.stderr)
        self.exit(EXIT_INPUT, f"biasbridge: error: {message}\n")


def _console() -> Console:
    from rich.console import Console

    return Console(highlight=False, soft_wrap=False)


def example_path(name: str) -> Path:
    """A bundled example netlist, from the installed package data or the source tree."""
    from importlib import resources

    try:
        candidate = Path(str(resources.files("bridge._examples").joinpath(name)))
        if candidate.is_file():
            return candidate
    except ModuleNotFoundError:
        pass
    return Path(__file__).resolve().parents[1] / "netlists" / name


def unusable_json(file: str, message: str, location: Location) -> dict[str, object]:
    """The JSON line of a netlist that cannot be used (`--json`), in its place among the others:
    the file as given, and the message with the place it points at (in that file or in one it
    includes)."""
    error = {"message": message, "file": location.file, "line": location.line, "column": location.column}
    return {"file": file, "error": error}


def unusable_netlist(args: argparse.Namespace, exc: NetlistError) -> int:
    """A netlist that cannot be read: its located message on stderr and, with --json, its error
    object (`unusable_json`) on stdout; exit status 2."""
    print(exc.render(), file=sys.stderr)
    if args.json:
        sys.stdout.write(json.dumps(unusable_json(args.file, exc.message, exc.location)) + "\n")
    return EXIT_INPUT


def input_files(file: str, circuit: Circuit) -> set[str]:
    """The real paths of the netlist and every file it includes: what an output must not overwrite."""
    return {os.path.realpath(file)} | {
        os.path.realpath(element.origin.file) for element in circuit.elements if element.origin.file
    }


def refuse(message: str) -> int:
    """Unusable input: one line on stderr, exit status 2."""
    print(f"biasbridge: error: {message}", file=sys.stderr)
    return EXIT_INPUT


def command_parse(args: argparse.Namespace) -> int:
    from .netlist import NetlistError, read_netlist
    from .report.circuit_view import circuit_json, circuit_renderable

    status = EXIT_OK
    for path in args.files:
        try:
            circuit = read_netlist(path)
        except NetlistError as exc:
            print(exc.render(), file=sys.stderr)
            if args.json:
                sys.stdout.write(json.dumps(unusable_json(path, exc.message, exc.location)) + "\n")
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
    if value != value:  # nan
        raise argparse.ArgumentTypeError(f"`{text}` is not a number of seconds")
    if value <= 0:
        raise argparse.ArgumentTypeError("the timeout must be positive")
    # inf reads as a float; the wait for ngspice takes whole milliseconds in a C int (epoll).
    if not value <= MAX_SIM_TIMEOUT:
        raise argparse.ArgumentTypeError(f"the timeout must be at most {MAX_SIM_TIMEOUT:.0f} seconds (a day)")
    return value


def command_check(args: argparse.Namespace) -> int:
    from .sim.client import NgspiceSession, ngspice_available

    available, hint = ngspice_available()
    session = NgspiceSession() if available else None
    if session is not None:
        session.spawn()  # ngspice starts up while the analyses are imported and the netlists read
    from .ahead import Preparation, Prepared, Unusable, next_meanwhile, worth_a_helper
    from .netlist import NetlistError

    expectations = None
    if args.expect:
        from .expect import read_expectations  # and the TOML reader with it: only for --expect

        try:
            expectations = read_expectations(args.expect, args.tol)
        except NetlistError as exc:
            print(exc.render(), file=sys.stderr)
            if session is not None:
                session.close()
            return EXIT_INPUT
    # Reading and solving run ahead in a second process when there are enough files (see
    # ahead.py); it is forked before the report's modules load, which it does not need.
    worker = session.worker_pid if session is not None else None
    helper = worth_a_helper(len(args.files), beside=() if worker is None else (worker,))
    prepared = Preparation(args.files, expectations, helper=helper, working=args.steps)
    from .check import CheckQueue, PendingCheck, start_check
    from .report.check_view import check_json_line, check_renderable, print_check

    # JSON lines are written without rich: it is not even imported (see _json_terminal).
    console = None if args.json else _console()
    if session is None:
        print(f"biasbridge: {hint}", file=sys.stderr)
    status = EXIT_OK
    batch = None if console is None else _batch_view(args, console)
    progress = None
    if console is not None and len(args.files) >= 2 and console.is_terminal and sys.stderr.isatty():
        from rich.console import Console
        from rich.progress import Progress

        progress = Progress(console=Console(stderr=True), transient=True)
        progress.start()
        task = progress.add_task("checking", total=len(args.files))
    queue = CheckQueue()

    def report(item: object) -> None:
        nonlocal status
        if isinstance(item, Unusable):  # a netlist that could not be checked
            print(item.rendered, file=sys.stderr)
            if args.json:
                sys.stdout.write(json.dumps(unusable_json(item.file, item.message, item.location)) + "\n")
            elif batch is not None:
                batch.unusable(item.file, item.message)
            status = EXIT_INPUT
            if progress is not None:
                progress.advance(task)
            return
        assert isinstance(item, PendingCheck)
        try:
            result = item.finish()
        except NetlistError as exc:
            report(Unusable.from_error(item.circuit.source_file, exc))
            return
        if args.json:
            sys.stdout.write(check_json_line(result) + "\n")
        elif batch is not None:
            batch.row(result)
        else:
            assert console is not None
            print_check(console, check_renderable(result, steps=args.steps, allow_region=args.allow_region))
        # A stage that does not amplify is a finding too, unless --allow-region accepts it.
        if (not result.agree or not (result.amplifies or args.allow_region)) and status == EXIT_OK:
            status = EXIT_FINDINGS
        if progress is not None:
            progress.advance(task)

    def report_answered() -> None:
        for done in queue.answered():
            report(done)

    # On a terminal, a result is shown as soon as it is complete: while the next netlist is read
    # and solved (a slow one, say), what ngspice has answered is reported in between. Otherwise
    # the next netlist is prepared first and the result reported after it, in the same order.
    at_once = console.is_terminal if console is not None else _json_terminal()
    items = iter(prepared)
    try:
        # Started in order and reported in order; see CheckQueue for how ngspice is kept busy.
        while True:
            ready = (
                next_meanwhile(items, report_answered) if at_once and not prepared.at_hand() else next(items, None)
            )
            if ready is None:
                break
            item: object = ready
            if isinstance(ready, Prepared):
                item = start_check(
                    ready.circuit, session, tolerance=args.tol, sim_timeout=args.sim_timeout,
                    expect=expectations, unavailable_hint=None if available else hint,
                    submit=queue.may_submit(), own=ready.own,
                )
            queue.add(item)
            for done in queue.ready():
                report(done)
        for done in queue.rest():
            report(done)
        if batch is not None:
            if progress is not None:
                progress.stop()
            batch.finish()
    finally:
        prepared.close()
        if progress is not None:
            progress.stop()
        if session is not None:
            session.close()
    return status


class _BatchView:
    """`check` on several netlists in text: a row per stage as each result comes (see
    ``report.batch_view``), then the full view of the flagged stages (every stage's with
    --details), then the summary line."""

    def __init__(self, args: argparse.Namespace, console: Console) -> None:
        from .report import batch_view

        self.view, self.args, self.console = batch_view, args, console
        self.verdicts: list[str] = []
        self.detailed: list[CheckResult] = []  # the results whose full view follows the rows
        batch_view.print_line(console, batch_view.HEADING, "bold")

    def row(self, result: CheckResult) -> None:
        row = self.view.batch_row(result, self.args.allow_region)
        self.view.print_row(self.console, row)
        self.verdicts.append(row.verdict)
        if self.args.details or self.view.flagged(result, self.args.allow_region):
            self.detailed.append(result)

    def unusable(self, file: str, message: str) -> None:
        row = self.view.unusable_row(file, message)
        self.view.print_row(self.console, row)
        self.verdicts.append(row.verdict)

    def finish(self) -> None:
        from .report.check_view import check_renderable, print_check

        self.console.print()
        for result in self.detailed:
            print_check(self.console, check_renderable(result, steps=self.args.steps,
                                                       allow_region=self.args.allow_region))
        self.view.print_line(self.console, self.view.summary_line(self.verdicts, len(self.detailed)), "bold")


def _json_terminal() -> bool:
    """Whether JSON lines go to a terminal, decided as rich's Console.is_terminal decides it for
    standard output (rich 15, console.py: TTY_COMPATIBLE=0 or 1 settles it, then a non-empty
    FORCE_COLOR counts as a terminal, else isatty). Only when each line is written depends on it,
    never what is written."""
    compatible = os.environ.get("TTY_COMPATIBLE", "")
    if compatible in ("0", "1"):
        return compatible == "1"
    force_color = os.environ.get("FORCE_COLOR")
    if force_color is not None:
        return force_color != ""
    try:
        return sys.stdout.isatty()
    except (AttributeError, ValueError):
        return False


def _batch_view(args: argparse.Namespace, console: Console) -> _BatchView | None:
    """The batch view for text output of more than one netlist; None for one netlist or --json."""
    if args.json or len(args.files) < 2:
        return None
    return _BatchView(args, console)


def command_demo(args: argparse.Namespace) -> int:
    path = example_path(DEMO_NETLIST)
    _console().print(f"[bold]biasbridge demo[/bold]: check --steps on the bundled example {path.name}\n")
    demo_args = argparse.Namespace(
        files=[str(path)], json=False, steps=True, tol=0.05, sim_timeout=10.0, expect=None, allow_region=False,
        details=False,
    )
    status = command_check(demo_args)
    return EXIT_OK if status == EXIT_FINDINGS else status


def _sweep_number(text: str | None, option: str) -> float | None:
    from .netlist.numbers import NumberError, parse_number

    if text is None:
        return None
    try:
        return parse_number(text.strip())
    except NumberError:
        raise ValueError(f"{option} `{text}` is not a number (SPICE suffixes such as 10m or 1k are fine)") from None


def _check_output_path(target: str, inputs: set[str], option: str) -> None:
    """An output file may not be an input netlist, and its folder must exist."""
    resolved = os.path.realpath(target)
    if resolved in inputs:
        raise ValueError(f"{option} {target}: refusing to write over an input netlist")
    folder = os.path.dirname(resolved)
    if not os.path.isdir(folder):
        raise ValueError(f"{option} {target}: {_unusable_folder(os.path.dirname(target) or '.')}")
    if os.path.isdir(resolved):
        raise ValueError(f"{option} {target} is a folder")
    if not os.access(folder, os.W_OK | os.X_OK):  # said before the sweep runs, not after
        raise ValueError(f"{option} {target}: the folder {os.path.dirname(target) or '.'} is not writable")


def _unusable_folder(folder: str) -> str:
    """Why `folder` cannot take a file: the first part of it that is a file, or that it does not exist."""
    part = folder
    while part and not os.path.lexists(part):
        parent = os.path.dirname(part)
        if parent == part:
            break
        part = parent
    if part and os.path.lexists(part) and not os.path.isdir(part):
        return f"{part} is a file, not a folder"
    return f"the folder {folder} does not exist"


def _with_worker(body, args: argparse.Namespace, wanted: bool = True) -> int:
    """`body(args, session, hint)` with the ngspice worker spawned first (it starts while the
    command's modules load and the netlist is read), closed afterwards; `session` is None where
    ngspice is not installed (`hint` says so) or not `wanted`."""
    from .sim.client import NgspiceSession, ngspice_available

    available, hint = ngspice_available()
    session = NgspiceSession() if available and wanted else None
    if session is not None:
        session.spawn()
    try:
        return body(args, session, hint)
    finally:
        if session is not None:
            session.close()


def command_sweep(args: argparse.Namespace) -> int:
    """`biasbridge sweep`: the DC transfer curve in three columns, with region edges and gain."""
    return _with_worker(_sweep_with, args)  # ngspice starts up while the sweep's modules load and the netlist is read


def _sweep_with(args: argparse.Namespace, session: object, hint: str) -> int:
    """The sweep command once the worker is started (`session`: an NgspiceSession, None without ngspice)."""
    from .analysis.sweep import output_node, refuse_large_sweep, sweep_values
    from .commands.sweep_defaults import default_output, default_range, default_source, gate_bias_source
    from .curves import SweepInputError, independent_source
    from .netlist import NetlistError, read_netlist
    from .report.files import write_text_atomically
    from .report.sweep_view import sweep_csv, sweep_json, sweep_renderable
    from .sweep_run import transfer_curve

    try:
        circuit = read_netlist(args.file)
        refuse_large_sweep(circuit)
    except NetlistError as exc:
        return unusable_netlist(args, exc)
    inputs = input_files(args.file, circuit)
    try:
        if args.plot is not None:
            from .report.plot import plot_format

            plot_format(args.plot)
            _check_output_path(args.plot, inputs, "--plot")
        if args.csv is not None:
            _check_output_path(args.csv, inputs, "--csv")
        if args.plot is not None and args.csv is not None and os.path.realpath(args.plot) == os.path.realpath(
            args.csv
        ):
            raise ValueError("--plot and --csv name the same file")
        start, stop, step = (
            _sweep_number(args.start, "--start"), _sweep_number(args.stop, "--stop"), _sweep_number(args.step, "--step")
        )  # fmt: skip
        try:
            sim_timeout = _positive_seconds(args.sim_timeout)
        except argparse.ArgumentTypeError as exc:
            raise ValueError(f"--sim-timeout: {exc}") from None
        points: int | None = None
        if args.points is not None:
            try:
                points = int(args.points)
            except ValueError:
                raise ValueError(f"--points `{args.points}` is not a whole number") from None
        if step is not None and points is not None:
            raise ValueError("give --step or --points, not both")
        # A capacitor-coupled gate biased by a divider: the gate bias is swept, not the supply.
        gate_bias = None if args.source else gate_bias_source(circuit)
        if gate_bias is not None:
            circuit = gate_bias.circuit
        source = independent_source(circuit, args.source).name if args.source else (
            gate_bias.source if gate_bias is not None else default_source(circuit))  # fmt: skip
        output = output_node(circuit, args.output) if args.output else default_output(circuit)
        if start is None or stop is None:
            low, high = default_range(circuit, source)
            start = low if start is None else start
            stop = high if stop is None else stop
        values = sweep_values(start, stop, step=step, points=points)
    except (SweepInputError, ValueError) as exc:
        return refuse(f"{args.file}: {exc}")

    available = session is not None
    if not available:
        print(f"biasbridge: {hint} (the ngspice column stays empty)", file=sys.stderr)
    result = transfer_curve(
        circuit, source, output, values, session,  # type: ignore[arg-type]
        sim_timeout=sim_timeout, unavailable_hint=None if available else hint, gate_bias=gate_bias,
    )  # fmt: skip
    if session is not None:
        session.close()  # the worker is not needed for writing the output

    def write_plot_file(path: str) -> None:
        from .report.plot import write_plot

        write_plot(result, path)

    for target, write in (
        (args.plot, write_plot_file),
        (args.csv, lambda path: write_text_atomically(path, sweep_csv(result))),
    ):
        if target is None:
            continue
        try:
            write(target)
        except OSError as exc:
            return refuse(f"cannot write {target}: {exc.strerror or exc}")
    if args.json:
        sys.stdout.write(json.dumps(sweep_json(result), allow_nan=False) + "\n")
    else:
        _console().print(sweep_renderable(result, steps=args.steps))
    return EXIT_OK if result.agree else EXIT_FINDINGS


def command_gain(args: argparse.Namespace) -> int:
    """`biasbridge gain`: midband gain, Rin, Rout and band edges, hand | level-1 | ngspice."""
    return _with_worker(_gain_with, args)  # ngspice starts up while the analyses load and the netlist is read


def _frequency(text: str | None) -> float | None:
    """--freq: a positive frequency in Hz (SPICE suffixes allowed); ValueError otherwise."""
    value = _sweep_number(text, "--freq")
    if value is not None and not (math.isfinite(value) and value > 0.0):
        raise ValueError(f"--freq `{text}` must be a positive frequency in Hz")
    return value


def _gain_with(args: argparse.Namespace, session: object, hint: str) -> int:
    """The gain command once the worker is started (`session`: an NgspiceSession, None without ngspice)."""
    from .commands.gain_defaults import GainInputError
    from .curves import SweepInputError
    from .gain_run import run_gain
    from .netlist import NetlistError, read_netlist
    from .report.gain_view import gain_json, gain_renderable

    try:
        circuit = read_netlist(args.file)
    except NetlistError as exc:
        return unusable_netlist(args, exc)
    inputs = input_files(args.file, circuit)
    try:
        frequency = _frequency(args.freq)
        try:
            sim_timeout = _positive_seconds(args.sim_timeout)
        except argparse.ArgumentTypeError as exc:
            raise ValueError(f"--sim-timeout: {exc}") from None
        write_plot = None
        if args.plot is not None:
            from .report.plot import plot_format

            plot_format(args.plot)
            _check_output_path(args.plot, inputs, "--plot")
            from .report.gain_plot import plot_gain as write_plot
        if not circuit.elements_of("mosfet"):
            raise ValueError("the netlist has no MOSFET: `gain` follows a MOSFET stage")
        result = run_gain(
            circuit, session, input_name=args.input, output_name=args.output, frequency=frequency,
            tolerance=args.tol, band_tolerance=args.band_tol, sim_timeout=sim_timeout,
            unavailable_hint=None if session is not None else hint,
        )  # fmt: skip
    except (GainInputError, SweepInputError, ValueError) as exc:
        return refuse(f"{args.file}: {exc}")
    if session is None:
        print(f"biasbridge: {hint} (the ngspice column stays empty)", file=sys.stderr)
    if write_plot is not None:
        if result.measurement is None:
            print(f"biasbridge: --plot {args.plot}: no ngspice sweep to draw; no plot written", file=sys.stderr)
        else:
            try:
                write_plot(args.plot, result.measurement, result.gain["hand"], result.band["low_hz"]["hand"],
                           result.band["high_hz"]["hand"], f"{circuit.title} — {result.input.value} to "
                           f"{result.output.value}")  # fmt: skip
            except OSError as exc:
                return refuse(f"cannot write {args.plot}: {exc.strerror or exc}")
    if args.json:
        sys.stdout.write(json.dumps(gain_json(result), allow_nan=False) + "\n")
    else:
        _console().print(gain_renderable(result, steps=args.steps), soft_wrap=True)
    return EXIT_OK if result.agree else EXIT_FINDINGS


def _codes(text: str) -> tuple[str, ...]:
    """`--select`/`--ignore` values: codes or code prefixes, comma-separated."""
    codes = tuple(part.strip().lower() for part in text.split(",") if part.strip())
    if not codes:
        raise argparse.ArgumentTypeError("give one or more codes or code prefixes, e.g. scale,path")
    return codes


def command_lint(args: argparse.Namespace) -> int:
    """`biasbridge lint`: the classic bias mistakes, each at its card's line."""
    from .sim.client import NgspiceSession, ngspice_available

    available, _ = ngspice_available()
    session = NgspiceSession() if available else None
    if session is not None:
        session.spawn()  # starts while the front end and the rules are imported
    try:
        from .lint.run import ConfigCache, Selection, lint_files, unknown_patterns
        from .netlist import NetlistError

        select = tuple(code for group in args.select for code in group) if args.select else None
        ignore = tuple(code for group in args.ignore for code in group) if args.ignore else ()
        unknown = unknown_patterns((*(select or ()), *ignore))
        if unknown:
            print(f"biasbridge: error: `{unknown[0]}` names no lint code or family (see the README's lint rules)",
                  file=sys.stderr)
            return EXIT_INPUT
        configs = ConfigCache()
        try:
            for path in args.files:
                configs.for_netlist(path)
        except NetlistError as exc:
            print(exc.render(), file=sys.stderr)
            return EXIT_INPUT
        report = lint_files(args.files, Selection(select, ignore), configs, session, args.sim_timeout)
    finally:
        if session is not None:
            session.close()
    from .report.lint_view import lint_json_text, lint_lines, lint_renderable

    if args.format == "json":
        sys.stdout.write(lint_json_text(report))
    elif args.format == "text":
        sys.stdout.write(lint_lines(report))
    else:
        console = _console()
        if console.is_terminal:
            console.print(lint_renderable(report))
        else:
            sys.stdout.write(lint_lines(report))
    if report.unreadable:
        return EXIT_INPUT
    if report.count("error") or (args.strict and report.count("warning")):
        return EXIT_FINDINGS
    return EXIT_OK


def _number_pair(text: str, option: str, names: str) -> tuple[float, float]:
    """`A,B` with SPICE suffixes allowed → two floats (ValueError naming the option otherwise)."""
    parts = text.split(",")
    if len(parts) != 2:
        raise ValueError(f"{option} `{text}` is not {names} (two numbers separated by a comma)")
    first, second = (_sweep_number(part, option) for part in parts)
    assert first is not None and second is not None
    return first, second


def command_fit(args: argparse.Namespace) -> int:
    """`biasbridge fit`: a level-1 card from bench data, two datasheet points or another model card."""
    return _with_worker(_fit, args, wanted=not args.point)  # two datasheet points need no simulator


if TYPE_CHECKING:
    from .sim.client import NgspiceSession


def _fit(args: argparse.Namespace, session: NgspiceSession | None, hint: str) -> int:
    """`fit` with ngspice's worker already starting (`session`; None: not installed, `hint` says why)."""
    from .devices.mos1.load import Level1Geometry
    from .fit.data import read_bias_csv
    from .fit.least_squares import FitError
    from .netlist import NetlistError, read_netlist
    from .sim.client import SimulatorError

    ways = [args.file is not None, bool(args.point), args.card is not None]
    if sum(ways) != 1:
        return refuse("fit takes one of: a CSV file of measurements, --point VGS,ID twice, or --card FILE --model NAME")
    inputs = {os.path.realpath(path) for path in (args.file, args.card) if path is not None}
    try:
        w = _sweep_number(args.w, "--w") if args.w is not None else None
        l = _sweep_number(args.l, "--l") if args.l is not None else None  # noqa: E741
        geometry = Level1Geometry(**{key: value for key, value in (("w", w), ("l", l)) if value is not None})
        floor = _sweep_number(args.floor, "--floor")
        if floor is not None and floor < 0.0:
            raise ValueError("--floor must not be negative")
        timeout = _positive_seconds(args.sim_timeout)
        for target, option in ((args.out, "--out"), (args.plot, "--plot")):
            if target is not None:
                _check_output_path(target, inputs, option)
        if args.plot is not None:
            from .report.plot import plot_format

            plot_format(args.plot)
        if args.out is not None and args.plot is not None and os.path.realpath(args.out) == os.path.realpath(args.plot):
            raise ValueError("--out and --plot name the same file")
    except (ValueError, argparse.ArgumentTypeError) as exc:
        return refuse(str(exc))

    try:
        if args.point:
            from .fit.run import fit_datasheet

            if len(args.point) != 2:
                return refuse(f"datasheet mode takes --point VGS,ID exactly twice, not {len(args.point)} times")
            if args.plot is not None:
                return refuse("--plot needs measurements or a card: two datasheet points make no curves to show")
            try:
                points = tuple(_number_pair(p, "--point", "VGS,ID") for p in args.point)
                vds = _sweep_number(args.vds, "--vds")
                pair = (points[0], points[1])
                outcome = fit_datasheet(pair, geometry, args.name or "fitted", args.type or "nmos", vds)
            except ValueError as exc:
                return refuse(f"--point: {exc}" if not str(exc).startswith("--") else str(exc))
        elif args.card is not None:
            from .fit.run import fit_card

            if not args.model:
                return refuse("--card needs --model NAME: the card in the file to fit")
            try:
                vds_range = _number_pair(args.vds_range, "--vds-range", "VMIN,VMAX")
                around = _number_pair(args.around, "--around", "VGS,VDS") if args.around else None
            except ValueError as exc:
                return refuse(str(exc))
            if max(abs(v) for v in vds_range) <= 0.0:
                return refuse(f"--vds-range {args.vds_range} spans nothing")
            try:
                circuit = read_netlist(args.card)
            except NetlistError as exc:
                print(exc.render(), file=sys.stderr)
                return EXIT_INPUT
            card = next((m for key, m in circuit.models.items() if key.lower() == args.model.lower()), None)
            if card is None:
                known = ", ".join(sorted(circuit.models)) or "none; the first line of a SPICE file is its title"
                return refuse(f"{args.card}: no model `{args.model}` (models in the file: {known})")
            if card.type.lower() not in ("nmos", "pmos"):
                return refuse(f"{args.card}:{card.origin.line}: model `{card.name}` is a {card.type}, not a MOSFET")
            if args.type and args.type != card.type.lower():
                return refuse(f"--type {args.type} but model `{card.name}` is {card.type.lower()}")
            if session is None:
                return refuse(f"--card needs ngspice to simulate the card: {hint}")
            try:
                outcome = fit_card(session, card, args.card, geometry, args.name or f"{card.name}_l1", vds_range,
                                   around, timeout)  # fmt: skip
            except SimulatorError as exc:
                place = f"{args.card}:{card.origin.line}:1"
                return refuse(f"{place}: ngspice could not simulate model `{card.name}`: {exc}")
        else:
            from .fit.run import fit_measurements

            try:
                data = read_bias_csv(args.file, args.type or "nmos")
            except NetlistError as exc:
                print(exc.render(), file=sys.stderr)
                return EXIT_INPUT
            if session is None:
                print(f"biasbridge: {hint} (the fitted card is not simulated back)", file=sys.stderr)
            try:
                outcome = fit_measurements(data, geometry, args.name or "fitted", floor, session, timeout)
            except FitError as exc:
                return refuse(f"{args.file}: {exc}")
    except FitError as exc:
        return refuse(str(exc))

    from .report.files import write_text_atomically
    from .report.fit_view import fit_json, fit_renderable, fit_text

    try:
        if args.out is not None:
            write_text_atomically(args.out, outcome.card_text)
        if args.plot is not None:
            from .report.fit_plot import write_fit_plot

            write_fit_plot(outcome, args.plot)
    except OSError as exc:
        return refuse(f"cannot write {exc.filename or 'the output'}: {exc.strerror or exc}")
    if args.json:
        sys.stdout.write(json.dumps(fit_json(outcome), allow_nan=False) + "\n")
    elif sys.stdout.isatty():
        _console().print(fit_renderable(outcome))
    else:
        sys.stdout.write(fit_text(outcome))
    for warning in outcome.warnings if args.json else ():
        print(f"biasbridge: warning: {warning}", file=sys.stderr)
    return EXIT_OK


# -- spread ----------------------------------------------------------------------------------------

SPREAD_SIM_TIMEOUT = 10.0  # s: ngspice's limit for one corner's `.op`, as check's default


def command_spread(args: argparse.Namespace) -> int:
    """`biasbridge spread`: tolerance corners, temperature and Monte Carlo, the worst corners in ngspice."""
    return _with_worker(_spread_with, args)  # ngspice starts while numpy, the reader and the batch solver load


def _spread_with(args: argparse.Namespace, session: NgspiceSession | None, hint: str) -> int:
    from .commands import spread_defaults as defaults
    from .netlist import NetlistError, read_netlist

    def refuse_located(message: str, file: str | None = None, line: int | None = None) -> int:
        """Unusable input: the message on stderr (after `FILE:` or `FILE:LINE:1:` when given) and,
        with --json, the error object `check` and `sweep` print (null where there is no place)."""
        place = file if line is None else f"{file}:{line}:1"
        print(f"biasbridge: error: {place + ': ' if place else ''}{message}", file=sys.stderr)
        if args.json:
            error = {"message": message, "file": file, "line": line, "column": None if line is None else 1}
            sys.stdout.write(json.dumps({"file": args.file, "error": error}) + "\n")
        return EXIT_INPUT

    try:
        command_line = defaults.command_line_tolerances(args)
        count = defaults.samples(args.samples)
        seed = defaults.seed(args.seed)
    except (ValueError, argparse.ArgumentTypeError) as exc:
        return refuse_located(str(exc))
    try:
        file = defaults.read_tolerance_file(args.tolerances) if args.tolerances else None
        circuit = read_netlist(args.file)
        inputs = input_files(args.file, circuit)
        if args.tolerances:
            inputs.add(os.path.realpath(args.tolerances))
        if args.plot is not None:
            from .report.plot import plot_format

            plot_format(args.plot)
            _check_output_path(args.plot, inputs, "--plot")
        refusal = defaults.refusal(circuit)
        if refusal is not None:
            return refuse_located(refusal, args.file)
        tolerances = defaults.merged(command_line, file)
        bands = defaults.bands(circuit, tolerances)
    except NetlistError as exc:
        return unusable_netlist(args, exc)
    except ValueError as exc:
        return refuse_located(str(exc))
    if not bands:
        return refuse_located("nothing to vary: give --resistors, --supplies, --vto, --kp, --lambda, --temp or "
                      "--tolerances (with a non-zero tolerance on something the circuit has)")

    from .analysis.dcsolve import DcSolveError
    from .spread_run import run_spread

    try:
        run = run_spread(circuit, bands, samples=count, seed=seed, distribution=args.dist, session=session,
                         timeout=SPREAD_SIM_TIMEOUT)  # fmt: skip
    except ValueError as exc:  # the temperature phase refusing a card (PHI ≤ 0 at an end, say)
        return refuse_located(str(exc), args.file)
    except DcSolveError as exc:  # an element the solver does not model, a node without a DC path, ...
        element = circuit.element(getattr(exc, "element", None) or "")
        message = f"the level-1 solver cannot solve this circuit: {exc}"
        if element is None:
            return refuse_located(message, args.file)
        return refuse_located(message, element.origin.file or args.file, element.origin.line)
    if session is None:
        print(f"biasbridge: {hint} (the corners are not run in ngspice)", file=sys.stderr)
    else:
        session.close()
    from .report.spread_view import spread_json, spread_renderable

    result, check, findings = run.result, run.check, run.findings
    if args.plot is not None:
        from .report.spread_plot import write_spread_plot

        try:
            write_spread_plot(result, args.plot)
        except OSError as exc:
            return refuse_located(f"cannot write {args.plot}: {exc.strerror or exc}")
    if args.json:
        sys.stdout.write(json.dumps(spread_json(args.file, result, check, findings), allow_nan=False) + "\n")
    else:
        _console().print(spread_renderable(args.file, result, check, findings))
    return EXIT_FINDINGS if any(f.severity in ("warning", "error") for f in findings) else EXIT_OK


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
    check.add_argument("--allow-region", action="store_true",
                       help="a device in cutoff or triode (a switch, say) is reported but does not make the exit "
                            "status 1")
    check.add_argument("--details", action="store_true",
                       help="with several netlists: the full table of every stage, not only of those flagged")
    check.set_defaults(run=command_check)
    sweep = verbs.add_parser(
        "sweep", help="the DC transfer curve: hand, level-1 and ngspice, with region edges and gain"
    )
    # A negative value with a SPICE suffix (`--step -10m`, `--start -1.5k`, `-2e-3`) is a value, not an
    # option: argparse's own pattern knows only plain numbers (`-10`, `-0.5`); no sweep option starts `-<digit>`.
    sweep._negative_number_matcher = SWEEP_NEGATIVE_VALUE
    sweep.add_argument("file", metavar="FILE", help="SPICE netlist of a single-transistor stage")
    sweep.add_argument("--source", metavar="NAME",
                       help="independent source to sweep (default: the voltage source that drives the gate; for a "
                       "divider-biased gate whose signal comes through a capacitor, a source created at the gate)")
    sweep.add_argument("--output", metavar="NODE",
                       help="node to follow (default: the MOSFET's drain; its source when the drain is on a supply)")
    sweep.add_argument("--start", metavar="A", help="first value (default 0)")
    sweep.add_argument("--stop", metavar="B", help="last value (default: the largest |V| of the sources)")
    sweep.add_argument("--step", metavar="S", help="step, negative to sweep down (SPICE suffixes allowed)")
    sweep.add_argument("--points", metavar="N", help="number of points instead of --step (default 201)")
    sweep.add_argument("--steps", action="store_true", help="show the closed-form edges and gain, step by step")
    sweep.add_argument("--plot", metavar="FILE.png|.svg", help="write the transfer-curve plot")
    sweep.add_argument("--csv", metavar="FILE", help="write one row per point")
    sweep.add_argument("--json", action="store_true", help="print one JSON object")
    sweep.add_argument("--sim-timeout", default="30", metavar="SECONDS",
                       help="give up on ngspice after this long (default 30)")
    sweep.set_defaults(run=command_sweep)
    gain = verbs.add_parser(
        "gain", help="small-signal cross-check: midband gain, Rin, Rout and band edges, hand | level-1 | ngspice"
    )
    gain.add_argument("file", metavar="FILE", help="SPICE netlist of a single-transistor stage")
    gain.add_argument("--input", metavar="SOURCE",
                      help="the signal source (default: the source with an AC spec, else the one driving the gate)")
    gain.add_argument("--output", metavar="NODE",
                      help="the output node (default: the far side of the output coupling capacitor, else the "
                           "drain; the source for a follower)")
    gain.add_argument("--freq", metavar="F", help="the midband frequency in Hz (default: chosen and printed)")
    gain.add_argument("--json", action="store_true", help="print one JSON object")
    gain.add_argument("--steps", action="store_true", help="show the hand small-signal derivation")
    gain.add_argument("--plot", metavar="FILE.png|.svg",
                      help="write ngspice's magnitude and phase with the hand values")
    gain.add_argument("--tol", type=_tolerance, default=0.05, metavar="TOL",
                      help="hand-vs-simulator tolerance, e.g. 5%% or 0.05 (default 5%%)")
    gain.add_argument("--band-tol", type=_tolerance, default=0.5, metavar="TOL",
                      help="how far the hand band-edge estimates may be from the simulator when the hand network's "
                           "own -3 dB point is within --tol (default 50%%)")
    gain.add_argument("--sim-timeout", default="30", metavar="SECONDS",
                      help="give up on ngspice after this long (default 30)")
    gain.set_defaults(run=command_gain)
    lint = verbs.add_parser("lint", help="the classic bias mistakes, each at its card's line, with a fix")
    lint.add_argument("files", nargs="+", metavar="FILE", help="SPICE netlist(s)")
    lint.add_argument("--format", choices=("text", "json"),
                      help="text: FILE:LINE:COL: SEVERITY CODE message lines (the default in a pipe); json: one "
                           "object (default on a terminal: a grouped view with each card shown)")
    lint.add_argument("--select", type=_codes, action="append", metavar="CODE[,CODE]",
                      help="report only these codes or code prefixes (e.g. scale,path: every scale-… and path-… code)")
    lint.add_argument("--ignore", type=_codes, action="append", metavar="CODE[,CODE]",
                      help="leave out these codes or code prefixes")
    lint.add_argument("--strict", action="store_true", help="warnings, too, make the exit status 1")
    lint.add_argument("--sim-timeout", type=_positive_seconds, default=10.0, metavar="SECONDS",
                      help="give up on ngspice's operating point of one netlist after this long (default 10)")
    lint.set_defaults(run=command_lint)
    fit = verbs.add_parser("fit", help="a level-1 card from bench data, two datasheet points or another model card")
    fit._negative_number_matcher = SWEEP_NEGATIVE_VALUE  # `--point -2,-10m` (PMOS signs) is a value
    fit.add_argument("file", nargs="?", metavar="FILE.csv", help="measurements: columns vgs, vds, id (vbs optional)")
    fit.add_argument("--type", choices=("nmos", "pmos"), help="device type of the data (default nmos)")
    fit.add_argument("--w", metavar="W", help="channel width the data was taken at (default 100u, ngspice's DEFW)")
    fit.add_argument("--l", metavar="L", help="channel length (default 100u, ngspice's DEFL)")
    fit.add_argument("--name", metavar="NAME", help="the card's model name (default fitted, or MODEL_l1)")
    fit.add_argument("--floor", metavar="A", help="leave out points below this current (default 1%% of the largest)")
    fit.add_argument("--point", action="append", metavar="VGS,ID", help="datasheet mode: a saturation point (twice)")
    fit.add_argument("--vds", metavar="V", help="datasheet mode: the VDS of the two points")
    fit.add_argument("--card", metavar="FILE", help="card mode: a file holding the .model card to fit")
    fit.add_argument("--model", metavar="NAME", help="card mode: the model's name in that file")
    fit.add_argument("--vds-range", default="0,3.3", metavar="VMIN,VMAX",
                     help="card mode: VDS range of the grid; VGS runs from 0 to VMAX (default 0,3.3)")
    fit.add_argument("--around", metavar="VGS,VDS", help="card mode: weight the fit around this operating point")
    fit.add_argument("--out", metavar="FILE", help="write the .model card (atomically)")
    fit.add_argument("--plot", metavar="FILE.png|.svg", help="write data and fitted curves")
    fit.add_argument("--json", action="store_true", help="print one JSON object")
    fit.add_argument("--sim-timeout", default="30", metavar="SECONDS", help="give up on ngspice after this long")
    fit.set_defaults(run=command_fit)
    spread = verbs.add_parser(
        "spread", help="tolerance corners, temperature and Monte Carlo: will the bias survive production?"
    )
    spread._negative_number_matcher = SWEEP_NEGATIVE_VALUE  # `--temp -40:125` is a value
    spread.add_argument("file", metavar="FILE", help="SPICE netlist of a single-transistor stage (level-1 cards)")
    spread.add_argument("--resistors", metavar="PCT", help="every resistor ±PCT %% (e.g. 5 or 5%%)")
    spread.add_argument("--supplies", metavar="PCT", help="every independent voltage source ±PCT %%")
    spread.add_argument("--vto", metavar="VOLTS", help="every MOSFET card's VTO ±VOLTS (absolute, e.g. 0.05 or 50m)")
    spread.add_argument("--kp", metavar="PCT", help="every MOSFET card's KP ±PCT %%")
    spread.add_argument("--lambda", dest="lambda_", metavar="PCT", help="every MOSFET card's LAMBDA ±PCT %%")
    spread.add_argument("--temp", metavar="LO:HI", help="temperature range in °C (e.g. -40:125)")
    spread.add_argument("--tolerances", metavar="FILE.toml", help="per-element and per-model tolerances (see README)")
    spread.add_argument("--samples", default=str(10_000), metavar="N", help="Monte-Carlo samples (default 10000)")
    spread.add_argument("--seed", default="0", metavar="S", help="random seed (default 0): same seed, same numbers")
    spread.add_argument("--dist", choices=("uniform", "normal"), default="uniform",
                        help="uniform within each band (default), or normal with the band as ±3σ (clipped to it)")
    spread.add_argument("--json", action="store_true", help="print one JSON object")
    spread.add_argument("--plot", metavar="FILE.png|.svg", help="histograms of drain current and margin")
    spread.set_defaults(run=command_spread)
    demo = verbs.add_parser("demo", help="run the main job on a bundled example")
    demo.set_defaults(run=command_demo)
    return parser


def _terminated(signum: int, frame: object) -> None:
    raise SystemExit(128 + signum)


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    # SIGTERM (a CI job cancelled or timed out) unwinds like Ctrl-C instead of ending the process
    # on the spot: the ngspice worker and its temporary folder go, a half-written output's
    # temporary file is removed.
    installed = _main_thread()
    previous = signal.signal(signal.SIGTERM, _terminated) if installed else None
    try:
        return args.run(args)
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:
        return EXIT_OK
    finally:
        if installed:
            signal.signal(signal.SIGTERM, signal.SIG_DFL if previous is None else previous)


def _main_thread() -> bool:
    import threading

    return threading.current_thread() is threading.main_thread()


if __name__ == "__main__":
    sys.exit(main())
