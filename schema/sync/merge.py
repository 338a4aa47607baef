"""Merge rules as pure functions of a version set: leaves, winners, conflicts and the merge itself.

- Leaves of a field are its versions that no other version of the same field names as a parent.
- The winner is the highest leaf by (stamp, device id): every replica picks the same one.
- More than one leaf is an open conflict; resolving it is a new version whose parents are all the leaves.
- Causality comes from parents, never from clocks: a skewed clock only changes which of two concurrent
  values shows first, and both stay flagged.
- Set fields: an item is present when some 'add' of it is not named as a parent by a 'remove'.
"""

from __future__ import annotations

import uuid
from collections import defaultdict
from dataclasses import dataclass, field
from typing import Any, Iterable

from .versions import SET_FIELDS, Version

__all__ = ["Conflict", "FieldKey", "MergeResult", "VersionSet", "leaves", "merge", "set_value", "winner"]

FieldKey = tuple[str, uuid.UUID, str]  # (record, record id, field)


def leaves(versions: Iterable[Version]) -> list[Version]:
    """Versions of one field that no other version of it names as a parent, highest first."""
    vs = list(versions)
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


@dataclass
class VersionSet:
    """All versions a replica holds, indexed by field."""

    by_id: dict[str, Version] = field(default_factory=dict)
    by_field: dict[FieldKey, list[Version]] = field(default_factory=lambda: defaultdict(list))

    @classmethod
    def of(cls, versions: Iterable[Version]) -> "VersionSet":
        s = cls()
        merge(s, versions)
        return s

    def field_versions(self, key: FieldKey) -> list[Version]:
        return self.by_field.get(key, [])

    def value(self, key: FieldKey) -> Any:
        record, _rid, fname = key
        vs = self.field_versions(key)
        if fname in SET_FIELDS.get(record, ()):
            return set_value(vs)
        w = winner(vs)
        return None if w is None else w.value

    def conflicts(self) -> list[Conflict]:
        out = []
        for key, vs in self.by_field.items():
            if key[2] in SET_FIELDS.get(key[0], ()):
                continue  # sets merge by union; nothing to choose
            top = leaves(vs)
            if len(top) > 1:
                out.append(Conflict(key, tuple(top)))
        return sorted(out, key=lambda c: (c.key[0], str(c.key[1]), c.key[2]))

    def records(self) -> dict[tuple[str, uuid.UUID], dict[str, Any]]:
        """Each record's visible field values."""
        out: dict[tuple[str, uuid.UUID], dict[str, Any]] = defaultdict(dict)
        for key in self.by_field:
            out[(key[0], key[1])][key[2]] = self.value(key)
        return dict(out)


@dataclass(frozen=True)
class MergeResult:
    added: tuple[Version, ...]  # versions new to this replica
    touched: frozenset[FieldKey]  # fields whose version set grew


def merge(state: VersionSet, incoming: Iterable[Version]) -> MergeResult:
    """Add incoming versions to ``state`` (in place); idempotent, order-independent, loses nothing."""
    added = []
    for v in incoming:
        if v.id in state.by_id:
            continue
        state.by_id[v.id] = v
        state.by_field[(v.record, v.record_id, v.field)].append(v)
        added.append(v)
    return MergeResult(tuple(added), frozenset((v.record, v.record_id, v.field) for v in added))
