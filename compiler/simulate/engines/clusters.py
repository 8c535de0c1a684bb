"""Connected groups of dots under the exchange that is on: the unit of exact
propagation of the fast engine and of its general-levels path."""

from __future__ import annotations


def clusters(n: int, edges, active):
    """Connected groups of dots (sorted tuples) and the pairs inside each."""
    parent = list(range(n))

    def find(x):
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    for a, b in edges:
        parent[find(a)] = find(b)
    groups: dict = {}
    for q in range(n):
        groups.setdefault(find(q), []).append(q)
    out = []
    for members in groups.values():
        dots = tuple(sorted(members))
        pairs = tuple(i for i, (a, b) in zip(active, edges) if a in members)
        out.append((dots, pairs))
    return out


def noise_variants(points, dots, pairs) -> int:
    """How many distinct values the quadrature points give a cluster's own
    noise variables (its dots' detunings, its pairs' charge offsets, the
    gate-band modes): the channels an exact cluster needs per segment."""
    return len({(tuple(pt.detuning[q] if pt.detuning else 0.0 for q in dots),
                 tuple(pt.dv[j] if pt.dv else 0.0 for j in pairs),
                 tuple(pt.modes) if pt.modes else ()) for pt in points})
