"""An invented excavation for the demo, the benchmarks and test fixtures. Nothing here is a real place.

"Vellan Lake Margin" (code VLM) is an invented open-air site on the margin of a rift-basin palaeolake: lake
silts over a grey volcanic-ash marker bed (tuff VL-1), deltaic sands and lower clays, cut by a small channel in
trench TR2. Three trenches, twelve units in four horizons, three tablets (TAB-1..3) worked by recorders
AK, MO and JT. Values come from a seed, so a run repeats exactly except for the record ids (fresh UUIDs).
"""

from __future__ import annotations

import datetime as dt
import random
from dataclasses import dataclass, field
from typing import Any

from .records import (
    AgeDetermination, ControlPoint, Horizon, LevelPoint, Relation, Season, Site, Spit, Trench, Unit,
)

__all__ = ["DemoSite", "TabletPlan", "build_site", "control_csv", "dates_csv", "fit_demo_grid", "plan_finds", "setup_toml"]

TZ = dt.timezone(dt.timedelta(hours=3))
SEASON_START = dt.date(2026, 7, 1)

# code, label, order
HORIZONS = (
    ("H1", "Upper lake silts", 1),
    ("H2", "Grey tuff marker VL-1", 2),
    ("H3", "Deltaic sands", 3),
    ("H4", "Lower clays", 4),
)

# trench code, outline (grid E, N), ground surface Z, tablet label, recorder
TRENCHES = (
    ("TR1", [(1000.0, 2000.0), (1004.0, 2000.0), (1004.0, 2003.0), (1000.0, 2003.0)], 100.00, "TAB-1", "AK"),
    ("TR2", [(1010.0, 2005.0), (1013.0, 2005.0), (1013.0, 2008.0), (1010.0, 2008.0)], 100.35, "TAB-2", "MO"),
    ("TR3", [(1020.0, 1995.0), (1022.0, 1995.0), (1022.0, 2000.0), (1020.0, 2000.0)], 99.80, "TAB-3", "JT"),
)

# unit code, trench, kind, horizon (None for a cut), thickness (m), texture, Munsell (moist), description
UNITS = (
    ("101", "TR1", "deposit", "H1", 0.35, "silt_loam", "10YR 5/3", "laminated lake silt, rootlet casts"),
    ("102", "TR1", "deposit", "H2", 0.20, "volcanic_ash", "2.5Y 7/2", "grey vitric tuff, normally graded"),
    ("103", "TR1", "deposit", "H3", 0.40, "sand", "10YR 6/4", "cross-bedded medium sand with pebbles"),
    ("104", "TR1", "deposit", "H4", 0.30, "clay", "5Y 4/2", "massive olive clay, carbonate nodules"),
    ("201", "TR2", "deposit", "H1", 0.30, "silt_loam", "10YR 5/3", "lake silt"),
    ("202", "TR2", "cut", None, 0.00, None, None, "channel cut, steep east side"),
    ("203", "TR2", "fill", "H1", 0.25, "loamy_sand", "10YR 4/3", "channel fill, coarse sand and bone"),
    ("204", "TR2", "deposit", "H2", 0.20, "volcanic_ash", "2.5Y 7/2", "grey tuff, eroded top"),
    ("205", "TR2", "deposit", "H3", 0.45, "sand", "10YR 6/4", "deltaic sand"),
    ("301", "TR3", "deposit", "H1", 0.30, "silt", "10YR 5/2", "lake silt, ostracod-rich"),
    ("302", "TR3", "deposit", "H2", 0.25, "volcanic_ash", "2.5Y 7/2", "grey tuff"),
    ("303", "TR3", "deposit", "H4", 0.35, "silty_clay", "5Y 4/2", "olive clay"),
)

# upper, lower, kind
RELATIONS = (
    ("101", "102", "above"), ("102", "103", "above"), ("103", "104", "above"),
    ("201", "203", "above"), ("203", "202", "fills"), ("202", "204", "cuts"), ("204", "205", "above"),
    ("301", "302", "above"), ("302", "303", "above"),
    ("102", "204", "same_as"), ("102", "302", "same_as"),
)

