"""Every Baulk record, defined once.

``REGISTRY`` maps a record name (also its table name) to its ``RecordSpec``; tables, JSON Schema files, forms
and export columns are derived from it. To add a record type, see DEVELOPERS.md.
"""

from __future__ import annotations

from . import curation, dating, device, find, photo, safety, site, strata, survey
from ._base import Record, RecordSpec
from .curation import Correction
from .dating import AgeDetermination
from .device import Device, DevicePublic, NumberBlock
from .find import Find, Sample
from .photo import Photo
from .safety import SafetyCheck
from .site import ControlPoint, GridPolynomial, GridTransform, Season, Site, Trench
from .strata import Horizon, HorizonAssignment, LevelPoint, Relation, Spit, Unit
from .survey import GnssFix, Shot, StationSetup

__all__ = [
    "REGISTRY", "AgeDetermination", "ControlPoint", "Correction", "Device", "DevicePublic", "Find", "GnssFix", "GridPolynomial", "GridTransform", "Horizon", "HorizonAssignment",
    "LevelPoint", "NumberBlock", "Photo", "Record", "RecordSpec", "Relation", "SafetyCheck", "Sample", "Season", "Shot", "Site",
    "Spit", "StationSetup", "Trench", "Unit", "spec_for",
]

REGISTRY: dict[str, RecordSpec] = {
    s.name: s for module in (site, strata, survey, find, dating, safety, curation, photo, device) for s in module.SPECS
}


def spec_for(record: type[Record] | Record | str) -> RecordSpec:
    """The spec of a record class, instance or name."""
    if isinstance(record, str):
        return REGISTRY[record]
    cls = record if isinstance(record, type) else type(record)
    return REGISTRY[cls.record_name]
