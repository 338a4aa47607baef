"""``baulk horizon``, ``baulk date`` and ``baulk correct`` (finds, units, relations and photos voided or restored): the
data manager's curation at camp.

Each command parses its arguments, calls one function of ``sync_server.curation``, re-runs validation (as
``baulk season import`` does) and prints what was written in a line or two. Tablets pull every change at their
next sync.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import click

from schema import vocab
from schema.records.dating import DatingMethod

__all__ = ["correct", "date", "horizon"]

_db_option = click.option("--db", "database_url", default=None,
                          help="Server database URL [default: the server's SQLite file].")
_site_option = click.option("--site", "site", default=None,
                            help="Site code, when the store holds more than one [default: the only (first) site].")
_reason_option = click.option("--reason", required=True, help="Why: kept with the change for whoever reads it later.")
_by_option = click.option("--by", "by", required=True, help="Your initials (2-4 capital letters), kept with the change.")


def _store(database_url: str | None) -> Any:
    from .cli import _server_store

    return _server_store(database_url)


def _revalidate(store: Any, site: str | None, codes: tuple[str, ...]) -> str | None:
    """Run validation again after a change; a line saying how many checks of ``codes`` are now open, if any."""
    from schema.records import Site

    from .validation import run_validation

    found = [s.id for s in store.list(Site, code=site)] if site else [None]
    report, _summary = run_validation(store, site_id=found[0] if found else None)
    open_ = [i for i in report.issues if i.code in codes]
    if open_:
        counts = {c: sum(1 for i in open_ if i.code == c) for c in codes}
        shown = ", ".join(f"{n} {c}" for c, n in counts.items() if n)
        return f"checks now open: {shown} (baulk validate lists them)"
    return None


def _echo_checks(line: str | None) -> None:
    if line:
        click.echo(line)


# -- horizons -------------------------------------------------------------------------------------------------
_HORIZON_CHECKS = ("HORIZON_ORDER", "HORIZON_SAME_AS_SPLIT", "HORIZON_MISSING")


@click.group()
def horizon() -> None:
    """Horizons of the site: add them, order them top to bottom and put units in them (with a reason)."""


@horizon.command("add")
@click.argument("code")
@click.option("--label", required=True, help="What the horizon is called, e.g. 'Grey tuff marker'.")
@click.option("--order", type=click.IntRange(min=1), default=None,
              help="Position from the top, 1 = uppermost; those below move down one [default: at the bottom].")
@click.option("--formation", default=None, help="Lithostratigraphic formation, if named.")
@click.option("--member", default=None, help="Lithostratigraphic member, if named.")
@click.option("--bed", default=None, help="Lithostratigraphic bed, if named.")
@_site_option
@_db_option
def horizon_add(code: str, label: str, order: int | None, formation: str | None, member: str | None,
                bed: str | None, site: str | None, database_url: str | None) -> None:
    """Add a horizon to the site, at the bottom or at --order."""
    from .curation import add_horizon

    with _store(database_url) as store:
        h = add_horizon(store, code=code, label=label, order=order, formation=formation, member=member, bed=bed,
                        site=site)
        checks = _revalidate(store, site, _HORIZON_CHECKS)
    names = ", ".join(n for n in (h.formation, h.member, h.bed) if n)
    click.echo(f"horizon {h.code} ({h.label}) added at order {h.order}" + (f"; {names}" if names else ""))
    _echo_checks(checks)


@horizon.command("list")
@_site_option
@_db_option
def horizon_list(site: str | None, database_url: str | None) -> None:
    """The site's horizons top to bottom, with their units and lithostratigraphic names."""
    from .curation import list_horizons, units_without_horizon

    with _store(database_url) as store:
        rows = list_horizons(store, site=site)
        loose = units_without_horizon(store, site=site)
    click.echo(f"{'order':>5}  {'code':<8} {'units':>5}  label")
    for r in rows:
        names = " / ".join(n for n in (r["formation"], r["member"], r["bed"]) if n)
        click.echo(f"{r['order']:>5}  {r['code']:<8} {r['unit_count']:>5}  {r['label']}" + (f" [{names}]" if names else "")
                   + (f": {', '.join(u['code'] for u in r['units'])}" if r["units"] else ""))
    click.echo(f"units in no horizon: {', '.join(u['code'] for u in loose) or 'none'}")


