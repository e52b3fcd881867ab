"""Members, their sections and the loads each section carries.

A member is a link (a two-force member) or a body other than the chassis. A
body is modelled as round tubes along a spanning tree of its loaded points
(joint ends, guide ends and the wheel centre), taken from the design position
of the mechanism file (the same for every candidate of a topology): the
shortest tree (Kruskal) that keeps every slider guide a straight chain of
segments from ``a_from`` to ``a_to``, since the guide is the tube the runner
slides in.

Stations, where each section is checked: both ends of every segment, and
both sides of every load that enters along a segment rather than at a tree
point (a slider's force and couple on its guide, at the runner). Between
stations a straight tube carries constant shear and axial force and a
linearly varying bending moment, so the largest values lie at stations.

Section loads at a station: the resultant of every load on the member on the
first end's side of the cut (in-plane force ``F1`` and moment ``M1`` about the
station, couples included, all in the lean sense of docs/domain.md). The
member is in equilibrium (the force analysis makes it so), so the other side
gives ``F2 = -F1``, ``M2 = -M1``: :func:`section_loads` returns both sides so
that this can be checked. The internal forces at the cut are the axial force
``N = -F1 . t`` (tension +, ``t`` the unit vector from the segment's first end
to its second), the transverse shear ``V = F1 . n`` and the bending moment ``M
= M1``. The out-of-plane braking moment and shear of the force analysis are
added at the chassis-pivot stations of the member pinned there.

Section checks (:func:`tube_checks`, a round tube of area ``A``, section
modulus ``S``, allowable ``s_a``, safety factor SF):

- axial ``SF |N| / (A s_a)``; bending ``SF |M| / (S s_a)`` with in-plane and
  out-of-plane moments added as vectors (exact for a round tube);
- combined ``SF (|N| / A + |M| / S) / s_a`` (the largest normal stress, at the
  outer fibre);
- transverse shear: the largest shear stress of a hollow circular section,
  at its neutral axis, ``tau = 4 V / (3 A) (r2^2 + r2 r1 + r1^2) / (r2^2 +
  r1^2)`` (Gere & Goodno, Mechanics of Materials, shear stresses in beams of
  circular cross section; from memory), combined there with the axial stress
  by von Mises, ``SF sqrt((N / A)^2 + 3 tau^2) / s_a``;
- two-force members in compression: buckling (see :mod:`tiltopt.kinematics.sizing`).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .disjoint_sets import DisjointSets
from .forces import ForceModel, ForceResult

COLLINEAR_MM = 0.01     # a body point within this distance of a guide line lies on the guide


@dataclass
class Member:
    """One member of a topology.

    Attributes
    ----------
    name, kind : str
        ``kind``: "two-force" (links, and bodies with exactly two loaded points and no wheel,
        slider or lock couple) or "beam".
    body, link : int
        Body index (-1 for a link), link index (-1 for a body).
    nodes : list of int
        Loaded points (global point indices).
    edges : list of (int, int)
        Tree segments, as positions in ``nodes``.
    sides : ndarray of shape (n_edges, n_nodes), bool
        Nodes on the first end's side of each segment (the first end included).
    guides : list of (int, list of int)
        Per slider whose guide is this body: the slider index and the segments of its guide chain.
    material : str
    """

    name: str
    kind: str
    body: int
    link: int
    nodes: list[int]
    edges: list[tuple[int, int]]
    sides: np.ndarray
    guides: list[tuple[int, list[int]]] = field(default_factory=list)
    material: str = ""

    @property
    def n_stations(self) -> int:
        """Stations per segment: two ends, then before / after each guided load."""
        return 2 + 2 * len(self.guides)


def _tree(P: np.ndarray, forced: list[tuple[int, int]]) -> list[tuple[int, int]]:
    """Kruskal's shortest spanning tree of points ``P`` (n, 2) that contains the ``forced`` edges."""
    n = len(P)
    sets = DisjointSets(n)
    cand = [(0.0, i, j) for i, j in forced]
    cand += sorted((float(np.linalg.norm(P[i] - P[j])), i, j) for i in range(n) for j in range(i + 1, n))
    return [(i, j) for _, i, j in cand if sets.union(i, j)]


def _sides(edges: list[tuple[int, int]], n: int) -> np.ndarray:
    sides = np.zeros((len(edges), n), bool)
    for e, (i, j) in enumerate(edges):
        seen, stack = {i}, [i]
        while stack:
            a = stack.pop()
            for (p, q) in edges:
                for u, v in ((p, q), (q, p)):
                    if u == a and v not in seen and {u, v} != {i, j}:
                        seen.add(v)
                        stack.append(v)
        sides[e, sorted(seen)] = True
    return sides


