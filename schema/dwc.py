"""Darwin Core for the fossil finds: the occurrence columns, what each holds, and the pure pieces of the archive
(names and ranks of taxa, ``meta.xml``, ``eml.xml``).

Every column is a term of the Darwin Core List of Terms, version 2026-05-26 (cited copy with IRIs:
``schema.dwc_termlist``); a test holds the columns to that copy. What goes where, and why:

- pieces in a bag are not individuals: they go in ``objectQuantity`` with ``objectQuantityType`` "pieces" (terms
  for the quantity of material entities), and ``individualCount`` is not exported (Baulk records no individuals);
- a recorded "Mammalia indet." is ``scientificName`` "Mammalia", ``identificationQualifier`` "indet.",
  ``taxonRank`` "class", with the recorded text in ``verbatimIdentification``;
- ``lithostratigraphicTerms``, ``formation``, ``member``, ``bed`` carry only the formal names a horizon was given;
  the excavation's own labels (trench, unit, spit, horizon) go in ``fieldNumber``, ``geologicalContextID`` and
  ``locationRemarks``;
- the chronostratigraphic terms name the stages of the horizon's age bracket (``schema.chronostrat``, the ICS chart
  v2024-12); elevations are CRS heights (site datum Z minus the site's vertical offset), with ``verticalDatum``;
- sieved finds, known only by their trench, are georeferenced by the point-radius method (``schema.georef``);
- ``eventDate`` is the day in the site's own time zone;
- ``associatedMedia`` lists the find's photo files by their names in the export's ``photos/`` folder, joined by
  " | " (the Darwin Core guidance for lists); a photo of possible human remains is never named there.
"""

from __future__ import annotations

from typing import Any
from xml.sax.saxutils import escape, quoteattr

from .dwc_termlist import DWC_LIST_URL, DWC_LIST_VERSION, TERM_IRIS

__all__ = ["DWC_LIST_VERSION", "DWC_NAMESPACE", "DWC_TERMS", "eml_xml", "identification", "meta_xml",
           "split_identification", "taxon_rank"]

DWC_NAMESPACE = "http://rs.tdwg.org/dwc/terms/"

_GEO = {"earliest": "older end", "latest": "younger end"}
_CHRONO = [(f"{side}{rank}", "string", f"ICS chart {rank.split('Or')[0].lower()} at the {_GEO[side]} of the horizon's "
            "age bracket (95 % interval of the age model)", {})
           for side in ("earliest", "latest")
           for rank in (("EonOrLowestEonothem", "EraOrLowestErathem", "PeriodOrLowestSystem", "EpochOrLowestSeries",
                         "AgeOrLowestStage") if side == "earliest" else
                        ("EonOrHighestEonothem", "EraOrHighestErathem", "PeriodOrHighestSystem",
                         "EpochOrHighestSeries", "AgeOrHighestStage"))]

