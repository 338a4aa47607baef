"""``baulk demo``: the whole job on the embedded default (SQLite), on an invented site.

It sets up a camp server store, enrols three tablets and issues them find-number blocks, gives each tablet the
site set-up, records a few hundred finds on the tablets (plotted, sieved, GNSS and samples with their details),
voids one, shows that bad input is refused with the fix and nothing written, and writes a summary. Each later
capability (sync, survey, validation, exports) adds its step here so the demo always shows the whole job.

This is the one module besides the CLI that drives both the tablet code and the server code.
"""

from __future__ import annotations

import collections
import csv
import datetime as dt
import json
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from schema import __version__
import numpy as np

import httpx

from mobile.recording import Reading, record_gnss_find, record_plotted_find, setup_by_backsight, setup_by_resection
from mobile.sync import SyncClient
from schema.demo_site import SEASON_START, UNITS, DemoSite, TabletPlan, build_site, plan_finds
from schema.errors import BaulkError, FixNotAccepted
from schema.records import Device, Find, GnssFix, Relation, SafetyCheck, Shot
from schema.strata import validate
from schema.survey.polar import Station
from schema.survey.recompute import station_of
from schema.survey.simulate import gnss_epoch, readings_for

from .app import create_app
from .loopback import serve_in_thread
from .store import ServerStore
from .validation import run_validation

__all__ = ["DemoResult", "run_demo"]

Progress = Callable[[str], None]
TABLETS = (("TAB-1", 140, 11), ("TAB-2", 120, 22), ("TAB-3", 110, 33))  # label, finds, seed


@dataclass
class DemoResult:
    out: Path
    summary: dict[str, Any] = field(default_factory=dict)


def run_demo(out: Path, *, progress: Progress = lambda _msg: None) -> DemoResult:
    """Run the demo into ``out`` (created; refused if it holds a previous demo's stores)."""
    from mobile.store import TabletStore  # the demo is one of the two places that drive both ends

    out = Path(out)
    if (out / "server.sqlite").exists():
        raise BaulkError(f"{out} already holds a demo; choose a new folder or delete {out / 'server.sqlite'} first")
    (out / "tablets").mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    server, demo, survey_summary, curation = _set_up_camp(out, progress)
    summary: dict[str, Any] = {"site": demo.site.code, "version": __version__, "tablets": {}, "survey": survey_summary,
                               "curation": curation}
    tablet_counts: dict[str, dict[str, Any]] = {}
    with serve_in_thread(create_app(store=server)) as url:
        progress(f"camp server: listening on {url} (loopback); tablets sync over real HTTP")
        tablets = {}
        for label, count, seed in TABLETS:
            device, token = server.add_device(label=label, role="recorder")
            block = server.issue_number_block(device_id=device.id)  # the site's number_block_size
            progress(f"{label}: enrolled, numbers {block.first}-{block.last}; first sync brings the site set-up")
            tablet = TabletStore.open(out / "tablets" / f"{label}.sqlite")
            tablet.set_identity(device=device)
            tablet.set_token(token)
            client = SyncClient(tablet, httpx.Client(base_url=url, timeout=60), token)
            client.sync()
            tablets[label] = (tablet, client)
            progress(f"{label}: recording {count} finds offline")
            plan = plan_finds(demo, label=label, first_number=block.first, count=count, seed=seed)
            setup, setup_report = _set_up_instrument(tablet, demo, plan)
            survey_summary["setups"][label] = setup_report
            _morning_cautions(tablet, demo, plan, setup)
            tablet_counts[label] = _record(tablet, demo, plan, setup, progress, np.random.default_rng(seed))
            tablet_counts[label]["live_checks"] = _field_mistakes(tablet, demo, plan, setup)
            day_report = validate(tablet.site_data())
            tablet_counts[label]["validation"] = day_report.by_code()
            if label == "TAB-1":
                summary["age_brackets"] = _brackets(day_report, demo)
                summary["refused"] = _refusals(tablet, demo)
        summary["sync"] = _sync_rounds(server, tablets, demo, url, progress)
        for label, (tablet, client) in tablets.items():
            tablet_counts[label]["integrity"] = tablet.integrity_check()
            tablet_counts[label]["pragmas"] = tablet.pragmas()
            client.http.close()
            tablet.close()
    progress("camp server: checking every find against the stratigraphy")
    report, run = run_validation(server)
    summary["server_validation"] = {"finds_checked": report.finds_checked, "by_code": report.by_code(),
                                    "new": run.new}
    summary["files"] = _analyst_files(server, report, out, progress)
    summary["tablets"] = tablet_counts
    summary["server"] = {"counts": server.counts(), "devices": [d.label for d in server.list(Device)]}
    summary["finds"] = _tables(server, demo)
    summary["safety"] = {"checks": server.count(SafetyCheck),
                         "by_kind": dict(sorted(collections.Counter(c.kind for c in server.list(SafetyCheck)).items()))}
    summary["seconds"] = round(time.perf_counter() - started, 1)
    server.close()
    _write_summary(out, summary)
    progress(f"done in {summary['seconds']} s: summary in {out / 'summary.md'}")
    return DemoResult(out, summary)