def build_members(fm: ForceModel, materials: dict[str, str] | None = None, default_material: str = "") -> list[Member]:
    """Members of a topology: bodies other than the chassis (with two or more loaded points), then links."""
    model = fm.model
    P0 = model.default_geometry.points[0]
    wheel_bodies = set(fm.upright)
    slider_bodies = {s[2] for s in fm.sliders} | {s[4] for s in fm.sliders}
    out = []
    for b, name in enumerate(model.body_names):
        if b == fm.chassis:
            continue
        nodes = fm.loaded_points[b]
        if len(nodes) < 2:
            continue
        pos = {p: k for k, p in enumerate(nodes)}
        forced, chains = [], []
        for k, (pf, pt, ga, pb, rb) in enumerate(fm.sliders):
            if ga != b:
                continue
            g = P0[pt] - P0[pf]
            L = float(np.linalg.norm(g))
            t = [(float(np.dot(P0[p] - P0[pf], g)) / L ** 2, p) for p in nodes]
            on = sorted((tv, p) for tv, p in t if -1e-9 <= tv <= 1 + 1e-9 and abs(
                (P0[p] - P0[pf])[0] * g[1] - (P0[p] - P0[pf])[1] * g[0]) / L <= COLLINEAR_MM)
            chain = [(pos[a], pos[c]) for (_, a), (_, c) in zip(on[:-1], on[1:])]
            forced += chain
            chains.append((k, chain))
        edges = _tree(P0[nodes], forced)
        guides = [(k, [edges.index(e) if e in edges else edges.index(e[::-1]) for e in chain]) for k, chain in chains]
        two = len(nodes) == 2 and b not in wheel_bodies and b not in slider_bodies and b != fm.lock_body
        out.append(Member(name, "two-force" if two else "beam", b, -1, nodes, edges, _sides(edges, len(nodes)),
                          guides))
    for k, l in enumerate(model.mech.links):
        pa, pb = model.point_index[l.a], model.point_index[l.b]
        out.append(Member(l.name, "two-force", -1, k, [pa, pb], [(0, 1)], np.array([[True, False]])))
    for m in out:
        m.material = (materials or {}).get(m.name, default_material)
    return out


@dataclass
class SectionLoads:
    """Section loads of one member at N items (candidate-major states), E segments, K stations each.

    Attributes
    ----------
    axial : ndarray of shape (N, E, K)
        Tension positive, N.
    shear : ndarray of shape (N, E, K)
        In-plane transverse shear ``F1 . n``, N.
    moment : ndarray of shape (N, E, K)
        In-plane bending moment ``M1`` (lean sense), N*mm.
    out_of_plane_moment, out_of_plane_shear : ndarray of shape (N, E, K)
        Braking moment (N*mm) and shear (N) at chassis-pivot stations, else 0.
    position : ndarray of shape (N, E, K, 2)
        Where each station is, mm.
    force_first, force_second : ndarray of shape (N, E, K, 2)
        Resultant of the loads on each side of the cut, N (``force_second`` only with ``both``).
    moment_first, moment_second : ndarray of shape (N, E, K)
        Their moments about the station, couples included, lean sense, N*mm.
    """

    axial: np.ndarray
    shear: np.ndarray
    moment: np.ndarray
    out_of_plane_moment: np.ndarray
    out_of_plane_shear: np.ndarray
    position: np.ndarray
    force_first: np.ndarray
    moment_first: np.ndarray
    force_second: np.ndarray | None = None
    moment_second: np.ndarray | None = None