@horizon.command("reorder")
@click.argument("codes", nargs=-1, required=True)
@_site_option
@_db_option
def horizon_reorder(codes: tuple[str, ...], site: str | None, database_url: str | None) -> None:
    """Give every horizon code once, top first: the site's new order from the uppermost down."""
    from .curation import reorder_horizons

    with _store(database_url) as store:
        moved = reorder_horizons(store, list(codes), site=site)
        checks = _revalidate(store, site, _HORIZON_CHECKS)
    click.echo(f"horizons top to bottom: {', '.join(codes)}; "
               + (", ".join(f"{c} {a}->{b}" for c, a, b in moved) if moved else "no order changed"))
    _echo_checks(checks)


@horizon.command("assign")
@click.argument("horizon_code", metavar="HORIZON")
@click.argument("units", nargs=-1, required=True)
@_reason_option
@_by_option
@_site_option
@_db_option
def horizon_assign(horizon_code: str, units: tuple[str, ...], reason: str, by: str, site: str | None,
                   database_url: str | None) -> None:
    """Put units in a horizon (HORIZON 'none' takes them out); each change is kept with who, when and why."""
    from .curation import assign_units

    target = None if horizon_code.lower() == "none" else horizon_code
    with _store(database_url) as store:
        a = assign_units(store, horizon=target, units=list(units), reason=reason, by=by, site=site)
        checks = _revalidate(store, site, _HORIZON_CHECKS)
    where = f"horizon {a.horizon}" if a.horizon else "no horizon"
    click.echo(f"unit{'s' if len(a.moved) > 1 else ''} {', '.join(a.moved)} now in {where} (by {by}: {reason.strip()})"
               + (f"; already there: {', '.join(a.already)}" if a.already else ""))
    _echo_checks(checks)


# -- laboratory dates -----------------------------------------------------------------------------------------
_DATE_CHECKS = ("AGE_CONTRADICTION",)


def _date_line(d: dict[str, Any]) -> str:
    sample = f", sample find {d['sample_find_number']}" if d.get("sample_find_number") else ""
    return (f"unit {d['unit']}: {d['method']} {d['age_ka']:g} ± {d['sigma_ka']:g} ka, lab code "
            f"{d['lab_code'] or '-'}{sample}" + (f"; {d['note']}" if d.get("note") else ""))


@click.group()
def date() -> None:
    """Laboratory dates on units: add one, import a laboratory's CSV, list them."""


@date.command("add")
@click.argument("unit")
@click.option("--method", required=True, type=click.Choice(vocab.values(DatingMethod)),
              help="How the age was determined.")
@click.option("--age-ka", type=float, required=True, help="The age in thousands of years (ka).")
@click.option("--sigma-ka", type=float, required=True, help="Its one-sigma uncertainty in ka (above 0).")
@click.option("--lab-code", default=None, help="The laboratory's code for the sample, e.g. VLM-AR-07.")
@click.option("--sample", "sample", type=int, default=None, help="The find number of the dated sample, if any.")
@click.option("--note", default="", help="A note on the date (material, treatment).")
@_site_option
@_db_option
def date_add(unit: str, method: str, age_ka: float, sigma_ka: float, lab_code: str | None, sample: int | None,
             note: str, site: str | None, database_url: str | None) -> None:
    """Record one laboratory date on a unit."""
    from .curation import add_date

    with _store(database_url) as store:
        add_date(store, unit=unit, method=method, age_ka=age_ka, sigma_ka=sigma_ka, lab_code=lab_code,
                 sample_find_number=sample, note=note, site=site)
        checks = _revalidate(store, site, _DATE_CHECKS)
    click.echo("date added: " + _date_line({"unit": unit, "method": method, "age_ka": age_ka, "sigma_ka": sigma_ka,
                                             "lab_code": lab_code, "sample_find_number": sample, "note": note}))
    _echo_checks(checks)


