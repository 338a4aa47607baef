"""The ``baulk`` command line: a thin shell over library functions.

Each command parses its options, calls one library function and prints the result; whatever goes wrong becomes
one line (``sync_server.cli_boundary``): a ``BaulkError`` its message with the fix and exit code 1. This module,
``sync_server.cli_bundle`` and ``sync_server.demo`` are the only places that know both the tablet and the server
packages; they import ``mobile`` lazily inside the commands that need it.
"""

from __future__ import annotations

import datetime as dt
import sys
from pathlib import Path
from typing import Any

import click

from schema import __version__
from schema.records.safety import SAFETY_KINDS

from .cli_boundary import boundary

__all__ = ["cli", "main"]


# the server database every store command takes (the settings' default when not given)
_db_option = click.option("--db", "database_url", default=None,
                          help="Server database URL [default: the server's SQLite file].")
_photos_dir_option = click.option(  # the camp's photo folder (sync_server.photos.photo_dir decides the default)
    "--photos-dir", type=click.Path(file_okay=False, path_type=Path), default=None,
    help="Folder of the camp's photo files [default: the setting BAULK_SERVER_PHOTOS_DIR, else <database>-photos "
         "beside a SQLite file, else photos/ in the user data folder].")


class _BaulkGroup(click.Group):
    """The one error boundary of every subcommand (``sync_server.cli_boundary``): a domain error, a file that cannot
    be read or written, a damaged database, even a bug, reaches the user as one line; exit 1, or 2 for a bug."""

    def invoke(self, ctx: click.Context) -> Any:
        try:
            return super().invoke(ctx)
        except Exception as exc:  # noqa: BLE001 - the boundary sorts them
            raise boundary(exc) from None


@click.group(cls=_BaulkGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="baulk")
def cli() -> None:
    """Baulk: offline-first field recording for excavations.

    Tablets record finds in the trench with no network; the camp server merges them, checks them against the
    stratigraphy and hands analysts clean per-horizon tables.
    """


@cli.command()
@click.option("--out", "out", type=click.Path(file_okay=False, path_type=Path), default=Path("demo-out"),
              show_default=True, help="Folder to write the demo's stores and summary into.")
def demo(out: Path) -> None:
    """Run the whole job on an invented site, on the embedded SQLite default."""
    from .demo import run_demo

    result = run_demo(out, progress=lambda msg: click.echo(f"[demo] {msg}"))
    click.echo((result.out / "summary.md").read_text())


@cli.command()
@click.option("--store", "store_path", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="The tablet's SQLite file [default: tablet.sqlite in the user data folder].")
@click.option("--simulate", is_flag=True, help="Stand-in total station and GNSS receiver (demo and training).")
@click.option("--instrument", default=None, help="Device file the total station's lines arrive on (e.g. /dev/rfcomm0).")
@click.option("--template", "template_file", default=None, metavar="FILE|bks|csv",
              help="Instrument line template (TOML) the instrument's lines are read with, or a built-in one: "
                   "bks (Baulk's own line, the default) or csv. See README, 'Instrument line templates'.")
@click.option("--receiver", default=None, help="Device file the GNSS receiver's NMEA sentences arrive on.")
@click.option("--laser-class", default=None, help="The total station's laser class as marked on it (shown with the setup).")
def tablet(store_path: Path | None, simulate: bool, instrument: str | None, receiver: str | None,
           laser_class: str | None, template_file: str | None) -> None:
    """Open the tablet app (Kivy) on a tablet file."""
    import os

    from schema.survey.templates import load_template, template_named

    template = None  # the template file is checked whole before the app opens
    if template_file is not None:
        template = template_named(template_file) if template_file in ("bks", "csv") else load_template(template_file)

    os.environ.setdefault("KIVY_NO_ARGS", "1")
    from mobile.settings import TabletSettings
    from mobile.ui.app import TabletApp

    settings = TabletSettings()
    TabletApp(store_path=store_path or settings.store_path, simulate=simulate, instrument=instrument, receiver=receiver,
              labels_dir=settings.labels_dir, laser_class=laser_class or settings.laser_class, template=template).run()


