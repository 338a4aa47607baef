"""A voided relation in the analyst's export (issue 18, item 12): relations.csv keeps it, marked voided with its
reason; the reduced matrix and the checks leave it out. The demo's tablet TAB-3 types one relation the wrong
way round, which closes a circle; once voided, the exported reduced matrix equals networkx's transitive reduction
of the relations still in force (networkx: the outside reference), and no unit is left in a circle."""

from __future__ import annotations

import csv
import shutil
from pathlib import Path

import networkx as nx
from click.testing import CliRunner

from schema.demo_site import RELATIONS
from schema.records import Relation, Unit
from schema.validation import check
from sync_server.cli import cli


def _rows(path: Path) -> list[dict[str, str]]:
    with path.open(newline="") as fh:
        return list(csv.DictReader(fh))


def test_a_voided_relation_is_listed_as_voided_and_left_out_of_the_matrix(demo_out: Path, tmp_path: Path) -> None:
    from sync_server.store import ServerStore

    db = tmp_path / "server.sqlite"
    shutil.copy(demo_out / "server.sqlite", db)
    store = ServerStore.open(f"sqlite:///{db}")
    try:
        code = {u.id: u.code for u in store.list(Unit)}
        planned = {(a, b) for a, b, _k in RELATIONS}
        (wrong,) = [r for r in store.list(Relation) if (code[r.upper_unit_id], code[r.lower_unit_id]) not in planned]
        store.put(check(Relation, {**wrong.model_dump(), "voided": True, "void_reason": "typed the wrong way round"}))
        in_force = [r for r in store.list(Relation) if not r.voided]
    finally:
        store.close()
    out = tmp_path / "export"
    r = CliRunner().invoke(cli, ["export", "--out", str(out), "--db", f"sqlite:///{db}"])
    assert r.exit_code == 0, r.output
    rels = {row["id"]: row for row in _rows(out / "relations.csv")}
    assert (rels[str(wrong.id)]["voided"], rels[str(wrong.id)]["void_reason"]) == ("true", "typed the wrong way round")
    assert len(rels) == len(in_force) + 1  # kept, never deleted
    assert all(row["in_cycle"] == "false" for row in _rows(out / "units.csv"))
    # reference: networkx on the relations in force, same-as units merged under their first code
    same = nx.Graph()
    same.add_nodes_from(code.values())
    same.add_edges_from((code[r.upper_unit_id], code[r.lower_unit_id]) for r in in_force if r.kind == "same_as")
    group = {c: "=".join(sorted(comp)) for comp in nx.connected_components(same) for c in comp}
    g = nx.DiGraph()
    g.add_edges_from((group[code[r.upper_unit_id]], group[code[r.lower_unit_id]]) for r in in_force
                     if r.kind in ("above", "cuts", "fills"))
    assert nx.is_directed_acyclic_graph(g)
    exported = {(row["upper_group"], row["lower_group"]) for row in _rows(out / "reduced_matrix.csv")}
    assert exported == set(nx.transitive_reduction(g).edges())
