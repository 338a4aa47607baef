"""Old and new tablets: versions carry the schema version of the record shapes they were written in.

When a record shape changes (a field renamed, a value's form changed), ``SCHEMA_VERSION`` in ``schema`` goes up
and ``STEPS[n]`` says how one version written at schema ``n`` reads at ``n + 1``. Every version a replica merges
(push, bundle, season archive, pull) passes through ``upgrade`` inside ``insert_versions``, so a tablet that
syncs late with an old Baulk is read in today's shapes, and nothing it sent is dropped for its age.

A version from a *newer* Baulk (schema above this one's) is kept as it is: it is stored, counted, served to other
replicas and merged by its parents like any other; a field this Baulk does not know is simply not shown, and a
value it cannot read keeps the record as a pending row with a reason (``materialize``), until Baulk is updated.

No shape has changed since schema 1, so ``STEPS`` is empty; the mechanism is tested with a test-only step.
Keep steps pure (one version in, one version out, same id and parents), so every replica upgrades alike.
"""

from __future__ import annotations

from typing import Callable, Iterable

from .. import SCHEMA_VERSION
from .versions import Version

__all__ = ["SCHEMA_VERSION", "STEPS", "Step", "upgrade"]

Step = Callable[[Version], Version]

# schema version n -> how a version written at n reads at n + 1
STEPS: dict[int, Step] = {}


def upgrade(versions: Iterable[Version], *, steps: dict[int, Step] | None = None,
            current: int | None = None) -> list[Version]:
    """Bring each version up to the current schema; newer ones pass unchanged."""
    steps = STEPS if steps is None else steps
    current = SCHEMA_VERSION if current is None else current
    out = []
    for v in versions:
        while v.schema_version < current:
            step = steps.get(v.schema_version)
            if step is None:  # nothing changed at this step: the shape reads the same one schema up
                v = v.model_copy(update={"schema_version": v.schema_version + 1})
                continue
            nxt = step(v)
            if nxt.id != v.id or nxt.parents != v.parents or nxt.schema_version != v.schema_version + 1:
                raise ValueError(f"upgrade step {v.schema_version} must keep id and parents and raise the schema by one")
            v = nxt
        out.append(v)
    return out
