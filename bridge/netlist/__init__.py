"""The netlist front end: SPICE text → Circuit, and Circuit → canonical SPICE text.

    read_netlist(path) -> Circuit      parse a file (includes relative to it)
    parse_netlist(text, name) -> Circuit
    emit(circuit) -> SpiceDeck          the only text the simulator ever receives
"""

from __future__ import annotations

import os

from .build import build_circuit
from .circuit import Circuit
from .errors import Location, NetlistError
from .source import decode_source, read_deck, read_source

__all__ = ["Circuit", "Location", "NetlistError", "parse_netlist", "read_netlist"]


def read_netlist(path: str | os.PathLike[str]) -> Circuit:
    """Read and understand a netlist file; raises NetlistError with a place on bad input."""
    source = read_source(path)
    return build_circuit(read_deck(source, path))


def parse_netlist(text: str, name: str = "<netlist>", directory: str | None = None) -> Circuit:
    """Understand netlist text; includes resolve relative to `directory` (default: cwd)."""
    source = decode_source(text.encode("utf-8", errors="replace"), name)
    base = os.path.join(directory or os.getcwd(), os.path.basename(name) or "netlist")
    return build_circuit(read_deck(source, base))
