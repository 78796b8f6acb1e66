"""DC connectivity of circuit nodes: one union-find for every analysis that asks which nodes
a DC path joins (shorts merged by the hand analysis, floating nodes refused by the solver:
``structure_fault``)."""

from __future__ import annotations

from collections.abc import Callable, Hashable, Iterable
from typing import NamedTuple

from ..netlist.circuit import GROUND, Circuit


class NodeSets:
    """Disjoint sets of nodes (union-find with path halving).

    `survivor`, when given, picks which of two roots names the joined set (the hand analysis
    keeps ground, else the node written first); otherwise the second root does.
    """

    def __init__(self, nodes: Iterable[Hashable], survivor: Callable[[Hashable, Hashable], Hashable] | None = None):
        self.parent: dict = {node: node for node in nodes}
        self._survivor = survivor

    def __contains__(self, node: Hashable) -> bool:
        return node in self.parent

    def root(self, node: Hashable) -> Hashable:
        """The node naming `node`'s set."""
        parent = self.parent
        while parent[node] != node:
            parent[node] = parent[parent[node]]
            node = parent[node]
        return node

    def join(self, a: Hashable, b: Hashable) -> bool:
        """Put `a` and `b` in one set; False when they already were."""
        ra, rb = self.root(a), self.root(b)
        if ra == rb:
            return False
        if self._survivor is not None and self._survivor(ra, rb) == ra:
            self.parent[rb] = ra
        else:
            self.parent[ra] = rb
        return True


class StructureFault(NamedTuple):
    """Why a circuit's matrix is singular by construction: the message, and the nodes or the
    elements it names."""

    message: str
    nodes: tuple[str, ...] = ()
    elements: tuple[str, ...] = ()


def structure_fault(circuit: Circuit, nodes: tuple[str, ...], *, channels: bool = False) -> StructureFault | None:
    """Whether the circuit's DC matrix is singular by construction, and why (None when it is not).

    A node with no DC path to ground (reached only through capacitors, current sources or
    MOSFET gates) has no defined voltage; a loop of voltage sources and shorts has no
    defined current. ngspice meets both as a singular matrix. With `channels` (the hand
    device: no bulk junctions) a MOSFET joins its drain and source only, and inductors are
    shorts whose nodes are merged, not branches. The DC solver refuses such a circuit
    (``dcsolve.SingularCircuit``).
    """
    sets = NodeSets((GROUND, *nodes))
    root, join = sets.root, sets.join

    # Loops of fixed-voltage branches first: independent V sources and inductors.
    fixed = [e for e in circuit.elements if e.kind == "vsource" or (e.kind == "inductor" and not channels)]
    for element in fixed:
        if not join(element.nodes[0], element.nodes[1]):
            group = root(element.nodes[0])
            loop = [e.name for e in fixed if root(e.nodes[0]) == group]
            return StructureFault(
                f"singular circuit: a loop of voltage sources and inductors among {', '.join(loop)} "
                "(the currents around it are undefined)",
                elements=tuple(loop),
            )
    # Then DC paths: everything that conducts at DC joins its nodes.
    loose_ends: set[str] = set()  # outputs of G/F sources: they may pin a node in odd circuits
    for element in circuit.elements:
        kind, ends = element.kind, element.nodes
        if kind in ("resistor", "diode", "vcvs", "ccvs") or (kind == "inductor" and channels):
            join(ends[0], ends[1])
        elif kind == "mosfet" and channels:
            join(ends[0], ends[2])  # the channel: the hand device has no junctions to the bulk
        elif kind == "mosfet":
            # The bulk junctions (with GMIN) tie drain and source to the bulk.
            join(ends[0], ends[3])
            join(ends[2], ends[3])
        elif kind in ("vccs", "cccs"):
            loose_ends.update(ends[:2])
            if kind == "vccs" and {ends[0], ends[1]} == {ends[2], ends[3]}:
                join(ends[0], ends[1])  # a G source controlled by its own nodes is a conductance
    ground = root(GROUND)
    floating = [node for node in nodes if root(node) != ground]
    if floating and not any(root(node) in {root(f) for f in floating} for node in loose_ends):
        names = ", ".join(floating)
        return StructureFault(
            f"singular circuit: no DC path to ground from node{'s' if len(floating) > 1 else ''} "
            f"{names} (only capacitors, current sources or MOSFET gates reach "
            f"{'them' if len(floating) > 1 else 'it'}), so the operating point is undefined",
            nodes=tuple(floating),
        )
    return None
