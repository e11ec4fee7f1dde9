"""Stable IDs: mint, merge, split, never reuse, always resolve — including a stateful random walk."""

from __future__ import annotations

import base64
import hashlib

import pytest
from hypothesis import settings
from hypothesis import strategies as st
from hypothesis.stateful import RuleBasedStateMachine, initialize, invariant, precondition, rule

from linkfold.dedupe import Edge, EventKind, IdState, assign_ids, check_state, cluster, derive_id


def _kinds(update) -> list[tuple[str, str, str | None]]:
    return [(e.kind.value, e.id, e.other) for e in update.events]


def test_derive_id_format() -> None:
    # RFC 4648 §6 base32 of SHA-256, lower-cased, first 12 characters, after the family prefix.
    digest = base64.b32encode(hashlib.sha256(b"k7q2example").digest()).decode()[:12].lower()
    assert derive_id("a", "k7q2example") == "a" + digest
    assert len(derive_id("s", "x")) == 13


def test_mint_merge_split_lifecycle() -> None:
    s0 = IdState()
    u1 = assign_ids(s0, [("k1", "k2"), ("k3",)], prefix="a")
    a12, a3 = u1.state.assigned["k1"], u1.state.assigned["k3"]
    assert a12 == derive_id("a", "k1") and a3 == derive_id("a", "k3")
    assert _kinds(u1) == [("minted", a12, None), ("minted", a3, None)]
    assert len(u1.changes) == 3 and {c.old for c in u1.changes} == {None}

    # merge: a12 was minted first, so it survives and a3 maps forward to it
    u2 = assign_ids(u1.state, [("k1", "k2", "k3")], prefix="a")
    assert _kinds(u2) == [("merged_into", a3, a12)]
    assert u2.state.resolve(a3) == a12 and u2.state.live() == {a12}

    # split: the part with the founder k1 keeps a12; {k2, k3} gets a new ID founded by k2
    u3 = assign_ids(u2.state, [("k1",), ("k2", "k3")], prefix="a")
    a23 = u3.state.assigned["k2"]
    assert a23 == derive_id("a", "k2")
    assert _kinds(u3) == [("minted", a23, None), ("split_from", a23, a12)]
    assert u3.events[0].reason == "split" and u3.events[0].member == "k2"
    # a3 still resolves — to the live ID that kept the founder of the cluster it merged into
    assert u3.state.resolve(a3) == a12
    assert check_state(u3.state) == []


def test_founder_key_reused_after_merge_gets_a_new_id() -> None:
    u1 = assign_ids(IdState(), [("k1",), ("k2",)], prefix="a")
    old_k2 = u1.state.assigned["k2"]
    u2 = assign_ids(u1.state, [("k1", "k2")], prefix="a")     # k2's ID retires into k1's
    u3 = assign_ids(u2.state, [("k1",), ("k2",)], prefix="a")  # k2 leaves again and founds a cluster
    new_k2 = u3.state.assigned["k2"]
    assert new_k2 == old_k2 + "-2" and u3.state.resolve(old_k2) == u3.state.assigned["k1"]
    u4 = assign_ids(assign_ids(u3.state, [("k1", "k2")], prefix="a").state, [("k1",), ("k2",)], prefix="a")
    assert u4.state.assigned["k2"] == old_k2 + "-3"


def test_oldest_claim_wins_regardless_of_id_text() -> None:
    u1 = assign_ids(IdState(), [("zz",)], prefix="a")
    u2 = assign_ids(u1.state, [("aa",), ("zz",)], prefix="a")
    u3 = assign_ids(u2.state, [("aa", "zz")], prefix="a")
    assert u3.state.assigned["aa"] == u1.state.assigned["zz"]


def test_founder_key_orders_founders() -> None:
    first_seen = {"k9": 1, "k1": 2}
    u = assign_ids(IdState(), [("k1", "k9")], prefix="s", founder_key=first_seen.__getitem__)
    assert u.state.founders[u.state.assigned["k1"]] == "k9"


