"""Age brackets implied by superposition, and dates that contradict the matrix.

A unit is younger than every dated unit beneath it and older than every dated unit above it (law of
superposition; common practice, no source). Each date enters as its two-sigma range (age +- 2 sigma), so a
bracket is the widest reading of the evidence: a unit's oldest possible age is the smallest (age + 2 sigma) of
the dated units below it, its youngest the largest (age - 2 sigma) of those above. Two dates contradict the
matrix when the upper unit's date is older than the lower one's beyond both two-sigma ranges.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass

from ..records import AgeDetermination, Horizon
from .issues import Issue, issue
from .matrix import Matrix

__all__ = ["Bracket", "age_brackets", "age_issues"]

K = 2.0  # sigmas: a two-sigma range, about 95 % for a normal error


@dataclass(frozen=True)
class Bracket:
    """Ages in ka: ``youngest`` <= age <= ``oldest``; None where nothing bounds that side."""

    youngest: float | None
    oldest: float | None
    dated: bool  # the unit carries a date of its own

    def as_dict(self) -> dict[str, float | bool | None]:
        return {"youngest_ka": self.youngest, "oldest_ka": self.oldest, "dated": self.dated}


def _own(ages: list[AgeDetermination]) -> tuple[float, float]:
    """The two-sigma range of a unit's own dates (their intersection when several agree, else their union)."""
    lo = max(a.age_ka - K * a.sigma_ka for a in ages)
    hi = min(a.age_ka + K * a.sigma_ka for a in ages)
    if lo <= hi:
        return lo, hi
    return min(a.age_ka - K * a.sigma_ka for a in ages), max(a.age_ka + K * a.sigma_ka for a in ages)


def age_brackets(matrix: Matrix, ages: list[AgeDetermination]) -> dict[uuid.UUID, Bracket]:
    """For every unit, the bracket implied by the dated units above and below it (empty while cyclic)."""
    if matrix.below is None:
        return {}
    by_group: dict[uuid.UUID, list[AgeDetermination]] = {}
    for a in ages:
        if a.unit_id in matrix.group_of:
            by_group.setdefault(matrix.group_of[a.unit_id], []).append(a)
    own = {g: _own(v) for g, v in by_group.items()}
    above: dict[uuid.UUID, set[uuid.UUID]] = {g: set() for g in matrix.members}
    for g, lower in matrix.below.items():
        for b in lower:
            above[b].add(g)
    out: dict[uuid.UUID, Bracket] = {}
    for g, members in matrix.members.items():
        older_limits = [own[d][1] for d in matrix.below[g] if d in own]
        younger_limits = [own[d][0] for d in above[g] if d in own]
        young = max(younger_limits, default=None)
        old = min(older_limits, default=None)
        if g in own:
            young = own[g][0] if young is None else max(young, own[g][0])
            old = own[g][1] if old is None else min(old, own[g][1])
        for u in members:
            out[u] = Bracket(young, old, g in own)
    return out


def horizon_brackets(brackets: dict[uuid.UUID, Bracket], matrix: Matrix,
                     horizons: list[Horizon]) -> dict[uuid.UUID, Bracket]:
    """A horizon spans its units: from the youngest of their young limits to the oldest of their old limits."""
    out = {}
    for h in horizons:
        units = [b for u, b in brackets.items() if matrix.units[u].horizon_id == h.id]
        youngs = [b.youngest for b in units if b.youngest is not None]
        olds = [b.oldest for b in units if b.oldest is not None]
        out[h.id] = Bracket(min(youngs) if youngs and len(youngs) == len(units) else None,
                            max(olds) if olds and len(olds) == len(units) else None, any(b.dated for b in units))
    return out


def age_issues(matrix: Matrix, ages: list[AgeDetermination]) -> list[Issue]:
    """Dates that contradict the matrix beyond both two-sigma ranges, and dates on unknown units."""
    out: list[Issue] = []
    known = [a for a in ages if a.unit_id in matrix.group_of]
    for a in ages:
        if a.unit_id not in matrix.group_of:
            out.append(issue("AGE_UNKNOWN_UNIT", "age_determination", a.id, f"date {a.lab_code or str(a.id)[:8]}",
                             f"date {a.lab_code or a.id} ({a.age_ka:g} +- {a.sigma_ka:g} ka) names a unit that is not recorded",
                             "correct the date's unit"))
    if matrix.below is None:
        return out
    for upper in known:
        for lower in known:
            gu, gl = matrix.group_of[upper.unit_id], matrix.group_of[lower.unit_id]
            if gl in matrix.below[gu] and upper.age_ka - K * upper.sigma_ka > lower.age_ka + K * lower.sigma_ka:
                uu, ul = matrix.units[upper.unit_id], matrix.units[lower.unit_id]
                out.append(issue(
                    "AGE_CONTRADICTION", "age_determination", upper.id,
                    f"date {upper.lab_code or str(upper.id)[:8]} on unit {uu.code}",
                    f"unit {uu.code} is dated {upper.age_ka:g} +- {upper.sigma_ka:g} ka but lies above unit {ul.code}, "
                    f"dated {lower.age_ka:g} +- {lower.sigma_ka:g} ka: the upper date is older beyond both 2-sigma ranges",
                    "check for reworked material in the upper sample, a mislabelled sample, or the relations",
                    value=round(upper.age_ka - lower.age_ka, 4), detail=str(lower.id),
                ))
    return out
