"""Pictures for the analyst, drawn with matplotlib (no external binary): the reduced Harris matrix layered by
horizon (SVG with its labels kept as text, and PNG), and per trench a plan and a section along the trench's long
axis, both in site grid metres.

Matrix layout: boxes (same-as groups) are layered by horizon - every box of a horizon sits below every box of the
horizons above it, in a band named at the left - and within a horizon by the longest path from the top (so every
later unit is drawn above every earlier one it touches); within a row, boxes are ordered by the mean position of
the boxes above them (one barycentre sweep, the usual layered-drawing heuristic - Sugiyama et al. 1981, from
memory). Units with problems (a check names them) are drawn with a thick red outline. The groups of a cycle (a
relation typed the wrong way round) share one box, white rather than in any horizon's colour, so a
matrix that is not yet consistent can still be looked at.

Sections: the trench's long axis (``schema.section``); unit surfaces drawn from their level points, each unit
filled in its horizon's colour, the top of each horizon as a thick line; plotted finds projected onto the axis;
the vertical exaggeration stated on the drawing. Legends sit outside the data.
"""

from __future__ import annotations

import heapq
import math
import uuid
from collections import defaultdict
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from schema.records import Find, Horizon, LevelPoint, Trench, Unit
from schema.section import long_axis, profile, vertical_exaggeration
from schema.strata.graph import strongly_connected, transitive_reduction
from schema.strata.matrix import Matrix

__all__ = ["Layout", "box_fill", "draw_matrix", "draw_trench_plots", "matrix_layout", "plan_figure", "section_figure"]

# text stays text in the SVG (editable, searchable); ids come from a fixed salt and no date is written, so the same
# store draws the same bytes (matplotlib rcParams svg.fonttype and svg.hashsalt, savefig metadata)
_SVG_RC = {"svg.fonttype": "none", "svg.hashsalt": "baulk"}
_NO_DATE = {"Date": None}

# a colour-blind-safe qualitative palette (Okabe and Ito 2008, "Color Universal Design", from memory)
PALETTE = ["#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7", "#999999"]
NO_HORIZON = "#DDDDDD"
CYCLE_FILL = "#FFFFFF"


def _colours(horizons: list[Horizon]) -> dict[uuid.UUID, str]:
    return {h.id: PALETTE[i % len(PALETTE)] for i, h in enumerate(sorted(horizons, key=lambda h: h.order))}


@dataclass
class Layout:
    """Boxes (same-as groups; a cycle's groups share one box), the lines between them and where each sits."""

    boxes: dict[tuple[uuid.UUID, ...], list[uuid.UUID]]  # box key -> its groups
    lines: set[tuple[tuple[uuid.UUID, ...], tuple[uuid.UUID, ...]]]  # later box -> earlier box
    at: dict[tuple[uuid.UUID, ...], tuple[float, int]]  # box -> (x, row), row 0 at the top
    bands: dict[uuid.UUID, tuple[int, int]] = field(default_factory=dict)  # horizon -> (first row, last row)

    def row_of(self, label_of: Any) -> dict[str, int]:
        return {" / ".join(label_of(g) for g in self.boxes[k]): r for k, (_x, r) in self.at.items()}


Box = tuple[uuid.UUID, ...]


def _box_horizons(matrix: Matrix, k: Box) -> set[uuid.UUID]:
    return {matrix.units[u].horizon_id for g in k for u in matrix.members[g] if matrix.units[u].horizon_id}


