"""``baulk ages``: the age of every horizon and unit from the laboratory dates, and the stratigraphic ranges of
the finds with confidence intervals on their ends. A thin shell over ``sync_server.export_ages`` (which calls the
pure model in ``schema.strata.agemodel`` and ``schema.strata.ranges``)."""

from __future__ import annotations

from pathlib import Path

import click

__all__ = ["ages"]


@click.command("ages")
@click.option("--series", "series_path", type=click.Path(exists=True, dir_okay=False, path_type=Path), default=None,
              help="A CSV of age_ka,value (any proxy record) to summarise over each horizon's age span.")
@click.option("--out", type=click.Path(file_okay=False, path_type=Path), default=None,
              help="Folder to write the tables, the pictures and their datapackage.json into [default: print only].")
@click.option("--db", "database_url", default=None, help="Server database URL [default: the server's SQLite file].")
def ages(series_path: Path | None, out: Path | None, database_url: str | None) -> None:
    """Model the age of every horizon, unit and find from the laboratory dates and the order the matrix and the
    horizons impose (order-constrained Monte Carlo, seeded: the same store gives the same tables), and the first
    and last horizon of each taxon, artifact material and category with 95 % confidence intervals on the ends
    (Strauss and Sadler 1989; Marshall 1990). Dates the order cannot reconcile are named and left out."""
    from schema.analysis import select_finds
    from schema.records import Find
    from schema.strata.validate import validate

    from .cli import _server_store
    from .export_ages import compute_ages, draw_age_pictures, horizon_lines, read_series, write_age_files, write_age_package

    series = read_series(series_path) if series_path else None  # first: a bad file is refused before any work
    with _server_store(database_url) as store:
        data = store.site_data()
        finds = store.list(Find, site_id=data.site.id)
    report = validate(data)
    counted = select_finds(finds, report.issues, strict=False).included
    tables = compute_ages(data, counted, matrix=report.matrix, series=series)
    m = tables.model
    if out is not None:
        out.mkdir(parents=True, exist_ok=True)
        written = write_age_files(tables, out)
        write_age_package(data.site, list(written), out)
        pictures = draw_age_pictures(tables, data, out)
        click.echo(f"wrote {out}: {', '.join(f'{n}.csv ({k} rows)' for n, k in written.items())}, "
                   f"{', '.join(p.name for p in pictures) or 'no pictures'} and datapackage.json")
    if m.problem:
        click.echo(f"no ages: {m.problem}")
    else:
        click.echo(f"{m.draws} draws (seed {m.seed}) over {len(m.anchors)} dated units: "
                   + "; ".join(f"{a.name} {a.age_ka:g} +- {a.sigma_ka:g} ka" for a in m.anchors))
        click.echo(f"draws already in order before sampling: {m.order_acceptance:.1%}; Gibbs proposals inside their "
                   f"interval at once: {m.proposal_acceptance:.1%} ({m.sweeps} sweeps)")
    for line in horizon_lines(tables):
        click.echo(line)
    for note in m.notes:
        click.echo(f"note: {note}")
    for x in m.left_out:
        click.echo(f"left out: {x.lab_code} on unit {x.unit} ({x.age_ka:g} +- {x.sigma_ka:g} ka): {x.reason}")
    for row in tables.rows.get("series_by_horizon", []):
        if row["draws_with_points"]:
            click.echo(f"series over {row['horizon']}: mean {row['mean_median']:g} (95 %: {row['mean_lo95']:g} to "
                       f"{row['mean_hi95']:g}) over a median of {row['points_median']:g} points")
        else:
            click.echo(f"series over {row['horizon']}: no point falls in the horizon's age span")
