"""The one union-find of DC connectivity, as the hand analysis and the DC solver use it."""

from __future__ import annotations

from bridge.analysis.connectivity import NodeSets


def test_joined_nodes_share_a_root_and_a_second_join_reports_nothing_new() -> None:
    sets = NodeSets(["0", "vdd", "d", "s", "g"])
    assert sets.join("d", "vdd") and sets.join("s", "0")
    assert not sets.join("vdd", "d")
    assert sets.root("d") == sets.root("vdd") != sets.root("s")
    assert sets.root("g") == "g" and "g" in sets and "x" not in sets


def test_the_survivor_rule_names_the_merged_set() -> None:
    order = {"a": 0, "b": 1, "c": 2}

    def ground_then_first(one: str, other: str) -> str:
        return other if other == "0" or (one != "0" and order[other] < order[one]) else one

    sets = NodeSets(["0", "a", "b", "c"], ground_then_first)
    sets.join("c", "b")
    assert sets.root("c") == "b"
    sets.join("b", "a")
    assert sets.root("c") == "a"
    sets.join("a", "0")
    assert {sets.root(n) for n in "abc"} == {"0"}
