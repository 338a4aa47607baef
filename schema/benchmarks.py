"""Benchmarks of the shared core for ``baulk bench``."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from .benchkit import Bench, benchmark
from .survey.polar import Station, reduce_shots


def _setup_reduce(size: int, _work: Path) -> dict[str, Any]:
    import pyproj

    rng = np.random.default_rng(1)
    return {
        "station": Station(1000.0, 2000.0, 100.0, 1.55, 37.5),
        "hz": rng.uniform(0, 360, size), "zen": rng.uniform(80, 100, size),
        "sd": rng.uniform(1, 80, size), "th": np.full(size, 1.3),
        "lon": rng.uniform(34.9, 35.1, size), "lat": rng.uniform(-1.2, -1.0, size),
        "proj": pyproj.Transformer.from_crs(4326, 32736, always_xy=True),
    }


def _reduce(state: dict[str, Any], _work: Path, _i: int) -> None:
    reduce_shots(state["station"], state["hz"], state["zen"], state["sd"], state["th"])


def _proj(state: dict[str, Any], _work: Path, _i: int) -> None:
    state["proj"].transform(state["lon"], state["lat"])


benchmark(Bench(
    name="survey.reduce",
    baseline_name="pyproj WGS84->UTM 36S, same n",
    sizes=(100_000, 1_000_000),
    setup=_setup_reduce,
    subject=_reduce,
    baseline=_proj,
    repeats=5,
    doc="polar reduction of n total-station shots (numpy) vs pyproj transforming n points; goal ratio <= 1.0",
))


def _setup_validate(size: int, work: Path) -> dict[str, Any]:
    """A site of 50 trenches x 10 stacked units (500 units, 8 level points each) and ``size`` finds."""
    import datetime as dt
    import uuid

    import sqlalchemy as sa

    from . import db
    from .records import LevelPoint, Season, Site, Trench, Unit
    from .store import RecordStore
    from .strata.data import FIND_COLUMNS
    from .tables import metadata

    engine = db.sqlite_engine(work / "validate.sqlite")
    metadata.create_all(engine)
    store = RecordStore(engine)
    rng = np.random.default_rng(2)
    site = Site(code="BENCH", name="Bench site", crs_epsg=32736)
    season = Season(site_id=site.id, label="2026", starts_on=dt.date(2026, 7, 1))
    trenches, units, levels = [], [], []
    for t in range(50):
        x0, y0 = (t % 10) * 10.0, (t // 10) * 10.0
        trench = Trench(site_id=site.id, code=f"T{t}", outline=[(x0, y0), (x0 + 4, y0), (x0 + 4, y0 + 3), (x0, y0 + 3)])
        trenches.append(trench)
        for k in range(10):
            unit = Unit(site_id=site.id, trench_id=trench.id, code=f"{t}-{k}", kind="deposit",
                        opened_on=dt.date(2026, 7, 1), recorder="AK")
            units.append(unit)
            top, bottom = 100.0 - 0.2 * k, 100.0 - 0.2 * (k + 1)
            for (e, n) in trench.outline:
                levels.append(LevelPoint(unit_id=unit.id, surface="top", e=e, n=n, z=top + rng.normal(0, 0.005)))
                levels.append(LevelPoint(unit_id=unit.id, surface="bottom", e=e, n=n, z=bottom + rng.normal(0, 0.005)))
    with engine.begin() as conn:
        for r in (site, season, *trenches, *units, *levels):
            conn.execute(metadata.tables[r.record_name].insert(), db.to_row(r))
        which = rng.integers(0, len(units), size)
        when = dt.datetime(2026, 7, 10, 9, tzinfo=dt.timezone.utc)
        rows = []
        for i, u in enumerate(which):
            unit = units[u]
            trench = trenches[u // 10]
            (x0, y0) = trench.outline[0]
            k = u % 10
            rows.append(dict(
                id=uuid.uuid4(), number=i + 1, site_id=site.id, season_id=season.id, trench_id=trench.id,
                unit_id=unit.id, category="artifact", material="basalt", count=1, recovery="plotted",
                e=x0 + rng.uniform(0, 4), n=y0 + rng.uniform(0, 3), z=100.0 - 0.2 * k - rng.uniform(0, 0.21),
                position_source="total_station", found_at=when, recorder="AK", notes="", photo_hashes=[],
                human_remains=False, voided=False,
            ))
        conn.execute(metadata.tables["find"].insert(), rows)
    t = metadata.tables["find"]
    return {"store": store, "engine": engine, "query": sa.select(*(t.c[c] for c in FIND_COLUMNS)),
            "report": {"units": len(units), "level_points": len(levels)}}


def _validate(state: dict[str, Any], _work: Path, _i: int) -> None:
    from .strata import validate

    report = validate(state["store"].site_data())
    state["report"]["issues"] = len(report.issues)


def _scan(state: dict[str, Any], _work: Path, _i: int) -> None:
    with state["engine"].connect() as conn:
        conn.execute(state["query"]).fetchall()


benchmark(Bench(
    name="strata.validate",
    baseline_name="SQL scan of the same finds",
    sizes=(100_000, 200_000),
    setup=_setup_validate,
    subject=_validate,
    baseline=_scan,
    repeats=3,
    doc="load a site and run every rule over n finds, 500 units with surfaces, vs a plain SQL scan; goal <= 5x",
))


def _setup_ages(size: int, _work: Path) -> dict[str, Any]:
    """A site of 50 trenches x 10 stacked units (500 units, 10 horizons across the trenches, level points at the
    corners) with 20 dated units in 10 trenches, their dates overlapping within and between neighbouring
    horizons (the other trenches' units take their horizons' ages); ``size`` draws."""
    import datetime as dt

    from .records import AgeDetermination, Horizon, LevelPoint, Relation, Site, Trench, Unit
    import time

    from .strata.data import SiteData
    from .strata.matrix import build_matrix

    rng = np.random.default_rng(3)
    site = Site(code="BENCH", name="Bench site", crs_epsg=32736)
    horizons = [Horizon(site_id=site.id, code=f"H{k + 1}", label=f"horizon {k + 1}", order=k + 1) for k in range(10)]
    trenches, units, relations, levels, ages = [], [], [], [], []
    for t in range(50):
        x0, y0 = (t % 10) * 10.0, (t // 10) * 10.0
        trench = Trench(site_id=site.id, code=f"T{t}", outline=[(x0, y0), (x0 + 4, y0), (x0 + 4, y0 + 3), (x0, y0 + 3)])
        trenches.append(trench)
        for k in range(10):
            unit = Unit(site_id=site.id, trench_id=trench.id, code=f"{t}-{k}", kind="deposit", horizon_id=horizons[k].id,
                        opened_on=dt.date(2026, 7, 1), recorder="AK")
            if k:
                relations.append(Relation(site_id=site.id, upper_unit_id=units[-1].id, lower_unit_id=unit.id, kind="above"))
            units.append(unit)
            for surface, z in (("top", 100.0 - 0.2 * k), ("bottom", 100.0 - 0.2 * (k + 1))):
                levels += [LevelPoint(unit_id=unit.id, surface=surface, e=e, n=n, z=z + rng.normal(0, 0.005))
                           for e, n in trench.outline]
    for i in range(20):  # trenches 0-9, two dates each (levels a and a + 5): 20 dates on 10 horizons
        k = i // 10 * 5 + i % 5
        ages.append(AgeDetermination(site_id=site.id, unit_id=units[10 * (i % 10) + k].id, method="argon_argon",
                                     age_ka=float(1000 + 15 * k + rng.normal(0, 6)), sigma_ka=float(rng.uniform(3, 12)),
                                     lab_code=f"B-{i:02d}"))
    data = SiteData(site=site, trenches=trenches, units=units, relations=relations, horizons=horizons,
                    level_points=levels, ages=ages)
    from .strata.agemodel import plan_ages

    t0 = time.perf_counter()
    plan = plan_ages(data, matrix=build_matrix(units, relations))  # records -> order, dates, rules (not timed below)
    plan_s = time.perf_counter() - t0
    return {"plan": plan, "draws": size, "units": len(units),
            "report": {"units": len(units), "dates": len(ages), "plan_ms": round(plan_s * 1000, 1)}}


def _ages(state: dict[str, Any], _work: Path, i: int) -> None:
    from .strata.agemodel import draw_ages

    model = draw_ages(state["plan"], draws=state["draws"])
    mids = [r.mid for r in model.rules.values() if r.mid is not None]
    unit_draws = model.ages(np.vstack(mids))  # (draws, units): every unit's age in every draw
    assert unit_draws.shape == (state["draws"], state["units"])
    state["report"].update(order_acceptance=round(model.order_acceptance, 4),
                           proposal_acceptance=round(model.proposal_acceptance, 4), sweeps=model.sweeps)


def _normals_sorted(state: dict[str, Any], _work: Path, i: int) -> None:
    rng = np.random.default_rng(i)
    np.sort(rng.standard_normal((state["draws"], state["units"])), axis=1)


benchmark(Bench(
    name="ages.model",
    baseline_name="numpy: draws x 500 normals, each draw sorted",
    sizes=(2_000, 10_000),
    setup=_setup_ages,
    subject=_ages,
    baseline=_normals_sorted,
    repeats=3,
    doc="age model: n draws (10k full) of 20 ordered dates carried to 500 units (the plan from the records is "
        "made once, plan_ms), vs numpy drawing n x 500 unconstrained normals and sorting each draw; reports the "
        "acceptance rates; goal ratio < 2",
))
