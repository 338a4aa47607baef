"""The ``baulk`` command line: a thin shell over library functions.

Each command parses its options, calls one library function and prints the result; a ``BaulkError`` becomes
one message with the fix and exit code 1. This module and ``sync_server.demo`` are the only places that know
both the tablet and the server packages; they import ``mobile`` lazily inside the commands that need it.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

import click

from schema import __version__
from schema.errors import BaulkError

__all__ = ["cli", "main"]


class _BaulkGroup(click.Group):
    """Turns any domain error, from any subcommand, into one clear message (the fix included) and exit 1."""

    def invoke(self, ctx: click.Context) -> Any:
        try:
            return super().invoke(ctx)
        except BaulkError as exc:
            raise click.ClickException(str(exc)) from None


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
@click.option("--host", default=None, help="Address to listen on [default: 127.0.0.1; 0.0.0.0 for the camp Wi-Fi].")
@click.option("--port", type=int, default=None, help="Port to listen on [default: 8765].")
@click.option("--db", "database_url", default=None,
              help="Database URL [default: a SQLite file in the user data folder]; postgresql+psycopg://... for PostgreSQL.")
@click.option("--tls-cert", type=click.Path(dir_okay=False, path_type=Path), default=None, help="PEM certificate for HTTPS.")
@click.option("--tls-key", type=click.Path(dir_okay=False, path_type=Path), default=None, help="PEM private key for HTTPS.")
def serve(host: str | None, port: int | None, database_url: str | None, tls_cert: Path | None, tls_key: Path | None) -> None:
    """Start the camp server (HTTP, or HTTPS with --tls-cert and --tls-key)."""
    import uvicorn
    from pydantic import ValidationError

    from .app import create_app
    from .settings import ServerSettings

    given = {k: v for k, v in dict(host=host, port=port, database_url=database_url, tls_cert=tls_cert,
                                   tls_key=tls_key).items() if v is not None}
    try:
        settings = ServerSettings(**given)
    except ValidationError as exc:
        raise click.ClickException("; ".join(e["msg"].removeprefix("Value error, ") for e in exc.errors())) from None
    scheme = "https" if settings.tls_cert else "http"
    click.echo(f"Baulk camp server {__version__} listening on {scheme}://{settings.host}:{settings.port}/v1/")
    click.echo(f"database: {_redact(settings.database_url)}")
    click.echo("Tablets on the camp Wi-Fi reach it at this machine's address; stop it with Ctrl+C.")
    uvicorn.run(
        create_app(settings), host=settings.host, port=settings.port, log_level="info",
        ssl_certfile=str(settings.tls_cert) if settings.tls_cert else None,
        ssl_keyfile=str(settings.tls_key) if settings.tls_key else None,
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

    from mobile.store import TabletStore

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
def bench(names: tuple[str, ...], quick: bool, as_json: bool, list_only: bool) -> None:
    """Run benchmarks; each reports subject/baseline measured in the same run (lower is better)."""
    from schema import benchkit

    _load_benchmarks()
    if list_only:
        for name, b in sorted(benchkit.BENCHMARKS.items()):
            click.echo(f"{name:<24} {b.doc}")
        return
    try:
        results = benchkit.run(list(names), quick=quick) if as_json else _run_printing(benchkit, list(names), quick)
    except KeyError as exc:
        raise click.ClickException(str(exc.args[0])) from None
    if as_json:
        click.echo(benchkit.to_json(results))


def _run_printing(benchkit: Any, names: list[str], quick: bool) -> list[Any]:
    results = []
    for name in names or sorted(benchkit.BENCHMARKS):
        if name not in benchkit.BENCHMARKS:
            raise KeyError(f"unknown benchmark {name}; known: {', '.join(sorted(benchkit.BENCHMARKS))}")
        click.echo(f"running {name} ...", err=True)
        (r,) = benchkit.run([name], quick=quick)
        click.echo(benchkit.format_line(r))
        results.append(r)
    return results


@cli.group()
def bundle() -> None:
    """Carry a tablet's unsent work to the camp server on a USB stick when there is no Wi-Fi."""


