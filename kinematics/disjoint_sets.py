"""Disjoint sets (union-find) over the integers ``0 .. n-1``.

One helper for the two places that group things by joining pairs: the pin groups of a template
(points joined by pins move together, :mod:`tiltopt.problems.templates`) and Kruskal's shortest
spanning tree of a member's loaded points (:mod:`tiltopt.kinematics.sections`). Path halving on
``find``; a few hundred elements at most, so no union by rank.
"""
from __future__ import annotations


class DisjointSets:
    """Sets of ``0 .. n-1``, each element alone at first."""

    def __init__(self, n: int):
        self._parent = list(range(n))

    def find(self, a: int) -> int:
        """The representative of ``a``'s set."""
        parent = self._parent
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    def union(self, a: int, b: int) -> bool:
        """Join the sets of ``a`` and ``b``; False when they were one set already."""
        ra, rb = self.find(a), self.find(b)
        if ra == rb:
            return False
        self._parent[ra] = rb
        return True

    def groups(self) -> list[list[int]]:
        """Per element, the elements of its set in ascending order (one list object per set)."""
        by_root: dict[int, list[int]] = {}
        for i in range(len(self._parent)):
            by_root.setdefault(self.find(i), []).append(i)
        return [by_root[self.find(i)] for i in range(len(self._parent))]
