"""Validation issues: one catalogue of stable codes (our own), each with its severity and what it checks.

An issue names the record, the measured value and the fix in plain words. Its ``key`` (code, record and a
detail) stays the same from run to run, so a data manager's acceptance sticks until the problem changes.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any, Literal

__all__ = ["CATALOGUE", "Issue", "Severity", "issue"]

Severity = Literal["error", "warning", "info"]

# code -> (severity, what the rule checks). Codes are stable: scripts and accepted issues refer to them.
CATALOGUE: dict[str, tuple[Severity, str]] = {
    "MATRIX_UNKNOWN_UNIT": ("error", "a relation names a unit that does not exist"),
    "MATRIX_SELF": ("error", "a relation orders a unit against itself (directly or through same-as)"),
    "MATRIX_CYCLE": ("error", "relations that go round in a circle (a unit both above and below another)"),
    "MATRIX_ORDERED_AND_CONTEMPORARY": ("error", "a pair recorded contemporary but ordered by other relations"),
    "MATRIX_FILL_NOT_CUT": ("error", "a fill whose target is not a cut"),
    "MATRIX_CUT_NOT_CUT": ("warning", "a 'cuts' relation from a unit that is not a cut"),
    "MATRIX_FILL_BEFORE_CUT": ("error", "a fill the matrix places earlier than its own cut"),
    "MATRIX_REDUNDANT": ("info", "a relation already implied by others (corroborating, not wrong)"),
    "UNIT_UNKNOWN": ("error", "a find in a unit that does not exist"),
    "UNIT_OTHER_TRENCH": ("error", "a find in a unit of another trench"),
    "UNIT_IS_CUT": ("error", "a find in a cut (cuts hold no finds)"),
    "UNIT_NOT_OPEN": ("error", "a find dated when its unit was not open"),
    "POS_OUTSIDE_TRENCH": ("error", "a plotted find outside its trench outline"),
    "POS_FAR_OUTSIDE": ("error", "a plotted find far from every trench"),
    "POS_ABOVE_UNIT": ("error", "a find above the top of its unit at its position"),
    "POS_BELOW_UNIT": ("error", "a find below the base of its unit at its position"),
    "SURFACE_MISSING": ("warning", "a unit with plotted finds but no level points for a surface"),
    "SURFACE_EXTRAPOLATED": ("info", "Z checked against a surface outside its level points' hull"),
    "LEVEL_UNKNOWN_UNIT": ("error", "a level point on a unit that does not exist"),
    "SIEVE_NO_SPIT": ("error", "a sieved find with no spit"),
    "SIEVE_HAS_POINT": ("warning", "a sieved find with an exact point"),
    "SPIT_OTHER_UNIT": ("error", "a find whose spit belongs to another unit"),
    "NUMBER_DUPLICATE": ("error", "two finds with the same number"),
    "HORIZON_ORDER": ("error", "horizon order that contradicts the matrix"),
    "HORIZON_MISSING": ("warning", "a unit with finds but no horizon"),
    "HORIZON_SAME_AS_SPLIT": ("warning", "units recorded as the same unit but put in different horizons"),
    "GNSS_NOT_FIXED": ("warning", "a find plotted from a GNSS fix that is not RTK fixed"),
    "SETUP_RESIDUAL": ("warning", "an instrument setup whose residuals exceed the tolerance"),
    "AGE_CONTRADICTION": ("error", "a date on an upper unit older than a date below it, beyond both 2-sigma ranges"),
    "AGE_UNKNOWN_UNIT": ("error", "a date on a unit that does not exist"),
}


@dataclass(frozen=True)
class Issue:
    code: str
    severity: Severity
    record: str  # kind of record: find, unit, relation, level_point, station_setup, ...
    record_id: str | None
    label: str  # how people name it: "find 1432", "unit 1012"
    message: str  # what is wrong, with the measured value
    fix: str
    value: float | str | None = None
    detail: str = ""

    @property
    def key(self) -> str:
        return f"{self.code}:{self.record_id or self.label}:{self.detail}"

    def __str__(self) -> str:
        return f"{self.message}; {self.fix}"

    def as_dict(self) -> dict[str, Any]:
        return {**asdict(self), "key": self.key}


def issue(code: str, record: str, record_id: object, label: str, message: str, fix: str, *,
          value: float | str | None = None, detail: str = "") -> Issue:
    """An issue with the severity from the catalogue (so one place says how serious each code is)."""
    severity, _what = CATALOGUE[code]
    return Issue(code, severity, record, str(record_id) if record_id is not None else None, label, message, fix,
                 value, detail)
