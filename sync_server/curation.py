"""The data manager's curation at camp: horizons (their order, lithostratigraphic names and which units belong),
laboratory dates, corrections of recorded finds and units with their reasons, and relations voided or restored.

Every change goes through the store's versioned save (``save_versioned``), so it becomes field versions of the
server's own device: it joins the change log and every tablet pulls it like any other set-up record. Each
function is one verb with keyword-only arguments and writes in one transaction, or raises a ``BaulkError``
naming the record, the field, the bad value and the fix, with nothing written. Callers re-run validation
afterwards (the command line with ``run_validation``, the camp pages with ``app.state.revalidate``).

Everything is per site: ``site`` is a site code, by default the store's only site (the first by code when it
holds more than one).
"""

from __future__ import annotations

import datetime as dt
import difflib
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, get_args

import sqlalchemy as sa
from pydantic import AwareDatetime, TypeAdapter, ValidationError
from sqlalchemy.engine import Connection

from schema import db, vocab
from schema.errors import (
    DuplicateRecord, FieldProblem, HorizonOrderInvalid, InputFileInvalid, NothingChanged, ReasonMissing,
    RecordInvalid, RecordNotFound, UnknownField, WrongSite,
)
from schema.forms import coerce, form_fields
from schema.records import (
    AgeDetermination, Correction, Device, Find, Horizon, HorizonAssignment, Photo, Record, Relation, Season, Site, Spit,
    Trench, Unit, spec_for,
)
from schema.records.dating import DatingMethod
from schema.tables import metadata
from schema.tabular import read_csv
from schema.validation import check

from .store import ServerStore

__all__ = [
    "DATE_COLUMNS", "METHODS", "Assignment", "Corrected", "DateImport",
    "add_date", "add_horizon", "assign_units", "assignment_history", "correct_record", "correctable_fields",
    "corrections", "import_dates_csv", "list_dates", "list_horizons", "reorder_horizons", "units_without_horizon",
    "RelationChange", "restore_relation", "unit_relations", "void_relation",
    "PhotoChange", "restore_photo", "void_photo",
]

METHODS: tuple[str, ...] = vocab.values(DatingMethod)
"""The dating methods a laboratory date may name."""

DATE_COLUMNS = ("unit", "method", "age_ka", "sigma_ka", "lab_code", "sample_find_number", "note")
"""The columns of a dates CSV, in order (the last two may be left out)."""


def _now() -> dt.datetime:
    return dt.datetime.now(dt.timezone.utc)