# The invented tie of the site grid to WGS 84 / UTM zone 36S (EPSG:32736): rotation -8.2 deg, scale 0.99996,
# grid origin at E 801234.5 N 9712345.6; heights on the site datum are CRS heights minus 1187.42 m.
GRID_TIE = {"rotation_deg": -8.2, "scale": 0.99996, "tx": 801234.5, "ty": 9712345.6, "dz": -1187.42}


def _tie(x: float, y: float) -> tuple[float, float]:
    import math

    r = math.radians(GRID_TIE["rotation_deg"])
    a, b = GRID_TIE["scale"] * math.cos(r), GRID_TIE["scale"] * math.sin(r)
    return round(GRID_TIE["tx"] + a * x - b * y, 3), round(GRID_TIE["ty"] + b * x + a * y, 3)


# code, grid E, N, Z, CRS E, N (CRS values from the tie, rounded to the millimetre as a survey list would be)
CONTROL = tuple(
    (code, e, n, z, *_tie(e, n))
    for code, e, n, z in (("CP1", 995.000, 1990.000, 100.512), ("CP2", 1030.000, 1992.000, 99.874),
                          ("CP3", 1012.000, 2020.000, 100.931))
)

# Invented dates: the grey tuff VL-1 by 40Ar/39Ar on feldspars, and the lower clays by correlation of a
# thin ash in them with a dated eruption elsewhere in the basin.
AGES = (
    ("102", "argon_argon", 1871.0, 4.0, "VLM-AR-07", "sanidine, single-crystal fusion"),
    ("104", "tephra_correlation", 1935.0, 12.0, "VLM-TC-02", "glass chemistry match to a basin marker ash"),
)

FOSSIL_TAXA = (
    ("Hippopotamidae", "molar"), ("Bovidae", "horn core"), ("Crocodylidae", "tooth"), ("Suidae", "canine"),
    ("Equidae", "metapodial"), ("Cichlidae", "vertebra"), ("Testudines", "carapace fragment"),
    ("Mammalia indet.", "long bone shaft"),
)


@dataclass
class DemoSite:
    """The site set-up every tablet and the server share."""

    site: Site
    season: Season
    control_points: list[ControlPoint]
    trenches: dict[str, Trench]
    horizons: dict[str, Horizon]
    units: dict[str, Unit]
    relations: list[Relation]
    level_points: list[LevelPoint]
    spits: dict[str, list[Spit]]
    ages: list[AgeDetermination]
    surfaces: dict[str, tuple[float, float]] = field(default_factory=dict)  # unit -> (top Z, bottom Z)

    def recorded_records(self) -> list[Any]:
        """The units, relations, level points and spits dug so far (what the tablets record), parents first."""
        return [*self.units.values(), *self.relations, *self.level_points,
                *(s for spits in self.spits.values() for s in spits)]

    def setup_records(self) -> list[Any]:
        """Every set-up record, parents first (the order a store needs)."""
        return [
            self.site, self.season, *self.control_points, *self.trenches.values(), *self.horizons.values(),
            *self.units.values(), *self.relations, *self.level_points,
            *(s for spits in self.spits.values() for s in spits), *self.ages,
        ]


def fit_demo_grid(demo: DemoSite) -> tuple[Site, Any, Any]:
    """The site with its grid fitted from the control points (both systems known) and the PROJ-free tablet
    polynomial (needs pyproj); returns (site, grid fit, polynomial)."""
    from .records import GridPolynomial, GridTransform
    from .survey.grid import PointPair, fit_grid, fit_grid_polynomial

    pairs = [PointPair(cp.code, cp.e, cp.n, cp.crs_e, cp.crs_n, cp.z, cp.z - GRID_TIE["dz"])  # type: ignore[arg-type]
             for cp in demo.control_points]
    fit = fit_grid(pairs)
    grid = GridTransform(**fit.as_grid_transform())
    poly = fit_grid_polynomial(grid=grid, crs=demo.site.crs_epsg, centre_x=1010.0, centre_y=2000.0)
    site = demo.site.model_copy(update={"grid": grid, "grid_polynomial": GridPolynomial.model_validate(poly.model_dump()),
                                        "vertical_offset_m": fit.vertical_offset_m or 0.0})
    return site, fit, poly