def section_loads(member: Member, fm: ForceModel, forces: ForceResult, both: bool = False) -> SectionLoads:
    """Loads at every station of ``member`` (see module docs), for every item of ``forces``.

    Parameters
    ----------
    both : bool
        Also the resultants of the second side of each cut (for the equilibrium check).
    """
    x = forces.positions
    N = x.shape[0]
    ends = np.array([[member.nodes[i], member.nodes[j]] for i, j in member.edges])     # (E, 2)
    xe = x[:, ends]                                                                     # (N, E, 2, 2)
    t = xe[:, :, 1] - xe[:, :, 0]
    t = t / np.linalg.norm(t, axis=-1, keepdims=True)
    nrm = np.stack([-t[..., 1], t[..., 0]], -1)
    E, K = len(member.edges), member.n_stations
    if member.link >= 0:
        return _link_loads(forces.link_tension[:, member.link], t, xe, both)
    loads = forces.body_loads[member.body]
    node_pos = {p: k for k, p in enumerate(member.nodes)}
    frc = np.stack([l.force for l in loads], 1)                  # (N, L, 2)
    pos = np.stack([l.position for l in loads], 1)
    q = frc[..., 0] * pos[..., 1] - frc[..., 1] * pos[..., 0] + np.stack([l.couple for l in loads], 1)
    node = np.tile(np.array([node_pos[l.point] for l in loads]), (N, 1))             # (N, L)
    tau = np.zeros((N, E, K))
    tau[:, :, 1] = 1.0
    hosted = _runners(member, loads, x, xe, pos, node, tau)
    W = member.sides[np.arange(E)[None, :, None], node[:, None, :]]                    # (N, E, L)
    W = np.repeat(W[:, :, None, :], K, axis=2)                                        # (N, E, K, L)
    for h, (li, has, seg, tpar) in enumerate(hosted):
        on_e = has[:, None] & (np.arange(E)[None] == seg[:, None])                    # (N, E)
        tp = tpar[:, None, None]
        rule = np.empty((N, E, K), bool)
        rule[:, :, 0] = tp[..., 0] <= 0.0
        rule[:, :, 1] = tp[..., 0] < 1.0
        for g in range(len(hosted)):
            rule[:, :, 2 + 2 * g] = tp[..., 0] < tau[:, :, 2 + 2 * g]
            rule[:, :, 3 + 2 * g] = tp[..., 0] <= tau[:, :, 3 + 2 * g]
        W[..., li] = np.where(on_e[:, :, None], rule, W[..., li])
    # a hosted station whose load is not on this segment stands in for the first end
    for h, (li, has, seg, tpar) in enumerate(hosted):
        off_e = ~(has[:, None] & (np.arange(E)[None] == seg[:, None]))
        for s in (2 + 2 * h, 3 + 2 * h):
            W[:, :, s] = np.where(off_e[..., None], W[:, :, 0], W[:, :, s])
    c = xe[:, :, None, 0] + tau[..., None] * (xe[:, :, None, 1] - xe[:, :, None, 0])   # (N, E, K, 2)
    Wf = W.astype(float)
    F1 = np.einsum("nekl,nld->nekd", Wf, frc)
    M1 = np.einsum("nekl,nl->nek", Wf, q) - (F1[..., 0] * c[..., 1] - F1[..., 1] * c[..., 0])
    F2 = M2 = None
    if both:
        F2 = np.einsum("nekl,nld->nekd", 1.0 - Wf, frc)
        M2 = np.einsum("nekl,nl->nek", 1.0 - Wf, q) - (F2[..., 0] * c[..., 1] - F2[..., 1] * c[..., 0])
    Mo, Vo = _brake_out_of_plane(member, fm, forces, ends, N, K)
    return SectionLoads(axial=-np.einsum("nekd,ned->nek", F1, t), shear=np.einsum("nekd,ned->nek", F1, nrm),
                        moment=M1, out_of_plane_moment=Mo, out_of_plane_shear=Vo, position=c, force_first=F1,
                        moment_first=M1, force_second=F2, moment_second=M2)


def _link_loads(f: np.ndarray, t: np.ndarray, xe: np.ndarray, both: bool) -> SectionLoads:
    """A two-force link: its tension ``f`` (N,) along its axis ``t`` at both ends, nothing else."""
    N = f.shape[0]
    z = np.zeros((N, 1, 2))
    F1 = -f[:, None, None, None] * t[:, :, None, :]      # end a's side: the pull of end b's part
    return SectionLoads(axial=np.broadcast_to(f[:, None, None], (N, 1, 2)).copy(), shear=z.copy(), moment=z.copy(),
                        out_of_plane_moment=z.copy(), out_of_plane_shear=z.copy(), position=xe,
                        force_first=np.broadcast_to(F1, (N, 1, 2, 2)).copy(), moment_first=z.copy(),
                        force_second=-np.broadcast_to(F1, (N, 1, 2, 2)) if both else None,
                        moment_second=z.copy() if both else None)


