"""How the client turns the worker's answer into a SimResult: an operating point's one-value
vectors (``client._single_points``) and every other plot (one array per vector) give the
same values, shapes, types and read-only arrays."""

from __future__ import annotations

import numpy as np
import pytest

from bridge.netlist.emit import SpiceDeck
from bridge.sim.client import _sim_result, _single_points

# A greenhouse sensor board's soil-moisture buffer: an NMOS source follower off a 3.3 V rail.
MOISTURE_BUFFER = """greenhouse soil-moisture buffer
.model NSENSE nmos (level=1 vto=0.6 kp=0.0002 lambda=0.03 gamma=0.35 phi=0.7)
VRAIL rail 0 dc 3.3
RTOP rail probe 47000
RBOT probe 0 68000
MBUF rail probe out 0 NSENSE w=1e-05 l=1e-06
RS out 0 22000
.save all @mbuf[id] @mbuf[gm] @mbuf[vgs] @mbuf[vds] @mbuf[von]
.op
.end
"""


def _one_array_each(vectors: dict) -> dict[str, np.ndarray]:
    """The arrays as the client made them before: one np.asarray per vector."""
    return {name: np.asarray(values, dtype=float) for name, values in vectors.items()}


def _reply(vectors: dict) -> dict:
    return {"id": 1, "ok": True, "plot": "op1", "vectors": vectors, "messages": [], "error": None,
            "kind": None, "retire": False}


def test_an_operating_points_vectors_are_read_only_single_values() -> None:
    vectors = {"out": [1.2345678901234567], "rail": [3.3], "vrail#branch": [-2.5e-05], "@mbuf[id]": [0.0]}
    result = _sim_result(_reply(vectors))
    assert list(result.vectors) == list(vectors)
    for name, expected in _one_array_each(vectors).items():
        array = result.vectors[name]
        assert array.shape == (1,) and array.dtype == np.float64
        assert array.tolist() == expected.tolist()
        assert not array.flags.writeable
        with pytest.raises(ValueError):
            array[0] = 1.0
    assert result.scalar("v(out)") == 1.2345678901234567
    assert result.scalar_if_any("i(vrail)") == -2.5e-05


@pytest.mark.parametrize("vectors", [
    {},
    {"sweep": [0.0, 0.5, 1.0], "out": [3.3, 2.1, 0.4]},  # a .dc plot
    {"out": [1.0], "probe": []},  # a vector with no point
    {"out": [1]},  # not a float: left to the general reading
    {"out": {"re": [1.0], "im": [-0.5]}},  # an .ac plot's complex vector, one frequency
    {"frequency": {"re": [10.0, 100.0], "im": [0.0, 0.0]}, "out": {"re": [1.0, 0.5], "im": [0.0, -0.5]}},
])
def test_other_plots_keep_one_array_per_vector(vectors: dict) -> None:
    assert _single_points(vectors) is None
    result = _sim_result(_reply(vectors))
    for name, values in vectors.items():
        array = result.vectors[name]
        if isinstance(values, dict):
            assert array.tolist() == [complex(re, im) for re, im in zip(values["re"], values["im"], strict=True)]
        else:
            assert array.tolist() == values and array.dtype == np.float64
        assert not array.flags.writeable


def test_ngspice_operating_point_reads_as_one_array_per_vector(required_ngspice_session) -> None:
    result = required_ngspice_session.run(SpiceDeck(MOISTURE_BUFFER, "greenhouse soil-moisture buffer"))
    assert {"out", "probe", "rail", "vrail#branch", "@mbuf[id]", "@mbuf[von]"} <= set(result.vectors)
    for array in result.vectors.values():
        assert array.shape == (1,) and array.dtype == np.float64 and not array.flags.writeable
    # The divider sets the gate: 3.3 V × 68k / (47k + 68k), no gate current (checked against ngspice -b).
    assert result.scalar("probe") == pytest.approx(3.3 * 68 / 115, rel=1e-9)
    # The follower's source sits a threshold and an overdrive below its gate, its current through RS.
    out, drain_current = result.scalar("out"), result.scalar("@mbuf[id]")
    assert 0.0 < out < result.scalar("probe") - 0.6
    assert drain_current == pytest.approx(out / 22000, rel=1e-6)