def _surfaces() -> dict[str, tuple[float, float]]:
    """Top and bottom Z of each unit, stacked down from each trench's ground surface."""
    out: dict[str, tuple[float, float]] = {}
    ground = {code: z for code, _o, z, _t, _r in TRENCHES}
    for code, trench, kind, _h, thick, *_ in UNITS:
        if kind == "cut":
            continue
        top = ground[trench]
        out[code] = (round(top, 3), round(top - thick, 3))
        ground[trench] = top - thick
    # the channel cut (202) runs from the base of 201 to the base of its fill 203
    out["202"] = (out["203"][0], out["203"][1])
    return out


SEASON_END = dt.date(2026, 8, 15)


def setup_toml() -> str:
    """The invented site's set-up file, as a data manager would write it for ``baulk site init`` (the demo
    writes it next to its stores; the control points go in ``control.csv``, see ``control_csv``)."""
    lines = [
        "# Site set-up for baulk site init (invented demo site; see README.md, 'Your own site')",
        'control_points_csv = "control.csv"',
        "",
        "[site]",
        'code = "VLM"',
        'name = "Vellan Lake Margin"',
        "crs_epsg = 32736                 # WGS 84 / UTM zone 36S",
        'timezone = "Africa/Nairobi"',
        'country_code = "KE"',
        "z_tolerance_m = 0.02",
        "shoring_check_depth_m = 1.2      # set it to your local rule",
        "number_block_size = 500",
        "grid_tolerance_m = 0.01",
        f"vertical_offset_m = {GRID_TIE['dz']}       # site datum Z minus CRS height",
        "",
        "[season]",
        'label = "2026"',
        f"starts_on = {SEASON_START.isoformat()}",
        f"ends_on = {SEASON_END.isoformat()}",
    ]
    for code, outline, _z, _t, _r in TRENCHES:
        corners = ", ".join(f"[{e:g}, {n:g}]" for e, n in outline)
        lines += ["", "[[trench]]", f'code = "{code}"', f"outline = [{corners}]"]
    return "\n".join(lines) + "\n"


def control_csv() -> str:
    """The invented site's control points, ``code,e,n,z,crs_e,crs_n``."""
    return "code,e,n,z,crs_e,crs_n\n" + "".join(f"{c},{e:.3f},{n:.3f},{z:.3f},{ce:.3f},{cn:.3f}\n"
                                               for c, e, n, z, ce, cn in CONTROL)


def dates_csv() -> str:
    """The invented laboratory dates, ``unit,method,age_ka,sigma_ka,lab_code,sample_find_number,note``."""
    rows = ["unit,method,age_ka,sigma_ka,lab_code,sample_find_number,note"]
    rows += [f'{u},{m},{a:g},{s:g},{lab},,"{note}"' for u, m, a, s, lab, note in AGES]
    return "\n".join(rows) + "\n"


