"""The reader does each piece of work once, and none whose result nobody reads: a plain card read
before (in another netlist of a batch) is not read again, yet gives what a fresh read gives, at
its own place; an element's fields as written are not even placed until lint looks at them."""

from __future__ import annotations

import pytest

from bridge.netlist import NetlistError, build, parse_netlist, parser
from bridge.netlist.circuit import Written
from bridge.netlist.parser import plain_card, read_plain_card
from bridge.netlist.source import decode_source, read_deck

FIRST = """Greenhouse sensor board, soil channel
VDD vdd 0 5
R1 vdd g 1meg
R2 g 0 470k
RD vdd d 22k
M1 d g 0 0 nsoil W=10u L=1u
.model nsoil nmos (vto=0.6 kp=80u lambda=0.01)
.op
.end
"""

# The same cards, lower down and in another order, in another file of the batch.
SECOND = """Greenhouse sensor board, air channel
* the air probe shares the soil channel's parts

.model nsoil nmos (vto=0.6 kp=80u lambda=0.01)
VDD vdd 0 5
R2 g 0 470k
R1 vdd g 1meg
M1 d g 0 0 nsoil W=10u L=1u
RD vdd d 22k
.op
.end
"""


def _cards(text: str, name: str):
    return list(read_deck(decode_source(text.encode("utf-8"), name), name).cards)


@pytest.fixture
def nothing_read_before(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(parser, "_READ_CARDS", {})


def test_a_card_read_before_is_not_read_again_and_gives_a_fresh_reads_card_at_its_own_place(
    nothing_read_before: None, monkeypatch: pytest.MonkeyPatch
) -> None:
    for card in _cards(FIRST, "soil.cir"):
        assert plain_card(card) is not None
    fresh_reads: list[str] = []

    def counted(card):
        fresh_reads.append(card.text)
        return read_plain_card(card)

    monkeypatch.setattr(parser, "read_plain_card", counted)
    second = _cards(SECOND, "air.cir")
    again = [plain_card(card) for card in second]
    assert fresh_reads == []  # every card of the second netlist was read in the first
    for card, raw in zip(second, again):
        assert raw == read_plain_card(card) and raw.card is card


def test_a_netlist_of_cards_read_before_is_placed_at_its_own_lines(nothing_read_before: None) -> None:
    parse_netlist(FIRST, "soil.cir")
    circuit = parse_netlist(SECOND, "air.cir")
    assert [(e.name, e.origin.file, e.origin.line) for e in circuit.elements] == [
        ("VDD", "air.cir", 5), ("R2", "air.cir", 6), ("R1", "air.cir", 7), ("M1", "air.cir", 8),
        ("RD", "air.cir", 9),
    ]
    assert circuit.models["nsoil"].origin.line == 4
    assert circuit.element("M1").written["w"] == Written("10u", 8, 20)
    # An error found after the reading points at the second netlist's card, not the first's.
    with pytest.raises(NetlistError) as caught:
        parse_netlist(SECOND.replace(".model nsoil", ".model nair"), "air.cir")
    assert (caught.value.location.file, caught.value.location.line, caught.value.location.column) == ("air.cir", 8, 12)


def test_past_the_limit_cards_are_read_afresh_and_read_right(
    nothing_read_before: None, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(parser, "_READ_CARDS_LIMIT", 2)
    cards = _cards(FIRST, "soil.cir")
    read = [plain_card(card) for card in cards]
    assert list(parser._READ_CARDS) == [cards[0].text, cards[1].text]
    assert read == [read_plain_card(card) for card in cards]


def test_the_fields_as_written_are_not_placed_while_reading(monkeypatch: pytest.MonkeyPatch) -> None:
    placed: list[str] = []
    original = build._written_places

    def counted(raw):
        placed.append(raw.name)
        return original(raw)

    monkeypatch.setattr(build, "_written_places", counted)
    circuit = parse_netlist(FIRST, "soil.cir")
    assert placed == []  # a check never looks at them
    assert circuit.element("M1").written["model"] == Written("nsoil", 6, 12)
    assert placed == ["M1"]


def test_decimal_is_imported_for_a_rounding_tie_alone(tmp_path) -> None:
    """Reading a netlist and writing numbers leaves `decimal` unloaded until a tie needs it."""
    import subprocess
    import sys

    netlist = tmp_path / "soil.cir"
    netlist.write_text(FIRST)
    script = (
        "import sys; from bridge.netlist import read_netlist; from bridge.netlist.numbers import engineering; "
        f"read_netlist({str(netlist)!r}); before = engineering(2.1287869e-4, 'A'); loaded = 'decimal' in sys.modules; "
        "tie = engineering(1.5625, 'V'); print(before, loaded, tie, 'decimal' in sys.modules)"
    )
    completed = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=60)
    assert completed.stdout.split() == ["212.9", "µA", "False", "1.563", "V", "True"], completed.stderr