def _sync_rounds(server: ServerStore, tablets: dict[str, Any], demo: DemoSite, url: str,
                 progress: Progress) -> dict[str, Any]:
    """Evening sync in one order; overlapping offline edits; a second sync in another order; convergence."""
    from .sync import list_conflicts, resolve_conflict

    rounds: list[list[str]] = []
    order = ["TAB-3", "TAB-1", "TAB-2"]
    for label in order:
        r = tablets[label][1].sync()
        progress(f"{label}: pushed {r.pushed_versions} versions in {r.pushed_batches} batches, pulled {r.pulled_versions}")
    rounds.append(order)
    for label in order:  # everyone pulls what the later tablets sent
        tablets[label][1].sync()
    # next morning, offline: two recorders correct the same mislogged find differently, and two tablets
    # reword the same unit description
    t1, t2, t3 = (tablets[k][0] for k in ("TAB-1", "TAB-2", "TAB-3"))
    slip = next(f for f in t1.list(Find) if f.number == 141)
    t1.put(slip.model_copy(update={"unit_id": demo.units["104"].id, "notes": "unit corrected by AK after checking the section"}))
    t3.put(t3.get(Find, slip.id).model_copy(update={"unit_id": demo.units["103"].id}))
    unit = demo.units["102"]
    t1.put(t1.get(type(unit), unit.id).model_copy(update={"description": "grey vitric tuff, normally graded, 20 cm"}))
    t2.put(t2.get(type(unit), unit.id).model_copy(update={"description": "grey tuff VL-1, pumice lapilli at base"}))
    order = ["TAB-2", "TAB-1", "TAB-3 (bundle)"]
    for label in order[:2]:
        tablets[label][1].sync()
    # TAB-3's Wi-Fi is down: the day's sieve finds go to the camp laptop in a bundle on a USB stick
    spit = demo.spits["302"][0]
    for b in range(5):
        t3.save_find(find=dict(
            number=t3.next_find_number(), site_id=demo.site.id, season_id=demo.season.id,
            trench_id=demo.trenches["TR3"].id, unit_id=demo.units["302"].id, spit_id=spit.id, bucket=f"B{41 + b}",
            category="fossil", material="tooth", taxon="Cichlidae", element="pharyngeal tooth", recovery="sieved",
            count=3 + b, found_at=dt.datetime.combine(SEASON_START + dt.timedelta(days=21), dt.time(15, b * 7),
                                                      dt.timezone(dt.timedelta(hours=3))), recorder="JT"))
    from mobile.bundles import export_bundle

    from .bundles import import_bundle

    folder = Path(t3.path).parent.parent / "usb"
    folder.mkdir(exist_ok=True)
    manifest = export_bundle(t3, folder)
    imported = import_bundle(server, Path(manifest["path"]))
    progress(f"TAB-3: bundle {Path(manifest['path']).name} imported: {imported['applied']} versions")
    rounds.append(order)
    conflicts = list_conflicts(server)
    progress(f"camp server: {len(conflicts)} conflicts surfaced for the data manager")
    # the manager settles the find's unit (the section shows 104); the description waits for the morning meeting
    settled = None
    for c in conflicts:
        if c["record"] == "find" and c["field"] == "unit_id":
            settled = resolve_conflict(server, record="find", record_id=slip.id, field="unit_id",
                                       value=str(demo.units["104"].id))
    for label in ("TAB-2", "TAB-1", "TAB-3"):  # back on the Wi-Fi: TAB-3's bundled batches are answered from their acks
        tablets[label][1].sync()
    finds_server = sorted(f.number for f in server.list(Find))
    converged = all(sorted(f.number for f in t.list(Find)) == finds_server for t, _ in tablets.values())
    same_unit = {str(t.get(Find, slip.id).unit_id) for t, _ in tablets.values()}
    codes = {str(u.id): u.code for u in demo.units.values()}
    return {
        "orders": rounds, "conflicts": [{"record": c["record"], "field": c["field"],
                                         "values": [f"{v['device']}: {codes.get(str(v['value']), v['value'])}"
                                                    for v in c["values"]]} for c in conflicts],
        "resolved": settled, "open_after": len(list_conflicts(server)), "converged": converged,
        "bundle": {"file": Path(manifest["path"]).name, "batches": imported["batches"], "versions": imported["applied"]},
        "finds_on_server": len(finds_server), "slip_unit_everywhere": sorted(codes.get(u, u) for u in same_unit),
    }


