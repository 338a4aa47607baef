"""Small graph algorithms the matrix needs, written out so they run on any tablet build and can be
cross-checked against networkx in the tests: strongly connected components (cycles), topological order and
the transitive reduction of a DAG. Nodes are any hashable values; edges run from later to earlier."""

from __future__ import annotations

from collections.abc import Hashable, Iterable
from typing import TypeVar

__all__ = ["reachability", "strongly_connected", "topological_order", "transitive_reduction"]

N = TypeVar("N", bound=Hashable)


def _adjacency(nodes: Iterable[N], edges: Iterable[tuple[N, N]]) -> dict[N, list[N]]:
    adj: dict[N, list[N]] = {n: [] for n in nodes}
    for a, b in edges:
        adj.setdefault(a, []).append(b)
        adj.setdefault(b, [])
    return adj


def strongly_connected(nodes: Iterable[N], edges: Iterable[tuple[N, N]]) -> list[list[N]]:
    """Tarjan's strongly connected components, iterative (no recursion limit); each as a list of nodes."""
    adj = _adjacency(nodes, edges)
    index: dict[N, int] = {}
    low: dict[N, int] = {}
    on_stack: set[N] = set()
    stack: list[N] = []
    out: list[list[N]] = []
    counter = 0
    for root in adj:
        if root in index:
            continue
        work: list[tuple[N, int]] = [(root, 0)]
        while work:
            node, i = work.pop()
            if i == 0:
                index[node] = low[node] = counter
                counter += 1
                stack.append(node)
                on_stack.add(node)
            recurse = False
            for j in range(i, len(adj[node])):
                nxt = adj[node][j]
                if nxt not in index:
                    work.append((node, j + 1))
                    work.append((nxt, 0))
                    recurse = True
                    break
                if nxt in on_stack:
                    low[node] = min(low[node], index[nxt])
            if recurse:
                continue
            if low[node] == index[node]:
                comp = []
                while True:
                    w = stack.pop()
                    on_stack.discard(w)
                    comp.append(w)
                    if w == node:
                        break
                out.append(comp)
            if work:
                parent = work[-1][0]
                low[parent] = min(low[parent], low[node])
    return out


def topological_order(nodes: Iterable[N], edges: Iterable[tuple[N, N]]) -> list[N]:
    """Kahn's order: every edge's source before its target (latest first). Raises ValueError on a cycle."""
    adj = _adjacency(nodes, edges)
    indeg = {n: 0 for n in adj}
    for a in adj:
        for b in adj[a]:
            indeg[b] += 1
    ready = sorted((n for n, d in indeg.items() if d == 0), key=repr)
    order: list[N] = []
    while ready:
        n = ready.pop(0)
        order.append(n)
        for b in adj[n]:
            indeg[b] -= 1
            if indeg[b] == 0:
                ready.append(b)
    if len(order) != len(adj):
        raise ValueError("the graph has a cycle")
    return order


def reachability(nodes: Iterable[N], edges: Iterable[tuple[N, N]]) -> dict[N, set[N]]:
    """For each node of a DAG, every node reachable from it (not itself)."""
    adj = _adjacency(nodes, edges)
    order = topological_order(adj, ((a, b) for a in adj for b in adj[a]))
    pos = {n: i for i, n in enumerate(order)}
    bits: dict[N, int] = {}
    for n in reversed(order):
        acc = 0
        for b in adj[n]:
            acc |= bits[b] | (1 << pos[b])
        bits[n] = acc
    return {n: {order[i] for i in range(len(order)) if bits[n] >> i & 1} for n in order}


def transitive_reduction(nodes: Iterable[N], edges: Iterable[tuple[N, N]]) -> set[tuple[N, N]]:
    """The fewest edges of a DAG with the same reachability; the rest are implied (redundant)."""
    adj = _adjacency(nodes, edges)
    order = topological_order(adj, ((a, b) for a in adj for b in adj[a]))
    pos = {n: i for i, n in enumerate(order)}
    below: dict[N, int] = {}
    for n in reversed(order):
        acc = 0
        for b in adj[n]:
            acc |= below[b] | (1 << pos[b])
        below[n] = acc
    kept: set[tuple[N, N]] = set()
    for a in adj:
        targets = set(adj[a])
        implied = 0
        for b in targets:
            implied |= below[b]
        for b in targets:
            if not implied >> pos[b] & 1:
                kept.add((a, b))
    return kept
