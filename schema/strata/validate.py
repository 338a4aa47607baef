"""Run every rule over a site's data: the one entry point the tablet (live) and the server (after each merge)
share. Validation reports; it never raises on bad data and never blocks a merge."""

from __future__ import annotations

import uuid
from collections import Counter
from dataclasses import dataclass, field

from .data import SiteData
from .dating import Bracket, age_brackets, age_issues
from .issues import Issue
from .matrix import Matrix, build_matrix
from .rules import find_issues, horizon_issues, level_issues, quality_issues

__all__ = ["Report", "validate"]

_RANK = {"error": 0, "warning": 1, "info": 2}


@dataclass
class Report:
    issues: list[Issue]
    matrix: Matrix
    finds_checked: int
    brackets: dict[uuid.UUID, Bracket] = field(default_factory=dict)  # unit id -> implied age bracket

    @property
    def errors(self) -> list[Issue]:
        return [i for i in self.issues if i.severity == "error"]

    def counts(self) -> dict[str, int]:
        return dict(Counter(i.severity for i in self.issues))

    def by_code(self) -> dict[str, int]:
        return dict(sorted(Counter(i.code for i in self.issues).items()))

    def flagged_finds(self) -> dict[str, list[Issue]]:
        out: dict[str, list[Issue]] = {}
        for i in self.issues:
            if i.record == "find" and i.record_id:
                out.setdefault(i.record_id, []).append(i)
        return out


def validate(data: SiteData) -> Report:
    """Every issue of the site, errors first, then by code and record."""
    matrix = build_matrix(data.units, data.relations)
    issues = [*matrix.issues, *level_issues(data), *find_issues(data, matrix), *horizon_issues(data, matrix),
              *quality_issues(data), *age_issues(matrix, data.ages)]
    issues.sort(key=lambda i: (_RANK[i.severity], i.code, i.label))
    return Report(issues, matrix, len(data.finds), age_brackets(matrix, data.ages, data.horizons))