def _set_up_camp(out: Path, progress: Progress) -> tuple[ServerStore, DemoSite, dict[str, Any], dict[str, Any]]:
    """The data manager's public path, as README's 'Your own site' walks it: a set-up file checked and written by
    the code behind ``baulk site init``; the units dug so far; horizons defined and units assigned to them with a
    reason (``baulk horizon``); laboratory dates imported from a CSV (``baulk date import``)."""
    from schema.demo_site import control_csv, dates_csv, setup_toml
    from schema.records import AgeDetermination, Unit
    from schema.setup_file import read_setup

    from .curation import add_horizon, assign_units, import_dates_csv
    from .site_setup import init_site

    folder = out / "setup"
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "site.toml").write_text(setup_toml())
    (folder / "control.csv").write_text(control_csv())
    (folder / "dates.csv").write_text(dates_csv())
    progress(f"camp server: baulk site init {folder / 'site.toml'} (checked whole, grid fitted to UTM 36S with pyproj)")
    plan = read_setup(folder / "site.toml")
    server = ServerStore.open(f"sqlite:///{out / 'server.sqlite'}", create=True)
    init_site(server, plan)
    demo = build_site(plan, assign_horizons=False)
    with server.atomic():  # the units opened, related and levelled so far this season
        for record in demo.recorded_records():
            server.add(record)
    progress("camp server: horizons defined and units assigned with a reason; laboratory dates imported from dates.csv")
    for h in sorted(demo.horizons.values(), key=lambda h: h.order):
        demo.horizons[h.code] = add_horizon(server, code=h.code, label=h.label, order=h.order)
    assigned = 0
    for code in demo.horizons:
        units = [u for u, _t, _k, hz, *_ in UNITS if hz == code]
        assign_units(server, horizon=code, units=units, by="DM",
                     reason="section drawings and the tuff VL-1 marker, first season meeting")
        assigned += len(units)
    imported = import_dates_csv(server, folder / "dates.csv")
    demo.units = {u.code: u for u in server.list(Unit, site_id=demo.site.id)}
    demo.ages = server.list(AgeDetermination, site_id=demo.site.id)
    fit, poly = plan.grid_fit, plan.polynomial
    survey = {
        "grid_rotation_deg": round(fit.rotation_deg, 6), "grid_scale": round(fit.scale, 8),
        "grid_max_residual_m": round(max(float(r["d"]) for r in fit.residuals), 4),
        "vertical_offset_m": plan.site.vertical_offset_m, "polynomial_max_error_m": poly.max_error_m,
        "polynomial_half_extent_m": poly.half_extent_m, "setups": {},
    }
    curation = {"setup_file": "setup/site.toml", "horizons": list(demo.horizons), "units_assigned": assigned,
                "dates_imported": len(imported.added), "dates_skipped": len(imported.skipped),
                "dates_file": "setup/dates.csv"}
    return server, demo, survey, curation