@date.command("import")
@click.argument("csv_file", metavar="CSV", type=click.Path(dir_okay=False, path_type=Path))
@_site_option
@_db_option
def date_import(csv_file: Path, site: str | None, database_url: str | None) -> None:
    """Import dates from a CSV (unit,method,age_ka,sigma_ka,lab_code[,sample_find_number,note]); every row is
    checked first and one bad row imports nothing; rows already held are skipped."""
    from .curation import import_dates_csv

    with _store(database_url) as store:
        r = import_dates_csv(store, csv_file, site=site)
        checks = _revalidate(store, site, _DATE_CHECKS) if r.added else None
    click.echo(f"imported {csv_file.name}: {len(r.added)} date{'' if len(r.added) == 1 else 's'} added, "
               f"{len(r.skipped)} skipped")
    for s in r.skipped:
        click.echo(f"  line {s['line']} skipped: {s['what']} {s['why']}")
    _echo_checks(checks)


@date.command("list")
@_site_option
@_db_option
def date_list(site: str | None, database_url: str | None) -> None:
    """The site's laboratory dates by unit."""
    from .curation import list_dates

    with _store(database_url) as store:
        rows = list_dates(store, site=site)
    for d in rows:
        click.echo(_date_line(d))
    click.echo(f"{len(rows)} date{'' if len(rows) == 1 else 's'}", err=True)


# -- corrections ----------------------------------------------------------------------------------------------
@click.group()
def correct() -> None:
    """Correct recorded fields of a find or a unit, or void / restore a relation, at camp, with a reason (tablets
    pull the correction)."""


def _changes(pairs: tuple[str, ...]) -> dict[str, str]:
    out: dict[str, str] = {}
    for pair in pairs:
        name, sep, value = pair.partition("=")
        if not sep or not name.strip():
            raise click.BadParameter(f"{pair!r} is not FIELD=VALUE; write e.g. unit=203 or notes='rolled edge'",
                                     param_hint="FIELD=VALUE")
        out[name.strip()] = value
    return out


def _run_correction(record: str, key: str, pairs: tuple[str, ...], reason: str, by: str, site: str | None,
                    database_url: str | None) -> None:
    from .curation import correct_record

    changes = _changes(pairs)
    with _store(database_url) as store:
        done = correct_record(store, record=record, key=key, changes=changes, reason=reason, by=by, site=site)
        checks = _revalidate(store, site, ())
    click.echo(f"{done.label} corrected by {done.correction.by}: "
               + "; ".join(f"{f} {was} -> {now}" for f, was, now in done.changes))
    click.echo(f"reason: {done.correction.reason}")
    _echo_checks(checks)


@correct.command("find")
@click.argument("number")
@click.argument("changes", nargs=-1, required=True, metavar="FIELD=VALUE...")
@_reason_option
@_by_option
@_site_option
@_db_option
def correct_find(number: str, changes: tuple[str, ...], reason: str, by: str, site: str | None,
                 database_url: str | None) -> None:
    """Correct fields of a find by its number (unit=203 moves it to unit 203; trench, season, spit likewise)."""
    _run_correction("find", number, changes, reason, by, site, database_url)


@correct.command("unit")
@click.argument("code")
@click.argument("changes", nargs=-1, required=True, metavar="FIELD=VALUE...")
@_reason_option
@_by_option
@_site_option
@_db_option
def correct_unit(code: str, changes: tuple[str, ...], reason: str, by: str, site: str | None,
                 database_url: str | None) -> None:
    """Correct fields of a unit by its code (description, munsell, texture, status, closed_on, ...)."""
    _run_correction("unit", code, changes, reason, by, site, database_url)


