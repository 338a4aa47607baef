"""Errors Baulk raises for conditions a user can fix.

Every message is a full sentence that names the record, the field, the bad value and the fix.
The command line turns any ``BaulkError`` into that one message and a non-zero exit code.

    BaulkError
     +-- RecordInvalid          a record failed its model (one or more fields)
     +-- NumberOutsideBlock     a find number is not in any block issued to this device
     +-- NoNumbersLeft          the device has used every number it was issued
     +-- RecordNotFound         an id that names no stored record
     +-- DuplicateRecord        a code or number that must be unique is taken
     +-- StoreError             a store file or database that cannot be used
          +-- StoreTooNew       the file was written by a newer Baulk
          +-- MigrationFailed   an upgrade step failed (the store is left as it was)
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = [
    "BaulkError",
    "DuplicateRecord",
    "FieldProblem",
    "MigrationFailed",
    "NoNumbersLeft",
    "NumberOutsideBlock",
    "RecordInvalid",
    "RecordNotFound",
    "StoreError",
    "StoreTooNew",
]


class BaulkError(Exception):
    """Base of every error a user can act on."""


@dataclass(frozen=True)
class FieldProblem:
    """One bad field: where it is, what is wrong, and how to fix it."""

    field: str
    message: str
    fix: str

    def __str__(self) -> str:
        return f"{self.field}: {self.message}. Fix: {self.fix}"


class RecordInvalid(BaulkError):
    """A record failed validation; nothing was written."""

    def __init__(self, record: str, problems: list[FieldProblem]):
        self.record = record
        self.problems = problems
        lines = "; ".join(str(p) for p in problems)
        super().__init__(f"{record} refused, nothing was saved. {lines}")

    @property
    def fields(self) -> list[str]:
        return [p.field for p in self.problems]


class NumberOutsideBlock(BaulkError):
    """A find number lies outside every number block issued to the device."""


class NoNumbersLeft(BaulkError):
    """The device has used all find numbers it was issued."""


class RecordNotFound(BaulkError):
    """No stored record has this id."""


class DuplicateRecord(BaulkError):
    """A value that must be unique is already taken."""


class StoreError(BaulkError):
    """A store cannot be opened or used."""


class StoreTooNew(StoreError):
    """The store was written by a newer version of Baulk than this one."""


class MigrationFailed(StoreError):
    """A schema upgrade step failed and was rolled back."""