def _analyst_files(server: ServerStore, report: Any, out: Path, progress: Progress) -> dict[str, Any]:
    """What ``baulk validate --out DIR/checks`` and ``baulk export --out DIR/export`` write."""
    from .exports import run_export
    from .validation import list_issues, write_brackets, write_report

    checks = out / "checks"
    checks.mkdir(exist_ok=True)
    write_report(list_issues(server, limit=10**9), checks)
    write_brackets(report, server.site_data(), checks)
    progress("analyst: export to export/ (per-horizon tables, GeoPackage, Darwin Core, data package)")
    m = run_export(server, out / "export")
    with (out / "export" / "ages_by_horizon.csv").open(newline="") as fh:  # the age model's horizon ages
        ages = {r["horizon"]: r for r in csv.DictReader(fh)}
    return {"checks": sorted(p.name for p in checks.iterdir()), "export": sorted(p.name for p in (out / "export").iterdir()),
            "export_counts": m["counts"], "horizon_ages": ages}


def _reading(station: Any, e: float, n: float, z: float, th: float, at: dt.datetime, rng: Any) -> Reading:
    """What the instrument would read on a target, with 1 mgon-class angle noise and 2 mm on distances
    (exact when ``rng`` is None)."""
    noise = {"rng": rng, "sigma_angle": 0.0003, "sigma_distance_m": 0.002} if rng is not None else {}
    hz, zen, sd = readings_for(station, e, n, z, th, **noise)
    return Reading(float(hz[0]), float(zen[0]), float(sd[0]), th, at)


def _set_up_instrument(tablet: Any, demo: DemoSite, plan: TabletPlan) -> tuple[Any, dict[str, Any]]:
    """TAB-1 and TAB-3 occupy a datum and orient on backsights; TAB-2 free-stations on all three points."""
    rng = np.random.default_rng(len(plan.label) + ord(plan.label[-1]))
    cps = {cp.code: cp for cp in demo.control_points}
    at = dt.datetime.combine(SEASON_START, dt.time(6, 45), dt.timezone(dt.timedelta(hours=3)))
    ih = 1.552
    if plan.label == "TAB-2":
        # the true (unknown to the tablet) station and orientation the readings are simulated from
        truth = Station(1016.0, 2011.5, 100.42, ih, 131.7)
        obs = [(cp, _reading(truth, cp.e, cp.n, cp.z, 1.5, at, rng)) for cp in cps.values()]
        setup, res = setup_by_resection(tablet, site=demo.site, code="FS-TR2", observations=obs, instrument_height_m=ih,
                                        angle_unit="deg", tolerance_m=0.01, recorder=plan.recorder, at=at)
        return setup, {"method": "resection", "points": len(obs), "max_residual_m": round(
            max(float(r["d"]) for r in res.residuals), 4), "scale_ppm": round(res.scale_ppm, 1),
            "station_error_m": round(float(np.hypot(setup.e - truth.e, setup.n - truth.n)), 4)}
    occupied, backsight_codes = ("CP1", ("CP2", "CP3")) if plan.label == "TAB-1" else ("CP2", ("CP1",))
    station_cp = cps[occupied]
    truth = Station(station_cp.e, station_cp.n, station_cp.z, ih, 12.3456)
    bss = [(cps[c], _reading(truth, cps[c].e, cps[c].n, cps[c].z, 1.5, at, rng)) for c in backsight_codes]
    setup, res = setup_by_backsight(tablet, site=demo.site, station=station_cp, backsights=bss, instrument_height_m=ih,
                                    angle_unit="deg", recorder=plan.recorder, at=at)
    return setup, {"method": f"occupied {occupied}", "backsights": list(backsight_codes),
                   "max_angle_residual_deg": round(max(abs(b.angle_residual) for b in res.backsights), 5),
                   "warnings": res.warnings}