# (term, frictionless type, what Baulk puts there, constraints)
DWC_TERMS: list[tuple[str, str, str, dict[str, Any]]] = [
    ("occurrenceID", "string", "urn:uuid: of the find", {"required": True}),
    ("basisOfRecord", "string", "always FossilSpecimen", {"required": True, "enum": ["FossilSpecimen"]}),
    ("occurrenceStatus", "string", "always detected (a find is a detection)", {"required": True, "enum": ["detected"]}),
    ("catalogNumber", "string", "site code and find number, e.g. VLM-1042", {"required": True}),
    ("recordedBy", "string", "recorder's initials", {}),
    ("eventDate", "date", "the day it was found, in the site's time zone", {"required": True}),
    ("fieldNumber", "string", "excavation label of the find's place: trench, unit and spit, e.g. 'TR1 104 spit 3'", {}),
    ("samplingProtocol", "string", "how it was recovered (plotted in place, sieved with its mesh, surface, core)", {}),
    ("verbatimIdentification", "string", "the identification as recorded", {}),
    ("scientificName", "string", "the recorded name without its qualifier", {}),
    ("identificationQualifier", "string", "cf., aff., indet., sp. ... as recorded, with the word it qualifies", {}),
    ("taxonRank", "string", "rank of scientificName; empty when the name's rank is not known to Baulk", {}),
    ("objectQuantity", "integer", "pieces in the bag", {"minimum": 1}),
    ("objectQuantityType", "string", "always pieces", {"enum": ["pieces"]}),
    ("dynamicProperties", "string", 'JSON: {"element": skeletal element} (Darwin Core has no element term)', {}),
    ("countryCode", "string", "ISO 3166-1 alpha-2 code of the site's country", {"pattern": "^[A-Z]{2}$"}),
    ("locality", "string", "site and trench", {}),
    ("locationRemarks", "string", "excavation labels: trench, unit, horizon and its label (site terms)", {}),
    ("decimalLatitude", "number", "WGS 84 latitude; empty when withheld", {"minimum": -90, "maximum": 90}),
    ("decimalLongitude", "number", "WGS 84 longitude; empty when withheld", {"minimum": -180, "maximum": 180}),
    ("geodeticDatum", "string", "EPSG:4326 when coordinates are given", {}),
    ("coordinateUncertaintyInMeters", "number",
     "plotted: twice the recorded 1-sigma position error; sieved: the radius covering the trench", {"minimum": 0}),
    ("georeferenceProtocol", "string", "how the coordinates were found (survey, or point-radius of the trench)", {}),
    ("georeferenceRemarks", "string", "what the point and radius stand for", {}),
    ("minimumElevationInMeters", "number", "CRS height: find Z (or spit base) minus the site's vertical offset", {}),
    ("maximumElevationInMeters", "number", "CRS height: find Z (or spit top) minus the site's vertical offset", {}),
    ("verticalDatum", "string", "what the elevations refer to", {}),
    ("geologicalContextID", "string", "site and horizon code, e.g. VLM-H4", {}),
    *_CHRONO,
    ("lithostratigraphicTerms", "string", "the horizon's formal names (formation | member | bed), when given", {}),
    ("formation", "string", "the horizon's formation, when given", {}),
    ("member", "string", "the horizon's member, when given", {}),
    ("bed", "string", "the horizon's bed, when given", {}),
    ("informationWithheld", "string", "what was left out and why", {}),
    ("occurrenceRemarks", "string", "open check codes, space-separated", {}),
    ("associatedMedia", "string", "the find's photo files in the export (photos/...), separated by ' | '; photos of "
     "possible human remains left out, as their files are", {}),
]
assert all(t in TERM_IRIS for t, *_ in DWC_TERMS), "every column must be a published Darwin Core term"

# qualifiers of open nomenclature (common practice in zoology; Bengtson 1988, Palaeontology 31: 223-227, from memory)
_QUALIFIERS = ("cf.", "aff.", "indet.", "sp.", "spp.", "gen.", "fam.", "?")
# ICZN Article 29.2 suffixes of family-group names (International Code of Zoological Nomenclature, 4th ed., 1999)
_SUFFIX_RANK = (("oidea", "superfamily"), ("idae", "family"), ("inae", "subfamily"), ("ini", "tribe"))
# higher taxa common in excavated faunas, with their usual rank (common zoological classification, from memory)
_HIGHER = {
    "Animalia": "kingdom", "Chordata": "phylum", "Mollusca": "phylum", "Arthropoda": "phylum",
    "Mammalia": "class", "Aves": "class", "Reptilia": "class", "Amphibia": "class", "Actinopterygii": "class",
    "Chondrichthyes": "class", "Osteichthyes": "class", "Gastropoda": "class", "Bivalvia": "class",
    "Testudines": "order", "Crocodylia": "order", "Squamata": "order", "Primates": "order", "Artiodactyla": "order",
    "Perissodactyla": "order", "Proboscidea": "order", "Carnivora": "order", "Rodentia": "order",
    "Lagomorpha": "order", "Siluriformes": "order", "Cichliformes": "order",
}


def split_identification(recorded: str) -> tuple[str, str | None]:
    """``(scientificName, identificationQualifier)`` from a recorded identification: qualifiers come out of the
    name; a qualifier before a word keeps that word with it ("Homo cf. erectus" -> "Homo erectus", "cf. erectus")."""
    words = [p for w in recorded.split() for p in (["?", w[1:]] if w.startswith("?") and len(w) > 1 else [w])]
    name: list[str] = []
    quals: list[str] = []
    i = 0
    while i < len(words):
        w = words[i]
        if w in _QUALIFIERS:
            nxt = words[i + 1] if i + 1 < len(words) and words[i + 1] not in _QUALIFIERS else None
            quals.append(f"{w} {nxt}" if nxt else w)
            if nxt:
                name.append(nxt)
                i += 1
        else:
            name.append(w)
        i += 1
    return " ".join(name), " ".join(quals) or None


