"""What is withheld from whom: where possible human remains lie (DESIGN.md section 8, README "Security").

A find flagged ``human_remains`` keeps its precise position for those who work the site and must protect the
spot (recorders, who plotted it, and data managers) and for the camp server itself. Every other reader (an
analyst's device, and every exported file, which may be published) gets the find without what places it:

- the find's ``e``, ``n``, ``z``, how and how well they were measured (``position_source``,
  ``position_sigma_m``) and the observation they came from (``shot_id``, ``gnss_fix_id``): these read as their
  defaults, so the find arrives as an unplotted find, still a valid record;
- every field of the total-station shot and of the GNSS fix the find names (the raw readings give the point
  again with the setup; the fix holds latitude, longitude and its raw sentences);
- the top and bottom Z of its sample details;
- the measured values in its position checks (``POSITION_CHECKS``): the check is still listed, with its code,
  severity and fix.

Level points, instrument setups, control points and trenches belong to no find and are never withheld.
The rule is here once; the edges (``GET /v1/sync/pull``, the camp pages, ``GET /v1/issues``, exports) ask it.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass
from typing import Any, Iterable

from .strata.issues import CATALOGUE

__all__ = ["FIND_FIELDS", "NOTE", "OBSERVATIONS", "POSITION_CHECKS", "SAMPLE_FIELDS", "SEES_POSITIONS", "Withheld",
           "withheld", "withholds"]

# Who sees the precise position of possible human remains; every other role or audience ("analyst", "export")
# does not (so a role added later starts without it).
SEES_POSITIONS: frozenset[str] = frozenset({"recorder", "manager", "server"})

# Fields of a flagged find that place it; withheld, they read as the model's defaults (an unplotted find).
FIND_FIELDS: frozenset[str] = frozenset({"e", "n", "z", "position_source", "position_sigma_m", "shot_id",
                                         "gnss_fix_id"})
# A flagged find's field naming its raw observation -> that record, withheld whole.
OBSERVATIONS: dict[str, str] = {"shot_id": "shot", "gnss_fix_id": "gnss_fix"}
# Fields of a flagged find's sample details that give its depth.
SAMPLE_FIELDS: frozenset[str] = frozenset({"top_z", "bottom_z"})
# Validation checks whose message and value quote a find's measured position.
POSITION_CHECKS: frozenset[str] = frozenset({"POS_OUTSIDE_TRENCH", "POS_FAR_OUTSIDE", "POS_ABOVE_UNIT",
                                             "POS_BELOW_UNIT"})

NOTE = "withheld: possible human remains"
_BLANK: dict[str, Any] = {"position_source": "none"}  # the model's defaults; every other field's is None


def withholds(role: str) -> bool:
    """Whether ``role`` (a device role, ``"server"`` or ``"export"``) is kept from positions of possible human
    remains."""
    return role not in SEES_POSITIONS


@dataclass(frozen=True)
class Withheld:
    """What one reader is not given: flagged finds (by id), the shots and fixes that place them (by record and
    id) and their samples (by id). Empty for those who see everything."""

    finds: frozenset[uuid.UUID] = frozenset()
    observations: frozenset[tuple[str, uuid.UUID]] = frozenset()
    samples: frozenset[uuid.UUID] = frozenset()

    def __bool__(self) -> bool:
        return bool(self.finds)

    def field(self, record: str, record_id: uuid.UUID, name: str) -> bool:
        """Whether ``record.name`` of ``record_id`` is withheld (a version of it is not sent, its value not shown)."""
        if record == "find":
            return name in FIND_FIELDS and record_id in self.finds
        if record in ("shot", "gnss_fix"):
            return (record, record_id) in self.observations
        if record == "sample":
            return name in SAMPLE_FIELDS and record_id in self.samples
        return False

    def blanked(self, find: Any) -> Any:
        """A copy of a find record (a pydantic model) with its withheld fields at their defaults."""
        hidden = {k: _BLANK.get(k) for k in FIND_FIELDS} if find.id in self.finds else {}
        return find.model_copy(update=hidden) if hidden else find

    def issue(self, row: dict[str, Any]) -> dict[str, Any]:
        """A validation issue (``code``, ``record``, ``record_id``, ``label``, ``message``, ``value``) as this
        reader sees it: a position check on a flagged find keeps its code, severity and fix, not its numbers."""
        if row.get("code") not in POSITION_CHECKS or row.get("record") != "find" or not self._flagged(
                row.get("record_id")):
            return row
        what = CATALOGUE[row["code"]][1]
        return {**row, "value": None,
                "message": f"{row.get('label') or 'a find'} fails this check ({what}); its position and the measured "
                           f"values are {NOTE}"}

    def _flagged(self, record_id: Any) -> bool:
        try:
            return uuid.UUID(str(record_id)) in self.finds
        except ValueError:
            return False


def withheld(role: str, finds: Iterable[Any], samples: Iterable[Any] = ()) -> Withheld:
    """What ``role`` is not given. ``finds`` hold at least every find flagged as possible human remains, as records
    or rows with ``id``, ``human_remains``, ``shot_id`` and ``gnss_fix_id``; ``samples`` the sample details of
    those finds, with ``id`` and ``find_id`` (others are ignored)."""
    if not withholds(role):
        return Withheld()
    flagged = {f.id: f for f in finds if f.human_remains}
    observations = frozenset((record, getattr(f, name)) for f in flagged.values()
                             for name, record in OBSERVATIONS.items() if getattr(f, name) is not None)
    return Withheld(finds=frozenset(flagged), observations=observations,
                    samples=frozenset(s.id for s in samples if s.find_id in flagged))
