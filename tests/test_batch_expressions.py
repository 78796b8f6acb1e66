"""Expressions a folder of netlists brings: min/max as ngspice counts their arguments, long sums,
`.func`s that call themselves; each one either read or refused at its place, never a traceback."""

from __future__ import annotations

import subprocess

import pytest
from conftest import NGSPICE, needs_ngspice

from bridge.cli import main
from bridge.netlist import NetlistError, parse_netlist

STAGE = (
    "VDD vdd 0 3.3\nVG g 0 1.1\nRD vdd d {rd}\nM1 d g 0 0 NHIVE W=10u L=1u\n"
    ".model NHIVE nmos (level=1 vto=0.6 kp=150u)\n.end\n"
)


def _parse(text: str):
    return parse_netlist(text, "hive.cir")


@pytest.mark.parametrize("function", ["max", "min"])
def test_min_or_max_with_one_argument_is_refused_at_the_call(function):
    # It raised TypeError ('float' object is not iterable) out of expressions.py.
    with pytest.raises(NetlistError) as caught:
        _parse(f"Beehive door sensor\n.param rd = {{2*{function}(4.7k)}}\n" + STAGE)
    assert (caught.value.location.line, caught.value.location.column) == (2, 16)
    assert caught.value.message == (
        f"`{function}` takes 2 argument(s), got 1: ngspice 39 reads `{function}(x)` as `{function}(x, 1)`; "
        "write the two values meant"
    )


def test_max_with_three_arguments_is_refused_not_read_as_the_largest():
    # It was read as the largest of the three (9k), where ngspice reads max(1k, 2k) = 2k.
    with pytest.raises(NetlistError) as caught:
        _parse("Beehive weight channel\n.param rd = {max(1k, 9k, 2k)}\n" + STAGE)
    assert "ngspice 39 reads `max(a, b, c)` as `max(a, c)`" in caught.value.message


def test_min_and_max_with_two_arguments_keep_their_values():
    circuit = _parse("Beehive scale\n.param rd = {max(2k, 8.2k) + min(-1, 3)*100}\n" + STAGE)
    assert circuit.element("RD").value == pytest.approx(8100.0)


@needs_ngspice
def test_ngspice_reads_min_and_max_as_the_refusals_say(tmp_path):
    # The source of the messages above: ngspice 39 itself, run with `ngspice -b`.
    netlist = tmp_path / "counts.cir"
    netlist.write_text(
        "Beehive scale: min and max argument counts\n"
        ".param a = {max(0.5)} b = {min(7)} c = {max(1, 4, 2)} d = {min(3, 0, 8)}\n"
        "V1 1 0 {a}\nV2 2 0 {b}\nV3 3 0 {c}\nV4 4 0 {d}\nR1 1 0 1k\nR2 2 0 1k\nR3 3 0 1k\nR4 4 0 1k\n"
        ".control\nop\nprint v(1) v(2) v(3) v(4)\n.endc\n.end\n"
    )
    completed = subprocess.run([NGSPICE, "-b", netlist.name], capture_output=True, text=True, cwd=tmp_path,
                               timeout=30)
    printed = {
        line.split("=")[0].strip(): float(line.split("=")[1]) for line in completed.stdout.splitlines()
        if line.startswith("v(") and "=" in line
    }
    assert printed == {"v(1)": 1.0, "v(2)": 1.0, "v(3)": 2.0, "v(4)": 3.0}


def test_a_sum_of_three_thousand_terms_is_read():
    # ngspice 39 reads it (measured with `ngspice -b`); it was refused as "nested too deeply
    # (recursive .func?)", which it is not.
    circuit = _parse("Beehive scale\n.param rd = {" + "+".join(["1"] * 3000) + "}\n" + STAGE)
    assert circuit.element("RD").value == 3000.0


def test_a_func_that_calls_itself_is_refused_at_the_call():
    # ngspice 39 crashes on it (segmentation fault, `ngspice -b`); the error used to point at the
    # column of the call inside the `.func` body, on the line of the card that used it.
    with pytest.raises(NetlistError) as caught:
        _parse("Bicycle dynamo light\n.func loop(x) {loop(x) + 1}\n.param rd = {loop(1)}\n" + STAGE)
    assert (caught.value.location.line, caught.value.location.column) == (3, 14)
    assert caught.value.message == "`.func loop` calls itself (loop → loop): it has no value"


def test_functions_calling_each_other_in_a_ring_are_refused():
    with pytest.raises(NetlistError) as caught:
        _parse("Bicycle dynamo light\n.func f(x) {g(x)}\n.func g(x) {f(x)*2}\n.param rd = {1 + f(1)}\n" + STAGE)
    assert caught.value.message == "`.func f` calls itself (f → g → f): it has no value"
    assert caught.value.location.column == 18


def test_a_failure_inside_a_func_body_points_at_the_call(tmp_path, capsys):
    netlist = tmp_path / "dynamo.cir"
    netlist.write_text("Bicycle dynamo light\n.func split(x) {x/(x-x)}\n.param rd = {1k + split(2)}\n" + STAGE)
    assert main(["parse", str(netlist)]) == 2
    err = capsys.readouterr().err
    assert f"{netlist}:3:19: division by zero (in the body of `.func split`)" in err
    assert "    .param rd = {1k + split(2)}\n                      ^" in err
