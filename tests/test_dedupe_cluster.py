"""Constrained clustering: manual decisions win, strongest evidence first, same data same clusters."""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from linkfold.dedupe import Edge, cluster


def test_plain_components() -> None:
    result = cluster("abcdef", [Edge("a", "b"), Edge("c", "b"), Edge("e", "f")])
    assert result.components == [("a", "b", "c"), ("d",), ("e", "f")]
    assert result.refused == []
    assert result.component_of()["c"] == 0


def test_cannot_link_blocks_transitive_join_and_is_reported() -> None:
    result = cluster("abc", [Edge("a", "b", 0.9), Edge("b", "c", 0.8)], cannot_link=[("c", "a")])
    assert result.components == [("a", "b"), ("c",)]
    [refusal] = result.refused
    assert (refusal.edge.a, refusal.edge.b, refusal.manual, refusal.separated) == ("b", "c", False, ("a", "c"))


def test_strongest_evidence_first() -> None:
    # b–c is stronger, so it is applied first and a is the one left out.
    result = cluster("abc", [Edge("a", "b", 0.6), Edge("b", "c", 0.9)], cannot_link=[("a", "c")])
    assert result.components == [("a",), ("b", "c")]


def test_ties_broken_by_member_pair_not_input_order() -> None:
    edges = [Edge("b", "c", 0.7), Edge("a", "b", 0.7)]
    for order in (edges, edges[::-1]):
        assert cluster("abc", order, cannot_link=[("a", "c")]).components == [("a", "b"), ("c",)]


def test_must_link_always_joins_and_conflicts_are_reported() -> None:
    result = cluster("abcd", [], must_link=[("a", "d")])
    assert result.components == [("a", "d"), ("b",), ("c",)]
    # a person joined a–b and b–c but separated a–c: the separation wins, the conflict is reported
    result = cluster("abc", [], must_link=[("a", "b"), ("b", "c")], cannot_link=[("a", "c")])
    assert result.components == [("a", "b"), ("c",)]
    assert [(r.edge.kind, r.manual) for r in result.refused] == [("manual", True)]


def test_unknown_members_and_self_separation_are_errors() -> None:
    with pytest.raises(ValueError, match="not among the members"):
        cluster("ab", [Edge("a", "z")])
    with pytest.raises(ValueError, match="itself"):
        cluster("ab", [], cannot_link=[("a", "a")])


members = st.integers(0, 11)
edges_st = st.lists(st.builds(Edge, members, members, st.sampled_from([0.5, 0.7, 0.9, 1.0])), max_size=30)
pairs_st = st.lists(st.tuples(members, members).filter(lambda p: p[0] != p[1]), max_size=6)


@settings(max_examples=300, deadline=None)
@given(edges_st, pairs_st, pairs_st, st.randoms(use_true_random=False))
def test_constraints_hold_and_result_ignores_input_order(edges, musts, cannots, rnd) -> None:
    universe = range(12)
    result = cluster(universe, edges, must_link=musts, cannot_link=cannots)
    where = result.component_of()
    assert sorted(where) == list(universe)
    for a, b in cannots:
        assert where[a] != where[b]
    refused = {(r.edge.a, r.edge.b, r.edge.kind) for r in result.refused}
    for a, b in musts:
        lo, hi = min(a, b), max(a, b)
        assert where[a] == where[b] or (lo, hi, "manual") in refused
    for e in edges:
        lo, hi = min(e.a, e.b), max(e.a, e.b)
        assert where[e.a] == where[e.b] or (lo, hi, e.kind) in refused
    for r in result.refused:
        # a refused edge really would have joined two members that a person separated
        x, y = r.separated
        assert {where[x], where[y]} == {where[r.edge.a], where[r.edge.b]}
    shuffled_edges, shuffled_musts, shuffled_cannots = list(edges), list(musts), list(cannots)
    for seq in (shuffled_edges, shuffled_musts, shuffled_cannots):
        rnd.shuffle(seq)
    again = cluster(reversed(universe), shuffled_edges, must_link=[(b, a) for a, b in shuffled_musts],
                    cannot_link=shuffled_cannots)
    assert again.components == result.components
    assert again.refused == result.refused