_MATRIX_CHECKS = ("MATRIX_CYCLE", "MATRIX_SELF", "MATRIX_FILL_NOT_CUT", "MATRIX_CUT_NOT_CUT", "MATRIX_FILL_BEFORE_CUT",
                  "MATRIX_ORDERED_AND_CONTEMPORARY", "MATRIX_UNKNOWN_UNIT")


def _run_relation(void: bool, upper: str, kind: str, lower: str, reason: str, by: str, site: str | None,
                  database_url: str | None) -> None:
    from .curation import restore_relation, void_relation

    act = void_relation if void else restore_relation
    with _store(database_url) as store:
        done = act(store, upper=upper, kind=kind, lower=lower, reason=reason, by=by, site=site)
        checks = _revalidate(store, site, _MATRIX_CHECKS)
    copies = f" ({len(done.relations)} copies of it)" if len(done.relations) > 1 else ""
    state = "voided: it no longer counts in the matrix" if void else "restored: it counts in the matrix again"
    click.echo(f"relation {done.label}{copies} {state}")
    click.echo(f"reason: {done.reason}")
    click.echo(checks or "no matrix check is open")


_relation_args = [click.argument("upper"), click.argument("kind"), click.argument("lower")]


def _relation_command(func: Any) -> Any:
    for decorate in reversed([*_relation_args, _reason_option, _by_option, _site_option, _db_option]):
        func = decorate(func)
    return func


@correct.command("void-relation")
@_relation_command
def correct_void_relation(upper: str, kind: str, lower: str, reason: str, by: str, site: str | None,
                          database_url: str | None) -> None:
    """Void a wrong relation, named by its units and kind (e.g. 103 above 101; 'same as' or same_as), with a
    reason; it is kept, left out of the matrix, and tablets pull the void."""
    _run_relation(True, upper, kind, lower, reason, by, site, database_url)


@correct.command("restore-relation")
@_relation_command
def correct_restore_relation(upper: str, kind: str, lower: str, reason: str, by: str, site: str | None,
                             database_url: str | None) -> None:
    """Put a voided relation back in force (e.g. 103 above 101), with a reason; tablets pull it."""
    _run_relation(False, upper, kind, lower, reason, by, site, database_url)


def _run_photo(void: bool, device: str, number: str, reason: str, by: str, site: str | None,
               database_url: str | None) -> None:
    from .curation import restore_photo, void_photo

    act = void_photo if void else restore_photo
    with _store(database_url) as store:
        done = act(store, device=device, number=number, reason=reason, by=by, site=site)
    if void:
        state = "voided: kept in the register, marked void"
        follow = "" if done.find_hashes is None else f"; {done.subject} no longer lists its file" \
            if done.photo.sha256 not in done.find_hashes else \
            f"; {done.subject} still lists its file (another photo of it has the same file)"
    else:
        state = "restored: in force again"
        follow = f"; {done.subject} lists its file again" if done.find_hashes is not None else ""
    click.echo(f"photo {done.label} ({done.subject}) {state}{follow}")
    click.echo(f"reason: {done.reason}")


_photo_args = [click.argument("device"), click.argument("number")]


def _photo_command(func: Any) -> Any:
    for decorate in reversed([*_photo_args, _reason_option, _by_option, _site_option, _db_option]):
        func = decorate(func)
    return func


@correct.command("void-photo")
@_photo_command
def correct_void_photo(device: str, number: str, reason: str, by: str, site: str | None,
                       database_url: str | None) -> None:
    """Void a wrong photo, named by the taking tablet's label and its number as the register shows them (TAB-1 P12
    or TAB-1 12), with a reason; it stays in the register marked void, a find's photo_hashes loses its file, and
    tablets pull the void."""
    _run_photo(True, device, number, reason, by, site, database_url)


@correct.command("restore-photo")
@_photo_command
def correct_restore_photo(device: str, number: str, reason: str, by: str, site: str | None,
                          database_url: str | None) -> None:
    """Put a voided photo back in force (e.g. TAB-1 P12), with a reason; tablets pull it."""
    _run_photo(False, device, number, reason, by, site, database_url)
