"""``baulk bundle``: a tablet's work to the camp and the camp's changes back to the tablet, on a USB stick.

``export`` and ``read`` work on a tablet file (they import ``mobile`` lazily, inside the command: this module
and ``sync_server.cli`` / ``sync_server.demo`` are the only server modules that know the tablet package);
``import`` and ``for-tablet`` work on the camp store. Each calls one library function and prints its outcome.
"""

from __future__ import annotations

from pathlib import Path

import click

from schema.wording import count_words

__all__ = ["bundle"]

_db_option = click.option("--db", "database_url", default=None,
                          help="Server database URL [default: the server's SQLite file].")
_photos_dir_option = click.option(
    "--photos-dir", type=click.Path(file_okay=False, path_type=Path), default=None,
    help="Folder of the camp's photo files [default: as baulk serve: BAULK_SERVER_PHOTOS_DIR, else beside the "
         "database].")


@click.group()
def bundle() -> None:
    """Carry a tablet's unsent work to the camp server on a USB stick when there is no Wi-Fi, and the camp's
    changes (new find numbers, resolutions, corrections) back to the tablet."""


@bundle.command("export")
@click.option("--store", "store_path", type=click.Path(exists=True, dir_okay=False, path_type=Path), required=True,
              help="The tablet's SQLite file.")
@click.option("--out", type=click.Path(path_type=Path), required=True,
              help="Bundle file to write, or a folder to write a dated one into.")
def bundle_export(store_path: Path, out: Path) -> None:
    """Write every batch the server has not acknowledged into one sealed bundle file."""
    from mobile.bundles import export_bundle
    from mobile.store import TabletStore, check_tablet_file

    check_tablet_file(store_path)
    with TabletStore.open(store_path) as tablet:
        m = export_bundle(tablet, out)
    total = sum(b["versions"] for b in m["batches"])
    click.echo(f"wrote {m['path']}: {len(m['batches'])} batches, {total} versions from {m['device_label']}")
    if m["photos"]:
        click.echo(f"and {m['path']}.photos.zip: {m['photos']} photos (keep it beside the bundle)")


@bundle.command("import")
@click.argument("file", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@_db_option
@_photos_dir_option
def bundle_import(file: Path, database_url: str | None, photos_dir: Path | None = None) -> None:
    """Check a bundle whole, then apply it exactly like a push (a bad bundle changes nothing)."""
    from .bundles import import_bundle
    from .cli import _server_store
    from .validation import validate_after_merge

    with _server_store(database_url) as store:
        r = import_bundle(store, file, photos_dir=photos_dir)
        if r["applied"]:
            validate_after_merge(store)  # the checks follow the new finds (a running server shows them at once)
    click.echo(f"imported {file.name} from {r['device']}: {r['batches']} batches, {r['applied']} new versions"
               + (f", {r['replayed']} already applied" if r["replayed"] else "")
               + (f"; {len(r['refused'])} refused:" if r["refused"] else ""))
    for refused in r["refused"]:
        click.echo(f"  refused {refused['version']}: {refused['reason']}")
    photos = r["photos"]
    if photos["kept"] or photos["held"] or photos["refused"]:
        click.echo(f"photos: {photos['kept']} kept, {photos['held']} held already"
                   + (f", {len(photos['refused'])} refused:" if photos["refused"] else ""))
    for line in photos["refused"]:
        click.echo(f"  refused photo {line}")


def _spans(blocks: list[tuple[int, int]]) -> str:
    return ", ".join(f"{a}-{b}" for a, b in blocks) or "none"


@bundle.command("for-tablet")
@click.argument("label")
@click.option("--out", type=click.Path(path_type=Path), required=True,
              help="Return bundle file to write, or a folder (the stick) to write "
                   "<LABEL>-from-camp-<time>.baulkreturn into.")
@_db_option
@_photos_dir_option
def bundle_for_tablet(label: str, out: Path, database_url: str | None, photos_dir: Path | None = None) -> None:
    """Write what the tablet LABEL would pull into one file sealed for it: the changes after the position its last
    bundle reported (everything, if it never sent one), its number blocks (a new one first when half of its newest
    is used) and the camp's resolutions and corrections. The tablet reads it on its Camp screen (Read bundle)."""
    from .bundles import write_for_tablet
    from .cli import _server_store

    with _server_store(database_url) as store:
        r = write_for_tablet(store, label=label, out=out, photos_dir=photos_dir)
    click.echo(f"wrote {r['path']} for {r['device_label']}: {r['versions']} changes after camp change {r['after']} "
               f"(up to {r['next']}), {r['from_camp']} of them made at camp")
    click.echo(f"number blocks: {_spans(r['blocks'])}"
               + (f" ({_spans(r['issued'])} issued now)" if r["issued"] else ""))
    if r["thumbnails"]:
        click.echo(f"and {r['path']}.thumbs.zip: {count_words(r['thumbnails'], 'photo thumbnail')} (keep it beside the bundle; "
                   "its hash is under the bundle's seal)")


@bundle.command("read")
@click.argument("file", type=click.Path(exists=True, path_type=Path))
@click.option("--store", "store_path", type=click.Path(exists=True, dir_okay=False, path_type=Path), required=True,
              help="The tablet's SQLite file.")
def bundle_read(file: Path, store_path: Path) -> None:
    """Read a return bundle into a tablet file without the app, as the Camp screen's Read bundle does: checked
    whole, then applied once (FILE may be the folder holding it: the tablet's newest is read)."""
    from mobile.bundles import read_return_bundle
    from mobile.store import TabletStore, check_tablet_file

    check_tablet_file(store_path)
    with TabletStore.open(store_path) as tablet:
        r = read_return_bundle(tablet, file)
    click.echo(r.sentence())