def build_site(setup: Any = None, *, assign_horizons: bool = True) -> DemoSite:
    """The invented site's set-up records. ``setup`` (a ``schema.setup_file.SetupPlan``, as ``baulk site init``
    wrote it) supplies the site, season, control points and trenches instead of fresh ones; with
    ``assign_horizons=False`` units start with no horizon (the demo assigns them as a data manager would)."""
    if setup is not None:
        site, season, cps = setup.site, setup.season, list(setup.control_points)
        trenches = {t.code: t for t in setup.trenches}
    else:
        site = Site(code="VLM", name="Vellan Lake Margin", crs_epsg=32736, vertical_offset_m=0.0)
        season = Season(site_id=site.id, label="2026", starts_on=SEASON_START, ends_on=SEASON_END)
        cps = [
            ControlPoint(site_id=site.id, code=code, e=e, n=n, z=z, crs_e=ce, crs_n=cn)
            for code, e, n, z, ce, cn in CONTROL
        ]
        trenches = {
            code: Trench(site_id=site.id, code=code, outline=outline, seasons_opened=[season.id])
            for code, outline, _z, _t, _r in TRENCHES
        }
    horizons = {code: Horizon(site_id=site.id, code=code, label=label, order=order) for code, label, order in HORIZONS}
    recorder = {code: rec for code, _o, _z, _t, rec in TRENCHES}
    units = {
        code: Unit(
            site_id=site.id, trench_id=trenches[trench].id, code=code, kind=kind, description=desc,
            munsell=munsell, munsell_condition="moist" if munsell else None, texture=texture,
            opened_on=SEASON_START, recorder=recorder[trench],
            horizon_id=horizons[h].id if h and assign_horizons else None,
        )
        for code, trench, kind, h, _t, texture, munsell, desc in UNITS
    }
    relations = [
        Relation(site_id=site.id, upper_unit_id=units[a].id, lower_unit_id=units[b].id, kind=k) for a, b, k in RELATIONS
    ]
    surfaces = _surfaces()
    level_points, spits = _levels_and_spits(units, trenches, surfaces)
    ages = [
        AgeDetermination(site_id=site.id, unit_id=units[code].id, method=method, age_ka=age, sigma_ka=sigma,  # type: ignore[arg-type]
                         lab_code=lab, note=note)
        for code, method, age, sigma, lab, note in AGES
    ]
    return DemoSite(site, season, cps, trenches, horizons, units, relations, level_points, spits, ages, surfaces)


def _levels_and_spits(
    units: dict[str, Unit], trenches: dict[str, Trench], surfaces: dict[str, tuple[float, float]]
) -> tuple[list[LevelPoint], dict[str, list[Spit]]]:
    levels: list[LevelPoint] = []
    spits: dict[str, list[Spit]] = {}
    by_id = {t.id: t for t in trenches.values()}
    for code, unit in units.items():
        trench = by_id[unit.trench_id]
        top, bottom = surfaces[code]
        for e, n in trench.outline:
            levels.append(LevelPoint(unit_id=unit.id, surface="top", e=e, n=n, z=top))
            levels.append(LevelPoint(unit_id=unit.id, surface="bottom", e=e, n=n, z=bottom))
        if unit.kind == "cut":
            continue
        area = _area(trench.outline)
        steps = max(1, round((top - bottom) / 0.10))
        depth = (top - bottom) / steps
        spits[code] = [
            Spit(
                unit_id=unit.id, number=i + 1, top_z=round(top - i * depth, 3), bottom_z=round(top - (i + 1) * depth, 3),
                area_m2=area, sieved_volume_l=round(area * depth * 1000, 1), mesh_mm=2.0, buckets=int(area * depth * 100),
            )
            for i in range(steps)
        ]
    return levels, spits


def _area(ring: list[tuple[float, float]]) -> float:
    return abs(sum(x1 * y2 - x2 * y1 for (x1, y1), (x2, y2) in zip(ring, ring[1:] + ring[:1]))) / 2


@dataclass
class TabletPlan:
    """What one tablet records during the demo: finds (and sample details keyed by find id)."""

    label: str
    recorder: str
    trench: str
    finds: list[dict[str, Any]]
    samples: dict[int, dict[str, Any]]  # index into finds -> sample details


