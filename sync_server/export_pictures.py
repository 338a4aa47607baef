"""Pictures for the analyst, drawn with matplotlib (no external binary): the reduced Harris matrix layered by
horizon (SVG and PNG), and per trench a plan (E against N) and a section (E against Z) of the plotted finds
coloured by horizon.

Matrix layout: each same-as group sits on the row of its longest path from the top (so every later unit is
drawn above every earlier one it touches); within a row, groups are ordered by the mean position of the groups
above them (one barycentre sweep, the usual layered-drawing heuristic - Sugiyama et al. 1981, from memory).
Units with problems (a check names them) are drawn with a thick red outline. The groups of a cycle (a relation
typed the wrong way round) share one red box, so a matrix that is not yet consistent can still be looked at.
"""

from __future__ import annotations

import uuid
from collections import defaultdict
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from schema.records import Find, Horizon, Trench, Unit
from schema.strata.graph import strongly_connected, topological_order, transitive_reduction
from schema.strata.matrix import Matrix

__all__ = ["Layout", "draw_matrix", "draw_trench_plots", "matrix_layout"]

# a colour-blind-safe qualitative palette (Okabe and Ito 2008, "Color Universal Design", from memory)
PALETTE = ["#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7", "#999999"]
NO_HORIZON = "#DDDDDD"


def _colours(horizons: list[Horizon]) -> dict[uuid.UUID, str]:
    return {h.id: PALETTE[i % len(PALETTE)] for i, h in enumerate(sorted(horizons, key=lambda h: h.order))}


@dataclass
class Layout:
    """Boxes (same-as groups; a cycle's groups share one box), the lines between them and where each sits."""

    boxes: dict[tuple[uuid.UUID, ...], list[uuid.UUID]]  # box key -> its groups
    lines: set[tuple[tuple[uuid.UUID, ...], tuple[uuid.UUID, ...]]]  # later box -> earlier box
    at: dict[tuple[uuid.UUID, ...], tuple[float, int]]  # box -> (x, row), row 0 at the top

    def row_of(self, label_of: Any) -> dict[str, int]:
        return {" / ".join(label_of(g) for g in self.boxes[k]): r for k, (_x, r) in self.at.items()}


def matrix_layout(matrix: Matrix) -> Layout:
    """Rows by longest path from the top, order within a row by the barycentre of the boxes above. A cycle's
    groups are drawn as one box (marked), so a matrix that still has a cycle can be drawn too."""
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
    boxes: dict[tuple[uuid.UUID, ...], list[uuid.UUID]] = {k: list(k) for k in set(comp.values())}
    above: dict[tuple[uuid.UUID, ...], list[tuple[uuid.UUID, ...]]] = defaultdict(list)
    for later, earlier in lines:
        above[earlier].append(later)
    row: dict[tuple[uuid.UUID, ...], int] = {}
    for k in topological_order(boxes, lines):  # latest first
        row[k] = max((row[a] + 1 for a in above[k] if a in row), default=0)
    rows: dict[int, list[tuple[uuid.UUID, ...]]] = defaultdict(list)
    for k, r in row.items():
        rows[r].append(k)
    x: dict[tuple[uuid.UUID, ...], float] = {}

    def label(k: tuple[uuid.UUID, ...]) -> str:
        return " / ".join(matrix.label(g) for g in k)

    for r in sorted(rows):
        def key(k: tuple[uuid.UUID, ...]) -> tuple[float, str]:
            xs = [x[a] for a in above[k] if a in x]
            return (sum(xs) / len(xs) if xs else 0.0, label(k))
        for i, k in enumerate(sorted(rows[r], key=key)):
            x[k] = float(i) - (len(rows[r]) - 1) / 2
    return Layout(boxes, lines, {k: (x[k], row[k]) for k in row})