def taxon_rank(name: str, qualifier: str | None = None) -> str | None:
    """The rank of a (qualifier-free) name: species or subspecies from the shape of the name, a genus when "sp."
    follows it, family-group ranks from their ICZN suffixes, higher taxa from a short kept list; None when Baulk
    cannot tell."""
    words = name.split()
    if len(words) == 1 and qualifier in ("sp.", "spp.") and name not in _HIGHER and taxon_rank(name) is None:
        return "genus"
    if len(words) == 2 and words[1].islower():
        return "species"
    if len(words) == 3 and words[1].islower() and words[2].islower():
        return "subspecies"
    if len(words) != 1 or not name[:1].isupper():
        return None
    if name in _HIGHER:
        return _HIGHER[name]
    return next((rank for suffix, rank in _SUFFIX_RANK if name.endswith(suffix)), None)


def identification(recorded: str | None) -> dict[str, str | None]:
    """The identification terms of one recorded taxon (all empty when none was recorded)."""
    if not recorded or not recorded.strip():
        return {"verbatimIdentification": None, "scientificName": None, "identificationQualifier": None,
                "taxonRank": None}
    name, qualifier = split_identification(recorded)
    return {"verbatimIdentification": recorded, "scientificName": name or None, "identificationQualifier": qualifier,
            "taxonRank": taxon_rank(name, qualifier) if name else None}


def meta_xml(core_file: str, columns: list[str]) -> str:
    """The archive descriptor (Darwin Core Text Guide, http://rs.tdwg.org/dwc/terms/guides/text/): one
    occurrence core, UTF-8 CSV with a header line, the id in column 0 (occurrenceID)."""
    fields = "\n".join(f'    <field index="{i}" term="{TERM_IRIS[c]}"/>' for i, c in enumerate(columns))
    return (
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        '<archive xmlns="http://rs.tdwg.org/dwc/text/" metadata="eml.xml">\n'
        '  <core encoding="UTF-8" fieldsTerminatedBy="," linesTerminatedBy="\\r\\n" fieldsEnclosedBy="&quot;"'
        ' ignoreHeaderLines="1" rowType="http://rs.tdwg.org/dwc/terms/Occurrence">\n'
        f"    <files><location>{escape(core_file)}</location></files>\n"
        '    <id index="0"/>\n'
        f"{fields}\n"
        "  </core>\n"
        "</archive>\n"
    )


def eml_xml(*, package_id: str, title: str, site_name: str, site_code: str, creators: list[str],
            abstract: str, pub_date: str | None) -> str:
    """Dataset metadata in EML 2.1.1 (the profile GBIF's tools read): title, creators by initials, abstract and the
    terms of the list version used. No wall-clock time goes in, so the same store gives the same bytes."""
    people = "".join(
        f"    <creator><individualName><surName>{escape(c)}</surName></individualName></creator>\n" for c in creators
    ) or f"    <creator><organizationName>{escape(site_name)}</organizationName></creator>\n"
    return (
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        '<eml:eml xmlns:eml="eml://ecoinformatics.org/eml-2.1.1" xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance"'
        ' xsi:schemaLocation="eml://ecoinformatics.org/eml-2.1.1 http://rs.gbif.org/schema/eml-gbif-profile/1.1/eml.xsd"'
        f" packageId={quoteattr(package_id)} system=\"baulk\" scope=\"system\" xml:lang=\"en\">\n"
        "  <dataset>\n"
        f"    <title>{escape(title)}</title>\n"
        f"{people}"
        f"    <contact><organizationName>{escape(site_name)} ({escape(site_code)})</organizationName></contact>\n"
        + (f"    <pubDate>{pub_date}</pubDate>\n" if pub_date else "")
        + "    <language>en</language>\n"
        f"    <abstract><para>{escape(abstract)}</para></abstract>\n"
        f"    <additionalInfo><para>Darwin Core terms as listed in {DWC_LIST_URL} (version {DWC_LIST_VERSION})."
        "</para></additionalInfo>\n"
        + "  </dataset>\n"
        "</eml:eml>\n"
    )
