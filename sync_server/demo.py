"""``baulk demo``: the whole job on the embedded default (SQLite), on an invented site.

It sets up a camp server store, enrols three tablets and issues them find-number blocks, gives each tablet the
site set-up, records a few hundred finds on the tablets (plotted, sieved, GNSS and samples with their details),
voids one, shows that bad input is refused with the fix and nothing written, and writes a summary. Each later
capability (sync, survey, validation, exports) adds its step here so the demo always shows the whole job.

This is the one module besides the CLI that drives both the tablet code and the server code.
"""

from __future__ import annotations

import collections
import datetime as dt
import json
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from schema import __version__
from schema.demo_site import DemoSite, TabletPlan, build_site, plan_finds
from schema.errors import BaulkError
from schema.records import Device, Find

from .store import ServerStore

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
    demo = build_site()

    progress("camp server: creating the store and the site set-up")
    server = ServerStore.open(f"sqlite:///{out / 'server.sqlite'}")
    with server.atomic():
        for record in demo.setup_records():
            server.add(record)

    summary: dict[str, Any] = {"site": demo.site.code, "version": __version__, "tablets": {}}
    tablet_counts: dict[str, dict[str, Any]] = {}
    for label, count, seed in TABLETS:
        device, _token = server.add_device(label=label, role="recorder")
        block = server.issue_number_block(device_id=device.id, size=500)
        progress(f"{label}: enrolled, numbers {block.first}-{block.last}; recording {count} finds")
        with TabletStore.open(out / "tablets" / f"{label}.sqlite") as tablet:
            _provision(tablet, demo, device, block)
            plan = plan_finds(demo, label=label, first_number=block.first, count=count, seed=seed)
            tablet_counts[label] = _record(tablet, plan, progress)
            tablet_counts[label]["integrity"] = tablet.integrity_check()
            tablet_counts[label]["pragmas"] = tablet.pragmas()
            if label == "TAB-1":
                summary["refused"] = _refusals(tablet, demo)
    summary["tablets"] = tablet_counts
    summary["server"] = {"counts": server.counts(), "devices": [d.label for d in server.list(Device)]}
    summary["finds"] = _tables(out, demo)
    summary["seconds"] = round(time.perf_counter() - started, 1)
    server.close()
    _write_summary(out, summary)
    progress(f"done in {summary['seconds']} s: summary in {out / 'summary.md'}")
    return DemoResult(out, summary)


def _provision(tablet: Any, demo: DemoSite, device: Any, block: Any) -> None:
    """Give a new tablet its identity, its number block and the site set-up.

    Until the sync engine lands this copies the records directly; afterwards it is the tablet's first pull.
    """
    with tablet.atomic():
        tablet.set_identity(device=device)
        tablet.add_number_block(block=block)
        for record in demo.setup_records():
            tablet.add(record)


def _record(tablet: Any, plan: TabletPlan, progress: Progress) -> dict[str, Any]:
    saved: list[Find] = []
    for i, data in enumerate(plan.finds):
        data = {**data, "number": tablet.next_find_number()}
        saved.append(tablet.save_find(find=data, sample=plan.samples.get(i)))
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
    }


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


def _tables(out: Path, demo: DemoSite) -> dict[str, Any]:
    from mobile.store import TabletStore

    by_unit: collections.Counter[str] = collections.Counter()
    by_horizon: collections.Counter[str] = collections.Counter()
    codes = {u.id: u.code for u in demo.units.values()}
    horizon_of = {u.id: u.horizon_id for u in demo.units.values()}
    hcode = {h.id: h.code for h in demo.horizons.values()}
    for path in sorted((out / "tablets").glob("*.sqlite")):
        with TabletStore.open(path) as tablet:
            for f in tablet.list(Find):
                if f.voided:
                    continue
                by_unit[codes[f.unit_id]] += 1
                by_horizon[hcode.get(horizon_of[f.unit_id], "none")] += 1  # type: ignore[arg-type]
    return {"by_unit": dict(sorted(by_unit.items())), "by_horizon": dict(sorted(by_horizon.items()))}


def _write_summary(out: Path, s: dict[str, Any]) -> None:
    (out / "summary.json").write_text(json.dumps(s, indent=2, default=str) + "\n")
    lines = [
        f"# Baulk demo: site {s['site']} (invented), Baulk {s['version']}",
        "",
        "Three tablets recorded finds offline in their own SQLite files; the camp server holds the site set-up,",
        "the enrolled devices and the find-number blocks it issued. (Merging the tablets into the server comes",
        "with the sync engine.)",
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
    lines += ["", "Finds (not voided) per horizon: " + ", ".join(f"{k} {v}" for k, v in s["finds"]["by_horizon"].items())]
    lines += ["", "Finds per unit: " + ", ".join(f"{k} {v}" for k, v in s["finds"]["by_unit"].items())]
    lines += ["", "## Bad input is refused with the fix, and nothing is written", ""]
    for r in s.get("refused", []):
        lines.append(f"- **{r['input']}** (nothing written: {'yes' if r['nothing_written'] else 'NO'}): {r['message']}")
    lines += ["", f"Finished in {s['seconds']} s.", ""]
    (out / "summary.md").write_text("\n".join(lines))