def matrix_layout(matrix: Matrix, horizon_order: dict[uuid.UUID, int] | None = None) -> Layout:
    """Rows by horizon (``horizon_order``: horizon id -> its order, 1 at the top), then by longest path from the
    top; order within a row by the barycentre of the boxes above. A box whose units lie in several horizons (a
    cycle's) is banded with the uppermost. A relation that runs against the horizon order wins over the bands
    (the HORIZON_ORDER check reports it). A cycle's groups are drawn as one box, so a matrix that still has a cycle
    can be drawn too."""
    groups = list(matrix.members)
    if matrix.reduced is not None:
        comp = {g: (g,) for g in groups}
        lines = {(comp[a], comp[b]) for a, b in matrix.reduced}
    else:
        comp = {}
        for scc in strongly_connected(groups, matrix.edges):
            key = tuple(sorted(scc, key=matrix.label))
            for g in scc:
                comp[g] = key
        condensed = {(comp[a], comp[b]) for a, b in matrix.edges if comp[a] != comp[b]}
        lines = transitive_reduction(set(comp.values()), condensed)
    boxes: dict[Box, list[uuid.UUID]] = {k: list(k) for k in set(comp.values())}
    above: dict[Box, list[Box]] = defaultdict(list)
    below: dict[Box, list[Box]] = defaultdict(list)
    for later, earlier in lines:
        above[earlier].append(later)
        below[later].append(earlier)

    def label(k: Box) -> str:
        return " / ".join(matrix.label(g) for g in k)

    order = horizon_order or {}
    band_of = {k: min((order[h] for h in _box_horizons(matrix, k) if h in order), default=None) for k in boxes}
    # Kahn's topological sort, upper horizons first, so a horizon's floor is known before its boxes are placed
    waiting = {k: len(above[k]) for k in boxes}
    ready = [((band_of[k] if band_of[k] is not None else math.inf), label(k), k) for k in boxes if not waiting[k]]
    heapq.heapify(ready)
    row: dict[Box, int] = {}
    deepest: dict[int, int] = {}  # horizon order -> deepest row used so far
    while ready:
        b, _l, k = heapq.heappop(ready)
        floor = max((r + 1 for o, r in deepest.items() if b != math.inf and o < b), default=0)
        row[k] = max([floor] + [row[a] + 1 for a in above[k]])
        if b != math.inf:
            deepest[int(b)] = max(deepest.get(int(b), 0), row[k])
        for e in below[k]:
            waiting[e] -= 1
            if not waiting[e]:
                heapq.heappush(ready, ((band_of[e] if band_of[e] is not None else math.inf), label(e), e))
    for k in boxes:  # a cycle left in the condensed lines cannot happen; keep every box drawable anyway
        row.setdefault(k, 0)
    rows: dict[int, list[Box]] = defaultdict(list)
    for k, r in row.items():
        rows[r].append(k)
    x: dict[Box, float] = {}
    for r in sorted(rows):
        def key(k: Box) -> tuple[float, str]:
            xs = [x[a] for a in above[k] if a in x]
            return (sum(xs) / len(xs) if xs else 0.0, label(k))
        for i, k in enumerate(sorted(rows[r], key=key)):
            x[k] = float(i) - (len(rows[r]) - 1) / 2
    bands: dict[uuid.UUID, tuple[int, int]] = {}
    for k, r in row.items():
        hs = _box_horizons(matrix, k)
        if len(hs) == 1:
            (h,) = hs
            lo, hi = bands.get(h, (r, r))
            bands[h] = (min(lo, r), max(hi, r))
    return Layout(boxes, lines, {k: (x[k], row[k]) for k in row}, bands)


def box_fill(horizons_in_box: set[uuid.UUID], cycle: bool, colour: dict[uuid.UUID, str]) -> str:
    """A box's fill: its horizon's colour; grey in no horizon; white for a cycle or a box across horizons (it
    belongs to no single horizon until the cycle is resolved)."""
    if cycle or len(horizons_in_box) > 1:
        return CYCLE_FILL
    if not horizons_in_box:
        return NO_HORIZON
    return colour.get(next(iter(horizons_in_box)), NO_HORIZON)


