"""What the speed work must not change: the paths it takes are checked for their behaviour
(modules a run loads, the cards a parse gives, the vectors read), never for their timing."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import EXAMPLES, REPO
from hypothesis import given, settings
from hypothesis import strategies as st
from lark.exceptions import UnexpectedInput

from bridge.netlist import NetlistError
from bridge.netlist.parser import RawCard, _explain, _parser, plain_card
from bridge.netlist.source import LogicalCard, decode_source, read_deck, read_source

# A fresh process runs the command and then says, on stderr, which of rich's modules it loaded.
_RUN_AND_LIST_MODULES = (
    "import sys; from bridge.cli import main; packages = sys.argv.pop(1).split(','); status = main(sys.argv[1:]); "
    "sys.stderr.write('LOADED ' + repr(sorted(m for m in sys.modules if m.split('.')[0] in packages)) + '\\n'); "
    "sys.exit(status)"
)


def _modules_loaded(package: str, *arguments: str) -> tuple[list[str], str]:
    """The modules of `package` (a name, or names joined by commas) a fresh process has loaded
    after the command, and its stdout."""
    completed = subprocess.run(
        [sys.executable, "-c", _RUN_AND_LIST_MODULES, package, *arguments],
        capture_output=True, text=True, timeout=60, stdin=subprocess.DEVNULL,
    )
    assert completed.returncode in (0, 1), completed.stderr
    line = next(line for line in completed.stderr.splitlines() if line.startswith("LOADED "))
    return eval(line[7:]), completed.stdout  # noqa: S307 - a repr of a list of names written above


def _rich_modules_loaded(*arguments: str) -> tuple[list[str], str]:
    return _modules_loaded("rich", *arguments)


def test_check_json_does_not_load_rich() -> None:
    loaded, stdout = _rich_modules_loaded("check", "--json", str(EXAMPLES / "cs_divider.cir"))
    assert loaded == []
    result = json.loads(stdout)
    assert "M1" in json.dumps(result)


def test_check_json_of_several_files_does_not_load_rich() -> None:
    files = [str(EXAMPLES / name) for name in ("cs_divider.cir", "pmos_cs.cir")]
    loaded, stdout = _rich_modules_loaded("check", "--json", *files)
    assert loaded == []
    assert len(stdout.splitlines()) == 2


def test_a_check_without_a_helper_or_expectations_does_not_load_their_modules() -> None:
    # Fewer files than a helper needs (ahead.AHEAD_FROM): no fork, no pipe, no shared value; no
    # --expect: no TOML reader.
    files = [str(EXAMPLES / name) for name in ("cs_divider.cir", "pmos_cs.cir")]
    loaded, stdout = _modules_loaded("multiprocessing,tomllib", "check", "--json", *files)
    assert loaded == []
    assert len(stdout.splitlines()) == 2


# What `check --json` of a MOSFET stage leaves unloaded or uncompiled: the diode model, the table
# layout, the package-data reader (for the grammar alone), the decimal module (for a printed
# number at an exact tie alone), the lint-only patterns.
_CHECK_AND_LIST_LAZY = (
    "import sys; from bridge.cli import main; status = main(sys.argv[1:]); "
    "from bridge.netlist import build, source; "
    "lazy = ('bridge.devices.diode', 'bridge.report.table_layout', 'importlib.resources', 'lark', 'decimal'); "
    "sys.stderr.write('LOADED ' + repr(sorted(m for m in lazy if m in sys.modules)) + ' ' "
    "+ repr((build._written_field.cache_info().misses, source._allow_patterns.cache_info().misses)) + '\\n'); "
    "sys.exit(status)"
)


def test_check_json_of_a_mosfet_stage_loads_no_diode_table_or_grammar_reader() -> None:
    files = [str(EXAMPLES / name) for name in ("cs_divider.cir", "pmos_cs.cir")]
    completed = subprocess.run([sys.executable, "-c", _CHECK_AND_LIST_LAZY, "check", "--json", *files],
                               capture_output=True, text=True, timeout=60, stdin=subprocess.DEVNULL)
    assert completed.returncode in (0, 1), completed.stderr
    line = next(line for line in completed.stderr.splitlines() if line.startswith("LOADED "))
    assert line == "LOADED [] (0, 0)"
    results = [json.loads(text) for text in completed.stdout.splitlines()]
    assert [sorted(result["devices"]) for result in results] == [["M1"], ["M1"]]


# A sourdough proofing box's status LED: the NMOS sinks the LED's current through a resistor.
_PROOFING_LED = """sourdough proofing box status LED
VDD vdd 0 5
VG g 0 3.3
RL vdd anode 330
D1 anode d led
M1 d g 0 0 sw W=50u L=2u
.model led d (is=1e-18 n=2)
.model sw nmos (vto=0.8 kp=100u)
.op
.end
"""

_SOLVE_A_DIODE = (
    "import sys; from bridge.netlist import read_netlist; from bridge.analysis.dcsolve import solve_operating_point; "
    "circuit = read_netlist(sys.argv[1]); before = 'bridge.devices.diode' in sys.modules; "
    "op = solve_operating_point(circuit); v = op.node_voltages; "
    "print(before, 'bridge.devices.diode' in sys.modules, repr(op.diode_currents['D1']), "
    "repr((v['vdd'] - v['anode']) / 330), repr(v['anode'] - v['d']))"
)


def test_a_diode_brings_its_model_with_it(tmp_path: Path) -> None:
    netlist = tmp_path / "proofing_led.cir"
    netlist.write_text(_PROOFING_LED, encoding="utf-8")
    completed = subprocess.run([sys.executable, "-c", _SOLVE_A_DIODE, str(netlist)],
                               capture_output=True, text=True, timeout=60, check=True)
    before, after, diode_current, resistor_current, forward = completed.stdout.split()
    assert (before, after) == ("False", "True")
    # The LED's current is the resistor's (KCL at the anode), and it conducts: a forward drop of
    # a volt or more at IS=1e-18, N=2 (Shockley, Vt = 25.85 mV at 27 °C from memory:
    # n·Vt·ln(I/IS) ≈ 1.9 V at ~6 mA).
    assert float(diode_current) == pytest.approx(float(resistor_current), rel=1e-6)
    assert 1e-3 < float(diode_current) < 1e-2 and 1.0 < float(forward) < 2.5


def test_check_text_still_draws_with_rich() -> None:
    # The table needs rich's console: the path above is not rich-free by accident.
    loaded, stdout = _rich_modules_loaded("check", str(EXAMPLES / "cs_divider.cir"))
    assert "rich.console" in loaded
    assert "M1" in stdout


# ---- plain cards: read without the parser, the same raw cards ------------------------------

_READ_AND_LIST_LARK = (
    "import sys; from bridge.netlist import read_netlist; c = read_netlist(sys.argv[1]); "
    "print(sorted(e.name for e in c.elements), 'lark' in sys.modules)"
)


def _read_in_fresh_process(name: str | Path) -> tuple[str, bool]:
    completed = subprocess.run([sys.executable, "-c", _READ_AND_LIST_LARK, str(EXAMPLES / name)],
                               capture_output=True, text=True, timeout=60, check=True)
    names, loaded = completed.stdout.rsplit(" ", 1)
    return names, loaded.strip() == "True"


def test_a_netlist_of_plain_cards_is_read_without_lark() -> None:
    names, loaded = _read_in_fresh_process("cs_divider.cir")
    assert "'M1'" in names and not loaded


def test_params_and_braced_names_and_numbers_are_read_without_lark() -> None:
    # bench_session.cir: `.param vsupply=5 rload={10k}`, `VDD vdd 0 {vsupply}`, `RD vdd drain {rload}`.
    names, loaded = _read_in_fresh_process("bench_session.cir")
    assert "'RD'" in names and not loaded


# A greenhouse vent actuator driver whose drain resistor is an arithmetic expression.
_VENT_DRIVER = """greenhouse vent driver
.param rl=2.2k
VDD vdd 0 12
RD vdd d {2*rl}
M1 d vdd 0 0 vent W=40u L=2u
.model vent nmos (vto=1 kp=80u)
.op
.end
"""


_PREPARE_AHEAD_AND_LIST_LARK = (
    "import sys; from bridge.ahead import Preparation; preparation = Preparation(sys.argv[1:], None, helper=True); "
    "forked = preparation.helper_pid is not None; items = list(preparation); "
    "print(len(items), forked, 'lark' in sys.modules)"
)


def test_a_helper_forked_for_netlists_of_plain_cards_brings_no_parser() -> None:
    names = ("cs_divider.cir", "bench_session.cir", "pmos_cs.cir", "source_follower.cir")
    paths = [str(EXAMPLES / name) for name in names]
    completed = subprocess.run([sys.executable, "-c", _PREPARE_AHEAD_AND_LIST_LARK, *paths],
                               capture_output=True, text=True, timeout=60, check=True)
    assert completed.stdout.split() == ["4", "True", "False"]


def test_an_expression_card_brings_the_parser(tmp_path: Path) -> None:
    netlist = tmp_path / "vent.cir"
    netlist.write_text(_VENT_DRIVER, encoding="utf-8")
    names, loaded = _read_in_fresh_process(netlist)
    assert "'RD'" in names and loaded

CORPORA = (EXAMPLES, REPO / "tests" / "batch_corpus", REPO / "tests" / "lint_corpus")


def _cards(text: str, name: str = "plain.cir") -> list[LogicalCard]:
    return list(read_deck(decode_source(text.encode("utf-8"), name)).cards)


def _by_the_parser(card: LogicalCard) -> RawCard | NetlistError:
    parser, transformer = _parser()
    transformer.card = card
    try:
        return parser.parse(card.text)
    except UnexpectedInput as exc:
        return _explain(card, exc)
    except NetlistError as exc:  # a number that does not read
        return exc


def _same_as_the_parser(card: LogicalCard) -> bool:
    """Whether `plain_card` reads `card` (True) or leaves it to the parser (False); asserts that
    what it reads is what the parser gives."""
    plain = plain_card(card)
    if plain is None:
        return False
    assert plain == _by_the_parser(card), card.text
    return True


def test_plain_cards_are_the_parser_cards_over_the_examples_and_corpora() -> None:
    read = total = 0
    for folder in CORPORA:
        for path in sorted(folder.rglob("*.cir")):
            try:
                cards = list(read_deck(read_source(path), path).cards)
            except NetlistError:
                continue
            for card in cards:
                total += 1
                read += _same_as_the_parser(card)
    # Most cards of a stage are plain: the fast reading is taken, not just allowed.
    assert total > 300 and read > total / 2, (read, total)


def test_plain_cards_of_each_kind() -> None:
    text = """plain kinds
