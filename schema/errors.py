"""Errors Baulk raises for conditions a user can fix.

Every message is a full sentence that names the record, the field, the bad value and the fix.
The command line turns any ``BaulkError`` into that one message and a non-zero exit code.

    BaulkError
     +-- RecordInvalid          a record failed its model (one or more fields)
     +-- NumberOutsideBlock     a find number is not in any block issued to this device
     +-- NoNumbersLeft          the device has used every number it was issued
     +-- RecordNotFound         an id that names no stored record
     +-- InputFileInvalid       a CSV, JSON or log file given on the command line that cannot be read
     |    +-- TemplateInvalid   an instrument line template that cannot read a shot (key named, with the fix)
     +-- DuplicateRecord        a code or number that must be unique is taken
     +-- StoreError             a store file or database that cannot be used
     |    +-- StoreTooNew       the file was written by a newer Baulk
     |    +-- MigrationFailed   an upgrade step failed (the store is left as it was)
     |    +-- StoreMissing      no store at the path given (and none is to be created there)
     |    +-- NotABaulkStore    a file or database that holds something else than a Baulk store
     |    +-- StoreExists       a store (or other data) where a restore or recovery must make a new one
     |    +-- BackupError       a backup that cannot be written or verified (nothing is kept)
     |         +-- BackupInvalid  a backup file that fails its checks on restore (hash, integrity, counts)
     +-- SyncError              a push or a bundle that cannot be applied as sent
     |    +-- BatchClash        the same (device, batch) with different content: a restored tablet
     |    +-- WrongDevice       versions that claim another device than the one authenticated
     |    |    +-- VersionIdMismatch  a version whose id is not ``<its device>:<its sequence>``
     |    +-- BundleInvalid     a bundle file that is corrupt, truncated or tampered with
     |         +-- BundleForAnotherDevice  a return bundle written for another device
     |         +-- BundleLeavesGap  a return bundle starting after camp changes the tablet does not hold
     +-- NumberTooFar           a find number or number floor far above the issued blocks, not confirmed
     +-- EnrolmentRefused       an enrolment code that is unknown, used already or expired
     +-- CautionUnanswered      a caution (possible human remains) that must be answered before the save
     +-- CurationError          a camp-side curation that cannot be made as asked (nothing is written)
     |    +-- ReasonMissing     a correction or horizon assignment given no reason
     |    +-- UnknownField      a field name the record does not have (the closest names are suggested)
     |    +-- NothingChanged    a correction that gives a field the value it already has
     |    +-- WrongSite         a unit put in a horizon of another site
     |    +-- HorizonOrderInvalid  a new horizon order that misses, repeats or invents a code
     +-- PhotoError             a photo file or upload that cannot be kept as it is (nothing is kept)
     |    +-- NotAnImage        a file Pillow cannot read as an image, or one cut short
     |    +-- ImageTooLarge     an image past the byte or pixel bound (MAX_PHOTO_BYTES, MAX_PHOTO_PIXELS)
     |    +-- UploadMismatch    an upload whose bytes do not hash to the photo's SHA-256
     +-- SurveyError            survey input or a survey result that cannot be used
          +-- ObservationInvalid  a reading outside its range (zenith, distance, ...)
          +-- WeakGeometry        control points duplicated, coincident or on one line
          +-- ResectionRejected   a setup whose residuals exceed the tolerance
          +-- UnknownCRS          an EPSG code PROJ does not know
          +-- UnusableCRS         an EPSG code that cannot be a site's CRS (unknown, geographic, geocentric)
          +-- ProjUnavailable     a CRS operation on a build without PROJ and no fitted fallback
          +-- FixNotAccepted      a GNSS fix not good enough for a piece-plot (and no override given)
          +-- InstrumentLineInvalid  a line from an instrument that cannot be read (checksum, field, range)
          +-- SetupNotReady       a total-station shot with no instrument setup accepted today
          +-- MoveNotConfirmed    an instrument download that would move finds further than allowed, unconfirmed
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = [
    "BackupError",
    "BackupInvalid",
    "BatchClash",
    "BaulkError",
    "BundleForAnotherDevice",
    "BundleInvalid",
    "BundleLeavesGap",
    "CautionUnanswered",
    "CurationError",
    "DuplicateRecord",
    "EnrolmentRefused",
    "FieldProblem",
    "FixNotAccepted",
    "HorizonOrderInvalid",
    "ImageTooLarge",
    "InputFileInvalid",
    "InstrumentLineInvalid",
    "MigrationFailed",
    "MoveNotConfirmed",
    "NoNumbersLeft",
    "NotABaulkStore",
    "NotAnImage",
    "NothingChanged",
    "NumberOutsideBlock",
    "NumberTooFar",
    "ObservationInvalid",
    "PhotoError",
    "ProjUnavailable",
    "ReasonMissing",
    "RecordInvalid",
    "RecordNotFound",
    "ResectionRejected",
    "SetupNotReady",
    "StoreError",
    "StoreExists",
    "StoreMissing",
    "StoreTooNew",
    "SurveyError",
    "SyncError",
    "TemplateInvalid",
    "UnknownCRS",
    "UnknownField",
    "UnusableCRS",
    "UploadMismatch",
    "VersionIdMismatch",
    "WeakGeometry",
    "WrongDevice",
    "WrongSite",
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


class InputFileInvalid(BaulkError):
    """An input file (CSV, JSON, log) that is missing, malformed or lacks a needed column."""


class TemplateInvalid(InputFileInvalid):
    """An instrument line template (TOML) with a missing, unknown or contradictory key."""


class DuplicateRecord(BaulkError):
    """A value that must be unique is already taken."""


class StoreError(BaulkError):
    """A store cannot be opened or used."""


class StoreTooNew(StoreError):
    """The store was written by a newer version of Baulk than this one."""


class MigrationFailed(StoreError):
    """A schema upgrade step failed and was rolled back."""


class StoreMissing(StoreError):
    """No store exists at the path given, and the command only opens existing stores."""


class NotABaulkStore(StoreError):
    """The file or database given is not a Baulk store (another program's, or not a database at all)."""


class StoreExists(StoreError):
    """A restore or recovery writes only a new store, and the place given already holds one (or other data)."""


class BackupError(StoreError):
    """A backup that cannot be written or verified; nothing of it is kept."""


class BackupInvalid(BackupError):
    """A backup file that fails its checks (hash, integrity, row counts) on restore; nothing was restored."""


class SurveyError(BaulkError):
    """Survey input or a survey result that cannot be used."""


class ObservationInvalid(SurveyError):
    """A reading outside its possible range."""


class WeakGeometry(SurveyError):
    """Control points that cannot fix a setup or a grid (duplicated, coincident, on one line)."""


class ResectionRejected(SurveyError):
    """A free-station solution whose residuals exceed the tolerance set by the user."""


class UnknownCRS(SurveyError):
    """An EPSG code that PROJ does not know."""


class UnusableCRS(SurveyError):
    """An EPSG code that cannot be a site's CRS: unknown to PROJ, or geographic or geocentric, not projected."""


class ProjUnavailable(SurveyError):
    """PROJ (pyproj) is missing and no fitted fallback covers the request."""


class FixNotAccepted(SurveyError):
    """A GNSS fix that is not RTK fixed, offered for a piece-plot without an override reason."""


class SyncError(BaulkError):
    """A push or bundle that cannot be applied as sent."""


class BatchClash(SyncError):
    """A (device, batch) key already applied with different content."""


class WrongDevice(SyncError):
    """Versions claiming a device other than the authenticated one."""


class VersionIdMismatch(WrongDevice):
    """A version whose id is not ``<its device>:<its sequence>``: it would take another version's place."""


class BundleInvalid(SyncError):
    """A bundle that fails its format or hash checks; nothing of it was applied."""


class BundleForAnotherDevice(BundleInvalid):
    """A return bundle the camp server wrote for another device; nothing of it was read."""


class BundleLeavesGap(BundleInvalid):
    """A return bundle that starts after camp changes this tablet does not hold; nothing of it was read."""


class NumberTooFar(BaulkError):
    """A find number or number floor far above every block issued so far, not confirmed as meant."""

    def __init__(self, what: str, number: int, highest: str, block_size: int, fix: str,
                 confirm: str = "confirm_far=True"):
        self.parts = (what, number, highest, block_size, fix)
        self.number = number
        super().__init__(
            f"{what}: that is more than 10 blocks of {block_size} numbers above {highest}, and every block issued "
            f"after it would start above {number}. {fix}, or confirm the far number on purpose ({confirm}).")

    def confirm_with(self, confirm: str) -> "NumberTooFar":
        """The same refusal, naming how this caller confirms (a flag, a checkbox, a request field)."""
        return NumberTooFar(*self.parts, confirm=confirm)


class EnrolmentRefused(BaulkError):
    """An enrolment code that is unknown, already used or expired; nothing was enrolled."""


class InstrumentLineInvalid(SurveyError):
    """A line from an instrument (or typed in) that cannot be read: bad checksum, missing field, out of range."""


class MoveNotConfirmed(SurveyError):
    """Points of an instrument download that would move finds further than allowed; nothing was written."""


class SetupNotReady(SurveyError):
    """A total-station shot was given but no instrument setup has been accepted today."""


class CautionUnanswered(BaulkError):
    """A caution that stops the flow (possible human remains) has not been answered."""


class CurationError(BaulkError):
    """A camp-side curation (horizons, dates, corrections) that cannot be made as asked; nothing was written."""


class ReasonMissing(CurationError):
    """A correction or a horizon assignment was given no reason."""


class UnknownField(CurationError):
    """A field name the record does not have; the message suggests the closest names."""


class NothingChanged(CurationError):
    """A correction that gives a field the value it already has."""


class WrongSite(CurationError):
    """A unit put in a horizon of another site."""


class HorizonOrderInvalid(CurationError):
    """A new top-to-bottom horizon order that misses, repeats or invents a horizon code."""


class PhotoError(BaulkError):
    """A photo file or upload that cannot be kept as it is (nothing is kept)."""


class NotAnImage(PhotoError):
    """A file Pillow cannot read as an image, or one cut short."""


class ImageTooLarge(PhotoError):
    """An image past the byte or pixel bound."""


class UploadMismatch(PhotoError):
    """An upload whose bytes do not hash to the photo's SHA-256."""