def draw_matrix(matrix: Matrix, horizons: list[Horizon], problem_units: set[uuid.UUID], out: Path) -> list[Path]:
    """``harris_matrix.svg`` (labels as text) and ``.png``; returns the files written."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.patches import Patch, Rectangle

    colour = _colours(horizons)
    layout = matrix_layout(matrix, {h.id: h.order for h in horizons})
    rows = 1 + max((r for _x, r in layout.at.values()), default=0)
    half = max((abs(x) for x, _r in layout.at.values()), default=1) + 1
    with plt.rc_context(_SVG_RC):
        fig, ax = plt.subplots(figsize=(max(7.0, half * 2 * 1.3 + 3), max(4.0, rows * 0.85 + 1)))
        ax.set_axis_off()
        by_id = {h.id: h for h in horizons}
        for hid, (r0, r1) in sorted(layout.bands.items(), key=lambda kv: by_id[kv[0]].order if kv[0] in by_id else 99):
            h = by_id.get(hid)
            if h is None:
                continue
            ax.add_patch(Rectangle((-half - 1.6, -r1 - 0.45), 2 * half + 1.6, r1 - r0 + 0.9, facecolor=colour[hid],
                                   alpha=0.18, edgecolor="none", zorder=0))
            ax.text(-half - 1.5, -(r0 + r1) / 2, f"{h.code}\n{h.label}", ha="left", va="center", fontsize=8,
                    color="#333333", zorder=1, wrap=True)
        for later, earlier in layout.lines:
            (x1, r1), (x2, r2) = layout.at[later], layout.at[earlier]
            ax.plot([x1, x2], [-r1, -r2], color="#444444", linewidth=1, zorder=1)
        for k, (x, r) in layout.at.items():
            units = [matrix.units[u] for g in k for u in matrix.members[g]]
            hs = _box_horizons(matrix, k)
            cycle = len(k) > 1
            bad = cycle or any(u.id in problem_units for u in units)
            text = " / ".join(matrix.label(g) for g in k)
            if cycle:
                codes = sorted(by_id[h].code for h in hs if h in by_id)
                text += "\n(cycle" + (f": {', '.join(codes)}" if codes else "") + ")"
            ax.text(x, -r, text, ha="center", va="center", fontsize=10, zorder=2,
                    bbox={"boxstyle": "square,pad=0.35", "facecolor": box_fill(hs, cycle, colour),
                          "edgecolor": "#C00000" if bad else "#222222", "linewidth": 2.5 if bad else 0.8})
        ax.set_xlim(-half - 1.6, half)
        ax.set_ylim(-rows + 0.4, 0.6)
        handles = [Patch(facecolor=colour[h.id], edgecolor="#222222", label=f"{h.code} {h.label}")
                   for h in sorted(horizons, key=lambda h: h.order)]
        handles.append(Patch(facecolor=NO_HORIZON, edgecolor="#222222", label="in no horizon"))
        handles.append(Patch(facecolor=CYCLE_FILL, edgecolor="#C00000", linewidth=2.5,
                             label="red outline: a check names the unit;\nwhite: units in a cycle, one box"))
        ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=9, frameon=False,
                  title="Horizon (box and band)", title_fontsize=9, alignment="left")
        title = "Harris matrix (reduced), later units above earlier, in bands by horizon"
        if matrix.reduced is None:
            title += "\nunits in a cycle share a box: resolve the cycle (see the checks)"
        ax.set_title(title, fontsize=12)
        files = [out / "harris_matrix.svg", out / "harris_matrix.png"]
        fig.savefig(files[0], bbox_inches="tight", metadata=_NO_DATE)
        fig.savefig(files[1], dpi=150, bbox_inches="tight")
        plt.close(fig)
    return files


def _darker(hex_colour: str, k: float = 0.6) -> str:
    r, g, b = (int(hex_colour[i:i + 2], 16) for i in (1, 3, 5))
    return f"#{int(r * k):02X}{int(g * k):02X}{int(b * k):02X}"


def draw_trench_plots(trenches: list[Trench], units: list[Unit], horizons: list[Horizon], finds: list[Find],
                      out: Path, *, levels: list[LevelPoint] | None = None) -> list[Path]:
    """``plan_<trench>.png`` and ``section_<trench>.png`` for each trench with plotted finds or level points."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    colour = _colours(horizons)
    files = []
    for t in trenches:
        mine = [f for f in finds if f.trench_id == t.id and f.e is not None and not f.human_remains]
        its_units = [u for u in units if u.trench_id == t.id]
        unit_ids = {u.id for u in its_units}
        its_levels = [p for p in levels or [] if p.unit_id in unit_ids]
        if not mine and not its_levels:
            continue
        axis = long_axis(list(t.outline))
        for kind, draw in (("plan", plan_figure), ("section", section_figure)):
            fig = draw(plt, t, axis, its_units, horizons, colour, mine, its_levels)
            path = out / f"{kind}_{t.code}.png"
            fig.savefig(path, dpi=130, bbox_inches="tight")
            plt.close(fig)
            files.append(path)
    return files