R1 a b 4.7k tc1=1m
Cload out 0 10p
L1 x y 1u
M1 d g 0 0 nch W=20u L=2u M=2 off
V1 in 0 DC 1.2 AC 1
Vdd vdd 0 5
I1 0 x dc=1m ac = 1 90
.model nch nmos (vto=0.7, kp=120u lambda=0.02 version=3.3.0)
.options reltol=1e-4 noacct
.op
.save all @m1[id]
"""
    cards = _cards(text)
    assert [_same_as_the_parser(card) for card in cards] == [True] * len(cards)


def test_plain_cards_with_braced_names_and_numbers_and_params() -> None:
    text = """braced fields
.param vsupply=5 rload={10k} w.in=2u gain=vsupply tiny=1mil
.PARAM x = 3
R1 a b {rload} tc1={1m}
Vdd vdd 0 {vsupply}
V2 in 0 dc {vsupply} ac {1} {0}
M1 d g 0 0 nch W={w.in} L={2u} {3}
Cx a 0 {1e-12}
.model nch nmos (vto={0.7} kp=120u)
.options temp={x}
"""
    cards = _cards(text)
    assert [_same_as_the_parser(card) for card in cards] == [True] * len(cards)
    # A number in braces or in a `.param` is an expression's number: MIL is no scale there.
    params = plain_card(cards[0])
    assert [(a.name, getattr(a.value, "value", None)) for a in params.assignments][-1] == ("tiny", 1e-3)


def test_cards_the_parser_must_read_or_refuse_are_left_to_it() -> None:
    text = """left to the parser