@cli.command()
@click.option("--host", default=None, help="Address to listen on [default: 127.0.0.1; 0.0.0.0 for the camp Wi-Fi].")
@click.option("--port", type=int, default=None, help="Port to listen on [default: 8765].")
@click.option("--db", "database_url", default=None,
              help="Database URL [default: a SQLite file in the user data folder]; postgresql+psycopg://... for PostgreSQL.")
@click.option("--tls-cert", type=click.Path(dir_okay=False, path_type=Path), default=None, help="PEM certificate for HTTPS.")
@click.option("--tls-key", type=click.Path(dir_okay=False, path_type=Path), default=None, help="PEM private key for HTTPS.")
@click.option("--forwarded-allow-ips", default=None, metavar="IPS",
              help="Behind a reverse proxy: its address(es), comma-separated, whose X-Forwarded-For is believed "
                   "[default: none; every client is the address it connects from].")
@_photos_dir_option
def serve(host: str | None, port: int | None, database_url: str | None, tls_cert: Path | None, tls_key: Path | None,
          forwarded_allow_ips: str | None, photos_dir: Path | None = None) -> None:
    """Start the camp server (HTTP, or HTTPS with --tls-cert and --tls-key)."""
    import uvicorn
    from pydantic import ValidationError

    from .access_log import log_config
    from .app import KEEP_ALIVE_S, create_app
    from .settings import ServerSettings

    given = {k: v for k, v in dict(host=host, port=port, database_url=database_url, tls_cert=tls_cert,
                                   tls_key=tls_key, forwarded_allow_ips=forwarded_allow_ips,
                                   photos_dir=photos_dir).items() if v is not None}
    try:
        settings = ServerSettings(**given)
    except ValidationError as exc:
        raise click.ClickException("; ".join(e["msg"].removeprefix("Value error, ") for e in exc.errors())) from None
    scheme = "https" if settings.tls_cert else "http"
    click.echo(f"Baulk camp server {__version__} listening on {scheme}://{settings.host}:{settings.port}/v1/")
    click.echo(f"database: {_redact(settings.database_url)}")
    from .photos import photo_dir

    click.echo(f"photos: {photo_dir(settings.database_url, settings.photos_dir)}")
    click.echo("Tablets on the camp Wi-Fi reach it at this machine's address; stop it with Ctrl+C.")
    click.echo("Enrol a tablet: baulk device add --role recorder --label TAB-1 (prints a one-time code and a QR code)")
    proxies = (settings.forwarded_allow_ips or "").strip()
    if proxies:
        click.echo(f"believing X-Forwarded-For from {proxies} only")
    uvicorn.run(
        create_app(settings), host=settings.host, port=settings.port, log_level="info",
        ssl_certfile=str(settings.tls_cert) if settings.tls_cert else None,
        ssl_keyfile=str(settings.tls_key) if settings.tls_key else None,
        log_config=log_config(),  # the access log's query strings without tokens
        proxy_headers=bool(proxies), forwarded_allow_ips=proxies or None,  # trust no proxy unless named
        timeout_keep_alive=KEEP_ALIVE_S,  # longer than a tablet reuses an idle connection (app.KEEP_ALIVE_S)
    )


def _redact(url: str) -> str:
    import sqlalchemy as sa

    return sa.make_url(url).render_as_string(hide_password=True)


@cli.command()
@click.argument("path", type=click.Path(exists=True, dir_okay=False, path_type=Path))
def inspect(path: Path) -> None:
    """Report on a tablet file without changing it: upgrade steps, integrity check, records."""
    from mobile.store import inspect_file

    report = inspect_file(path)
    click.echo(f"file: {path}")
    click.echo(f"integrity: {report['integrity']}")
    click.echo(f"upgrade steps applied: {', '.join(report['applied']) or 'none'}")
    click.echo(f"upgrade steps pending: {', '.join(report['pending']) or 'none (up to date)'}")
    for name, n in report["counts"].items():
        click.echo(f"  {name:<14} {n}")