def plan_finds(demo: DemoSite, *, label: str, first_number: int, count: int, seed: int) -> TabletPlan:
    """Invented finds for the tablet ``label``, numbered from ``first_number``; ``count`` of them."""
    rng = random.Random(seed)
    trench_code, outline, _z, _tab, recorder = next(t for t in TRENCHES if t[3] == label)
    trench = demo.trenches[trench_code]
    units = [u for u in demo.units.values() if u.trench_id == trench.id and u.kind != "cut"]
    xs, ys = [p[0] for p in outline], [p[1] for p in outline]
    finds: list[dict[str, Any]] = []
    samples: dict[int, dict[str, Any]] = {}
    for i in range(count):
        unit = rng.choice(units)
        top, bottom = demo.surfaces[unit.code]
        day = SEASON_START + dt.timedelta(days=rng.randrange(0, 40))
        when = dt.datetime.combine(day, dt.time(7 + rng.randrange(0, 9), rng.randrange(60)), TZ)
        base: dict[str, Any] = dict(
            number=first_number + i, site_id=demo.site.id, season_id=demo.season.id, trench_id=trench.id,
            unit_id=unit.id, found_at=when, recorder=recorder,
        )
        roll = rng.random()
        if roll < 0.10:
            base.update(_sample(rng, unit, top, bottom, xs, ys))
            samples[i] = base.pop("_sample")
        elif roll < 0.35:
            spit = rng.choice(demo.spits[unit.code])
            category = "artifact" if rng.random() < 0.6 else "fossil"
            base.update(category=category, recovery="sieved", spit_id=spit.id, bucket=f"B{rng.randrange(1, 40):02d}",
                        count=rng.randrange(1, 12), **_material(rng, category))
        else:
            category = "artifact" if rng.random() < 0.55 else "fossil"
            source = "gnss" if trench_code == "TR3" and rng.random() < 0.3 else "total_station"
            base.update(
                category=category, recovery="plotted", position_source=source,
                e=round(rng.uniform(min(xs) + 0.05, max(xs) - 0.05), 3),
                n=round(rng.uniform(min(ys) + 0.05, max(ys) - 0.05), 3),
                z=round(rng.uniform(bottom + 0.01, top - 0.01), 3),
                position_sigma_m=0.005 if source == "total_station" else 0.02,
                weight_g=round(rng.lognormvariate(2.5, 1.0), 1),
                length_mm=round(rng.uniform(15, 140), 1),
                **_material(rng, category),
            )
            if base["length_mm"] > 60:
                base.update(bearing_deg=round(rng.uniform(0, 359.9), 1), plunge_deg=round(rng.uniform(0, 40), 1))
        finds.append(base)
    return TabletPlan(label, recorder, trench_code, finds, samples)


def _material(rng: random.Random, category: str) -> dict[str, Any]:
    if category == "artifact":
        return {"material": rng.choice(("basalt", "basalt", "phonolite", "obsidian", "chert", "quartz"))}
    taxon, element = rng.choice(FOSSIL_TAXA)
    material = "tooth" if element in ("molar", "tooth", "canine") else "bone"
    return {"material": material, "taxon": taxon, "element": element}


def _sample(rng: random.Random, unit: Unit, top: float, bottom: float, xs: list[float], ys: list[float]) -> dict[str, Any]:
    is_tuff = unit.texture == "volcanic_ash"
    purpose = "tephra" if is_tuff else rng.choice(("micromorphology", "pollen", "phytolith", "bulk_flotation"))
    z_top = round(rng.uniform(bottom + 0.05, top), 3)
    return dict(
        category="sample", material="tephra" if is_tuff else "sediment", recovery="plotted",
        position_source="total_station", e=round(rng.uniform(min(xs), max(xs)), 3),
        n=round(rng.uniform(min(ys), max(ys)), 3), z=z_top, position_sigma_m=0.005,
        _sample=dict(
            purpose=purpose, container="bag + label" if purpose != "micromorphology" else "plaster jacket",
            volume_l=round(rng.uniform(0.2, 10.0), 1), oriented=purpose == "micromorphology",
            top_z=z_top, bottom_z=round(z_top - 0.05, 3),
        ),
    )