def _legend_outside(ax: Any, handles: list[Any], title: str) -> None:
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), fontsize=8, frameon=False, title=title,
              title_fontsize=8, alignment="left")


def _horizon_handles(horizons: list[Horizon], colour: dict[uuid.UUID, str], present: set[Any]) -> list[Any]:
    from matplotlib.patches import Patch

    hs = [Patch(facecolor=colour[h.id], edgecolor="#222222", label=f"{h.code} {h.label}")
          for h in sorted(horizons, key=lambda h: h.order) if h.id in present]
    if None in present:
        hs.append(Patch(facecolor=NO_HORIZON, edgecolor="#222222", label="in no horizon"))
    return hs


def plan_figure(plt: Any, t: Trench, axis: Any, units: list[Unit], horizons: list[Horizon],
                colour: dict[uuid.UUID, str], finds: list[Find], levels: list[LevelPoint]) -> Any:
    """The trench's plan in site grid metres: outline, the section line A-A', finds by horizon."""
    from matplotlib.lines import Line2D

    horizon_of = {u.id: u.horizon_id for u in units}
    fig, ax = plt.subplots(figsize=(7.5, 5))
    ring = list(t.outline) + [t.outline[0]]
    ax.plot([p[0] for p in ring], [p[1] for p in ring], color="#222222", linewidth=1.2)
    (ax0, ay0), (ax1, ay1) = axis.point(0), axis.point(axis.length)
    ax.plot([ax0, ax1], [ay0, ay1], color="#666666", linewidth=0.9, linestyle=(0, (6, 3)))
    ax.annotate("A", (ax0, ay0), textcoords="offset points", xytext=(-10, 4), fontsize=9)
    ax.annotate("A'", (ax1, ay1), textcoords="offset points", xytext=(4, 4), fontsize=9)
    present = {horizon_of.get(f.unit_id) for f in finds}
    for h in [x.id for x in sorted(horizons, key=lambda h: h.order)] + [None]:
        fs = [f for f in finds if horizon_of.get(f.unit_id) == h]
        if fs:
            ax.scatter([f.e for f in fs], [f.n for f in fs], s=16, color=colour.get(h, NO_HORIZON) if h else NO_HORIZON,
                       edgecolors="#222222", linewidths=0.4, zorder=3)
    ax.set_aspect("equal", adjustable="datalim")
    ax.set_xlabel("E (m, site grid)")
    ax.set_ylabel("N (m, site grid)")
    ax.set_title(f"Trench {t.code}: plan of the plotted finds (site grid)", fontsize=11)
    ax.grid(True, linewidth=0.3)
    handles = _horizon_handles(horizons, colour, present) + [
        Line2D([], [], color="#222222", linewidth=1.2, label="trench outline"),
        Line2D([], [], color="#666666", linewidth=0.9, linestyle=(0, (6, 3)), label="section line A-A' (long axis)")]
    _legend_outside(ax, handles, "Finds by horizon")
    return fig