def test_founder_moved_out_hands_the_id_to_the_rest() -> None:
    u1 = assign_ids(IdState(), [("k1", "k2", "k3")], prefix="a")
    a1 = u1.state.assigned["k1"]
    assert u1.state.founders[a1] == "k1"
    # a person: "k1 is not in a1" — k1 leaves, a1 stays with k2 and k3, whose smallest member takes over
    u2 = assign_ids(u1.state, [("k1",), ("k2", "k3")], prefix="a", handoff={a1: "k2"})
    assert u2.state.assigned["k2"] == u2.state.assigned["k3"] == a1
    assert u2.state.founders[a1] == "k2"
    new = u2.state.assigned["k1"]
    assert new == derive_id("a", "k1") + "-2"   # k1's own derived ID is a1's: never reused
    assert _kinds(u2) == [("founder_moved", a1, None), ("minted", new, None), ("split_from", new, a1)]
    assert u2.events[0].member == "k2" and u2.events[0].reason == "moved_out"
    assert [(c.member, c.old, c.new) for c in u2.changes] == [("k1", a1, new)]
    assert check_state(u2.state) == []
    # the same hand-off on the next run changes nothing; without the move it would not apply either
    again = assign_ids(u2.state, [("k1",), ("k2", "k3")], prefix="a", handoff={a1: "k2"})
    assert again.events == [] and again.changes == []
    same = assign_ids(u1.state, [("k1", "k2", "k3")], prefix="a", handoff={a1: "k2"})
    assert same.events == [] and same.state.founders[a1] == "k1"


def test_invalid_inputs() -> None:
    u = assign_ids(IdState(), [("k1", "k2")], prefix="a")
    with pytest.raises(ValueError, match="in no component"):
        assign_ids(u.state, [("k1",)], prefix="a")
    with pytest.raises(ValueError, match="more than one"):
        assign_ids(u.state, [("k1", "k2"), ("k2",)], prefix="a")
    with pytest.raises(KeyError):
        u.state.resolve("a-never")
    bad = IdState(assigned={"k1": "x"}, founders={"x": "k2"}, order={"x": 1})
    assert any("founder" in p for p in check_state(bad))


