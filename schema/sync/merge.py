"""Merge rules as pure functions of a version set: leaves, winners, conflicts and the merge itself.

- Leaves of a field are its versions that no other version of the same field names as a parent.
- The winner is the highest leaf by (stamp, device id): every replica picks the same one.
- More than one leaf is an open conflict; resolving it is a new version whose parents are all the leaves.
- Causality comes from parents, never from clocks: a skewed clock only changes which of two concurrent
  values shows first, and both stay flagged.
- Set fields: an item is present when some 'add' of it is not named as a parent by a 'remove'.
- Edit against void: a record is voided by a version of its ``voided`` field whose parents name every version
  the voider saw, on every field. An edit of another field that the winning void did not see, and that did not
  see the void (an edit made after seeing it names the void as a parent), is concurrent with it: a conflict on
  ``voided`` whose competing versions are the void and those edits. Choosing a value for ``voided`` (keep the
  void or restore the record) is a new version naming them all.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass, field
from typing import Any, Iterable, Iterator

from .versions import SET_FIELDS, Version

__all__ = ["VOID_FIELD", "Conflict", "FieldKey", "MergeResult", "VersionSet", "edit_parents", "leaves", "merge",
           "resolution_parents", "set_value", "void_parents", "void_seen", "winner"]

FieldKey = tuple[str, uuid.UUID, str]  # (record, record id, field)
VOID_FIELD = "voided"
VOID_COMPANIONS = frozenset({VOID_FIELD, "void_reason"})  # fields written with a void; never against it


def leaves(versions: Iterable[Version]) -> list[Version]:
    """Versions of one field that no other version of it names as a parent, highest first."""
    vs = versions if isinstance(versions, list) else list(versions)
    if len(vs) < 2:
        return list(vs)  # the common case: one version, its own leaf
    named = {p for v in vs for p in v.parents}
    return sorted((v for v in vs if v.id not in named), key=lambda v: v.order_key, reverse=True)


def winner(versions: Iterable[Version]) -> Version | None:
    top = leaves(versions)
    return top[0] if top else None


def set_value(versions: Iterable[Version]) -> list[Any]:
    """The items of an add/remove set field, in order of first addition."""
    vs = sorted(versions, key=lambda v: v.order_key)
    removed = {p for v in vs if v.value.get("op") == "remove" for p in v.parents}
    seen: dict[str, Any] = {}
    for v in vs:
        if v.value.get("op") == "add" and v.id not in removed:
            seen.setdefault(repr(v.value.get("item")), v.value.get("item"))
    return list(seen.values())


@dataclass(frozen=True)
class Conflict:
    """Two or more concurrent values of one field (leaves), highest first."""

    key: FieldKey
    leaves: tuple[Version, ...]
    kind: str = "concurrent"  # "concurrent" (two values of one field) | "void" (edits the void did not see)


@dataclass
class VersionSet:
    """All versions a replica holds, indexed by field."""

    by_id: dict[str, Version] = field(default_factory=dict)
    by_record: dict[tuple[str, uuid.UUID], dict[str, list[Version]]] = field(default_factory=dict)

    @classmethod
    def of(cls, versions: Iterable[Version]) -> "VersionSet":
        s = cls()
        merge(s, versions)
        return s

    def field_versions(self, key: FieldKey) -> list[Version]:
        fields = self.by_record.get((key[0], key[1]))
        return fields.get(key[2], []) if fields else []

    def value(self, key: FieldKey) -> Any:
        record, _rid, fname = key
        vs = self.field_versions(key)
        if fname in SET_FIELDS.get(record, ()):
            return set_value(vs)
        w = winner(vs)
        return None if w is None else w.value

    def versions_of(self, record: str, rid: uuid.UUID) -> list[Version]:
        return [v for key in self.fields_of(record, rid) for v in self.field_versions(key)]

    def fields_of(self, record: str, rid: uuid.UUID) -> list[FieldKey]:
        return [(record, rid, f) for f in sorted(self.by_record.get((record, rid), ()))]

    def field_keys(self) -> Iterator[tuple[FieldKey, list[Version]]]:
        for (record, rid), fields in self.by_record.items():
            for fname, vs in fields.items():
                yield (record, rid, fname), vs

    def ancestors(self, start: Iterable[str]) -> set[str]:
        """Every version id reachable through parents from ``start`` (held versions only)."""
        seen: set[str] = set()
        todo = list(start)
        while todo:
            vid = todo.pop()
            if vid in seen:
                continue
            seen.add(vid)
            v = self.by_id.get(vid)
            if v is not None:
                todo.extend(v.parents)
        return seen

    def conflict_at(self, key: FieldKey) -> Conflict | None:
        """The open conflict on one field, if any."""
        record, rid, fname = key
        if fname in SET_FIELDS.get(record, ()):
            return None  # sets merge by union; nothing to choose
        top = leaves(self.field_versions(key))
        if len(top) > 1:
            return Conflict(key, tuple(top))
        if fname == VOID_FIELD and top and top[0].value is True:
            unseen = self._unseen_by_void(record, rid, top[0])
            if unseen:
                return Conflict(key, (top[0], *unseen), kind="void")
        return None

    def _unseen_by_void(self, record: str, rid: uuid.UUID, void: Version) -> list[Version]:
        saw = self.ancestors([void.id])
        out = []
        for key in self.fields_of(record, rid):
            if key[2] in VOID_COMPANIONS:
                continue
            vs = self.field_versions(key)
            current = vs if key[2] in SET_FIELDS.get(record, ()) else leaves(vs)
            out.extend(v for v in current if v.device != void.device  # a device sees its own edits, in order
                       and v.id not in saw and void.id not in self.ancestors(v.parents))
        return sorted(out, key=lambda v: v.order_key, reverse=True)

    def conflicts(self) -> list[Conflict]:
        out = [c for key, vs in self.field_keys()
               if (len(vs) > 1 or key[2] == VOID_FIELD) and (c := self.conflict_at(key)) is not None]
        return sorted(out, key=lambda c: (c.key[0], str(c.key[1]), c.key[2]))

    def records(self) -> dict[tuple[str, uuid.UUID], dict[str, Any]]:
        """Each record's visible field values."""
        out: dict[tuple[str, uuid.UUID], dict[str, Any]] = {}
        for (record, rid), fields in self.by_record.items():
            sets = SET_FIELDS.get(record, ())
            out[(record, rid)] = {
                fname: vs[0].value if len(vs) == 1 and fname not in sets else self.value((record, rid, fname))
                for fname, vs in fields.items()
            }
        return out


