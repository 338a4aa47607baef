"""Merge rules: idempotent, order-independent, lose nothing; conflicts are the same on every replica."""

from __future__ import annotations

import random
import uuid

from hypothesis import given, settings
from hypothesis import strategies as st

from schema.sync import Clock, Stamp, Version, VersionSet, leaves, merge, version_id

RID = uuid.UUID(int=42)


class Replica:
    """A device with its own clock (possibly skewed) and version set, editing one record's fields."""

    def __init__(self, n: int, skew_ms: int, now: list[int]):
        self.device = uuid.UUID(int=1000 + n)
        self.seq = 0
        self.clock = Clock(physical=lambda: now[0] + skew_ms)
        self.state = VersionSet()

    def edit(self, fname: str, value: object) -> Version:
        self.seq += 1
        key = ("find", RID, fname)
        current = leaves(self.state.field_versions(key))
        stamp = self.clock.tick()
        v = Version(id=version_id(self.device, self.seq), record="find", record_id=RID, field=fname, value=value,
                    wall_ms=stamp.wall_ms, counter=stamp.counter, device=self.device, seq=self.seq,
                    parents=tuple(x.id for x in current[:1]))  # the editor saw the winner
        merge(self.state, [v])
        return v

    def resolve(self, fname: str, value: object) -> Version:
        self.seq += 1
        key = ("find", RID, fname)
        stamp = self.clock.tick()
        v = Version(id=version_id(self.device, self.seq), record="find", record_id=RID, field=fname, value=value,
                    wall_ms=stamp.wall_ms, counter=stamp.counter, device=self.device, seq=self.seq,
                    parents=tuple(x.id for x in leaves(self.state.field_versions(key))))
        merge(self.state, [v])
        return v

    def receive(self, versions: list[Version]) -> None:
        for v in versions:
            self.clock.observe(v.stamp)
        merge(self.state, versions)


actions = st.lists(
    st.tuples(st.sampled_from(["edit", "sync", "resolve"]), st.integers(0, 4), st.integers(0, 4),
              st.sampled_from(["unit_id", "z", "material", "voided"]), st.integers(0, 9)),
    min_size=1, max_size=60,
)


@settings(max_examples=300, deadline=None)
@given(actions, st.lists(st.integers(-86_400_000, 86_400_000), min_size=5, max_size=5), st.randoms())
def test_replicas_converge_under_any_order(steps, skews, rnd: random.Random) -> None:  # type: ignore[no-untyped-def]
    now = [1_780_000_000_000]
    reps = [Replica(i, skews[i], now) for i in range(5)]
    made: list[Version] = []
    for kind, a, b, fname, value in steps:
        now[0] += rnd.randint(0, 60_000)
        if kind == "edit":
            made.append(reps[a].edit(fname, value))
        elif kind == "resolve":
            made.append(reps[a].resolve(fname, value))
        else:
            sent = list(reps[a].state.by_id.values())
            rnd.shuffle(sent)
            reps[b].receive(sent[: rnd.randint(0, len(sent))] + sent[:2])  # partial, duplicated deliveries
    everything = [v for r in reps for v in r.state.by_id.values()]
    for r in reps:
        shuffled = everything[:]
        rnd.shuffle(shuffled)
        r.receive(shuffled)
    ids = {frozenset(r.state.by_id) for r in reps}
    assert len(ids) == 1 and set(next(iter(ids))) == {v.id for v in made}  # nothing lost, nothing invented
    assert all(r.state.records() == reps[0].state.records() for r in reps)
    assert len({str([(c.key, [v.id for v in c.leaves]) for c in r.state.conflicts()]) for r in reps}) == 1


def v(id_: str, value: object, wall: int, parents: tuple[str, ...] = (), dev: int = 1) -> Version:
    device = uuid.UUID(int=dev)
    return Version(id=f"{device}:{id_}", record="find", record_id=RID, field="z", value=value, wall_ms=wall,
                   counter=0, device=device, seq=int(id_), parents=tuple(f"{device}:{p}" for p in parents))


def test_sequential_edits_do_not_conflict() -> None:
    s = VersionSet.of([v("1", 99.1, 10), v("2", 99.2, 20, ("1",))])
    assert s.value(("find", RID, "z")) == 99.2 and s.conflicts() == []


def test_concurrent_edits_conflict_and_the_later_shows_first() -> None:
    a, b = v("1", 99.1, 10, dev=1), v("1", 99.5, 5, dev=2)
    s = VersionSet.of([a, b])
    (c,) = s.conflicts()
    assert [x.value for x in c.leaves] == [99.1, 99.5]
    assert s.value(("find", RID, "z")) == 99.1


def test_a_skewed_clock_cannot_hide_a_causal_edit() -> None:
    # device 2's clock is a day behind, but it saw device 1's value: its edit wins and there is no conflict
    first = v("1", 99.1, 86_400_000, dev=1)
    later = Version(id=f"{uuid.UUID(int=2)}:1", record="find", record_id=RID, field="z", value=99.3, wall_ms=10,
                    counter=0, device=uuid.UUID(int=2), seq=1, parents=(first.id,))
    s = VersionSet.of([first, later])
    assert s.value(("find", RID, "z")) == 99.3 and s.conflicts() == []


