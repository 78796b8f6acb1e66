"""DC connectivity of circuit nodes: one union-find for every analysis that asks which nodes
a DC path joins (shorts merged by the hand analysis, floating nodes refused by the solver)."""

from __future__ import annotations

from collections.abc import Callable, Hashable, Iterable


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