def edit_parents(state: VersionSet, key: FieldKey) -> tuple[str, ...]:
    """What a plain edit of one field names as parents: the winner it replaces, and the winning void when the
    record is voided (the editor saw the void, so the edit is not against it)."""
    record, rid, fname = key
    top = leaves(state.field_versions(key))
    return tuple(v.id for v in top[:1]) + (() if fname in VOID_COMPANIONS else void_seen(state, record, rid))


def void_seen(state: VersionSet, record: str, rid: uuid.UUID) -> tuple[str, ...]:
    """The winning void of a voided record, as an extra parent of edits made while looking at it."""
    void = winner(state.field_versions((record, rid, VOID_FIELD)))
    return (void.id,) if void is not None and void.value is True else ()


def void_parents(state: VersionSet, record: str, rid: uuid.UUID) -> tuple[str, ...]:
    """What a void names as parents: every current version of every field of the record (what the voider saw)."""
    out: list[str] = []
    for key in state.fields_of(record, rid):
        vs = state.field_versions(key)
        out.extend(v.id for v in (vs if key[2] in SET_FIELDS.get(record, ()) else leaves(vs)))
    return tuple(out)


def resolution_parents(state: VersionSet, key: FieldKey) -> tuple[str, ...]:
    """What a resolution names: every competing version of the field's conflict (all its leaves otherwise)."""
    c = state.conflict_at(key)
    return tuple(v.id for v in (c.leaves if c else leaves(state.field_versions(key))))


@dataclass(frozen=True)
class MergeResult:
    added: tuple[Version, ...]  # versions new to this replica

    @property
    def touched(self) -> frozenset[FieldKey]:
        """Fields whose version set grew."""
        return frozenset((v.record, v.record_id, v.field) for v in self.added)


def merge(state: VersionSet, incoming: Iterable[Version]) -> MergeResult:
    """Add incoming versions to ``state`` (in place); idempotent, order-independent, loses nothing."""
    added = []
    by_id, by_record = state.by_id, state.by_record
    for v in incoming:
        vid = v.id
        if vid in by_id:
            continue
        by_id[vid] = v
        rk = (v.record, v.record_id)
        fields = by_record.get(rk)
        if fields is None:
            fields = by_record[rk] = {}
        vs = fields.get(v.field)
        if vs is None:
            fields[v.field] = [v]
        else:
            vs.append(v)
        added.append(v)
    return MergeResult(tuple(added))
