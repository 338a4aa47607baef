"""Live checks on the tablet: the same rules the server runs, on what this tablet holds, right after a save.

They never stop a save; the recorder sees each problem with its fix and corrects the record or confirms it
(the confirmation reason travels to the data manager with the record's notes once sync lands).
"""

from __future__ import annotations

from schema.records import Find
from schema.strata import Issue, validate

from .store import TabletStore

__all__ = ["check_find", "check_matrix"]


def check_find(store: TabletStore, find: Find) -> list[Issue]:
    """Issues about this find (and its unit's surfaces) on this tablet's data, errors first."""
    report = validate(store.site_data(site_id=find.site_id, only_find=find.id))
    mine = str(find.id)
    unit = str(find.unit_id)
    return [i for i in report.issues if i.record_id == mine or (i.record == "unit" and i.record_id == unit
                                                                and i.code.startswith("SURFACE_"))]


def check_matrix(store: TabletStore) -> list[Issue]:
    """Matrix problems (not the informational ones) after a relation or unit is saved."""
    report = validate(store.site_data())
    return [i for i in report.matrix.issues if i.severity != "info"]