def _morning_cautions(tablet: Any, demo: DemoSite, plan: TabletPlan, setup: Any) -> None:
    """The day-start cautions each recorder acknowledges on the tablet: heat, and the laser with the setup,
    kept through the app's own path (``record_acknowledgement``)."""
    from mobile.controllers.day import record_acknowledgement

    trench = demo.trenches[plan.trench]
    for kind in ("heat", "laser"):
        record_acknowledgement(tablet, kind=kind, site_id=demo.site.id, trench_id=trench.id, recorder=plan.recorder,
                               by=plan.recorder, at=setup.set_up_at, laser_class="3R" if kind == "laser" else None)


def _record(tablet: Any, demo: DemoSite, plan: TabletPlan, setup: Any, progress: Progress, rng: Any) -> dict[str, Any]:
    saved: list[Find] = []
    station = station_of(setup)
    floats_refused = 0
    for i, data in enumerate(plan.finds):
        data = {**data, "number": tablet.next_find_number()}
        sample = plan.samples.get(i)
        source = data.pop("position_source", "none")
        if source == "total_station":
            e, n, z = (data.pop(k) for k in ("e", "n", "z"))
            reading = _reading(station, e, n, z, 1.300, data["found_at"], rng)
            saved.append(record_plotted_find(tablet, setup=setup, reading=reading, find=data, sample=sample))
        elif source == "gnss":
            e, n, z = (data.pop(k) for k in ("e", "n", "z"))
            quality = 5 if i % 7 == 3 else 4
            sentences = gnss_epoch(demo.site, e, n, z, data["found_at"], quality=quality)
            try:
                saved.append(record_gnss_find(tablet, site=demo.site, sentences=sentences, find=data, sample=sample))
            except FixNotAccepted:
                floats_refused += 1
                saved.append(record_gnss_find(tablet, site=demo.site, sentences=sentences, find=data, sample=sample,
                                              override_reason="float held 2 min under the acacia; sigma 3 cm"))
        else:
            saved.append(tablet.save_find(find=data, sample=sample))
        if (i + 1) % 50 == 0:
            progress(f"{plan.label}: {i + 1}/{len(plan.finds)} finds saved")
    victim = saved[len(saved) // 2]
    tablet.void_find(find_id=victim.id, reason="double-logged: same piece as the previous number")
    return {
        "recorder": plan.recorder,
        "trench": plan.trench,
        "finds": len(saved),
        "numbers": [saved[0].number, saved[-1].number],
        "voided": [victim.number],
        "by_category": dict(collections.Counter(f.category for f in saved)),
        "by_recovery": dict(collections.Counter(f.recovery for f in saved)),
        "samples": tablet.count(Find, category="sample"),
        "by_position": dict(collections.Counter(f.position_source for f in saved)),
        "shots": tablet.count(Shot),
        "gnss_fixes": tablet.count(GnssFix),
        "gnss_float_refused_then_overridden": floats_refused,
    }


def _brackets(report: Any, demo: DemoSite) -> dict[str, Any]:
    from schema.strata.dating import horizon_brackets

    hb = horizon_brackets(report.brackets, report.matrix, list(demo.horizons.values()))
    return {h.code: hb[h.id].as_dict() for h in sorted(demo.horizons.values(), key=lambda h: h.order)}


def _field_mistakes(tablet: Any, demo: DemoSite, plan: TabletPlan, setup: Any) -> list[dict[str, Any]]:
    """The slips that reach a store in real seasons; each is saved (validation never blocks) and the live check
    shows the recorder the problem and the fix at once."""
    from mobile.checks import check_find, check_matrix

    trench = demo.trenches[plan.trench]
    units = [u for u in demo.units.values() if u.trench_id == trench.id]
    deposits = [u for u in units if u.kind != "cut"]
    top, deep = deposits[0], deposits[-1]
    at = dt.datetime.combine(SEASON_START + dt.timedelta(days=20), dt.time(11, 5), dt.timezone(dt.timedelta(hours=3)))
    base = dict(site_id=demo.site.id, season_id=demo.season.id, trench_id=trench.id, found_at=at,
                recorder=plan.recorder, category="artifact", material="basalt")
    (x0, y0), (x1, y1) = trench.outline[0], trench.outline[2]
    e, n = (x0 + x1) / 2, (y0 + y1) / 2
    out = []
    # a flake shot in the deep unit but logged in the unit the recorder had open earlier
    z = (demo.surfaces[deep.code][0] + demo.surfaces[deep.code][1]) / 2
    wrong = record_plotted_find(tablet, setup=setup, reading=_reading(station_of(setup), e, n, z, 1.3, at, None),
                                find={**base, "number": tablet.next_find_number(), "unit_id": top.id, "recovery": "plotted"})
    out.append({"slip": f"find {wrong.number} shot in {deep.code} but logged in {top.code}",
                "shown": [str(i) for i in check_find(tablet, wrong)]})
    cut = next((u for u in units if u.kind == "cut"), None)
    if cut is not None:
        f = tablet.save_find(find={**base, "number": tablet.next_find_number(), "unit_id": cut.id, "recovery": "surface"})
        out.append({"slip": f"find {f.number} logged in the cut {cut.code}", "shown": [str(i) for i in check_find(tablet, f)]})
    else:
        f = tablet.save_find(find={**base, "number": tablet.next_find_number(), "unit_id": top.id, "recovery": "sieved"})
        out.append({"slip": f"sieve find {f.number} saved without its spit", "shown": [str(i) for i in check_find(tablet, f)]})
    if plan.label == "TAB-3":
        a, b = deposits[-1], deposits[0]
        tablet.add(Relation(site_id=demo.site.id, upper_unit_id=a.id, lower_unit_id=b.id, kind="above"))
        out.append({"slip": f"relation {a.code} above {b.code} typed the wrong way round",
                    "shown": [str(i) for i in check_matrix(tablet)]})
    return out


def _refusals(tablet: Any, demo: DemoSite) -> list[dict[str, Any]]:
    """Three bad inputs a tired recorder might type; each is refused with the fix, and nothing is written."""
    unit = demo.units["101"]
    good: dict[str, Any] = dict(
        number=tablet.next_find_number(), site_id=demo.site.id, season_id=demo.season.id,
        trench_id=unit.trench_id, unit_id=unit.id, category="artifact", material="basalt", recovery="surface",
        found_at=dt.datetime(2026, 7, 20, 10, 0, tzinfo=dt.timezone.utc), recorder="AK",
    )
    attempts = [
        ("unknown category", "find", {**good, "category": "pottery"}),
        ("Z typed as text", "find", {**good, "e": 1001.2, "n": 2001.1, "z": "99.8m", "position_source": "tape"}),
        ("bad Munsell colour", "unit", {**unit.model_dump(exclude={"id"}), "code": "105", "munsell": "10YR 5-3"}),
    ]
    out = []
    for what, kind, data in attempts:
        before = tablet.counts()
        try:
            if kind == "find":
                tablet.save_find(find=data)
            else:
                tablet.create("unit", data)
            message = "accepted (this is a bug)"
        except BaulkError as exc:
            message = str(exc)
        out.append({"input": what, "message": message, "nothing_written": tablet.counts() == before})
    return out


def _tables(server: ServerStore, demo: DemoSite) -> dict[str, Any]:
    by_unit: collections.Counter[str] = collections.Counter()
    by_horizon: collections.Counter[str] = collections.Counter()
    codes = {u.id: u.code for u in demo.units.values()}
    horizon_of = {u.id: u.horizon_id for u in demo.units.values()}
    hcode = {h.id: h.code for h in demo.horizons.values()}
    for f in server.list(Find):
        if f.voided:
            continue
        by_unit[codes[f.unit_id]] += 1
        by_horizon[hcode.get(horizon_of[f.unit_id], "none")] += 1  # type: ignore[arg-type]
    return {"by_unit": dict(sorted(by_unit.items())), "by_horizon": dict(sorted(by_horizon.items()))}


def _span(b: dict[str, Any]) -> str:
    young, old = b["youngest_ka"], b["oldest_ka"]
    return f"{'?' if young is None else format(young, 'g')} to {'?' if old is None else format(old, 'g')}"


def _write_summary(out: Path, s: dict[str, Any]) -> None:
    (out / "summary.json").write_text(json.dumps(s, indent=2, default=str) + "\n")
    lines = [
        f"# Baulk demo: site {s['site']} (invented), Baulk {s['version']}",
        "",
        "Three tablets recorded finds offline in their own SQLite files and merged them through the camp server;",
        "the server holds the site set-up, the enrolled devices, the number blocks it issued and every version.",
        "",
        "| tablet | recorder | trench | finds | numbers | voided | artifacts | fossils | samples | sieved | file check |",
        "|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for label, t in s["tablets"].items():
        c, r = t["by_category"], t["by_recovery"]
        lines.append(
            f"| {label} | {t['recorder']} | {t['trench']} | {t['finds']} | {t['numbers'][0]}-{t['numbers'][1]} | "
            f"{', '.join(map(str, t['voided']))} | {c.get('artifact', 0)} | {c.get('fossil', 0)} | "
            f"{c.get('sample', 0)} | {r.get('sieved', 0)} | {t['integrity']} |"
        )
    sv = s["survey"]
    cu = s["curation"]
    lines += [
        "",
        "## Set-up at camp",
        "",
        f"The data manager wrote the set-up file `{cu['setup_file']}` (site, CRS, time zone, country, tolerances, "
        "find-number block size, first season, trenches; control points in `control.csv`) and ran the code behind "
        "`baulk site init`: the whole file was checked first, then written in one transaction as versions of the "
        f"camp server's own device. Horizons {', '.join(cu['horizons'])} were defined and {cu['units_assigned']} units "
        f"assigned to them with a reason (`baulk horizon assign`); {cu['dates_imported']} laboratory dates were "
        f"imported from `{Path(cu['dates_file']).name}` (`baulk date import`). Each tablet's first sync brought it all.",
    ]
    lines += [
        "",
        "## Survey",
        "",
        f"Site grid fitted to WGS 84 / UTM 36S from the three control points: rotation "
        f"{sv['grid_rotation_deg']:.5f} deg, scale {sv['grid_scale']:.8f}, largest residual {sv['grid_max_residual_m']:.4f} m; "
        f"tablet polynomial (no PROJ needed) worst error {sv['polynomial_max_error_m'] * 1000:.5f} mm over a "
        f"{2 * sv['polynomial_half_extent_m'] / 1000:g} km square.",
        "",
    ]
    for label, st in sv["setups"].items():
        if st["method"] == "resection":
            detail = (f"free station on {st['points']} control points, largest residual {st['max_residual_m']:.4f} m, "
                      f"scale {st['scale_ppm']:+.1f} ppm")
        else:
            detail = (f"{st['method']}, backsights {', '.join(st['backsights'])}, largest angle residual "
                      f"{st['max_angle_residual_deg']:.5f} deg" + "".join(f"; warning: {w}" for w in st["warnings"]))
        t = s["tablets"][label]
        lines.append(f"- **{label}**: {detail}. Positions: " + ", ".join(f"{k} {v}" for k, v in t["by_position"].items())
                     + f"; {t['shots']} raw shots and {t['gnss_fixes']} GNSS fixes kept"
                     + (f"; {t['gnss_float_refused_then_overridden']} RTK-float fixes refused, then accepted with the "
                        "recorder's reason" if t["gnss_float_refused_then_overridden"] else "") + ".")
    sy = s["sync"]
    lines += ["", "## Sync", "",
              f"Each tablet's first sync over HTTP (a real server on loopback) brought it the site set-up and its own "
              f"number block. Evening sync in the order {', '.join(sy['orders'][0])}; the next morning two recorders "
              f"corrected the same mislogged find differently and two tablets reworded the same unit, offline; then "
              f"sync in the order {', '.join(sy['orders'][1])}: TAB-3's Wi-Fi was down, so its recorder carried bundle "
              f"{sy['bundle']['file']} ({sy['bundle']['batches']} batches, {sy['bundle']['versions']} versions) on a USB "
              "stick, imported through the same path as a push. Conflicts surfaced for the data manager:", ""]
    for c in sy["conflicts"]:
        lines.append(f"- {c['record']} {c['field']}: " + " / ".join(c["values"]))
    lines += ["", f"The manager settled the find's unit ({', '.join(sy['slip_unit_everywhere'])} on every replica); "
              f"{sy['open_after']} conflict left open for the morning meeting. All replicas converged: "
              f"{'yes' if sy['converged'] else 'NO'} ({sy['finds_on_server']} finds on the server).",
              "", "Server validation after the merge: " + (", ".join(f"{k} {v}" for k, v in s["server_validation"]["by_code"].items()) or "no issues")]
    lines += ["", "## Checks", "",
              "Each tablet ran the stratigraphy rules live after every save. The slips planted in this season and "
              "what the recorder was shown at once:", ""]
    for label, t in s["tablets"].items():
        for m in t["live_checks"]:
            lines.append(f"- {label}, {m['slip']}: " + (" / ".join(m["shown"]) or "nothing (a missed slip)"))
    lines += ["", "Issues per tablet after the day (code: count): " + "; ".join(
        f"{label} " + (", ".join(f"{k} {v}" for k, v in t["validation"].items()) or "none")
        for label, t in s["tablets"].items())]
    lines += ["", "Age brackets by superposition from the dated tuff and clays (ka, two-sigma): " + "; ".join(
        f"{code} {_span(b)}" for code, b in s.get("age_brackets", {}).items())]
    ka = lambda v: f"{float(v):.1f}" if v else "?"  # noqa: E731
    lines += ["", "Horizon ages from the order-constrained age model (ka, median and 95 % interval; "
              "export/ages_by_horizon.csv): " + "; ".join(f"{k} {ka(a['median_ka'])} ({ka(a['lo95_ka'])} to "
                                                          f"{ka(a['hi95_ka'])})"
                                                          for k, a in s.get("files", {}).get("horizon_ages", {}).items())]
    lines += ["", "Finds (not voided) per horizon: " + ", ".join(f"{k} {v}" for k, v in s["finds"]["by_horizon"].items())]
    lines += ["", "Finds per unit: " + ", ".join(f"{k} {v}" for k, v in s["finds"]["by_unit"].items())]
    sf = s["safety"]
    lines += ["", "## Safety", "",
              f"Each recorder acknowledged the day-start cautions on the tablet; the camp holds "
              f"{sf['checks']} safety checks (" + ", ".join(f"{k} {v}" for k, v in sf["by_kind"].items())
              + "), listed on the camp's Safety page. Baulk records the answers; it never judges a trench safe."]
    lines += ["", "## Bad input is refused with the fix, and nothing is written", ""]
    for r in s.get("refused", []):
        lines.append(f"- **{r['input']}** (nothing written: {'yes' if r['nothing_written'] else 'NO'}): {r['message']}")
    fl = s.get("files", {})
    if fl:
        c = fl["export_counts"]
        lines += ["", "## Files for the analyst", "",
                  f"`checks/`: {', '.join(fl['checks'])} (what `baulk validate --out checks` writes).",
                  f"`export/`: {', '.join(fl['export'])} (what `baulk export --out export` writes): "
                  f"{c['finds_included']} finds counted, {c['finds_excluded']} left out with their reasons in "
                  "excluded.csv."]
    lines += ["", f"Finished in {s['seconds']} s.", ""]
    (out / "summary.md").write_text("\n".join(lines))
