"""Controlled vocabularies for Baulk records.

The codes are Baulk's own (snake_case); where the trade or an open standard has a term (USDA texture classes,
NMEA fix quality) we use it. Each vocabulary is a ``Literal`` type so that pydantic, the SQL CHECK constraints,
the JSON Schema files and the tablet forms all read the same list.
"""

from __future__ import annotations

from typing import Literal, get_args

__all__ = [
    "Category",
    "FindRecovery",
    "MATERIALS",
    "PositionSource",
    "RelationKind",
    "SamplePurpose",
    "Texture",
    "UnitKind",
    "materials_for",
    "values",
    "words",
]

Category = Literal["artifact", "fossil", "sample"]

# Materials allowed per category. Lithic raw materials are those common in volcanic rift basins
# (common practice, no source).
MATERIALS: dict[str, tuple[str, ...]] = {
    "artifact": (
        "basalt", "phonolite", "trachyte", "rhyolite", "obsidian", "chert", "quartz", "quartzite",
        "other_stone", "bone", "ochre", "other",
    ),
    "fossil": ("bone", "tooth", "horn_core", "antler", "shell", "eggshell", "coprolite", "wood", "other"),
    "sample": ("sediment", "tephra", "charcoal", "bone", "shell", "tooth_enamel", "soil_block", "other"),
}

FindRecovery = Literal["plotted", "sieved", "surface", "core"]
PositionSource = Literal["total_station", "gnss", "tape", "none"]
UnitKind = Literal["deposit", "fill", "cut", "structure"]
UnitStatus = Literal["open", "closed"]
RelationKind = Literal["above", "cuts", "fills", "same_as", "contemporary"]
Surface = Literal["top", "bottom"]
SamplePurpose = Literal[
    "radiocarbon", "tephra", "micromorphology", "pollen", "phytolith", "bulk_flotation", "luminescence"
]
MunsellCondition = Literal["moist", "dry"]
# The twelve USDA soil texture classes (USDA Soil Survey Manual, Handbook 18, 2017, ch. 3, from memory),
# plus gravel and volcanic ash, which lake-margin deposits need (common practice, no source).
Texture = Literal[
    "sand", "loamy_sand", "sandy_loam", "loam", "silt_loam", "silt", "sandy_clay_loam", "clay_loam",
    "silty_clay_loam", "sandy_clay", "silty_clay", "clay", "gravel", "volcanic_ash",
]
Role = Literal["recorder", "manager", "analyst"]
AngleUnit = Literal["deg", "gon"]
SetupMethod = Literal["occupied", "resection"]


def values(vocabulary: object) -> tuple[str, ...]:
    """The allowed codes of a ``Literal`` vocabulary, in order."""
    return tuple(get_args(vocabulary))


def materials_for(category: str) -> tuple[str, ...]:
    """The materials allowed for a category (empty for an unknown category)."""
    return MATERIALS.get(category, ())


def words(value: str) -> str:
    """A vocabulary code as the words a person reads and picks (``tooth_enamel`` -> ``tooth enamel``); the code
    is what is stored. Every screen and page shows codes through this one function."""
    return str(value).replace("_", " ")
