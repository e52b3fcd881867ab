"""The union-find helper against scipy's graph routines (scipy.sparse.csgraph, a general-purpose reference).

- the sets after joining random pairs are the connected components of the graph of those pairs
  (``connected_components``);
- Kruskal's tree of member sections (``sections._tree``, built on the helper) has the length of
  scipy's minimum spanning tree (``minimum_spanning_tree``) when no edge is forced, and keeps every
  forced edge when some are.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components, minimum_spanning_tree

from tiltopt.kinematics.disjoint_sets import DisjointSets
from tiltopt.kinematics.sections import _tree


@pytest.mark.parametrize("seed", range(20))
def test_sets_are_the_connected_components(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 40))
    pairs = rng.integers(0, n, size=(int(rng.integers(0, 2 * n)), 2))
    sets = DisjointSets(n)
    joined = [sets.union(int(a), int(b)) for a, b in pairs]
    graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(n, n))
    k, label = connected_components(graph, directed=False)
    groups = sets.groups()
    assert len({id(g) for g in groups}) == k
    for i in range(n):
        assert groups[i] == sorted(np.flatnonzero(label == label[i]).tolist())
        assert (sets.find(i) == sets.find(groups[i][0]))
    # a union that joins two sets lowers the count by one: n - (joins) = components
    assert n - sum(joined) == k


@pytest.mark.parametrize("seed", range(20))
def test_kruskal_tree_is_the_minimum_spanning_tree(seed):
    rng = np.random.default_rng(100 + seed)
    n = int(rng.integers(2, 12))
    P = rng.uniform(-300.0, 300.0, size=(n, 2))
    edges = _tree(P, [])
    length = sum(np.linalg.norm(P[i] - P[j]) for i, j in edges)
    D = np.linalg.norm(P[:, None] - P[None], axis=-1)
    assert len(edges) == n - 1
    assert length == pytest.approx(minimum_spanning_tree(D).sum(), rel=1e-12)


def test_kruskal_tree_keeps_forced_edges():
    """A forced edge stays in the tree although the shortest tree would not hold it (0-2 is the longest
    distance of the four points); the rest is the shortest completion."""
    P = np.array([[0.0, 0.0], [100.0, 0.0], [200.0, 0.0], [100.0, 1.0]])
    D = np.linalg.norm(P[:, None] - P[None], axis=-1)
    mst = minimum_spanning_tree(D).toarray()
    assert mst[0, 2] == 0.0 and mst[2, 0] == 0.0
    edges = _tree(P, [(0, 2)])
    assert edges == [(0, 2), (1, 3), (0, 1)]     # then the 1 mm edge, then the first of the two 100 mm edges
    sets = DisjointSets(len(P))
    assert all(sets.union(i, j) for i, j in edges)    # a tree: no edge closes a loop