def _plural(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


def _site(conn: Connection, code: str | None) -> Site:
    sites = sorted(db.select(conn, Site), key=lambda s: s.code)
    if not sites:
        raise RecordNotFound("this store holds no site yet; set one up with baulk site init SETUP.toml first")
    if code is None:
        return sites[0]
    found = [s for s in sites if s.code == code]
    if not found:
        raise RecordNotFound(f"no site has code {code!r}; the sites here are {', '.join(s.code for s in sites)}")
    return found[0]


def _close(word: str, names: Any) -> str:
    """`` (did you mean X or Y?)`` when some names are close to ``word``, else empty."""
    near = difflib.get_close_matches(word, list(names), n=3, cutoff=0.6)
    return f" (did you mean {' or '.join(near)}?)" if near else ""


# -- horizons -------------------------------------------------------------------------------------------------
def _horizons(conn: Connection, site: Site) -> list[Horizon]:
    return sorted(db.select(conn, Horizon, site_id=site.id), key=lambda h: (h.order, h.code))


def _horizon(conn: Connection, site: Site, code: str) -> Horizon:
    horizons = _horizons(conn, site)
    for h in horizons:
        if h.code == code:
            return h
    known = ", ".join(h.code for h in horizons) or "none yet"
    raise RecordNotFound(f"site {site.code} has no horizon {code!r}{_close(code, [h.code for h in horizons])}; "
                         f"its horizons are: {known}")


def _blank_none(text: str | None) -> str | None:
    return text.strip() or None if isinstance(text, str) else text


def add_horizon(store: ServerStore, *, code: str, label: str, order: int | None = None, formation: str | None = None,
                member: str | None = None, bed: str | None = None, site: str | None = None) -> Horizon:
    """A new horizon at ``order`` (the ones from there down move one lower), or at the bottom when not given."""
    with store.atomic() as conn:
        s = _site(conn, site)
        horizons = _horizons(conn, s)
        bottom = max((h.order for h in horizons), default=0) + 1
        new = check(Horizon, {"site_id": s.id, "code": code, "label": label, "order": bottom if order is None else order,
                              "formation": _blank_none(formation), "member": _blank_none(member),
                              "bed": _blank_none(bed)}, record=f"horizon {code}")
        taken = [h for h in horizons if h.code == new.code]
        if taken:
            raise DuplicateRecord(f"site {s.code} already has a horizon {new.code} ({taken[0].label!r}, order "
                                  f"{taken[0].order}); choose another code")
        if new.order > bottom:
            raise HorizonOrderInvalid(f"order {new.order} for horizon {new.code} would leave a gap: site {s.code} has "
                                      f"{_plural(len(horizons), 'horizon')}; give an order from 1 to {bottom}, or "
                                      "none to add it at the bottom")
        for h in horizons:
            if h.order >= new.order:
                store.save_versioned(conn, h.model_copy(update={"order": h.order + 1}), new=False)
        store.save_versioned(conn, new, new=True)
    return new


def list_horizons(store: ServerStore, *, site: str | None = None) -> list[dict[str, Any]]:
    """The site's horizons top to bottom, each with its lithostratigraphic names and its units."""
    with store.read() as conn:
        s = _site(conn, site)
        units = sorted(db.select(conn, Unit, site_id=s.id), key=lambda u: u.code)
        return [{"order": h.order, "code": h.code, "label": h.label, "formation": h.formation, "member": h.member,
                 "bed": h.bed, "age_min_ka": h.age_min_ka, "age_max_ka": h.age_max_ka,
                 "units": [{"code": u.code, "id": u.id} for u in units if u.horizon_id == h.id],
                 "unit_count": sum(1 for u in units if u.horizon_id == h.id)} for h in _horizons(conn, s)]


def units_without_horizon(store: ServerStore, *, site: str | None = None) -> list[dict[str, Any]]:
    """The site's units in no horizon (cuts usually stay out), by code."""
    with store.read() as conn:
        s = _site(conn, site)
        return [{"code": u.code, "id": u.id, "kind": u.kind}
                for u in sorted(db.select(conn, Unit, site_id=s.id), key=lambda u: u.code) if u.horizon_id is None]


def reorder_horizons(store: ServerStore, codes: list[str], *, site: str | None = None) -> list[tuple[str, int, int]]:
    """Give the site's horizons a new top-to-bottom order (every code once); returns (code, old, new) of each
    horizon whose order changed, all rewritten in one transaction."""
    given = [c.strip() for c in codes]
    with store.atomic() as conn:
        s = _site(conn, site)
        horizons = {h.code: h for h in _horizons(conn, s)}
        _check_order(s, list(horizons), given)
        moved = []
        for order, code in enumerate(given, start=1):
            h = horizons[code]
            if h.order != order:
                store.save_versioned(conn, h.model_copy(update={"order": order}), new=False)
                moved.append((code, h.order, order))
    return moved


def _check_order(site: Site, held: list[str], given: list[str]) -> None:
    missing = [c for c in held if c not in given]
    repeated = sorted({c for c in given if given.count(c) > 1})
    unknown = [c for c in dict.fromkeys(given) if c not in held]
    if not (missing or repeated or unknown):
        return
    parts = [f"{what} {', '.join(found)}" for what, found in
             (("missing", missing), ("repeated", repeated), ("unknown", unknown)) if found]
    raise HorizonOrderInvalid(f"the new order of site {site.code}'s horizons must name each of them once, top "
                              f"first: {'; '.join(parts)}. Its horizons are {', '.join(held) or 'none yet'}")


@dataclass(frozen=True)
class Assignment:
    """What ``assign_units`` wrote: one history entry per unit moved, and the units already there."""

    horizon: str | None
    entries: list[HorizonAssignment]
    moved: list[str]
    already: list[str]


def assign_units(store: ServerStore, *, horizon: str | None, units: list[str], reason: str, by: str,
                 at: dt.datetime | None = None, site: str | None = None) -> Assignment:
    """Put units in a horizon (``None``: take them out), all in one transaction, each with its history entry."""
    reason = (reason or "").strip()
    if not reason:
        raise ReasonMissing("a horizon assignment needs a reason: say why these units belong there (or out), "
                            "e.g. 'same grey tuff as 102 in the east section'")
    codes = list(dict.fromkeys(c.strip() for c in units if c.strip()))
    if not codes:
        raise RecordInvalid("horizon assignment", [FieldProblem("units", "no unit code was given",
                                                                "name one or more units, e.g. 101 102")])
    with store.atomic() as conn:
        s = _site(conn, site)
        target = _horizon(conn, s, horizon) if horizon is not None else None
        held = {u.code: u for u in db.select(conn, Unit, site_id=s.id)}
        missing = [c for c in codes if c not in held]
        if missing:
            _refuse_units(conn, s, target, missing, list(held))
        hid = target.id if target else None
        chosen = [held[c] for c in codes]
        already = [u.code for u in chosen if u.horizon_id == hid]
        todo = [u for u in chosen if u.horizon_id != hid]
        where = f"horizon {target.code}" if target else "no horizon"
        if not todo:
            raise NothingChanged(f"unit{'s' if len(already) > 1 else ''} {', '.join(already)} already in {where}; "
                                 "nothing to assign")
        entries = [store.assign_horizon(unit_id=u.id, horizon_id=hid, by=by, at=at or _now(), note=reason)
                   for u in todo]
    return Assignment(target.code if target else None, entries, [u.code for u in todo], already)


def _refuse_units(conn: Connection, site: Site, target: Horizon | None, missing: list[str], held: list[str]) -> None:
    u, s = metadata.tables["unit"], metadata.tables["site"]
    elsewhere = conn.execute(sa.select(u.c.code, s.c.code).join(s, u.c.site_id == s.c.id)
                             .where(u.c.code.in_(missing), u.c.site_id != site.id).order_by(u.c.code)).all()
    if elsewhere:
        whose = f"the site of horizon {target.code}" if target else "the site being curated"
        listed = ", ".join(f"{code} (site {other})" for code, other in elsewhere)
        raise WrongSite(f"unit{'s' if len(elsewhere) > 1 else ''} {listed} not of site {site.code}, {whose}; "
                        "a unit can only be put in a horizon of its own site")
    hints = "".join(_close(c, held) for c in missing[:1]) if len(missing) == 1 else ""
    raise RecordNotFound(f"site {site.code} has no unit{'s' if len(missing) > 1 else ''} {', '.join(missing)}{hints}; "
                         "nothing was assigned. Check the codes against the site's units")


def assignment_history(store: ServerStore, *, site: str | None = None, unit: str | None = None,
                       limit: int | None = 200) -> list[dict[str, Any]]:
    """Horizon assignments of the site's units (or one unit's), newest first: who, when, into which, why."""
    with store.read() as conn:
        s = _site(conn, site)
        units = {x.id: x.code for x in db.select(conn, Unit, site_id=s.id) if unit is None or x.code == unit}
        horizons = {h.id: h.code for h in db.select(conn, Horizon, site_id=s.id)}
        t = metadata.tables["horizon_assignment"]
        q = sa.select(t).where(t.c.unit_id.in_(list(units))).order_by(t.c.assigned_at.desc()).limit(limit)
        rows = [db.from_row(spec_for(HorizonAssignment), r) for r in conn.execute(q)]
    return [{"at": r.assigned_at, "unit": units[r.unit_id], "unit_id": r.unit_id,  # type: ignore[attr-defined]
             "horizon": horizons.get(r.horizon_id) if r.horizon_id else None,  # type: ignore[attr-defined]
             "by": r.assigned_by, "reason": r.note} for r in rows]  # type: ignore[attr-defined]


# -- laboratory dates -----------------------------------------------------------------------------------------
@dataclass
class _Dates:
    """What checking date rows needs of one site, read once."""

    site: Site
    units: dict[str, Unit]
    finds: dict[int, list[Find]]
    held: dict[tuple[uuid.UUID, str, str | None], AgeDetermination]
    seen: dict[tuple[uuid.UUID, str, str | None], tuple[int, AgeDetermination]] = field(default_factory=dict)


def _dates_context(conn: Connection, site: str | None, numbers: set[int]) -> _Dates:
    s = _site(conn, site)
    finds: dict[int, list[Find]] = {}
    wanted, t = sorted(numbers), metadata.tables["find"]
    for k in range(0, len(wanted), 500):
        for row in conn.execute(sa.select(t).where(t.c.site_id == s.id, t.c.number.in_(wanted[k:k + 500]))):
            f = db.from_row(spec_for(Find), row)
            finds.setdefault(f.number, []).append(f)  # type: ignore[attr-defined]
    held = {(a.unit_id, a.method, a.lab_code): a for a in db.select(conn, AgeDetermination, site_id=s.id)}
    return _Dates(s, {u.code: u for u in db.select(conn, Unit, site_id=s.id)}, finds, held)


def _find_number(text: Any) -> int | None | FieldProblem:
    if text is None or (isinstance(text, str) and not text.strip()):
        return None
    if isinstance(text, int) and not isinstance(text, bool):
        return text
    if isinstance(text, str) and text.strip().isdigit():
        return int(text.strip())
    return FieldProblem("sample_find_number", f"{text!r} is not a find number",
                        "give the whole number on the sample's bag label, or leave it empty")


def _sample(ctx: _Dates, given: Any) -> uuid.UUID | None | FieldProblem:
    number = _find_number(given)
    if number is None or isinstance(number, FieldProblem):
        return number
    found = ctx.finds.get(number, [])
    col = "sample_find_number"
    if not found:
        return FieldProblem(col, f"site {ctx.site.code} has no find numbered {number}",
                            "give the number of the dated sample's find (on its bag label), or leave it empty")
    if len(found) > 1:
        return FieldProblem(col, f"find number {number} is held by {len(found)} finds (a duplicate number)",
                            "settle the duplicate on the Conflicts page first")
    if found[0].voided:
        return FieldProblem(col, f"find {number} is voided ({found[0].void_reason})",
                            "give the sample's live find number, or leave it empty")
    return found[0].id


_DATE_COLUMN = {"unit_id": "unit", "find_id": "sample_find_number"}


def _date(ctx: _Dates, row: dict[str, Any]) -> tuple[AgeDetermination | None, list[FieldProblem]]:
    """One date from typed values (a CSV row, a form, the command line), or what is wrong with it."""
    problems: list[FieldProblem] = []
    code = str(row.get("unit") or "").strip()
    unit = ctx.units.get(code)
    if not code:
        problems.append(FieldProblem("unit", "is empty", "give the code of the dated unit, e.g. 102"))
    elif unit is None:
        problems.append(FieldProblem("unit", f"site {ctx.site.code} has no unit {code!r}{_close(code, ctx.units)}",
                                     "give the code of a unit of this site"))
    method = str(row.get("method") or "").strip()
    if method not in METHODS:
        problems.append(FieldProblem("method", f"{method!r} is not a dating method{_close(method, METHODS)}",
                                     f"use one of: {', '.join(METHODS)}"))
    sigma = row.get("sigma_ka")
    if isinstance(sigma, (int, float)) and sigma <= 0:
        problems.append(FieldProblem("sigma_ka", f"{sigma:g} is not above 0",
                                     "give the laboratory's one-sigma uncertainty in ka; it is never 0 or negative"))
    sample = _sample(ctx, row.get("sample_find_number"))
    if isinstance(sample, FieldProblem):
        problems.append(sample)
    if problems or unit is None:
        return None, problems
    data = {"site_id": ctx.site.id, "unit_id": unit.id, "find_id": sample, "method": method,
            "age_ka": _float(row.get("age_ka")), "sigma_ka": _float(sigma),
            "lab_code": _blank_none(row.get("lab_code")), "note": (row.get("note") or "").strip()}
    try:
        return check(AgeDetermination, data), []
    except RecordInvalid as exc:
        return None, [FieldProblem(_DATE_COLUMN.get(p.field, p.field), p.message, p.fix) for p in exc.problems]


def _float(value: Any) -> Any:
    return float(value) if isinstance(value, int) and not isinstance(value, bool) else value


def _key(a: AgeDetermination) -> tuple[uuid.UUID, str, str | None]:
    return (a.unit_id, a.method, a.lab_code)


def _same(held: AgeDetermination, new: AgeDetermination) -> bool:
    """The same determination: age and sigma equal, and the same sample when the new one names one (a note is
    not part of the value)."""
    return (held.age_ka, held.sigma_ka) == (new.age_ka, new.sigma_ka) and new.find_id in (None, held.find_id)


def _date_text(ctx: _Dates, a: AgeDetermination) -> str:
    unit = next((code for code, u in ctx.units.items() if u.id == a.unit_id), "?")
    return f"date {a.lab_code or '(no lab code)'} ({a.method}) on unit {unit}"


def _clash(ctx: _Dates, held: AgeDetermination, new: AgeDetermination, where: str, what: str = "this row") -> str:
    samples = " from another sample" if (held.age_ka, held.sigma_ka) == (new.age_ka, new.sigma_ka) else ""
    return (f"{_date_text(ctx, new)} is {where} as {held.age_ka:g} ± {held.sigma_ka:g} ka but {what} gives "
            f"{new.age_ka:g} ± {new.sigma_ka:g} ka{samples}; a recorded date "
            f"is corrected, not given again: make {what} match it, or give a new determination its own lab code")


def add_date(store: ServerStore, *, unit: str, method: str, age_ka: float, sigma_ka: float, lab_code: str | None = None,
             sample_find_number: int | str | None = None, note: str = "", site: str | None = None) -> AgeDetermination:
    """Record one laboratory date on a unit (the dated sample's find by its number, if any)."""
    number = _find_number(sample_find_number)
    with store.atomic() as conn:
        ctx = _dates_context(conn, site, {number} if isinstance(number, int) else set())
        record, problems = _date(ctx, {"unit": unit, "method": method, "age_ka": age_ka, "sigma_ka": sigma_ka,
                                       "lab_code": lab_code, "sample_find_number": sample_find_number, "note": note})
        if record is None:
            raise RecordInvalid("date", problems)
        held = ctx.held.get(_key(record))
        if held is not None:
            raise DuplicateRecord(f"{_date_text(ctx, record)} is already recorded with these values; nothing was added"
                                  if _same(held, record) else _clash(ctx, held, record, "already recorded", "this date"))
        store.save_versioned(conn, record, new=True)
    return record


@dataclass(frozen=True)
class DateImport:
    """What ``import_dates_csv`` did: dates added, and rows skipped because they were held already."""

    added: list[AgeDetermination]
    skipped: list[dict[str, Any]]


def import_dates_csv(store: ServerStore, path: Path, *, site: str | None = None,
                     name: str | None = None) -> DateImport:
    """Import laboratory dates from a CSV (``unit,method,age_ka,sigma_ka,lab_code[,sample_find_number,note]``).

    Every row is checked before anything is written; one bad row and nothing is. A row already held with the
    same values is skipped (a file imported twice adds nothing); with other values it is refused. ``name`` is
    what messages call the file (an uploaded file's own name), by default its path.
    """
    shown = name or str(path)
    try:
        rows = read_csv(path, required=DATE_COLUMNS[:5], numeric=("age_ka", "sigma_ka"),
                        optional={"sample_find_number": "", "note": ""})
    except InputFileInvalid as exc:
        raise InputFileInvalid(str(exc).replace(str(path), shown, 1)) from None
    extra = [c for c in rows[0] if c not in DATE_COLUMNS and c != "_line"]
    if extra:
        hints = "".join(_close(c, DATE_COLUMNS) for c in extra)
        raise InputFileInvalid(f"{shown}: unknown column{'s' if len(extra) > 1 else ''} {', '.join(extra)}{hints}; "
                               f"the columns are {', '.join(DATE_COLUMNS)}")
    numbers = {n for r in rows if isinstance(n := _find_number(r["sample_find_number"]), int)}
    with store.atomic() as conn:
        ctx = _dates_context(conn, site, numbers)
        added, skipped, errors = _check_rows(ctx, rows)
        if errors:
            raise InputFileInvalid(f"{shown}: {_plural(len(errors), 'row')} refused, nothing was imported.\n"
                                   + "\n".join(errors))
        for record in added:
            store.save_versioned(conn, record, new=True)
    return DateImport(added, skipped)


def _check_rows(ctx: _Dates, rows: list[dict[str, Any]]) -> tuple[list[AgeDetermination], list[dict[str, Any]], list[str]]:
    added: list[AgeDetermination] = []
    skipped: list[dict[str, Any]] = []
    errors: list[str] = []
    for row in rows:
        line = row["_line"]
        record, problems = _date(ctx, row)
        if record is None:
            errors.append(f"line {line}: " + "; ".join(f"column {p.field}: {p.message}; fix: {p.fix}" for p in problems))
            continue
        key = _key(record)
        held, before = ctx.held.get(key), ctx.seen.get(key)
        other = held or (before[1] if before else None)
        if other is None:
            ctx.seen[key] = (line, record)
            added.append(record)
        elif _same(other, record):
            why = "already recorded" if held else f"repeats line {before[0]}"  # type: ignore[index]
            skipped.append({"line": line, "what": _date_text(ctx, record), "why": why})
        else:
            where = "already recorded" if held else f"given on line {before[0]}"  # type: ignore[index]
            errors.append(f"line {line}: {_clash(ctx, other, record, where)}")
    return added, skipped, errors


def list_dates(store: ServerStore, *, site: str | None = None) -> list[dict[str, Any]]:
    """The site's laboratory dates by unit code, method and lab code."""
    with store.read() as conn:
        s = _site(conn, site)
        units = {u.id: u.code for u in db.select(conn, Unit, site_id=s.id)}
        dates = list(db.select(conn, AgeDetermination, site_id=s.id))
        f = metadata.tables["find"]
        ids = [a.find_id for a in dates if a.find_id]
        numbers = dict(conn.execute(sa.select(f.c.id, f.c.number).where(f.c.id.in_(ids))).all()) if ids else {}
    rows = [{"id": a.id, "unit": units.get(a.unit_id, "?"), "method": a.method, "age_ka": a.age_ka,
             "sigma_ka": a.sigma_ka, "lab_code": a.lab_code, "sample_find_number": numbers.get(a.find_id),
             "note": a.note} for a in dates]
    return sorted(rows, key=lambda r: (r["unit"], r["method"], r["lab_code"] or "", r["age_ka"]))


# -- corrections ----------------------------------------------------------------------------------------------
_MODELS: dict[str, type[Record]] = {"find": Find, "unit": Unit}

# fields no correction touches, and where the change is made instead
_KEPT = {
    "id": "a record's id never changes",
    "site_id": "a record stays on its site",
    "device_id": "the device that minted the number is a fact of the record",
    "voided": "voiding is not a correction: void the find on a tablet (it keeps its number and the reason)",
    "void_reason": "the reason belongs to the void: void the find on a tablet",
    "shot_id": "raw shots are kept; correct the instrument setup and its finds are recomputed",
    "gnss_fix_id": "raw GNSS fixes are kept as received",
    "photo_hashes": "photos are added from the tablet",
    "horizon_id": "put the unit in a horizon with the horizon assignment (baulk horizon assign, or the Horizons "
                  "page), which keeps its history",
}
# references a person types by code: name -> (field, record, the key typed)
_REFS: dict[str, tuple[str, type[Record], str]] = {
    "unit": ("unit_id", Unit, "code"), "trench": ("trench_id", Trench, "code"),
    "season": ("season_id", Season, "label"), "spit": ("spit_id", Spit, "number"),
}


def correctable_fields(record: str) -> tuple[str, ...]:
    """The names a correction of a ``record`` ('find' or 'unit') may change (references by their short name)."""
    model = _model(record)
    short = {ref[0]: name for name, ref in _REFS.items()}
    return tuple(short.get(n, n) for n in model.model_fields if n not in _KEPT)


def _model(record: str) -> type[Record]:
    if record not in _MODELS:
        raise UnknownField(f"{record!r} cannot be corrected here; correct a find or a unit")
    return _MODELS[record]


@dataclass(frozen=True)
class Corrected:
    """A correction written: the record as it is now, the reason record, and each change as (field, was, now)."""

    record: Record
    correction: Correction
    label: str
    changes: list[tuple[str, str, str]]


def _field_name(record: str, name: str) -> str:
    """The field a typed name means (``unit_id`` and ``unit`` both mean the unit, typed by its code)."""
    name = name.strip().lower()
    allowed = correctable_fields(record)
    if _short(name) in allowed:
        return _short(name)
    if name in _KEPT and name in _model(record).model_fields:
        raise UnknownField(f"{record} field {name} is not corrected here: {_KEPT[name]}")
    raise UnknownField(f"a {record} has no field {name!r}{_close(name, allowed)}; the fields a correction may change "
                       f"are: {', '.join(allowed)}")


def _is_temporal(annotation: Any) -> bool:
    if annotation is AwareDatetime or (isinstance(annotation, type) and issubclass(annotation, dt.date)):
        return True
    return any(_is_temporal(a) for a in get_args(annotation))


_YES_NO = ("yes", "no", "y", "n", "true", "false", "1", "0", "on", "off")


def _typed(model: type[Record], name: str, text: str) -> Any:
    """A typed value from the text a person typed (``schema.forms.coerce``; dates parsed); the model judges it."""
    form = form_fields(model, (name,))[0]
    if form.kind == "flag" and text.strip().lower() not in (*_YES_NO, ""):
        raise RecordInvalid(model.record_name, [FieldProblem(name, f"{text.strip()!r} is not yes or no",
                                                             "type yes or no")])
    value = coerce(form, text)
    info = model.model_fields[name]
    if value is None and info.default == "":
        return ""  # an emptied text field that has no "unknown" (notes, description)
    if isinstance(value, str) and _is_temporal(info.annotation):
        try:
            return TypeAdapter(info.annotation).validate_python(value, strict=False)
        except ValidationError:
            stamp = "at" in name.split("_")
            what, example = ("a date and time", "2026-07-14T09:31:00+03:00 (with its time zone)") if stamp else \
                ("a date", "2026-07-14")
            raise RecordInvalid(model.record_name, [FieldProblem(name, f"{text!r} is not {what}",
                                                                 f"type it as {example}")]) from None
    return value


def _ref(conn: Connection, site: Site, name: str, text: str, unit_id: Any) -> tuple[uuid.UUID | None, FieldProblem | None]:
    """The id a typed code means (a unit, trench or season of the site; a spit by its number in the find's unit)."""
    _column, model, key = _REFS[name]
    text = text.strip()
    where: dict[str, Any] = {"unit_id": unit_id} if model is Spit else {"site_id": site.id}
    found = {str(getattr(r, key)): r.id for r in db.select(conn, model, **where)}  # type: ignore[attr-defined]
    scope = "its unit" if model is Spit else f"site {site.code}"
    fix = f"give the {key} of a {name} of {scope}" + (f", e.g. {min(found)}" if found else "")
    if not text:
        return (None, None) if model is Spit else (None, FieldProblem(name, "is empty", fix))
    if text in found:
        return found[text], None
    return None, FieldProblem(name, f"{scope} has no {name} {text!r}{_close(text, found)}", fix)


def _target(conn: Connection, site: Site, record: str, key: str) -> tuple[Record, str]:
    key = str(key).strip()
    if record == "find":
        if not key.isdigit():
            raise RecordNotFound(f"{key!r} is not a find number; give the number on the find's bag label, e.g. 1012")
        found = list(db.select(conn, Find, site_id=site.id, number=int(key)))
        if len(found) > 1:
            raise DuplicateRecord(f"find number {key} is held by {len(found)} finds on site {site.code}; settle the "
                                  "duplicate on the Conflicts page first, then correct the find")
        what = f"find {key}"
    else:
        found = list(db.select(conn, Unit, site_id=site.id, code=key))
        what = f"unit {key}"
    if not found:
        raise RecordNotFound(f"site {site.code} has no {what}; check the {'number' if record == 'find' else 'code'}")
    return found[0], what


def _shown(conn: Connection, name: str, value: Any) -> str:
    if name in _REFS and value is not None:
        column, model, key = _REFS[name]
        found = list(db.select(conn, model, id=value))
        return str(getattr(found[0], key)) if found else str(value)
    return "(empty)" if value in (None, "") else str(value)


def correct_record(store: ServerStore, *, record: str, key: str, changes: dict[str, str], reason: str, by: str,
                   at: dt.datetime | None = None, site: str | None = None) -> Corrected:
    """Correct recorded fields of a find (by number) or a unit (by code) from typed text, with the reason: a
    versioned edit plus a ``Correction`` record, in one transaction. References are typed by code (``unit=203``,
    ``trench=TR2``, ``season=2026``, ``spit=3``)."""
    model = _model(record)
    if not (reason or "").strip():
        raise ReasonMissing(f"a correction of {record} {key} needs a reason: say why the record was wrong, e.g. "
                            "'section drawing shows the piece in 104'")
    if not changes:
        raise UnknownField(f"no field was given to correct on {record} {key}; give FIELD=VALUE, e.g. notes=rolled edge")
    named = {_field_name(record, k): v for k, v in changes.items()}
    with store.atomic() as conn:
        s = _site(conn, site)
        current, what = _target(conn, s, record, key)
        typed, problems = _typed_changes(conn, s, model, current, named)
        if problems:
            raise RecordInvalid(what, problems)
        updated = check(model, {**current.model_dump(), **typed}, record=what)
        changed = [n for n in typed if getattr(updated, n) != getattr(current, n)]
        same = [n for n in typed if n not in changed]
        if same:
            shown = ", ".join(f"{_short(n)} is already {_shown(conn, _short(n), getattr(current, n))}" for n in same)
            raise NothingChanged(f"{what}: {shown}; nothing was corrected. Leave out what does not change")
        _unique(conn, s, record, current, updated)
        note = check(Correction, {"record": record, "record_id": getattr(current, "id"), "fields": ",".join(changed),
                                  "reason": reason.strip(), "by": by.strip(), "at": at or _now()}, record="correction")
        store.save_versioned(conn, updated, new=False)
        store.save_versioned(conn, note, new=True)
        rows = [(_short(n), _shown(conn, _short(n), getattr(current, n)),
                 _shown(conn, _short(n), getattr(updated, n))) for n in changed]
    return Corrected(updated, note, what, rows)


def _short(column: str) -> str:
    return next((name for name, ref in _REFS.items() if ref[0] == column), column)


def _typed_changes(conn: Connection, site: Site, model: type[Record], current: Record,
                   named: dict[str, str]) -> tuple[dict[str, Any], list[FieldProblem]]:
    typed: dict[str, Any] = {}
    problems: list[FieldProblem] = []
    order = sorted(named, key=lambda n: n == "spit")  # a spit is looked up in the (possibly new) unit
    for name in order:
        text = str(named[name])
        if name in _REFS:
            unit_id = typed.get("unit_id", getattr(current, "unit_id", None))
            value, problem = _ref(conn, site, name, text, unit_id)
            if problem:
                problems.append(problem)
            else:
                typed[_REFS[name][0]] = value
            continue
        try:
            typed[name] = _typed(model, name, text)
        except RecordInvalid as exc:
            problems += exc.problems
    return typed, problems


def _unique(conn: Connection, site: Site, record: str, current: Record, updated: Record) -> None:
    """A find number or a unit code that a correction changes must be free on the site."""
    key = "number" if record == "find" else "code"
    value = getattr(updated, key)
    if value == getattr(current, key):
        return
    if db.count(conn, Find if record == "find" else Unit, site_id=site.id, **{key: value}):
        raise DuplicateRecord(f"find number {value} is already held by another find on site {site.code}; give a "
                              "number no find holds" if record == "find" else
                              f"site {site.code} already has a unit {value}; choose another code")


def corrections(store: ServerStore, *, record: str, record_id: uuid.UUID) -> list[dict[str, Any]]:
    """A record's camp corrections, newest first: when, who, which fields, why."""
    rows = store.list(Correction, record=record, record_id=record_id)
    return [{"at": c.at, "by": c.by, "fields": [_short(f) for f in c.fields.split(",")], "reason": c.reason}
            for c in sorted(rows, key=lambda c: c.at, reverse=True)]


# -- relations: void and restore ------------------------------------------------------------------------------
# A relation carries no Correction record (that record names finds and units only, and widening it is a schema
# migration): who and why travel in the relation's own ``void_reason``, the when in its field versions. A voided
# relation's reason reads "why (camp, DM)"; a relation restored at camp keeps "restored (camp, DM): why" there,
# which nothing reads as a void (only ``voided`` does).
RELATION_KINDS: tuple[str, ...] = vocab.values(vocab.RelationKind)


@dataclass(frozen=True)
class RelationChange:
    """What a void or a restore wrote: the relations as they are now (every copy of the same observation), and
    the relation in words (``103 above 101``)."""

    relations: list[Relation]
    label: str
    voided: bool
    reason: str


def _kind(text: str) -> str:
    kind = text.strip().lower().replace(" ", "_").replace("-", "_")
    if kind not in RELATION_KINDS:
        words = ", ".join(vocab.words(k) for k in RELATION_KINDS)
        raise RecordInvalid("relation", [FieldProblem("kind", f"{text.strip()!r} is not a kind of relation"
                                                      f"{_close(kind, RELATION_KINDS)}", f"use one of: {words}")])
    return kind


def _relation_label(r: Relation, code_of: dict[uuid.UUID, str]) -> str:
    return f"{code_of.get(r.upper_unit_id, '?')} {vocab.words(r.kind)} {code_of.get(r.lower_unit_id, '?')}"


def _relations_named(conn: Connection, site: Site, *, relation_id: uuid.UUID | None, upper: str | None,
                     kind: str | None, lower: str | None) -> tuple[list[Relation], dict[uuid.UUID, str], str]:
    """The relations meant: one by id, or every copy of ``upper kind lower`` (two tablets may have recorded the
    same observation; a void or restore is of the observation)."""
    units = list(db.select(conn, Unit, site_id=site.id))
    code_of = {u.id: u.code for u in units}
    if relation_id is not None:
        found = [r for r in db.select(conn, Relation, id=relation_id) if r.site_id == site.id]
        if not found:
            raise RecordNotFound(f"site {site.code} has no relation with id {relation_id} (it may not have synced "
                                 "yet); reload the unit's page")
        return found, code_of, _relation_label(found[0], code_of)
    by_code = {u.code: u.id for u in units}
    missing = [c for c in (upper or "", lower or "") if c.strip() not in by_code]
    if missing:
        raise RecordNotFound(f"site {site.code} has no unit {missing[0].strip()!r}{_close(missing[0].strip(), by_code)}; "
                             "name the relation by its two unit codes and its kind, e.g. 103 above 101")
    a, b, k = by_code[(upper or "").strip()], by_code[(lower or "").strip()], _kind(kind or "")
    label = f"{(upper or '').strip()} {vocab.words(k)} {(lower or '').strip()}"
    found = [r for r in db.select(conn, Relation, site_id=site.id, upper_unit_id=a, lower_unit_id=b) if r.kind == k]
    if not found:
        held = [_relation_label(r, code_of) for r in db.select(conn, Relation, site_id=site.id)
                if {r.upper_unit_id, r.lower_unit_id} == {a, b}]
        known = f"; between these two units site {site.code} holds: {', '.join(held)}" if held else \
            f"; site {site.code} holds no relation between these two units"
        raise RecordNotFound(f"no relation {label} is recorded{known}")
    return found, code_of, label


def _set_void(store: ServerStore, *, void: bool, reason: str, by: str, relation_id: uuid.UUID | None,
              upper: str | None, kind: str | None, lower: str | None, site: str | None) -> RelationChange:
    verb = "void" if void else "restore"
    reason, by = (reason or "").strip(), (by or "").strip()
    if len(reason) < 3:
        example = "'misread the section: 103 lies under 101'" if void else "'the section drawing confirms it'"
        raise ReasonMissing(f"to {verb} a relation give a reason: say why, e.g. {example}")
    if not by:
        raise RecordInvalid(f"{verb} of the relation", [FieldProblem("by", "no initials were given",
                                                                     "give your initials, e.g. DM")])
    with store.atomic() as conn:
        s = _site(conn, site)
        found, code_of, label = _relations_named(conn, s, relation_id=relation_id, upper=upper, kind=kind,
                                                 lower=lower)
        todo = [r for r in found if r.voided != void]
        if not todo:
            state = f"voided ({found[0].void_reason})" if void else "in force"
            raise NothingChanged(f"relation {label} is already {state}; nothing was {'voided' if void else 'restored'}")
        text = f"{reason} (camp, {by})" if void else f"restored (camp, {by}): {reason}"
        changed = []
        for r in todo:
            updated = check(Relation, {**r.model_dump(), "voided": void, "void_reason": text},
                            record=f"relation {label}")
            store.save_versioned(conn, updated, new=False)
            changed.append(updated)
    return RelationChange(changed, label, void, text)


def void_relation(store: ServerStore, *, reason: str, by: str, relation_id: uuid.UUID | None = None,
                  upper: str | None = None, kind: str | None = None, lower: str | None = None,
                  site: str | None = None) -> RelationChange:
    """Void a wrong relation at camp (by id, or by ``upper kind lower`` unit codes), with the manager's reason:
    a versioned edit of the server's device that tablets pull; the matrix leaves it out from then on."""
    return _set_void(store, void=True, reason=reason, by=by, relation_id=relation_id, upper=upper, kind=kind,
                     lower=lower, site=site)


def restore_relation(store: ServerStore, *, reason: str, by: str, relation_id: uuid.UUID | None = None,
                     upper: str | None = None, kind: str | None = None, lower: str | None = None,
                     site: str | None = None) -> RelationChange:
    """Put a voided relation back in force at camp, with the reason (a versioned edit, like the void)."""
    return _set_void(store, void=False, reason=reason, by=by, relation_id=relation_id, upper=upper, kind=kind,
                     lower=lower, site=site)


def unit_relations(store: ServerStore, *, unit_id: uuid.UUID) -> list[dict[str, Any]]:
    """Every relation naming a unit, in force first then voided, each with the other unit and its reason."""
    with store.read() as conn:
        units = {u.id: u for u in db.select(conn, Unit, id=unit_id)}
        if not units:
            return []
        site_id = units[unit_id].site_id
        code_of = {u.id: u.code for u in db.select(conn, Unit, site_id=site_id)}
        rels = [r for r in db.select(conn, Relation, site_id=site_id) if unit_id in (r.upper_unit_id, r.lower_unit_id)]
    rows = [{"id": r.id, "upper": code_of.get(r.upper_unit_id, "?"), "upper_id": r.upper_unit_id,
             "kind": vocab.words(r.kind), "lower": code_of.get(r.lower_unit_id, "?"), "lower_id": r.lower_unit_id,
             "voided": r.voided, "reason": r.void_reason, "words": _relation_label(r, code_of)} for r in rels]
    return sorted(rows, key=lambda x: (x["voided"], x["upper"], x["kind"], x["lower"], str(x["id"])))


# -- photos: void and restore ---------------------------------------------------------------------------------
# A wrong photo (of another find, of a person, a blurred duplicate) is voided, never deleted: the register keeps
# it, marked, with "why (camp, DM)" in its ``void_reason``; a restore writes "restored (camp, DM): why" there. The
# find's ``photo_hashes`` follows in the same transaction (``schema.photo_rules``, the tablet's rule too).
@dataclass(frozen=True)
class PhotoChange:
    """What a photo void or restore wrote: the photo as it is now, its register name (``TAB-1-P12``), what it
    shows (``find 1203``), and the find's ``photo_hashes`` afterwards (None for a photo of no find)."""

    photo: Photo
    label: str
    subject: str
    voided: bool
    reason: str
    find_hashes: list[str] | None


def _photo_number(text: str) -> int:
    digits = (text or "").strip().upper().removeprefix("P")
    if not digits.isdigit() or int(digits) < 1:
        raise RecordInvalid("photo", [FieldProblem("number", f"{(text or '').strip()!r} is not a photo number",
                                                   "give the number the register shows after the tablet's label, "
                                                   "e.g. P12 or 12")])
    return int(digits)


def _near(numbers: list[int], wanted: int, n: int = 6) -> str:
    shown = sorted(sorted(numbers, key=lambda k: (abs(k - wanted), k))[:n])
    return ", ".join(f"P{k}" for k in shown)


def _photo_named(conn: Connection, site: Site, *, photo_id: uuid.UUID | None, device: str | None,
                 number: str | None) -> tuple[Photo, str]:
    """The photo meant, by id or by the taking tablet's label and its photo number, with its register name."""
    labels = {d.id: d.label for d in db.select(conn, Device)}
    if photo_id is not None:
        found = [p for p in db.select(conn, Photo, id=photo_id) if p.site_id == site.id]
        if not found:
            raise RecordNotFound(f"site {site.code} has no photo with id {photo_id} (it may not have synced yet); "
                                 "reload the photo register")
        return found[0], f"{labels.get(found[0].device_id, '?')}-P{found[0].number}"
    label = (device or "").strip()
    wanted = _photo_number(number or "")
    ids = [i for i, name in labels.items() if name == label]
    photos = list(db.select(conn, Photo, site_id=site.id))
    if not ids:
        takers = sorted({labels[p.device_id] for p in photos if p.device_id in labels})
        raise RecordNotFound(f"no device is labelled {label!r}{_close(label, takers)}; the tablets that took photos "
                             f"at site {site.code} are: {', '.join(takers) or 'none yet'} (baulk device list "
                             "shows every label)")
    mine = [p for p in photos if p.device_id in ids]
    found = [p for p in mine if p.number == wanted]
    if not found:
        near = f"; its photos nearest that number are {_near([p.number for p in mine], wanted)}" if mine else \
            " (none of its photos has synced yet)"
        raise RecordNotFound(f"{label} has no photo P{wanted} at site {site.code}{near}")
    return found[0], f"{label}-P{wanted}"


def _photo_subject(conn: Connection, photo: Photo) -> str:
    """What a photo shows, as the register names it: ``find 1203``, ``unit 101``, ``trench TR1``, ``the day``."""
    if photo.subject_id is None:
        return "the day"
    if photo.subject == "find":
        return " ".join(f"find {f.number}" for f in db.select(conn, Find, id=photo.subject_id)) or "a find"
    if photo.subject == "trench":
        return " ".join(f"trench {t.code}" for t in db.select(conn, Trench, id=photo.subject_id)) or "a trench"
    return " ".join(f"unit {u.code}" for u in db.select(conn, Unit, id=photo.subject_id)) or "a unit"


def _set_photo_void(store: ServerStore, *, void: bool, reason: str, by: str, photo_id: uuid.UUID | None,
                    device: str | None, number: str | None, site: str | None) -> PhotoChange:
    from schema import photo_rules

    verb = "void" if void else "restore"
    reason, by = (reason or "").strip(), (by or "").strip()
    if len(reason) < 3:
        example = "'a photo of find 1204, not this one'" if void else "'it shows this find after all'"
        raise ReasonMissing(f"to {verb} a photo give a reason: say why, e.g. {example}")
    if not by:
        raise RecordInvalid(f"{verb} of the photo", [FieldProblem("by", "no initials were given",
                                                                  "give your initials, e.g. DM")])
    text = f"{reason} (camp, {by})" if void else f"restored (camp, {by}): {reason}"
    with store.atomic() as conn:
        s = _site(conn, site)
        photo, label = _photo_named(conn, s, photo_id=photo_id, device=device, number=number)
        if photo.voided == void:
            state = f"voided ({photo.void_reason})" if void else "in force"
            raise NothingChanged(f"photo {label} is already {state}; nothing was {'voided' if void else 'restored'}")
        act = photo_rules.void_photo if void else photo_rules.restore_photo
        updated, _changed = act(conn, store.save_versioned, photo.id, text, record=f"{verb} of photo {label}")
        hashes = None
        if photo.subject == "find" and photo.subject_id is not None:
            found = list(db.select(conn, Find, id=photo.subject_id))
            hashes = list(found[0].photo_hashes) if found else None
        subject = _photo_subject(conn, photo)
    return PhotoChange(updated, label, subject, void, text, hashes)


def void_photo(store: ServerStore, *, reason: str, by: str, photo_id: uuid.UUID | None = None,
               device: str | None = None, number: str | None = None, site: str | None = None) -> PhotoChange:
    """Void a wrong photo at camp (by id, or by the taking tablet's label and photo number: ``TAB-1``, ``P12``),
    with the manager's reason: a versioned edit tablets pull; a find's ``photo_hashes`` loses its hash."""
    return _set_photo_void(store, void=True, reason=reason, by=by, photo_id=photo_id, device=device,
                           number=number, site=site)


def restore_photo(store: ServerStore, *, reason: str, by: str, photo_id: uuid.UUID | None = None,
                  device: str | None = None, number: str | None = None, site: str | None = None) -> PhotoChange:
    """Put a voided photo back in force at camp, with the reason; a find's ``photo_hashes`` gains its hash again."""
    return _set_photo_void(store, void=False, reason=reason, by=by, photo_id=photo_id, device=device,
                           number=number, site=site)