def test_merge_is_idempotent() -> None:
    s = VersionSet()
    first = merge(s, [v("1", 1, 1)])
    again = merge(s, [v("1", 1, 1)])
    assert len(first.added) == 1 and again.added == () and len(s.by_id) == 1


def test_set_fields_merge_by_add_and_remove() -> None:
    dev = uuid.UUID(int=7)

    def sv(seq: int, op: str, item: str, parents: tuple[int, ...] = ()) -> Version:
        return Version(id=f"{dev}:{seq}", record="find", record_id=RID, field="photo_hashes",
                       value={"op": op, "item": item}, wall_ms=seq, counter=0, device=dev, seq=seq,
                       parents=tuple(f"{dev}:{p}" for p in parents))

    s = VersionSet.of([sv(1, "add", "a"), sv(2, "add", "b"), sv(3, "remove", "a", (1,)), sv(4, "add", "a")])
    assert s.value(("find", RID, "photo_hashes")) == ["b", "a"]  # re-added after the remove it did not see
    assert s.conflicts() == []


def test_clock_rules_and_bound() -> None:
    now = [1000]
    c = Clock(physical=lambda: now[0], max_ahead_ms=100)
    assert c.tick() == Stamp(1000, 0) and c.tick() == Stamp(1000, 1)
    assert c.observe(Stamp(1050, 4)) and c.last == Stamp(1050, 5)
    assert not c.observe(Stamp(5000, 0))  # beyond the bound: accepted upstream but not followed
    assert c.last == Stamp(1050, 5)
    now[0] = 2000
    assert c.tick() == Stamp(2000, 0)


# -- edit against void (DESIGN.md section 3) ------------------------------------------------------------------
def _v(dev: int, seq: int, fname: str, value: object, parents: tuple[str, ...] = (), wall: int = 0) -> Version:
    device = uuid.UUID(int=dev)
    return Version(id=version_id(device, seq), record="find", record_id=RID, field=fname, value=value,
                   wall_ms=wall or seq, counter=0, device=device, seq=seq, parents=parents)


def test_a_void_that_did_not_see_an_edit_is_a_conflict_until_resolved() -> None:
    from schema.sync import edit_parents, resolution_parents, void_parents

    base = [_v(1, 1, "unit_id", "u1"), _v(1, 2, "voided", False), _v(1, 3, "z", 99.8)]
    a, b = VersionSet.of(base), VersionSet.of(base)
    # tablet A voids the find; tablet B, offline, moves it to another unit
    void = _v(1, 4, "voided", True, void_parents(a, "find", RID), wall=10)
    edit = _v(2, 1, "unit_id", "u2", edit_parents(b, ("find", RID, "unit_id")), wall=11)
    merged = VersionSet.of([*base, void, edit])
    (c,) = merged.conflicts()
    assert c.kind == "void" and c.key == ("find", RID, "voided")
    assert [v.id for v in c.leaves] == [void.id, edit.id]
    # the manager keeps the void: a new void naming both; no conflict is left
    keep = _v(3, 1, "voided", True, resolution_parents(merged, c.key), wall=12)
    merge(merged, [keep])
    assert merged.conflicts() == []
    assert merged.value(("find", RID, "voided")) is True and merged.value(("find", RID, "unit_id")) == "u2"


def test_an_edit_made_after_seeing_the_void_is_not_against_it() -> None:
    from schema.sync import edit_parents, void_parents

    base = [_v(1, 1, "unit_id", "u1"), _v(1, 2, "voided", False)]
    s = VersionSet.of(base)
    merge(s, [_v(1, 3, "voided", True, void_parents(s, "find", RID))])
    later = _v(2, 1, "notes", "seen voided", edit_parents(s, ("find", RID, "notes")))
    assert later.parents == (version_id(uuid.UUID(int=1), 3),)  # no notes version yet: only the void
    merge(s, [later])
    assert s.conflicts() == []


def test_edits_the_void_saw_and_unvoided_records_raise_nothing() -> None:
    from schema.sync import void_parents

    base = [_v(1, 1, "unit_id", "u1"), _v(2, 1, "z", 99.0), _v(1, 2, "voided", False)]
    s = VersionSet.of(base)
    merge(s, [_v(1, 3, "voided", True, void_parents(s, "find", RID))])
    assert s.conflicts() == []  # the z edit by device 2 was held when the void was made
    concurrent = _v(2, 2, "z", 98.0, (version_id(uuid.UUID(int=2), 1),))
    merge(s, [concurrent, _v(3, 1, "voided", False, (version_id(uuid.UUID(int=1), 3), concurrent.id))])
    assert s.conflicts() == []  # restored: an edit cannot be against a void that no longer wins