def section_figure(plt: Any, t: Trench, axis: Any, units: list[Unit], horizons: list[Horizon],
                   colour: dict[uuid.UUID, str], finds: list[Find], levels: list[LevelPoint]) -> Any:
    """The section along the long axis: units filled between their level surfaces, horizon tops, finds projected
    onto the axis, drawn at the stated vertical exaggeration."""
    import numpy as np
    from matplotlib.lines import Line2D

    horizon_of = {u.id: u.horizon_id for u in units}
    order = {h.id: h.order for h in horizons}
    code = {h.id: h.code for h in horizons}
    surfaces: dict[tuple[uuid.UUID, str], list[tuple[float, float]]] = defaultdict(list)
    for p in levels:
        surfaces[(p.unit_id, p.surface)].append((axis.along(p.e, p.n), p.z))
    prof = {k: profile(v) for k, v in surfaces.items()}
    zs = [f.z for f in finds if f.z is not None] + [p.z for p in levels]
    depth = (max(zs) - min(zs)) if zs else 1.0
    ve = vertical_exaggeration(axis.length, depth)
    fig_w = 9.0
    fig, ax = plt.subplots(figsize=(fig_w, max(3.2, min(7.5, fig_w * 0.8 * ve * depth / max(axis.length, 0.1)) + 1.2)))
    xs = np.linspace(0, axis.length, 200)
    names_at: dict[tuple[float, float], list[str]] = defaultdict(list)  # units whose tops start at one spot
    # each unit with both surfaces: filled in its horizon's colour between them
    for u in sorted(units, key=lambda u: (order.get(u.horizon_id, 99), u.code)):
        top, base = prof.get((u.id, "top")), prof.get((u.id, "bottom"))
        h = u.horizon_id
        fill = colour.get(h, NO_HORIZON) if h else NO_HORIZON
        if top and base:
            zt = np.interp(xs, [d for d, _ in top], [z for _, z in top])
            zb = np.interp(xs, [d for d, _ in base], [z for _, z in base])
            ax.fill_between(xs, zb, zt, color=fill, alpha=0.35, linewidth=0, zorder=1)
        for surf in (top, base):
            if surf:
                ax.plot([d for d, _ in surf], [z for _, z in surf], color="#555555", linewidth=0.8,
                        linestyle=(0, (4, 2)), zorder=2)
        if top:
            names_at[(round(top[0][0], 2), round(top[0][1], 2))].append(u.code)
    for (d, z), codes in names_at.items():
        ax.annotate(("unit " if len(codes) == 1 else "units ") + ", ".join(codes), (d, z), textcoords="offset points",
                    xytext=(3, -9), fontsize=7, color="#333333", zorder=5)
    # the top of each horizon: the highest of its units' top surfaces at each point of the axis
    for h in sorted(horizons, key=lambda h: h.order):
        tops = [prof[(u.id, "top")] for u in units if u.horizon_id == h.id and (u.id, "top") in prof]
        if tops:
            env = np.max([np.interp(xs, [d for d, _ in p], [z for _, z in p]) for p in tops], axis=0)
            ax.plot(xs, env, color=_darker(colour[h.id]), linewidth=2.2, zorder=3)
            ax.annotate(f"top of {code[h.id]}", (xs[-1], env[-1]), textcoords="offset points", xytext=(-3, 2),
                        ha="right", fontsize=7, color=_darker(colour[h.id]), zorder=5)
    present = {horizon_of.get(f.unit_id) for f in finds} | {horizon_of.get(p.unit_id) for p in levels}
    for h in [x.id for x in sorted(horizons, key=lambda h: h.order)] + [None]:
        fs = [f for f in finds if horizon_of.get(f.unit_id) == h]
        if fs:
            ax.scatter([axis.along(f.e, f.n) for f in fs], [f.z for f in fs], s=14,
                       color=colour.get(h, NO_HORIZON) if h else NO_HORIZON, edgecolors="#222222", linewidths=0.4,
                       zorder=4)
    ax.set_aspect(ve)  # 1 m of Z drawn as ve m of distance
    ax.set_xlim(0, axis.length)
    ax.text(0, 1.01, "A", transform=ax.transAxes, fontsize=9, va="bottom")
    ax.text(1, 1.01, "A'", transform=ax.transAxes, fontsize=9, va="bottom", ha="right")
    ax.set_xlabel(f"distance along the long axis A-A' (m, site grid; bearing {axis.bearing_deg:05.1f}\u00b0 grid)")
    ax.set_ylabel("Z (m, site datum)")
    ax.set_title(f"Trench {t.code}: section along its long axis (site grid), vertical exaggeration "
                 f"{ve:g}\u00d7\nfinds projected onto the axis from up to {axis.width / 2:.2f} m either side",
                 fontsize=10)
    ax.grid(True, linewidth=0.3)
    handles = _horizon_handles(horizons, colour, present) + [
        Line2D([], [], color="#555555", linewidth=0.8, linestyle=(0, (4, 2)), label="unit surface (level points)"),
        Line2D([], [], color="#333333", linewidth=2.2, label="top of a horizon (its colour, darker)"),
        Line2D([], [], marker="o", linestyle="none", markerfacecolor="white", markeredgecolor="#222222",
               label="plotted find (filled: its horizon)")]
    _legend_outside(ax, handles, "Horizon (fill)")
    return fig
