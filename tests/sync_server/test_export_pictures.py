"""Report-grade pictures: the matrix in bands by horizon with its labels as SVG text and a cycle's box in no
horizon's colour, sections along the trench's long axis with their vertical exaggeration and legends outside the
data. The SVG is read back with Python's XML parser, the figures with matplotlib's own layout."""

from __future__ import annotations

import datetime as dt
import re
import uuid
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from schema.records import Find, Horizon, LevelPoint, Relation, Trench, Unit
from schema.strata.matrix import build_matrix
from sync_server.export_pictures import draw_matrix, matrix_layout, section_figure

SITE, TRENCH = uuid.uuid4(), uuid.uuid4()
H1 = Horizon(site_id=SITE, code="H1", label="Upper silts", order=1)
H2 = Horizon(site_id=SITE, code="H2", label="Lower clays", order=2)


def _unit(code: str, h: Horizon | None) -> Unit:
    return Unit(site_id=SITE, trench_id=TRENCH, code=code, kind="deposit", opened_on=dt.date(2026, 7, 1),
                recorder="AK", horizon_id=h.id if h else None)


def _above(a: Unit, b: Unit) -> Relation:
    return Relation(site_id=SITE, kind="above", upper_unit_id=a.id, lower_unit_id=b.id)


def test_matrix_rows_follow_the_horizons() -> None:
    u = {c: _unit(c, h) for c, h in (("1", H1), ("2", H1), ("3", H2), ("4", H2))}
    m = build_matrix(u.values(), [_above(u["1"], u["2"]), _above(u["2"], u["3"]), _above(u["1"], u["4"])])
    # by longest path alone 4 would share row 1 with 2; in bands it sits under every unit of H1
    assert matrix_layout(m).row_of(m.label) == {"1": 0, "2": 1, "3": 2, "4": 1}
    layout = matrix_layout(m, {H1.id: 1, H2.id: 2})
    assert layout.row_of(m.label) == {"1": 0, "2": 1, "3": 2, "4": 2}
    assert layout.bands == {H1.id: (0, 1), H2.id: (2, 2)}


def _svg_styles(svg: Path) -> list[dict[str, str]]:
    out = []
    for el in ET.parse(svg).getroot().iter():
        style = el.get("style")
        if el.tag.endswith("path") and style:
            out.append(dict(kv.split(": ", 1) for kv in (p.strip() for p in style.split(";")) if ": " in kv))
    return out


def test_matrix_svg_keeps_text_and_a_cycle_is_no_horizon(tmp_path: Path) -> None:
    u = {c: _unit(c, h) for c, h in (("11", H1), ("12", H1), ("13", H2), ("14", None))}
    # 12 above 13 and 13 above 12: a relation typed the wrong way round, across two horizons
    m = build_matrix(u.values(), [_above(u["11"], u["12"]), _above(u["12"], u["13"]), _above(u["13"], u["12"]),
                                  _above(u["13"], u["14"])])
    assert m.reduced is None
    files = draw_matrix(m, [H1, H2], {u["12"].id, u["13"].id}, tmp_path)
    svg = tmp_path / "harris_matrix.svg"
    root = ET.parse(svg).getroot()
    texts = [("".join(t.itertext())).strip() for t in root.iter() if t.tag.endswith("text")]
    for label in ("11", "12 / 13", "(cycle: H1, H2)", "14", "H1 Upper silts", "H2 Lower clays"):
        assert any(label in t for t in texts), (label, texts)  # labels are <text>, editable, not outlines
    # every red-outlined box is white (the cycle), none in a horizon's colour (the matplotlib SVG writer puts
    # fill and stroke in each path's style)
    from sync_server.export_pictures import CYCLE_FILL, NO_HORIZON, PALETTE

    red = [s for s in _svg_styles(svg) if s.get("stroke", "").lower() == "#c00000"]
    assert red and {s.get("fill", "").lower() for s in red} == {CYCLE_FILL.lower()}
    fills = {s.get("fill", "").lower() for s in _svg_styles(svg)}
    assert NO_HORIZON.lower() in fills and PALETTE[0].lower() in fills  # unit 14 grey, unit 11 in H1's colour
    # the same matrix draws the same bytes: no date, fixed ids
    again = tmp_path / "again"
    again.mkdir()
    draw_matrix(m, [H1, H2], {u["12"].id, u["13"].id}, again)
    assert (again / "harris_matrix.svg").read_bytes() == svg.read_bytes()
    assert not re.search(rb"<dc:date>", svg.read_bytes())
    assert files[1].stat().st_size > 1000


def test_section_runs_along_the_long_axis_with_its_exaggeration_stated() -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from schema.section import long_axis

    # a 10 m x 2 m trench laid north-south, its level points spanning 48.8 to 50.0 m: the long axis runs north and
    # the section is drawn at 0.5 x 10 / 1.2 = 4.2, rounded down to 2.5 (schema.section.vertical_exaggeration)
    t = Trench(id=TRENCH, site_id=SITE, code="T9", outline=[(100, 200), (102, 200), (102, 210), (100, 210)])
    a, b = _unit("21", H1), _unit("22", H2)
    levels = [LevelPoint(unit_id=u.id, surface=s, e=e, n=n, z=z)
              for u, s, z0 in ((a, "top", 50.0), (a, "bottom", 49.6), (b, "top", 49.6), (b, "bottom", 49.0))
              for e, n, z in ((100, 200, z0), (102, 200, z0), (100, 210, z0 - 0.2), (102, 210, z0 - 0.2))]
    find = Find(number=1, site_id=SITE, season_id=uuid.uuid4(), trench_id=TRENCH, unit_id=b.id, category="artifact",
                material="obsidian", recovery="plotted", e=101.0, n=207.5, z=49.3, position_source="total_station",
                recorder="AK", found_at=dt.datetime(2026, 7, 2, 9, tzinfo=dt.timezone.utc))
    axis = long_axis(t.outline)
    assert axis.bearing_deg == pytest.approx(0.0) and axis.length == pytest.approx(10.0)
    fig = section_figure(plt, t, axis, [a, b], [H1, H2], {H1.id: "#E69F00", H2.id: "#56B4E9"}, [find], levels)
    try:
        ax = fig.axes[0]
        title = ax.get_title()
        assert "vertical exaggeration 2.5\u00d7" in title and "site grid" in title
        assert ax.get_aspect() == 2.5
        assert "site grid" in ax.get_xlabel() and "site datum" in ax.get_ylabel()
        # the find is drawn at its distance along the axis (7.5 m north of the southern end) and its own Z
        offsets = [c.get_offsets() for c in ax.collections if len(c.get_offsets()) == 1]
        assert any(tuple(o[0]) == pytest.approx((7.5, 49.3)) for o in offsets)
        # the legend sits outside the data: right of the axes
        fig.canvas.draw()
        legend = ax.get_legend().get_window_extent()
        assert legend.x0 >= ax.get_window_extent().x1
        labels = [t.get_text() for t in ax.get_legend().get_texts()]
        assert "H1 Upper silts" in labels and "unit surface (level points)" in labels
        # unit boundaries come from the level points: the top of H2 slopes 0.2 m down to the north
        tops = [ln for ln in ax.get_lines() if ln.get_linewidth() == pytest.approx(2.2)]
        z_of_h2 = [ln.get_ydata() for ln in tops if min(ln.get_ydata()) == pytest.approx(49.4)]
        assert z_of_h2 and z_of_h2[0][0] == pytest.approx(49.6) and z_of_h2[0][-1] == pytest.approx(49.4)
    finally:
        plt.close(fig)