@cli.command("validate")
@click.option("--db", "database_url", default=None,
              help="Server database URL to validate and store issues in [default: the server's SQLite file].")
@click.option("--tablet", "tablet_file", type=click.Path(exists=True, dir_okay=False, path_type=Path), default=None,
              help="Validate a tablet file instead (read-only; nothing is stored).")
@click.option("--out", type=click.Path(file_okay=False, path_type=Path), default=Path("validation"), show_default=True,
              help="Folder for issues.json and issues.csv.")
def validate_cmd(database_url: str | None, tablet_file: Path | None, out: Path) -> None:
    """Check every find against the stratigraphy; summary here, issues.json/csv in --out; exit 1 on errors."""
    from .validation import run_validation_job

    data = _tablet_site_data(tablet_file) if tablet_file is not None else None
    summary = run_validation_job(database_url=database_url, out=out, tablet_data=data, tablet_name=str(tablet_file))
    for line in summary["lines"]:
        click.echo(line)
    if summary["open_errors"]:
        raise SystemExit(1)


def _tablet_site_data(path: Path) -> Any:
    """A tablet file's data, read from a temporary copy so the original is never changed (not even upgraded)."""
    import shutil
    import tempfile

    from mobile.store import TabletStore, check_tablet_file

    check_tablet_file(path)
    with tempfile.TemporaryDirectory(prefix="baulk-validate-") as tmp:
        copy = Path(tmp) / path.name
        shutil.copy2(path, copy)
        for suffix in ("-wal", "-shm"):
            side = path.with_name(path.name + suffix)
            if side.exists():
                shutil.copy2(side, copy.with_name(copy.name + suffix))
        with TabletStore.open(copy) as tablet:
            return tablet.site_data()


@cli.command()
@click.argument("names", nargs=-1)
@click.option("--quick", is_flag=True, help="Small sizes (the CI run, under 2 minutes).")
@click.option("--json", "as_json", is_flag=True, help="Print a JSON list, one object per benchmark.")
@click.option("--list", "list_only", is_flag=True, help="List the benchmarks and exit.")
@click.option("--repeats", type=click.IntRange(min=1), default=None,
              help="Time each arm this many times instead of the benchmark's own count (e.g. 1 for a long "
                   "benchmark at full size).")
def bench(names: tuple[str, ...], quick: bool, as_json: bool, list_only: bool, repeats: int | None) -> None:
    """Run benchmarks; each reports subject/baseline measured in the same run (lower is better)."""
    from schema import benchkit

    _load_benchmarks()
    if list_only:
        for name, b in sorted(benchkit.BENCHMARKS.items()):
            click.echo(f"{name:<24} {b.doc}")
        return
    try:
        results = (benchkit.run(list(names), quick=quick, repeats=repeats) if as_json
                   else _run_printing(benchkit, list(names), quick, repeats))
    except KeyError as exc:
        raise click.ClickException(str(exc.args[0])) from None
    if as_json:
        click.echo(benchkit.to_json(results))


def _run_printing(benchkit: Any, names: list[str], quick: bool, repeats: int | None = None) -> list[Any]:
    """Run and print each benchmark in turn; one that fails is printed as failed and the others still run (the
    command then exits 1 naming the failed ones)."""
    results, failed = [], []
    for name in names or sorted(benchkit.BENCHMARKS):
        if name not in benchkit.BENCHMARKS:
            raise KeyError(f"unknown benchmark {name}; known: {', '.join(sorted(benchkit.BENCHMARKS))}")
        click.echo(f"running {name} ...", err=True)
        try:
            (r,) = benchkit.run([name], quick=quick, repeats=repeats)
        except RuntimeError as exc:
            click.echo(f"{name:<24} FAILED: {exc}")
            failed.append(name)
            continue
        click.echo(benchkit.format_line(r))
        results.append(r)
    if failed:
        raise click.ClickException(f"{len(failed)} of {len(results) + len(failed)} benchmarks failed: "
                                   f"{', '.join(failed)} (their lines above say why)")
    return results


