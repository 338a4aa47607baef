"""The Darwin Core terms Baulk's occurrence table uses, kept here so a test can hold the table to them.

Term names and meanings from the TDWG "Darwin Core List of Terms" (Darwin Core Maintenance Group, Biodiversity
Information Standards (TDWG), version of 2023-09-18, http://rs.tdwg.org/dwc/doc/list/) - copied from memory of
that list; check a new term against the published list before adding it here. Geological context goes in
``lithostratigraphicTerms`` (our horizons and units are site terms, not formal beds or members), the skeletal
element in ``dynamicProperties`` (Darwin Core has no element term).
"""

from __future__ import annotations

from typing import Any

__all__ = ["DWC_TERMS", "DWC_NAMESPACE"]

DWC_NAMESPACE = "http://rs.tdwg.org/dwc/terms/"

# (term, frictionless type, what Baulk puts there, constraints)
DWC_TERMS: list[tuple[str, str, str, dict[str, Any]]] = [
    ("occurrenceID", "string", "urn:uuid: of the find", {"required": True}),
    ("basisOfRecord", "string", "always FossilSpecimen", {"required": True, "enum": ["FossilSpecimen"]}),
    ("catalogNumber", "string", "site code and find number, e.g. VLM-1042", {"required": True}),
    ("recordedBy", "string", "recorder's initials", {}),
    ("eventDate", "date", "the day it was found (UTC)", {"required": True}),
    ("scientificName", "string", "lowest taxon identified, as recorded", {}),
    ("individualCount", "integer", "items in the find", {"minimum": 1}),
    ("dynamicProperties", "string", 'JSON: {"element": skeletal element}', {}),
    ("lithostratigraphicTerms", "string", "horizon and unit (site terms), e.g. 'H2 Grey tuff marker | unit 104'", {}),
    ("locality", "string", "site and trench", {}),
    ("decimalLatitude", "number", "WGS 84 latitude; empty when withheld", {"minimum": -90, "maximum": 90}),
    ("decimalLongitude", "number", "WGS 84 longitude; empty when withheld", {"minimum": -180, "maximum": 180}),
    ("geodeticDatum", "string", "EPSG:4326 when coordinates are given", {}),
    ("coordinateUncertaintyInMeters", "number", "twice the recorded 1-sigma position error", {"minimum": 0}),
    ("informationWithheld", "string", "what was left out and why", {}),
    ("occurrenceRemarks", "string", "open check codes, space-separated", {}),
]
