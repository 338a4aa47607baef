"""Analysts' horizon assignments are kept with who, when and why; the unit follows the latest."""

from __future__ import annotations

import datetime as dt

import pytest

from mobile.store import TabletStore
from schema.demo_site import DemoSite
from schema.errors import RecordInvalid
from schema.records import Unit


def test_assignments_are_kept_in_order(tablet: TabletStore, demo_site: DemoSite) -> None:
    unit = demo_site.units["103"]
    t0 = dt.datetime(2026, 9, 1, 10, tzinfo=dt.timezone.utc)
    tablet.assign_horizon(unit_id=unit.id, horizon_id=demo_site.horizons["H2"].id, by="MO", at=t0,
                          note="pumice at the base: reworked tuff?")
    tablet.assign_horizon(unit_id=unit.id, horizon_id=demo_site.horizons["H3"].id, by="AK",
                          at=t0 + dt.timedelta(days=3), note="thin sections show deltaic sand")
    assert tablet.get(Unit, unit.id).horizon_id == demo_site.horizons["H3"].id
    history = tablet.horizon_history(unit.id)
    assert [(h.assigned_by, h.note) for h in history] == [
        ("MO", "pumice at the base: reworked tuff?"), ("AK", "thin sections show deltaic sand")]


def test_an_assignment_needs_initials(tablet: TabletStore, demo_site: DemoSite) -> None:
    with pytest.raises(RecordInvalid, match="assigned_by"):
        tablet.assign_horizon(unit_id=demo_site.units["103"].id, horizon_id=None, by="someone",
                              at=dt.datetime(2026, 9, 1, tzinfo=dt.timezone.utc))
    assert tablet.horizon_history(demo_site.units["103"].id) == []