def _runners(member: Member, loads, x, xe, pos, node, tau) -> list:
    """Where each slider runner of the member's guides lies (per item): the node its load enters at
    (``node``, updated in place) and the stations on either side of it (``tau``, in place).

    Returns one (load index, on the guide, segment, parameter along it) per guide.
    """
    N, E = xe.shape[0], len(member.edges)
    hosted = []
    for h, (k, chain) in enumerate(member.guides):
        li = next(i for i, l in enumerate(loads) if l.slider == k)
        # where the runner lies on the guide chain (per item): segment and parameter along it
        a, b = xe[:, chain, 0], xe[:, chain, 1]                                       # (N, nc, 2)
        d = b - a
        tt = np.einsum("ncd,ncd->nc", pos[:, li, None] - a, d) / np.einsum("ncd,ncd->nc", d, d)
        inside = (tt >= 0.0) & (tt <= 1.0)
        first = np.argmax(inside, 1)
        has = inside.any(1)
        seg = np.array(chain)[first]                                                 # (N,)
        tpar = tt[np.arange(N), first]
        # off the guide (runner beyond its ends): the load enters at the nearest chain point
        cn = np.array([member.edges[e][i] for e in chain for i in (0, 1)])
        near = cn[np.argmin(np.linalg.norm(x[:, np.array(member.nodes)[cn]] - pos[:, li, None], axis=-1), 1)]
        node[:, li] = np.where(has, np.array([member.edges[e][0] for e in range(E)])[seg], near)
        hosted.append((li, has, seg, tpar))
        tau[:, :, 2 + 2 * h] = np.where(has[:, None] & (np.arange(E)[None] == seg[:, None]), tpar[:, None], 0.0)
        tau[:, :, 3 + 2 * h] = tau[:, :, 2 + 2 * h]
    return hosted


def _brake_out_of_plane(member: Member, fm: ForceModel, forces: ForceResult, ends, N: int, K: int):
    """Out-of-plane braking moment and shear (N, E, K) at the member's stations on chassis pivots."""
    E = len(ends)
    Mo = np.zeros((N, E, K))
    Vo = np.zeros((N, E, K))
    for k in fm.chassis_pins:
        pa, ba, pb, bb = fm.pins[k]
        p = pa if ba == member.body else (pb if bb == member.body else -1)
        if p < 0:
            continue
        at = np.zeros((E, K), bool)
        at[:, 0] = ends[:, 0] == p
        at[:, 1] = ends[:, 1] == p
        Mo = Mo + at[None] * forces.brake_pivot_moment[:, k][:, None, None]
        Vo = Vo + at[None] * forces.brake_pivot_shear[:, k][:, None, None]
    return Mo, Vo


def station_label(model, member: Member, e: int, k: int) -> str:
    """Where station ``k`` of segment ``e`` is, in words."""
    refs = model.point_refs
    a, b = (refs[member.nodes[i]].split(".", 1)[1] for i in member.edges[e])
    if member.link >= 0:
        return f"along the link ({a} - {b})"
    if k == 0:
        return f"at {a} (segment {a} - {b})"
    if k == 1:
        return f"at {b} (segment {a} - {b})"
    h = (k - 2) // 2
    name = model.mech.sliders[member.guides[h][0]].name
    return f"at the runner of slider {name} (segment {a} - {b}, on its {a if k % 2 == 0 else b} side)"


def shear_factor(outer_diameter_mm, wall_mm):
    """``tau_max A / V`` of a hollow circular section: ``4/3 (r2^2 + r2 r1 + r1^2) / (r2^2 + r1^2)``
    (Gere & Goodno, Mechanics of Materials; 2 for a thin wall, 4/3 for a solid bar)."""
    r2 = np.asarray(outer_diameter_mm, float) / 2.0
    r1 = r2 - np.asarray(wall_mm, float)
    return 4.0 / 3.0 * (r2 ** 2 + r2 * r1 + r1 ** 2) / (r2 ** 2 + r1 ** 2)


@dataclass
class TubeChecks:
    """Utilisations of a member's sections in T tubes (see module docs).

    ``axial``, ``bending`` and ``shear_part`` (``sqrt 3 SF tau / s_a``) are stored, arrays of shape
    (N, E, K, T) or any shape the inputs broadcast to; the others follow from them.
    """

    axial: np.ndarray
    bending: np.ndarray
    shear_part: np.ndarray

    @property
    def combined(self) -> np.ndarray:
        return self.axial + self.bending

    @property
    def shear(self) -> np.ndarray:
        return np.sqrt(self.axial ** 2 + self.shear_part ** 2)

    @property
    def governing(self) -> np.ndarray:
        return np.maximum(self.combined, self.shear)

    def at(self, index) -> "TubeChecks":
        return TubeChecks(self.axial[index], self.bending[index], self.shear_part[index])


def tube_checks(sec: SectionLoads, area, modulus, kshear, allowable_mpa: float, sf: float) -> TubeChecks:
    """Section checks of every station in every tube (area, modulus, kshear: shape (T,))."""
    k = sf / allowable_mpa
    M = np.hypot(sec.moment, sec.out_of_plane_moment)[..., None]
    V = np.hypot(sec.shear, sec.out_of_plane_shear)[..., None]
    return TubeChecks(axial=np.abs(sec.axial)[..., None] * (k / area), bending=M * (k / modulus),
                      shear_part=V * (np.sqrt(3.0) * k * kshear / area))