def draw_matrix(matrix: Matrix, horizons: list[Horizon], problem_units: set[uuid.UUID], out: Path) -> list[Path]:
    """``harris_matrix.svg`` and ``.png``; returns the files written."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.patches import Patch

    colour = _colours(horizons)
    layout = matrix_layout(matrix)
    rows = 1 + max((r for _x, r in layout.at.values()), default=0)
    width = max((abs(x) for x, _r in layout.at.values()), default=1) * 2 + 2
    fig, ax = plt.subplots(figsize=(max(6.0, width * 1.2), max(4.0, rows * 0.8)))
    ax.set_axis_off()
    for later, earlier in layout.lines:
        (x1, r1), (x2, r2) = layout.at[later], layout.at[earlier]
        ax.plot([x1, x2], [-r1, -r2], color="#444444", linewidth=1, zorder=1)
    for k, (x, r) in layout.at.items():
        units = [matrix.units[u] for g in k for u in matrix.members[g]]
        h = next((u.horizon_id for u in units if u.horizon_id), None)
        cycle = len(k) > 1
        bad = cycle or any(u.id in problem_units for u in units)
        text = " / ".join(matrix.label(g) for g in k) + ("\n(cycle)" if cycle else "")
        ax.text(x, -r, text, ha="center", va="center", fontsize=10, zorder=2,
                bbox={"boxstyle": "square,pad=0.35", "facecolor": colour.get(h, NO_HORIZON) if h else NO_HORIZON,
                      "edgecolor": "#C00000" if bad else "#222222", "linewidth": 2.5 if bad else 0.8})
    ax.set_xlim(-width / 2, width / 2)
    ax.set_ylim(-rows + 0.4, 0.6)
    handles = [Patch(facecolor=colour[h.id], edgecolor="#222222", label=f"{h.code} {h.label}")
               for h in sorted(horizons, key=lambda h: h.order)]
    handles.append(Patch(facecolor="white", edgecolor="#C00000", linewidth=2.5, label="a check names this unit"))
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=9, frameon=False)
    title = "Harris matrix (reduced), later units above earlier"
    if matrix.reduced is None:
        title += "\nunits in a cycle share a box: resolve the cycle (see the checks)"
    ax.set_title(title, fontsize=12)
    files = [out / "harris_matrix.svg", out / "harris_matrix.png"]
    fig.savefig(files[0], bbox_inches="tight")
    fig.savefig(files[1], dpi=150, bbox_inches="tight")
    plt.close(fig)
    return files


def draw_trench_plots(trenches: list[Trench], units: list[Unit], horizons: list[Horizon], finds: list[Find],
                      out: Path) -> list[Path]:
    """``plan_<trench>.png`` and ``section_<trench>.png`` for each trench with plotted finds."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    colour = _colours(horizons)
    horizon_of = {u.id: u.horizon_id for u in units}
    label = {h.id: f"{h.code} {h.label}" for h in horizons}
    files = []
    for t in trenches:
        mine = [f for f in finds if f.trench_id == t.id and f.e is not None and not f.human_remains]
        if not mine:
            continue
        groups: dict[Any, list[Find]] = defaultdict(list)
        for f in mine:
            groups[horizon_of.get(f.unit_id)].append(f)
        order = sorted(groups, key=lambda h: next((x.order for x in horizons if x.id == h), 99))
        for kind, (xa, ya, xl, yl) in {"plan": ("e", "n", "E (m)", "N (m)"), "section": ("e", "z", "E (m)", "Z (m)")}.items():
            fig, ax = plt.subplots(figsize=(7, 5))
            if kind == "plan":
                ring = list(t.outline) + [t.outline[0]]
                ax.plot([p[0] for p in ring], [p[1] for p in ring], color="#222222", linewidth=1, label="trench outline")
                ax.set_aspect("equal", adjustable="datalim")
            for h in order:
                fs = groups[h]
                ax.scatter([getattr(f, xa) for f in fs], [getattr(f, ya) for f in fs], s=14,
                           color=colour.get(h, NO_HORIZON) if h else NO_HORIZON, edgecolors="#222222", linewidths=0.3,
                           label=label.get(h, "no horizon") if h else "no horizon")
            ax.set_xlabel(xl)
            ax.set_ylabel(yl)
            ax.set_title(f"Trench {t.code}: {kind} of plotted finds by horizon")
            ax.legend(fontsize=8, loc="best")
            ax.grid(True, linewidth=0.3)
            path = out / f"{kind}_{t.code}.png"
            fig.savefig(path, dpi=130, bbox_inches="tight")
            plt.close(fig)
            files.append(path)
    return files
