"""``baulk backup``, ``baulk restore`` and ``baulk recover``: the camp store kept safe, and brought back.

Each command calls one function of ``sync_server.backup`` or ``sync_server.recovery`` and prints what was done;
progress lines on long work go to stderr (``[backup] ...``). Whatever goes wrong is one line from the command's
error boundary (``sync_server.cli_boundary``), and nothing half-written is left behind.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import click

__all__ = ["backup", "recover", "register", "restore"]

_REENROL = (
    "Enrol every device again (baulk device add --role recorder --label TAB-1), each tablet with a NEW tablet file: "
    "keep the old file (an old file cannot become a new device), start the app on a new one (baulk tablet --store "
    "NEW.sqlite) and enter the code; it pulls everything."
)


def _devices(revoked: int, *, recovered: bool, from_backup: bool) -> str:
    lines = ["Devices cannot be recovered from tablets: the server kept only their token hashes."] if recovered else []
    if from_backup:
        lines.append(f"The backup's {revoked} live devices are revoked here: the tablets' pull positions point into "
                     "the lost store's change log, and an old tablet syncing with this store could skip changes.")
    return " ".join([*lines, _REENROL])


def _at(iso: str) -> str:
    import datetime as dt

    return f"{dt.datetime.fromisoformat(iso):%Y-%m-%d %H:%M:%S} UTC"


def _say(prefix: str) -> Any:
    return lambda msg: click.echo(f"[{prefix}] {msg}", err=True)


def _url(database_url: str | None) -> str:
    from .settings import ServerSettings

    return database_url or ServerSettings().database_url


def _shown(url: str) -> str:
    import sqlalchemy as sa

    return sa.make_url(url).render_as_string(hide_password=True)


def _counts(counts: dict[str, int]) -> str:
    shown = [f"{counts.get(n, 0)} {n.replace('_', ' ')}s" for n in ("find", "unit", "field_version") if n in counts]
    return ", ".join(shown).replace("field versions", "versions")


@click.command("backup")
@click.option("--to", "folder", type=click.Path(file_okay=False, path_type=Path), required=True,
              help="Folder to write the backup into (a USB stick or another disk; made if missing).")
@click.option("--keep", type=click.IntRange(min=1), default=14, show_default=True,
              help="How many backups of this site to keep in that folder (the oldest beyond are deleted).")
@click.option("--db", "database_url", default=None, help="Server database URL [default: the server's SQLite file].")
def backup(folder: Path, keep: int, database_url: str | None) -> None:
    """Back up the camp store while it runs: a consistent snapshot (SQLite's backup API; pg_dump for PostgreSQL),
    verified, renamed into place with a JSON sidecar, kept in a rotation and shown on the camp Today page."""
    from .backup import backup_store

    r = backup_store(_url(database_url), folder, keep=keep, progress=_say("backup"))
    click.echo(f"wrote {r['path']} ({r['bytes'] / 1e6:.1f} MB, sha256 {r['sha256'][:16]}...): the store at "
               f"{_at(r['made_at'])}, {_counts(r['counts'])}; verified: "
               + (f"integrity ok, row counts of {len(r['counts'])} tables match the store" if r["backend"] == "sqlite"
                  else f"pg_restore reads it and lists the data of all {len(r['counts'])} tables (their row counts, "
                  "in the sidecar, are checked on restore)"))
    click.echo(f"kept the newest {keep} backups of {r['site']} in {folder}"
               + (f"; deleted {len(r['removed'])} older: {', '.join(Path(p).name for p in r['removed'])}"
                  if r["removed"] else ""))
    if r["not_recorded"]:
        click.echo(f"the backup is good, but the Today page will not show it: {r['not_recorded']}")


@click.command("restore")
@click.argument("backup_file", metavar="BACKUP", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@click.option("--db", "database_url", required=True,
              help="The NEW store to restore into: a SQLite file that does not exist yet (sqlite:///PATH), or an "
                   "empty PostgreSQL database.")
def restore(backup_file: Path, database_url: str) -> None:
    """Restore a backup into a new store, checked against its sidecar (SHA-256, integrity, row counts) before it is
    put in place; an existing store is refused and nothing is half-written on failure."""
    from .backup import restore_store

    r = restore_store(backup_file, database_url, progress=_say("restore"))
    click.echo(f"restored {backup_file.name} (the store at {_at(r['made_at'])}) into {_shown(database_url)}: "
               f"{_counts(r['counts'])}; checked: sha256, integrity, row counts")
    click.echo(_devices(r["devices_revoked"], recovered=False, from_backup=True))
    click.echo("Work the tablets did after the backup is not in it: if they hold some, run baulk recover --backup "
               f"{backup_file} --from-tablet TABLET.sqlite ... --db NEW-URL instead, before re-enrolling them.")


@click.command("recover")
@click.option("--from-tablet", "tablets", multiple=True, required=True,
              type=click.Path(exists=True, dir_okay=False, path_type=Path),
              help="A tablet's file (read only, never changed); list more files after it, or repeat the option.")
@click.argument("more", nargs=-1, type=click.Path(exists=True, dir_okay=False, path_type=Path))
@click.option("--backup", "backup_file", type=click.Path(exists=True, dir_okay=False, path_type=Path), default=None,
              help="The last backup of the lost store (from baulk backup), restored first.")
@click.option("--db", "database_url", required=True,
              help="The NEW store to build: a SQLite file that does not exist yet, or an empty PostgreSQL database.")
def recover(tablets: tuple[Path, ...], more: tuple[Path, ...], backup_file: Path | None, database_url: str) -> None:
    """Rebuild a lost camp store in a new one from its last backup (if any) and the tablets' files: each tablet's
    version log is merged as a push would be, and new number blocks start above every number any tablet held."""
    from .recovery import recover_store
    from .store import ServerStore
    from .validation import validate_after_merge

    r = recover_store(database_url, [*tablets, *more], backup=backup_file, progress=_say("recover"))
    with ServerStore.open(database_url, create=False) as store:
        validate_after_merge(store)
    click.echo(f"recovered into {_shown(database_url)}: {_counts({**r['counts'], 'field_version': r['versions']})}")
    if r["backup"]:
        click.echo(f"  from the backup of {_at(r['backup_made_at'])}: {r['versions_from_backup']} versions")
    for t in r["tablets"]:
        click.echo(f"  from {t.name}: {t.versions} versions, {t.merged['new']} new here"
                   + (f"; {t.unacked} of its own edits the lost store had not acknowledged" if t.unacked else "")
                   + (f"; {t.merged['left_out']} left out as a push would (set-up records from a {t.role})"
                      if t.merged["left_out"] else ""))
    click.echo(f"  {r['conflicts_open']} conflicts open ({r['number_clashes']} number clashes), {r['pending_rows']} "
               "rows pending")
    click.echo(f"number floor {r['number_floor']}: new number blocks start above it (the tablets' blocks and finds "
               f"reach {r['floor_from_tablets']}" + (f", the backup {r['floor_from_backup']})" if r["backup"] else ")"))
    click.echo("Not recoverable: what only the lost store held after the backup and no tablet given here had pulled "
               "(camp edits no tablet synced after, pushes of tablets not given), number blocks issued after it, "
               "and checks accepted after it.")
    click.echo(_devices(r["devices_revoked"], recovered=True, from_backup=bool(r["backup"])))



def register(group: click.Group) -> None:
    """Add ``baulk backup``, ``baulk restore`` and ``baulk recover`` to the ``baulk`` command."""
    for command in (backup, restore, recover):
        group.add_command(command)