def _server_store(database_url: str | None) -> Any:
    """The existing store a command works on; only ``baulk serve`` and ``baulk site init`` make one, so a mistyped
    --db is refused (nothing created) instead of starting an empty store."""
    from .settings import ServerSettings
    from .store import ServerStore

    return ServerStore.open(database_url or ServerSettings().database_url, create=False)


@cli.command("safety")
@click.option("--trench", default=None, help="Only this trench's checks (its code, e.g. TR1).")
@click.option("--kind", type=click.Choice(SAFETY_KINDS), default=None,
              help="Only checks of this kind.")
@click.option("--days", type=click.IntRange(min=1), default=None, help="Only checks of the last N days [default: all].")
@click.option("--csv", "csv_path", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Also write the listed checks to this CSV file.")
@_db_option
def safety_cmd(trench: str | None, kind: str | None, days: int | None, csv_path: Path | None,
               database_url: str | None) -> None:
    """List the safety checks the tablets recorded, newest first: shoring at depth, possible human remains, the
    laser with each setup, heat, with each recorder's answer. Baulk records answers; it never judges a trench safe."""
    from .safety import safety_line, safety_log, write_safety_csv

    since = dt.datetime.now(dt.timezone.utc) - dt.timedelta(days=days) if days else None
    with _server_store(database_url) as store:
        rows = safety_log(store, trench=trench, kind=kind, since=since, limit=None)
    if csv_path is not None:  # first: a path that cannot be written is refused before anything is listed
        write_safety_csv(rows, csv_path)
    for row in rows:
        click.echo(safety_line(row))
    click.echo(f"{len(rows)} safety check{'' if len(rows) == 1 else 's'}" + (f"; written to {csv_path}" if csv_path else ""),
               err=True)


@cli.command("export")
@click.option("--out", type=click.Path(file_okay=False, path_type=Path), required=True, help="Folder to write into.")
@click.option("--seasons", "seasons", multiple=True, help="Season label to include (repeatable) [default: all].")
@click.option("--strict", is_flag=True, help="Leave out every find an error-severity check names (listed in excluded.csv).")
@_db_option
@_photos_dir_option
def export(out: Path, seasons: tuple[str, ...], strict: bool, database_url: str | None,
           photos_dir: Path | None = None) -> None:
    """Write the analyst's files: counts and densities per horizon and unit, finds, excluded finds, volumes,
    Darwin Core occurrences, a GeoPackage, a Frictionless data package and a manifest."""
    from .exports import run_export

    with _server_store(database_url) as store:
        m = run_export(store, out, seasons=list(seasons) or None, strict=strict, photos_dir=photos_dir,
                       progress=lambda msg: click.echo(f"[export] {msg}", err=True))
    c = m["counts"]
    click.echo(f"wrote {out}: {c['finds_included']} finds counted, {c['finds_excluded']} left out (excluded.csv), "
               f"{c['locations_withheld']} locations withheld; seasons {', '.join(m['seasons'])}; "
               f"{'strict' if strict else 'flagged finds included with their issue codes'}")


@cli.group()
def season() -> None:
    """Carry one server store's work into another: last season's units, finds and numbering into this one."""


@season.command("archive")
@click.option("--out", type=click.Path(dir_okay=False, path_type=Path), required=True, help="Archive file to write.")
@_db_option
def season_archive(out: Path, database_url: str | None) -> None:
    """Write this store's whole version log (and its highest find number) into one archive file."""
    from .seasons import write_archive

    with _server_store(database_url) as store:
        m = write_archive(store, out, progress=lambda n, total: click.echo(f"  {n}/{total} versions", err=True))
    click.echo(f"wrote {m['path']}: {m['versions']} versions, numbers up to {m['number_floor']}")


@season.command("import")
@click.argument("file", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@click.option("--confirm-far-number", "confirm_far", is_flag=True,
              help="Accept a number floor more than 10 blocks above the highest number issued here.")
@_db_option
def season_import(file: Path, confirm_far: bool, database_url: str | None) -> None:
    """Check an archive whole, then merge it into this store (clashes become conflicts; a bad archive changes nothing)."""
    from schema.errors import NumberTooFar

    from .seasons import import_archive
    from .validation import run_validation

    with _server_store(database_url) as store:
        try:
            r = import_archive(store, file, confirm_far=confirm_far)
        except NumberTooFar as exc:
            raise exc.confirm_with("run the import again with --confirm-far-number") from None
        run_validation(store)
    click.echo(f"imported {file.name}: {r['applied']} new versions ({r['already_held']} already here), "
               f"{r['rows_written']} rows written, {r['conflicts_open']} conflicts open "
               f"({r['number_clashes']} number clashes); new number blocks start above {r['number_floor']}")


def _public_url(server: str | None) -> tuple[str, str | None]:
    """The address tablets use, and the certificate fingerprint when the server serves HTTPS."""
    import socket

    from .settings import ServerSettings
    from .tls import cert_fingerprint

    settings = ServerSettings()
    fingerprint = cert_fingerprint(settings.tls_cert) if settings.tls_cert else None
    if server:
        return server.rstrip("/"), fingerprint
    host = settings.host
    if host in ("0.0.0.0", "::"):
        try:
            host = socket.gethostbyname(socket.gethostname())
        except OSError:
            host = "127.0.0.1"
    return f"{'https' if settings.tls_cert else 'http'}://{host}:{settings.port}", fingerprint


@cli.group()
def device() -> None:
    """Enrol, list and revoke the tablets and laptops that may talk to this server."""


@device.command("add")
@click.option("--role", type=click.Choice(["recorder", "manager", "analyst"]), required=True,
              help="recorder: a trench tablet; manager: the data manager; analyst: read and export only.")
@click.option("--label", required=True, help="A name people will recognise, e.g. TAB-4.")
@_db_option
@click.option("--server", default=None, help="The address tablets use [default: from the server settings].")
@click.option("--png", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Also write the QR code as a PNG image here (to print or show on another screen).")
@click.option("--json", "as_json", is_flag=True,
              help="Print one JSON object (device, code, expires_at, enrol_line, server, fingerprint) and nothing else.")
def device_add(role: str, label: str, database_url: str | None, server: str | None, png: Path | None,
               as_json: bool) -> None:
    """Register a device and print its one-time enrolment code, as text and as a QR code (or as JSON)."""
    from .devices import CODE_TTL, code_qr, enrol_line, make_code

    url, fingerprint = _public_url(server)
    with _server_store(database_url) as store:
        dev, code, expires = make_code(store, label=label, role=role)
    line = enrol_line(url, code, fingerprint=fingerprint)
    if as_json:
        import json

        if png is not None:
            code_qr(line, png=png)  # the PNG is still written when asked; no QR art on stdout
        click.echo(json.dumps({"device": {"id": str(dev.id), "label": dev.label, "role": dev.role}, "code": code,
                               "expires_at": expires.isoformat(), "enrol_line": line, "server": url,
                               "fingerprint": fingerprint}))
        return
    click.echo(code_qr(line, png=png))
    click.echo(f"device {dev.label} ({dev.role}) registered; enrolment code: {code}")
    click.echo(f"good once, until {expires:%Y-%m-%d %H:%M} UTC ({int(CODE_TTL.total_seconds() // 60)} minutes); "
               f"server {url}" + (f"; certificate sha256 {fingerprint}" if fingerprint else ""))
    if png is not None:
        click.echo(f"QR code written to {png}")


@device.command("list")
@_db_option
def device_list(database_url: str | None) -> None:
    """Every device, its role, when it enrolled and whether it is revoked."""
    from .devices import list_devices

    with _server_store(database_url) as store:
        rows = list_devices(store)
    click.echo(f"{'label':<16} {'role':<9} {'enrolled':<17} {'revoked':<17} id")
    for d in rows:
        when = (lambda t: t.strftime("%Y-%m-%d %H:%M") if t else "-")
        click.echo(f"{d.label:<16} {d.role:<9} {when(d.enrolled_at) if d.enrolled_at else 'code not used':<17} "
                   f"{when(d.revoked_at):<17} {d.id}")


@device.command("revoke")
@click.argument("which")
@_db_option
def device_revoke(which: str, database_url: str | None) -> None:
    """Revoke a device by label or id: its token is refused from the next request on."""
    from .devices import revoke_device

    with _server_store(database_url) as store:
        d = revoke_device(store, which)
    click.echo(f"device {d.label} revoked at {d.revoked_at:%Y-%m-%d %H:%M} UTC; enrol it again with a new code to let it back")


@cli.group()
def server() -> None:
    """Set up the camp server machine."""


@server.command("make-cert")
@click.option("--host", "hostnames", multiple=True, help="Host name tablets use for this laptop (repeatable).")
@click.option("--ip", "ips", multiple=True, help="Address tablets use for this laptop (repeatable).")
@click.option("--out", type=click.Path(file_okay=False, path_type=Path), required=True, help="Folder for the files.")
@click.option("--days", type=int, default=400, show_default=True, help="How long the certificates are valid.")
def server_make_cert(hostnames: tuple[str, ...], ips: tuple[str, ...], out: Path, days: int) -> None:
    """Make a private camp CA and a server certificate for this laptop (for baulk serve --tls-cert/--tls-key)."""
    from .tls import make_camp_certificates

    try:
        r = make_camp_certificates(out, hostnames=list(hostnames), ips=list(ips), days=days)
    except ValueError as exc:
        raise click.ClickException(str(exc)) from None
    click.echo(f"camp CA: {r['ca']} (keep camp-ca.key off the camp Wi-Fi)")
    click.echo(f"server certificate: {r['cert']} and key {r['key']} for {', '.join(r['names'])}, valid until {r['expires']}")
    click.echo(f"fingerprint (sha256): {r['fingerprint']}")
    click.echo(f"start: baulk serve --host 0.0.0.0 --tls-cert {r['cert']} --tls-key {r['key']}")


def _register_groups() -> None:
    from .cli_site import season_close, season_open, site
    from .cli_survey import survey
    from .cli_curation import correct, date, horizon
    from .cli_bundle import bundle

    cli.add_command(survey)
    cli.add_command(bundle)
    for group in (horizon, date, correct):
        cli.add_command(group)
    cli.add_command(site)
    from .cli_ages import ages
    cli.add_command(ages)  # baulk ages: sync_server/cli_ages.py
    season.add_command(season_open)
    season.add_command(season_close)
    from .cli_backup import register as register_backup
    register_backup(cli)  # baulk backup, restore, recover


def _load_benchmarks() -> None:
    """Each part registers its own benchmarks when imported."""
    import mobile.benchmarks  # noqa: F401
    import schema.benchmarks  # noqa: F401
    import sync_server.bench_http  # noqa: F401
    import sync_server.bench_photos
    from mobile import photos, store, sync  # the tablet's side of photos.upload (this module may cross)
    from schema import benchkit

    if "photos.upload" not in benchkit.BENCHMARKS:
        sync_server.bench_photos.register(photos=photos, store=store, sync=sync)
    import sync_server.benchmarks  # noqa: F401


_register_groups()


def main() -> None:
    cli(prog_name="baulk")


if __name__ == "__main__":
    sys.exit(main())