@bundle.command("export")
@click.option("--store", "store_path", type=click.Path(exists=True, dir_okay=False, path_type=Path), required=True,
              help="The tablet's SQLite file.")
@click.option("--out", type=click.Path(path_type=Path), required=True,
              help="Bundle file to write, or a folder to write a dated one into.")
def bundle_export(store_path: Path, out: Path) -> None:
    """Write every batch the server has not acknowledged into one sealed bundle file."""
    from mobile.bundles import export_bundle
    from mobile.store import TabletStore

    with TabletStore.open(store_path) as tablet:
        m = export_bundle(tablet, out)
    total = sum(b["versions"] for b in m["batches"])
    click.echo(f"wrote {m['path']}: {len(m['batches'])} batches, {total} versions from {m['device_label']}")


@bundle.command("import")
@click.argument("file", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@click.option("--db", "database_url", default=None, help="Server database URL [default: the server's SQLite file].")
def bundle_import(file: Path, database_url: str | None) -> None:
    """Check a bundle whole, then apply it exactly like a push (a bad bundle changes nothing)."""
    from .bundles import import_bundle
    from .settings import ServerSettings
    from .store import ServerStore

    with ServerStore.open(database_url or ServerSettings().database_url) as store:
        r = import_bundle(store, file)
    click.echo(f"imported {file.name} from {r['device']}: {r['batches']} batches, {r['applied']} new versions"
               + (f", {r['replayed']} already applied" if r["replayed"] else ""))


@cli.group()
def season() -> None:
    """Carry one server store's work into another: last season's units, finds and numbering into this one."""


@season.command("archive")
@click.option("--out", type=click.Path(dir_okay=False, path_type=Path), required=True, help="Archive file to write.")
@click.option("--db", "database_url", default=None, help="Server database URL [default: the server's SQLite file].")
def season_archive(out: Path, database_url: str | None) -> None:
    """Write this store's whole version log (and its highest find number) into one archive file."""
    from .seasons import write_archive
    from .settings import ServerSettings
    from .store import ServerStore

    with ServerStore.open(database_url or ServerSettings().database_url) as store:
        m = write_archive(store, out, progress=lambda n, total: click.echo(f"  {n}/{total} versions", err=True))
    click.echo(f"wrote {m['path']}: {m['versions']} versions, numbers up to {m['number_floor']}")


@season.command("import")
@click.argument("file", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@click.option("--db", "database_url", default=None, help="Server database URL [default: the server's SQLite file].")
def season_import(file: Path, database_url: str | None) -> None:
    """Check an archive whole, then merge it into this store (clashes become conflicts; a bad archive changes nothing)."""
    from .seasons import import_archive
    from .settings import ServerSettings
    from .store import ServerStore
    from .validation import run_validation

    with ServerStore.open(database_url or ServerSettings().database_url) as store:
        r = import_archive(store, file)
        run_validation(store)
    click.echo(f"imported {file.name}: {r['applied']} new versions ({r['already_held']} already here), "
               f"{r['rows_written']} rows written, {r['conflicts_open']} conflicts open "
               f"({r['number_clashes']} number clashes); new number blocks start above {r['number_floor']}")


def _register_groups() -> None:
    from .cli_survey import survey

    cli.add_command(survey)


def _load_benchmarks() -> None:
    """Each part registers its own benchmarks when imported."""
    import mobile.benchmarks  # noqa: F401
    import schema.benchmarks  # noqa: F401
    import sync_server.bench_http  # noqa: F401
    import sync_server.benchmarks  # noqa: F401


_register_groups()


def main() -> None:
    cli(prog_name="baulk")


if __name__ == "__main__":
    sys.exit(main())
