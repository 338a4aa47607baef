"""The matrix's graph algorithms, cross-checked against networkx (a general-purpose reference library) on
random graphs, and on a hand-made matrix with a known reduced form."""

from __future__ import annotations

import networkx as nx
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from schema.strata.graph import reachability, strongly_connected, topological_order, transitive_reduction


@st.composite
def dags(draw: st.DrawFn) -> tuple[int, list[tuple[int, int]]]:
    n = draw(st.integers(1, 25))
    perm = draw(st.permutations(list(range(n))))
    pairs = draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=60))
    return n, [(perm[a], perm[b]) for a, b in pairs if a < b]


@settings(max_examples=200)
@given(dags())
def test_transitive_reduction_matches_networkx(case: tuple[int, list[tuple[int, int]]]) -> None:
    n, edges = case
    g = nx.DiGraph()
    g.add_nodes_from(range(n))
    g.add_edges_from(edges)
    assert transitive_reduction(range(n), edges) == set(nx.transitive_reduction(g).edges())
    reach = reachability(range(n), edges)
    assert all(reach[v] == nx.descendants(g, v) for v in range(n))
    order = topological_order(range(n), edges)
    pos = {v: i for i, v in enumerate(order)}
    assert all(pos[a] < pos[b] for a, b in edges)


@settings(max_examples=200)
@given(st.integers(1, 20).flatmap(lambda n: st.tuples(
    st.just(n), st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=50))))
def test_components_match_networkx(case: tuple[int, list[tuple[int, int]]]) -> None:
    n, edges = case
    g = nx.DiGraph()
    g.add_nodes_from(range(n))
    g.add_edges_from(edges)
    ours = sorted(sorted(c) for c in strongly_connected(range(n), edges))
    assert ours == sorted(sorted(c) for c in nx.strongly_connected_components(g))


def test_hand_made_matrix_reduces_to_its_known_form() -> None:
    # 1 over 2 over 3 over 4, plus 1 over 3 and 1 over 4 and 2 over 4 (all implied) and 5 over 3 (a side branch)
    edges = [(1, 2), (2, 3), (3, 4), (1, 3), (1, 4), (2, 4), (5, 3)]
    assert transitive_reduction(range(1, 6), edges) == {(1, 2), (2, 3), (3, 4), (5, 3)}


def test_cycle_is_refused_by_the_order() -> None:
    with pytest.raises(ValueError, match="cycle"):
        topological_order([1, 2], [(1, 2), (2, 1)])
