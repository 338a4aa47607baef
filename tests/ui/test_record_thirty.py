"""Thirty finds in a row on a real window, by touches only (issue 18): shots, GNSS, tape and sieve mixed, a
correction of an earlier find in the middle (new unit, new shot), a GNSS fix refused when reused. The tablet
file must then hold 30 distinct finds, each at the point it was measured and in the unit it was recorded in;
in portrait, Save and New find stay on screen after every save without scrolling."""

from __future__ import annotations

from typing import Any

import pytest

from schema.records import Find, Unit

pytestmark = pytest.mark.ui

CP1 = (995.0, 1990.0, 100.512)  # the demo site's CP1 (schema/demo_site.py), the tape's datum


def _on_screen(d: Any, widget: Any) -> bool:
    """The whole widget lies inside the window as drawn now (no scrolling)."""
    x0, y0 = widget.to_window(widget.x, widget.y)
    x1, y1 = widget.to_window(widget.right, widget.top)
    return 0 <= x0 and 0 <= y0 and x1 <= d.window.width and y1 <= d.window.height


def _start(d: Any) -> None:
    from tests.ui.test_tablet_windows import _set_up_instrument, _start_day

    _start_day(d)
    _set_up_instrument(d)


def test_thirty_finds_in_a_row_by_touch(tablet, demo_site, run_app, shots) -> None:  # type: ignore[no-untyped-def]
    from schema.demo_site import fit_demo_grid

    tablet.put(fit_demo_grid(demo_site)[0])  # GNSS finds need the fitted site grid
    d = run_app(tablet.path, simulate=True)
    _start(d)
    measured: list[tuple[float, float, float]] = []
    real_point = d.app.simulated_point

    def spy() -> tuple[float, float, float]:  # the simulator's target is the truth each reading came from
        measured.append(real_point())
        return measured[-1]

    d.app.simulated_point = spy
    rec = d.nav("record")
    d.choose(rec.ids.unit, "101")
    expected: dict[int, tuple[str, tuple[float, float, float] | None]] = {}
    methods = ["shot", "gnss", "tape", "sieve", "shot"]
    materials = {"artifact": ["chert", "obsidian", "basalt", "quartz"]}
    for i in range(30):
        number = int(rec.number)
        if i == 10:
            d.choose(rec.ids.unit, "102")  # the digging moves down a unit
        unit = rec.ids.unit.text
        mode = methods[i % len(methods)]
        d.choose(rec.ids.form.inputs["material"], materials["artifact"][i % 4])
        d.tap(rec.ids[f"pos_{mode}"])
        if mode == "shot":
            d.tap(rec.ids.take_shot)
            point: tuple[float, float, float] | None = measured[-1]
        elif mode == "gnss":
            d.tap(rec.ids.take_gnss)
            point = measured[-1]
            assert "read 0 s ago" in rec.gnss or "read 1 s ago" in rec.gnss, rec.gnss
        elif mode == "tape":
            east, north, depth = 5.0 + i * 0.1, 10.5 + i * 0.05, 0.62 + (0.2 if unit == "102" else 0.0)
            d.choose(rec.ids.tape_from, "CP1")
            d.type(rec.ids.tape_e, f"{east:.2f}")
            d.type(rec.ids.tape_n, f"{north:.2f}")
            d.type(rec.ids.tape_d, f"{depth:.2f}")
            point = (CP1[0] + round(east, 2), CP1[1] + round(north, 2), CP1[2] - round(depth, 2))
        else:
            d.choose(rec.ids.spit, "1")
            d.type(rec.ids.bucket, f"B-{i:02d}")
            point = None
        assert rec.ids.save.text == f"Save find {number}"
        d.tap(rec.ids.save)
        assert rec.problem == "", (i, mode, rec.problem)
        assert rec.summary.endswith(f"Saved find {number} in unit {unit}"
                                    + (" (no point: sieve find)." if point is None else
                                       f" at E {point[0]:.3f} N {point[1]:.3f} Z {point[2]:.3f}.")), rec.summary
        expected[number] = (unit, point)
        # the next find is the default, and the buttons are in reach without scrolling (portrait)
        assert rec.editing == "" and rec.number == str(number + 1)
        assert rec.ids.save.text == f"Save find {number + 1}"
        assert _on_screen(d, rec.ids.save) and _on_screen(d, rec.ids.new_find), i
        if i == 1:  # the same GNSS fix again is refused until the receiver is read again
            d.tap(rec.ids.save)
            assert "the fix already placed find" in rec.problem and rec.summary == rec.problem, rec.problem
            d.screenshot(shots, "record-gnss-reused")
            rec.problem = ""
            d.tap(rec.ids.new_find)
        if i == 14:  # correct find 12 (plotted by shot in 101): it was in 102, measured again
            target = next(n for n, (u, p) in sorted(expected.items()) if u == "101" and p is not None and n >= 5)
            finds = d.nav("finds")
            d.type(finds.ids.text, str(target))
            d.tap(finds.ids.search)
            d.pump(3)
            row = next(w for w in finds.ids.rv.layout_manager.children if w.text.startswith(f"{target}  "))
            d.tap(row)
            assert finds.detail.startswith(f"Find {target} in unit 101: artifact "), finds.detail
            d.screenshot(shots, "finds-chosen")
            d.tap(finds.ids.correct)
            rec = d.screen("record")
            assert rec.editing and rec.ids.title.text == f"Correcting find {target}"
            assert rec.ids.unit.text == "101" and rec.now_at.startswith("Now: unit 101, "), rec.now_at
            d.screenshot(shots, "record-correcting")
            d.choose(rec.ids.unit, "102")
            d.tap(rec.ids.pos_shot)
            d.tap(rec.ids.take_shot)
            assert rec.ids.save.text == f"Save correction to find {target}"
            d.tap(rec.ids.save)
            assert rec.problem == "", rec.problem
            new_point = measured[-1]
            assert rec.summary.startswith(f"Corrected find {target}: unit 101 -> 102;"), rec.summary
            expected[target] = ("102", new_point)
            assert rec.editing == "" and rec.ids.save.text.startswith("Save find ")
            assert rec.ids.unit.text == unit  # back on the day's unit
            d.screenshot(shots, "record-corrected")
    d.screenshot(shots, "record-thirty")

    finds = {f.number: f for f in d.app.store.list(Find)}
    codes = {u.id: u.code for u in d.app.store.list(Unit)}
    assert len(finds) == 30 and len({f.id for f in finds.values()}) == 30
    assert sorted(finds) == sorted(expected)
    for number, (unit, point) in expected.items():
        f = finds[number]
        assert codes[f.unit_id] == unit, (number, codes[f.unit_id], unit)
        if point is None:
            assert (f.e, f.recovery) == (None, "sieved"), number
        else:
            # a shot line carries 0.0001 deg and 0.1 mm; the simulated receiver's NMEA carries 1e-8 deg: within
            # 2 mm of the target either way (the site grid's own residuals are far below that)
            assert f.e == pytest.approx(point[0], abs=0.002) and f.n == pytest.approx(point[1], abs=0.002), number
            assert f.z == pytest.approx(point[2], abs=0.002), number
    assert {f.position_source for f in finds.values()} == {"total_station", "gnss", "tape", "none"}