R1 a b {2*rl}
R2 a b k1
V1 in 0 SIN(0 1 1k)
V2 in 0 DC
M1 d g s nch
.model nch nmos (vto=)
.op now
.param x=1+2
.dc V1 0 5 0.1
R3 a b 1k =
R4 a b { rl }
R5 a b {rl
.param y={x} z
.param
.model nch nmos {vto}
R6 {a} b 1k
.param 2x=1
"""
    assert [plain_card(card) for card in _cards(text)] == [None] * 17


_FIRST = st.sampled_from(["R1", "c2", "L3", "M1", "mx", "V1", "i2", "Vdd", ".model", ".MODEL", ".op", ".OP",
                          ".options", ".opt", ".option", ".optionss", ".save", ".print", ".tran", ".ac", ".dc",
                          ".param", "E1", "D1", "X1", "q1", "*"])
_FIELD = st.sampled_from(["a", "0", "1k", "2.5", "-3", "dc", "DC", "ac", "Ac", "sin", "pulse", "=", "(", ")", ",",
                          "w", "1e-3", "x1", "nmos", "vto", "3.3.0", "{1}", "'2'", "1meg", "5mil", "1q", "µ",
                          "\t", "(vto", "=1", "1,", "nch)", "$", ";", "+", "{x}", "{1k}", "{5mil}", "{a.b}", "{ x }",
                          "{", "}", "{2*x}", "x=", "{.5e-3V}", "{1.2.3}", "{µ}", "{x}{y}", "w={x}"])


@given(_FIRST, st.lists(_FIELD, max_size=10))
@settings(max_examples=400, derandomize=True, database=None, deadline=None)
def test_plain_cards_match_the_parser_on_random_cards(first: str, fields: list[str]) -> None:
    try:
        cards = _cards(f"random card\n{' '.join([first, *fields])}\n")
    except NetlistError:
        return
    for card in cards:
        _same_as_the_parser(card)


# ---- the worker reads the plot without PySpice's Plot objects: the same vectors ----------------

_BOTH_READS = r"""
import json, sys
from bridge.sim.worker import Simulator
simulator = Simulator(sys.argv[1])
reads = []
for deck in sys.argv[2:]:
    simulator._ngspice.load_circuit(deck)
    simulator._ngspice.run()
    plot = simulator._ngspice.last_plot
    reads.append([plot, simulator._read_plot_directly(plot), simulator._read_plot_through_pyspice(plot)])
    simulator._ngspice.exec_command("remcirc")
    simulator._ngspice.exec_command("destroy all")
print(json.dumps(reads))
"""

# A greenhouse fan driver: an NMOS switch with a divider on its gate, `.op` and a `.dc` sweep.
_FAN_DRIVER = """greenhouse fan driver
VDD vdd 0 12
VG gin 0 3
R1 gin g 10k
R2 g 0 47k
RF vdd d 240
M1 d g 0 0 fan W=400u L=2u
.model fan nmos (vto=1.1 kp=60u lambda=0.01 gamma=0.3)
.save all @m1[id] @m1[gm] @m1[von]
{analysis}
.end
"""


def test_the_worker_reads_the_plot_directly_as_pyspice_reads_it() -> None:
    from bridge.sim.client import ngspice_available
    from bridge.sim.locate import locate_ngspice

    available, hint = ngspice_available()
    if not available:
        pytest.skip(hint)
    decks = [_FAN_DRIVER.format(analysis=".op"), _FAN_DRIVER.format(analysis=".dc VG 0 5 0.05")]
    completed = subprocess.run(
        [sys.executable, "-c", _BOTH_READS, str(locate_ngspice().path), *decks],
        capture_output=True, text=True, timeout=60, stdin=subprocess.DEVNULL,
    )
    assert completed.returncode == 0, completed.stderr
    (op_plot, op_direct, op_pyspice), (dc_plot, dc_direct, dc_pyspice) = json.loads(completed.stdout.splitlines()[-1])
    assert op_plot.startswith("op") and dc_plot.startswith("dc")
    # The same names in the same order, the same numbers to the bit (JSON keeps a float's repr).
    assert list(op_direct.items()) == list(op_pyspice.items())
    assert list(dc_direct.items()) == list(dc_pyspice.items())
    assert {"d", "g", "vdd#branch", "@m1[id]", "@m1[gm]"} <= set(op_direct)
    assert len(dc_direct["d"]) == 101 and all(len(values) == 1 for values in op_direct.values())


# ---- the worker's ngspice loads BSIM instances on one OpenMP thread ---------------------------

_THREADS = r"""
import sys
from bridge.sim.worker import Simulator
simulator = Simulator(sys.argv[1])
simulator._raw.clear()
simulator._ngspice.exec_command("echo threads=$num_threads")
print(repr([line for line in simulator._raw if "threads=" in line]))
"""


def test_the_workers_ngspice_runs_models_on_one_openmp_thread() -> None:
    # A libngspice built with OpenMP loads BSIM3/4 instances on `num_threads` threads (2 unless
    # set, ngspice's spinit.in); whose spin-waits cost most of a busy machine's CPU: one thread.
    from bridge.sim.client import ngspice_available
    from bridge.sim.locate import locate_ngspice

    available, hint = ngspice_available()
    if not available:
        pytest.skip(hint)
    completed = subprocess.run([sys.executable, "-c", _THREADS, str(locate_ngspice().path)],
                               capture_output=True, text=True, timeout=60, stdin=subprocess.DEVNULL)
    assert completed.returncode == 0, completed.stderr
    lines = completed.stdout.splitlines()[-1]
    assert "threads=1" in lines and "threads=$" not in lines, lines


# ---- a card's effects, remembered per card in a batch: read as the level-1 model reads it ----


def test_a_cards_lambda_and_gamma_are_read_once_as_the_level1_model_reads_them() -> None:
    # compare asks each card's LAMBDA and GAMMA (does an effect act?) of the remembered model
    from bridge.analysis.dcsolve import level1_model
    from bridge.devices.mos1 import Level1Model
    from bridge.netlist.circuit import ModelCard, Origin

    origin = Origin("greenhouse_sensor.cir", 3)
    cards = [
        ModelCard("plain", "nmos", 1, {"vto": 0.7, "kp": 120e-6}, origin),
        ModelCard("clm", "nmos", 1, {"vto": 0.7, "kp": 120e-6, "lambda": 0.02}, origin),
        # GAMMA not given: derived from NSUB and TOX (ngspice's mos1 does the same)
        ModelCard("doped", "pmos", 1, {"vto": -0.8, "kp": 40e-6, "nsub": 1e16, "tox": 20e-9}, origin),
        ModelCard("body", "pmos", 1, {"vto": -0.8, "kp": 40e-6, "gamma": 0.45, "lambda": 0.0}, origin),
    ]
    for card in cards:
        model = level1_model(card)
        fresh = Level1Model.from_card(card.type, card.params)
        assert (model.lambda_ > 0, model.gamma > 0) == (fresh.lambda_ > 0, fresh.gamma > 0), card.name
        assert level1_model(card) is model, card.name  # remembered
    assert level1_model(cards[2]).gamma > 0  # the derived GAMMA acts
    bad = ModelCard("bad", "nmos", 1, {"vto": 0.7, "kp": 120e-6, "phi": -0.6}, origin)
    for _ in range(2):  # a card that cannot be read raises each time, never a remembered answer
        with pytest.raises(ValueError, match="PHI must be positive"):
            level1_model(bad)


def test_the_solvers_array_records_compare_by_identity() -> None:
    # The compiled MNA network holds numpy arrays: element-wise equality has no truth value, so it
    # is compared (and hashed) as the one object it is; a deep copy is another network.
    import copy

    from bridge.analysis import dcsolve
    from bridge.analysis.reduction import reduce_network
    from bridge.netlist import read_netlist

    net = dcsolve._build_network(read_netlist(EXAMPLES / "cs_divider.cir"), dcsolve.level1_model)
    twin = copy.deepcopy(net)
    assert net == net and net != twin and hash(net) != hash(twin)
    reduction = reduce_network(net, 1e-12)
    assert reduction == reduction and reduction != copy.deepcopy(reduction)


# ---- what a check process pays before its first stage --------------------------------------

def test_the_checks_result_records_compare_by_identity(required_ngspice_session, tmp_path: Path) -> None:
    # Nothing compares or hashes a check's result records by value (every __eq__ and __hash__ call
    # of bridge's dataclasses was recorded over the test suite and the dump of check, sweep and
    # the batch): they carry no generated equality, two generated methods fewer each at import.
    # A twin with the same fields is another object; each record equals and hashes as itself.
    import copy

    from bridge.check import check_circuit
    from bridge.compare import leading_cause
    from bridge.expect import read_expectations
    from bridge.netlist import read_netlist
    from bridge.netlist.emit import emit
    from bridge.sim.operating_point import simulate_operating_point

    circuit = read_netlist(EXAMPLES / "cs_divider.cir")
    targets = tmp_path / "targets.toml"
    targets.write_text('[nodes]\ndrain = "2.6"\n[devices.M1]\nid = "240u"\n', encoding="utf-8")
    expectations = read_expectations(targets, 0.05)
    result = check_circuit(circuit, required_ngspice_session, tolerance=0.05, expect=expectations)
    sim = simulate_operating_point(required_ngspice_session, circuit)
    records = [
        result, result.devices["M1"], *result.nodes.values(), *result.supplies.values(),
        *result.settled_by.values(), leading_cause(result), sim, sim.devices["M1"], emit(circuit),
        expectations, expectations.nodes["drain"],
    ]
    assert None not in records and len(records) > 10
    for record in records:
        twin = copy.copy(record)
        assert record == record and record != twin, type(record).__name__
        assert hash(record) == hash(record) != hash(twin)


_CHECK_AND_LIST_SIGNATURES = (
    "import dataclasses, inspect, sys; asked = []; real = inspect.signature\n"
    "def signature(obj, *args, **kwargs):\n"
    "    if sys._getframe(1).f_code is dataclasses._process_class.__code__: asked.append(obj.__qualname__)\n"
    "    return real(obj, *args, **kwargs)\n"
    "inspect.signature = signature\n"
    "from bridge.cli import main; status = main(sys.argv[1:])\n"
    "sys.stderr.write('ASKED ' + repr(sorted(asked)) + '\\n'); sys.exit(status)\n"
)


def test_check_json_writes_no_dataclass_docstring_from_its_signature() -> None:
    # A dataclass without a docstring gets one made from inspect.signature at import (~60 µs a
    # class): every record the check loads says what it is itself.
    files = [str(EXAMPLES / name) for name in ("cs_divider.cir", "bench_session.cir")]
    completed = subprocess.run([sys.executable, "-c", _CHECK_AND_LIST_SIGNATURES, "check", "--json", *files],
                               capture_output=True, text=True, timeout=60, stdin=subprocess.DEVNULL)
    assert completed.returncode in (0, 1), completed.stderr
    line = next(line for line in completed.stderr.splitlines() if line.startswith("ASKED "))
    assert line == "ASKED []"
    assert len(completed.stdout.splitlines()) == 2


def _libngspice_in_a_usual_directory() -> bool:
    from bridge.sim import locate

    return any((directory / name).is_file() for directory in locate._library_dirs() for name in locate._LIBRARY_NAMES)


def test_check_json_runs_no_system_search_when_a_usual_directory_holds_libngspice() -> None:
    # ctypes.util.find_library runs `ldconfig -p` in a child process on Linux: before the worker
    # can start, each check waited for it. ctypes.util comes only with that search.
    if not _libngspice_in_a_usual_directory():
        pytest.skip("no usual directory holds libngspice here: the system search is the way to it")
    completed = subprocess.run(
        [sys.executable, "-c", "import sys; from bridge.cli import main; status = main(sys.argv[1:]); "
         "sys.stderr.write('LOADED %s\\n' % ('ctypes.util' in sys.modules)); sys.exit(status)",
         "check", "--json", str(EXAMPLES / "cs_divider.cir")],
        capture_output=True, text=True, timeout=60, stdin=subprocess.DEVNULL,
    )
    assert completed.returncode in (0, 1), completed.stderr
    assert "LOADED False" in completed.stderr.splitlines()
    assert json.loads(completed.stdout)["simulator"] is not None


def test_libngspice_is_looked_for_in_the_usual_directories_before_the_loaders_cache(tmp_path, monkeypatch) -> None:
    import ctypes.util

    from bridge.sim import locate

    first, second = tmp_path / "lib", tmp_path / "local"
    first.mkdir()
    second.mkdir()
    (second / "libngspice.so.0").write_bytes(b"")
    asked: list[str] = []

    def find_library(name: str) -> str:
        asked.append(name)
        return "libngspice.so.7"  # a library the loader's cache knows elsewhere

    monkeypatch.setattr(ctypes.util, "find_library", find_library)
    monkeypatch.setattr(locate, "_library_dirs", lambda: [first, second])
    monkeypatch.delenv(locate.ENV_VARIABLE, raising=False)
    locate._system_soname.cache_clear()
    try:
        assert locate.locate_ngspice().path == str(second / "libngspice.so.0")
        assert asked == []
        # Where no usual directory holds it, the loader's cache is asked, and its soname kept as it
        # is when none of the directories has that file (the loader opens it by its cache).
        (second / "libngspice.so.0").unlink()
        assert locate.locate_ngspice().path == "libngspice.so.7"
        (first / "libngspice.so.7").write_bytes(b"")
        assert locate.locate_ngspice().path == str(first / "libngspice.so.7")
        assert asked == ["ngspice"]  # asked once a process
    finally:
        locate._system_soname.cache_clear()