class IdLifecycle(RuleBasedStateMachine):
    """Random histories of evidence and manual decisions; after every step the whole pipeline
    (cluster → assign_ids) runs as a nightly job would, and the ID rules must hold."""

    @initialize()
    def setup(self) -> None:
        self.members: list[str] = []
        self.edges: dict[tuple[str, str], float] = {}
        self.must: set[tuple[str, str]] = set()
        self.cannot: set[tuple[str, str]] = set()
        self.state = IdState()
        # (mover, heir): a person said "mover is not in the cluster that heir is in" (heir: the smallest
        # other member, the one that takes over when the mover is the founder)
        self.moves: list[tuple[str, str]] = []
        self.handoff: dict[str, str] = {}
        self.ever_issued: set[str] = set()
        self.last_update = None
        self.last_clustering = None
        self.add_member()

    def _pair(self, data: st.DataObject) -> tuple[str, str]:
        a = data.draw(st.sampled_from(self.members))
        b = data.draw(st.sampled_from([m for m in self.members if m != a]))
        return (a, b) if a < b else (b, a)

    def _handoff(self) -> dict[str, str]:
        # What the stage does on every run: an in-force move-out whose mover founds the heir's ID now
        # hands that ID to the heir (docs/dedupe.md §8, "founder moved").
        out: dict[str, str] = {}
        for mover, heir in self.moves:
            id_ = self.state.assigned.get(heir)
            if id_ is not None and self.state.founders.get(id_) == mover:
                out[id_] = heir
        return out

    def _run(self) -> None:
        self.last_clustering = cluster(self.members, [Edge(a, b, s) for (a, b), s in self.edges.items()],
                                       must_link=self.must, cannot_link=self.cannot)
        previous = set(self.state.order)
        self.handoff = self._handoff()
        update = assign_ids(self.state, self.last_clustering.components, prefix="a", handoff=self.handoff)
        minted = {e.id for e in update.events if e.kind is EventKind.MINTED}
        assert not minted & self.ever_issued, "an ID was issued twice"
        assert set(update.state.order) == previous | minted
        for e in update.events:
            if e.kind is EventKind.MERGED_INTO:
                # merges keep the older ID
                assert update.state.order[e.other] < update.state.order[e.id]
        self.ever_issued |= minted
        self.state, self.last_update = update.state, update

    @rule()
    def add_member(self) -> None:
        self.members.append(f"k{len(self.members):03d}")
        self._run()

    @precondition(lambda self: len(self.members) >= 2)
    @rule(data=st.data(), strength=st.sampled_from([0.55, 0.8, 0.95, 1.0]))
    def add_evidence(self, data: st.DataObject, strength: float) -> None:
        self.edges[self._pair(data)] = strength
        self._run()

    @precondition(lambda self: bool(self.edges))
    @rule(data=st.data())
    def withdraw_evidence(self, data: st.DataObject) -> None:
        # e.g. a new ruleset or higher threshold removes a link: clusters may split
        del self.edges[data.draw(st.sampled_from(sorted(self.edges)))]
        self._run()

    @precondition(lambda self: len(self.members) >= 2)
    @rule(data=st.data())
    def person_says_same(self, data: st.DataObject) -> None:
        pair = self._pair(data)
        self.cannot.discard(pair)
        self.must.add(pair)
        self.moves = [mv for mv in self.moves if tuple(sorted(mv)) != pair]
        self._run()

    @precondition(lambda self: len(self.members) >= 2)
    @rule(data=st.data())
    def person_says_different(self, data: st.DataObject) -> None:
        pair = self._pair(data)
        self.must.discard(pair)
        self.cannot.add(pair)
        self._run()

    @precondition(lambda self: len(self.members) >= 2)
    @rule(data=st.data())
    def person_moves_out(self, data: st.DataObject) -> None:
        # "this member is not in that cluster": it leaves, the ID stays with the rest — founder or not
        shared = [m for m in self.members
                  if sum(1 for x in self.members if self.state.assigned[x] == self.state.assigned[m]) > 1]
        if not shared:
            return
        mover = data.draw(st.sampled_from(shared))
        held = self.state.assigned[mover]
        rest = sorted(m for m in self.members if m != mover and self.state.assigned[m] == held)
        heir = rest[0] if self.state.founders[held] == mover else self.state.founders[held]
        for m in rest:
            pair = (mover, m) if mover < m else (m, mover)
            self.must.discard(pair)
            self.cannot.add(pair)
        self.moves.append((mover, heir))
        was_founder = self.state.founders[held] == mover
        self._run()
        # the mover left; the ID stays with the rest (it may have merged on, and still resolves)
        assert self.state.assigned[mover] != self.state.resolve(held)
        assert self.state.assigned[heir] == self.state.resolve(held)
        moved = [e for e in self.last_update.events if e.kind is EventKind.FOUNDER_MOVED and e.id == held]
        assert bool(moved) == was_founder
        if moved:
            assert moved[0].member == heir and moved[0].reason == "moved_out"

    @invariant()
    def every_id_ever_issued_resolves_to_a_live_id(self) -> None:
        live = self.state.live()
        assert set(self.state.assigned.values()) == live
        for id_ in self.ever_issued:
            assert self.state.resolve(id_) in live
        assert check_state(self.state) == []

    @invariant()
    def ids_follow_clusters_and_decisions(self) -> None:
        assign = self.state.assigned
        ids = [{assign[m] for m in comp} for comp in self.last_clustering.components]
        assert all(len(s) == 1 for s in ids)
        assert len({next(iter(s)) for s in ids}) == len(ids)
        for a, b in self.cannot:
            assert assign[a] != assign[b]
        conflicts = {(r.edge.a, r.edge.b) for r in self.last_clustering.refused if r.manual}
        for a, b in self.must:
            assert assign[a] == assign[b] or (a, b) in conflicts

    @invariant()
    def rerun_without_change_changes_nothing(self) -> None:
        again = assign_ids(self.state, cluster(
            self.members, [Edge(a, b, s) for (a, b), s in self.edges.items()],
            must_link=self.must, cannot_link=self.cannot).components, prefix="a", handoff=self._handoff())
        assert again.events == [] and again.changes == []
        assert again.state == self.state


TestIdLifecycle = IdLifecycle.TestCase
TestIdLifecycle.settings = settings(max_examples=150, stateful_step_count=40, deadline=None)
