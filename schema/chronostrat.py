"""Geochronologic names for an age bracket, from a cited copy of the International Chronostratigraphic Chart.

The table is the Cenozoic (with its eon) of the ICS chart, version 2024-12 (``owl:versionInfo "2024-12"``, modified
2024-11-24): ``chart.ttl`` in https://github.com/i-c-stratigraphy/chart at commit
d4d0e3d02f033cc1eae201f369ce5ded3eacc437 (2026-04-13), the chart's machine-readable source. Citation: Cohen, K.M.,
Harper, D., Gibbard, P. & Car, N. (2025) The ICS International Chronostratigraphic Chart this decade. Episodes 48:
105-115, https://doi.org/10.18814/epiiugs/2025/025001. Names are the English ``skos:prefLabel``; the "Upper" stage
of the Pleistocene has none in the chart (not yet ratified) and is named after its concept,
``ischart:UpperPleistocene``. Boundaries are ``time:hasBeginning`` / ``time:hasEnd`` in Ma, copied by a script, not
typed. The chart itself has the Miocene and Neogene base at 23.04 Ma but the Aquitanian base at 23.03 Ma; an age in
that gap takes the nearer stage. Holocene boundaries are counted from AD 2000 (b2k) in the chart; the 50 years
between that and "before present" are ignored here.

Ages older than the Cenozoic (66 Ma) get no names: :class:`AgeOutsideChart` says so.
"""

from __future__ import annotations

from typing import NamedTuple

__all__ = ["CHART_SOURCE", "CHART_VERSION", "AgeOutsideChart", "CHART", "Unit", "dwc_geological_terms", "unit_at"]

CHART_VERSION = "2024-12"
CHART_SOURCE = ("International Chronostratigraphic Chart v2024-12 (International Commission on Stratigraphy), "
                "https://github.com/i-c-stratigraphy/chart chart.ttl")


class Unit(NamedTuple):
    name: str
    rank: str  # Eon, Era, Period, Epoch, Age
    broader: str | None
    base_ma: float  # older boundary
    top_ma: float  # younger boundary


class AgeOutsideChart(ValueError):
    """An age outside the part of the chart Baulk keeps (the Cenozoic)."""


CHART: tuple[Unit, ...] = tuple(Unit(*r) for r in (
    ("Phanerozoic", "Eon", None, 538.8, 0),
    ("Cenozoic", "Era", "Phanerozoic", 66.00, 0),
    ("Quaternary", "Period", "Cenozoic", 2.58, 0),
    ("Neogene", "Period", "Cenozoic", 23.04, 2.58),
    ("Paleogene", "Period", "Cenozoic", 66.00, 23.04),
    ("Holocene", "Epoch", "Quaternary", 0.0117, 0),
    ("Pleistocene", "Epoch", "Quaternary", 2.58, 0.0117),
    ("Pliocene", "Epoch", "Neogene", 5.333, 2.58),
    ("Miocene", "Epoch", "Neogene", 23.04, 5.333),
    ("Oligocene", "Epoch", "Paleogene", 33.9, 23.04),
    ("Eocene", "Epoch", "Paleogene", 56.00, 33.9),
    ("Paleocene", "Epoch", "Paleogene", 66.00, 56.00),
    ("Meghalayan", "Age", "Holocene", 0.0042, 0),
    ("Northgrippian", "Age", "Holocene", 0.0082, 0.0042),
    ("Greenlandian", "Age", "Holocene", 0.0117, 0.0082),
    ("Upper Pleistocene", "Age", "Pleistocene", 0.129, 0.0117),
    ("Chibanian", "Age", "Pleistocene", 0.774, 0.129),
    ("Calabrian", "Age", "Pleistocene", 1.80, 0.774),
    ("Gelasian", "Age", "Pleistocene", 2.58, 1.80),
    ("Piacenzian", "Age", "Pliocene", 3.600, 2.58),
    ("Zanclean", "Age", "Pliocene", 5.333, 3.600),
    ("Messinian", "Age", "Miocene", 7.246, 5.333),
    ("Tortonian", "Age", "Miocene", 11.63, 7.246),
    ("Serravallian", "Age", "Miocene", 13.82, 11.63),
    ("Langhian", "Age", "Miocene", 15.98, 13.82),
    ("Burdigalian", "Age", "Miocene", 20.45, 15.98),
    ("Aquitanian", "Age", "Miocene", 23.03, 20.45),
    ("Chattian", "Age", "Oligocene", 27.30, 23.04),
    ("Rupelian", "Age", "Oligocene", 33.9, 27.30),
    ("Priabonian", "Age", "Eocene", 37.71, 33.9),
    ("Bartonian", "Age", "Eocene", 41.03, 37.71),
    ("Lutetian", "Age", "Eocene", 48.07, 41.03),
    ("Ypresian", "Age", "Eocene", 56.00, 48.07),
    ("Thanetian", "Age", "Paleocene", 59.24, 56.00),
    ("Selandian", "Age", "Paleocene", 61.66, 59.24),
    ("Danian", "Age", "Paleocene", 66.00, 61.66),
))

_BY_NAME = {u.name: u for u in CHART}
_AGES = [u for u in CHART if u.rank == "Age"]


def unit_at(age_ka: float) -> dict[str, str]:
    """The stage (Age) an age falls in, and its Epoch, Period, Era and Eon, by rank. An age on a boundary
    belongs to the younger unit (a stage's base, its GSSP, is where it begins: a unit runs from its base,
    inclusive, to its top, exclusive; 0 belongs to the youngest stage)."""
    ma = age_ka / 1000.0
    if not 0 <= ma <= _BY_NAME["Cenozoic"].base_ma:
        raise AgeOutsideChart(f"age {age_ka:g} ka lies outside the Cenozoic part of the chart kept by Baulk "
                              f"(0 to {_BY_NAME['Cenozoic'].base_ma * 1000:g} ka)")
    inside = [u for u in _AGES if u.top_ma < ma <= u.base_ma] or [u for u in _AGES if u.top_ma == ma == 0]
    stage = inside[0] if inside else min(_AGES, key=lambda u: min(abs(ma - u.base_ma), abs(ma - u.top_ma)))
    out, u = {}, stage
    while u is not None:
        out[u.rank] = u.name
        u = _BY_NAME.get(u.broader) if u.broader else None
    return out


_DWC = {"Eon": "EonOrLowestEonothem", "Era": "EraOrLowestErathem", "Period": "PeriodOrLowestSystem",
        "Epoch": "EpochOrLowestSeries", "Age": "AgeOrLowestStage"}


def dwc_geological_terms(young_ka: float | None, old_ka: float | None) -> dict[str, str]:
    """Darwin Core's ``earliest...`` terms from the older end of a bracket and ``latest...`` from the younger end
    (an open end gives no terms on its side). Ages outside the kept chart give none either."""
    out: dict[str, str] = {}
    for side, ka in (("earliest", old_ka), ("latest", young_ka)):
        if ka is None:
            continue
        try:
            names = unit_at(ka)
        except AgeOutsideChart:
            continue
        for rank, suffix in _DWC.items():
            if side == "latest":
                suffix = suffix.replace("OrLowest", "OrHighest")
            out[side + suffix] = names[rank]
    return out