BROKEN_BUFFER = MOISTURE_BUFFER.replace("RS out 0 22000", "RS out 0 22000 trim(")


def test_each_deck_finds_ngspice_cleared_after_the_one_before(required_ngspice_session) -> None:
    """The worker clears ngspice after each deck (`remcirc`, `destroy all`) and sends no `destroy all`
    before the next: each `.op` plot is then still ngspice's first, `op1` (with an earlier plot kept,
    ngspice names the next `op2`: `ngspice -b` with two `op` in a `.control` block), a deck ngspice
    refused among them."""
    from bridge.sim.client import SimulationFailed

    session = required_ngspice_session
    deck = SpiceDeck(MOISTURE_BUFFER, "greenhouse soil-moisture buffer")
    first = session.run(deck)
    with pytest.raises(SimulationFailed):
        session.run(SpiceDeck(BROKEN_BUFFER, "greenhouse soil-moisture buffer"))
    lower_rail = SpiceDeck(MOISTURE_BUFFER.replace("dc 3.3", "dc 2.5"), "greenhouse soil-moisture buffer")
    again, lower = session.run(deck), session.run(lower_rail)
    assert first.plot == again.plot == lower.plot == "op1"
    assert again.scalar("out") == first.scalar("out")
    assert lower.scalar("probe") == pytest.approx(2.5 * 68 / 115, rel=1e-9)
    assert lower.scalar("out") < first.scalar("out")


@pytest.mark.skipif(not hasattr(__import__("fcntl"), "F_GETPIPE_SZ"), reason="F_GETPIPE_SZ is Linux's alone")
def test_a_read_of_the_answers_asks_for_no_more_than_a_pipe_holds() -> None:
    """A read of a pipe returns at most what the pipe holds (65536 bytes on Linux, pipe(7)); asking
    for more only makes os.read allocate a larger buffer for each answer."""
    import fcntl
    import os

    from bridge.sim import client

    read_end, write_end = os.pipe()
    try:
        assert fcntl.fcntl(read_end, fcntl.F_GETPIPE_SZ) >= client._READ_CHUNK
    finally:
        os.close(read_end)
        os.close(write_end)


def test_an_answer_larger_than_a_pipe_is_read_whole(required_ngspice_session) -> None:
    """A `.dc` sweep of the rail in 0.1 mV steps: 33000 points a vector (ngspice 39 stops a step
    short of 3.3 V), megabytes of answer, read over many reads of the pipe."""
    sweep = MOISTURE_BUFFER.replace(".save all @mbuf[id] @mbuf[gm] @mbuf[vgs] @mbuf[vds] @mbuf[von]\n", "")
    sweep = sweep.replace(".op", ".dc VRAIL 0 3.3 0.0001")
    result = required_ngspice_session.run(SpiceDeck(sweep, "greenhouse soil-moisture buffer"),
                                          ["v(rail)", "v(probe)", "v(out)"])
    rail, probe, out = result["v(rail)"], result["v(probe)"], result["v(out)"]
    assert rail.shape == probe.shape == out.shape and rail.size >= 33000
    assert rail[0] == 0.0 and rail[-1] == pytest.approx(3.3, abs=2e-4)
    assert probe == pytest.approx(rail * 68 / 115, rel=1e-9, abs=1e-15)  # the divider, at every step
    assert abs(out[0]) < 1e-12 and (out[1:] >= out[:-1] - 1e-12).all()  # the follower rises with its rail


def test_the_system_search_for_libngspice_runs_once_a_process(monkeypatch) -> None:
    """`check` asks where libngspice is twice (``ngspice_available``, then the session); on Linux
    ``ctypes.util.find_library`` runs ``ldconfig -p`` each time it is asked."""
    import ctypes.util

    from bridge.sim import locate

    asked: list[str] = []
    real = ctypes.util.find_library

    def counting(name: str) -> str | None:
        asked.append(name)
        return real(name)

    monkeypatch.setattr(ctypes.util, "find_library", counting)
    monkeypatch.delenv(locate.ENV_VARIABLE, raising=False)
    first, second = locate.locate_ngspice(), locate.locate_ngspice()
    assert first == second
    assert len(asked) <= 1
