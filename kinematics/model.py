"""Compiled topology of a mechanism and its batched geometry.

A :class:`Model` is built once per topology (bodies and joints). It picks
reduced coordinates: a spanning tree of pins and sliders rooted at the
chassis, so each tree body has one coordinate (its angle behind a pin, its
slide behind a slider). Pins and sliders that close loops, links, springs,
the wheel-ground contacts and the lateral reference become equations.

Pose conventions (see docs/domain.md): ``R(a) = [[cos a, sin a], [-sin a, cos a]]``
rotates a front-view vector ``(y, z)`` by ``a`` in the lean sense (a point
above the origin moves toward +y). A body angle is its rotation from the
design position. A design point ``p`` of body ``b`` is at

    x(p) = t_root + sum over the chain of R(angle_k) (v_k + u_k * s_k)

where ``v_k`` are design-position vectors between joint points and ``s_k``
slider coordinates. The chassis is the root with ``t = (y_O, z_O)``, the
position of its datum (design origin), and its angle is the lean, which is
prescribed, not solved for.

A :class:`Geometry` holds the point coordinates of many candidates of one
topology (batch axis first).
"""
from __future__ import annotations

from collections import deque
from dataclasses import dataclass

import numpy as np

from tiltopt.base.errors import InputError

from .mechanism import Mechanism, split_ref

# coordinate kinds
TRANSLATION, ANGLE, SLIDE = 0, 1, 2


@dataclass
class Geometry:
    """Design-position geometry of a batch of candidates of one topology.

    Attributes
    ----------
    points : ndarray of shape (n_candidates, n_points, 2)
        Every point (model.point_refs order), mm, design position.
    outer_radius : ndarray of shape (n_candidates, 2)
        Tyre outer radius R of the [left, right] wheel, mm.
    crown_radius : ndarray of shape (n_candidates, 2)
        Tyre crown radius r, mm.
    static_camber : ndarray of shape (n_candidates, 2)
        Static camber, radians, docs/domain.md sign (positive = top toward +y).
    x : ndarray of shape (n_candidates, n_points)
        Forward position x of every point, mm (the linkage plane's x where a point has none of its
        own). The planar linkage never moves a point in x; the steering and the side view use it.
    """

    points: np.ndarray
    outer_radius: np.ndarray
    crown_radius: np.ndarray
    static_camber: np.ndarray
    x: np.ndarray | None = None

    @property
    def n_candidates(self) -> int:
        return self.points.shape[0]

    @property
    def points3(self) -> np.ndarray:
        """Every point as (x, y, z), shape (n_candidates, n_points, 3), mm, design position."""
        return np.concatenate([self.x[..., None], self.points], axis=-1)

    def take(self, idx) -> "Geometry":
        idx = np.asarray(idx)
        return Geometry(self.points[idx], self.outer_radius[idx], self.crown_radius[idx], self.static_camber[idx],
                        self.x[idx])


@dataclass
class _Tree:
    parent: list[int]
    kind: list[str]          # "root", "pin", "slide_run" (child runs on parent's guide), "slide_guide"
    joint: list[object]
    ref_point: list[int]     # design point index the body's pose is referred to (-1 = origin)
    entry_point: list[int]   # design point index on the parent where the child attaches
    ang_src: list[int]       # index into the angle vector (0 = chassis lean)
    coord: list[int]         # the body's own coordinate (angle or slide), -1 for none


class Model:
    """Frozen, compiled topology of a mechanism (see module docs).

    Parameters
    ----------
    mech : Mechanism
        The mechanism; its point coordinates become the default geometry.
    """

    def __init__(self, mech: Mechanism):
        self.mech = mech
        self.body_names = list(mech.bodies)
        self.point_refs = mech.point_refs
        self.point_index = {r: i for i, r in enumerate(self.point_refs)}
        self.point_body = np.array([self.body_names.index(split_ref(r)[0]) for r in self.point_refs])
        self.chassis = self.body_names.index(mech.chassis)
        self.wheel_upright = [self.body_names.index(w.upright) for w in mech.wheels]
        self.wheel_centre = [self.point_index[w.centre] for w in mech.wheels]
        self.spring_names = [s.name for s in mech.springs]
        self._build_tree()
        self._build_equations()
        self.default_geometry = self.geometry_from(mech)

    # ----------------------------------------------------------------- topology
    def _build_tree(self):
        mech, nb = self.mech, len(self.body_names)
        bi = {b: i for i, b in enumerate(self.body_names)}
        pidx = self.point_index
        adj: dict[int, list] = {i: [] for i in range(nb)}
        for p in mech.pins:
            a, b = bi[split_ref(p.a)[0]], bi[split_ref(p.b)[0]]
            adj[a].append((b, "pin", p, pidx[p.a], pidx[p.b]))
            adj[b].append((a, "pin", p, pidx[p.b], pidx[p.a]))
        for s in mech.sliders:
            g, r = bi[split_ref(s.a_from)[0]], bi[split_ref(s.b)[0]]
            adj[g].append((r, "slide_run", s, pidx[s.b], pidx[s.b]))
            adj[r].append((g, "slide_guide", s, pidx[s.b], pidx[s.b]))
        tree = _Tree([-1] * nb, [""] * nb, [None] * nb, [-1] * nb, [-1] * nb, [-1] * nb, [-1] * nb)
        coord_kind: list[int] = []
        coord_names: list[str] = []
        coord_body: list[int] = []
        ang_coord: list[int] = []   # q column of angle source k+1
        root_t: dict[int, tuple[int, int]] = {}
        tree_joints: set[int] = set()

        def new_coord(kind, name, body):
            coord_kind.append(kind)
            coord_names.append(name)
            coord_body.append(body)
            return len(coord_kind) - 1

        order = [self.chassis] + [i for i in range(nb) if i != self.chassis]
        seen = [False] * nb
        self.roots = []
        for root in order:
            if seen[root]:
                continue
            seen[root] = True
            self.roots.append(root)
            name = self.body_names[root]
            root_t[root] = (new_coord(TRANSLATION, f"{name}.y", root), new_coord(TRANSLATION, f"{name}.z", root))
            tree.kind[root] = "root"
            if root == self.chassis:
                tree.ang_src[root] = 0
            else:
                c = new_coord(ANGLE, f"{name}.angle", root)
                ang_coord.append(c)
                tree.ang_src[root] = len(ang_coord)
                tree.coord[root] = c
            queue = deque([root])
            while queue:
                a = queue.popleft()
                for b, kind, joint, pa, pb in adj[a]:
                    if seen[b]:
                        continue
                    seen[b] = True
                    tree_joints.add(id(joint))
                    tree.parent[b], tree.kind[b], tree.joint[b] = a, kind, joint
                    tree.ref_point[b], tree.entry_point[b] = pb, pa
                    bname = self.body_names[b]
                    if kind == "pin":
                        c = new_coord(ANGLE, f"{bname}.angle", b)
                        ang_coord.append(c)
                        tree.ang_src[b] = len(ang_coord)
                    else:
                        c = new_coord(SLIDE, f"{joint.name}.slide", b)
                        tree.ang_src[b] = tree.ang_src[a]
                    tree.coord[b] = c
                    root_t[b] = root_t[a]
                    queue.append(b)
        self.tree = tree
        self.root_t = root_t
        self.coord_kind = np.array(coord_kind)
        self.coord_names = coord_names
        self.coord_body = np.array(coord_body)
        self.ang_coord = np.array(ang_coord, dtype=int)
        self.n_q = len(coord_kind)
        self.n_ang = 1 + len(ang_coord)
        self.loop_pins = [p for p in mech.pins if id(p) not in tree_joints]
        self.loop_sliders = [s for s in mech.sliders if id(s) not in tree_joints]
        self.tree_pins = [p for p in mech.pins if id(p) in tree_joints]
        self.tree_sliders = [s for s in mech.sliders if id(s) in tree_joints]

    def chain_terms(self, point: int):
        """Terms of a design point's position.

        Returns
        -------
        consts : list of (ang_src, plus_point, minus_point)
            ``R(angle[ang_src]) (P[plus] - P[minus])`` terms; ``minus = -1`` means the origin.
        slides : list of (ang_src, slider, sign, coord)
            ``sign * R(angle[ang_src]) u_slider * q[coord]`` terms.
        root : int
        """
        t = self.tree
        b = int(self.point_body[point])
        consts, slides = [], []
        p = point
        while True:
            consts.append((t.ang_src[b], p, t.ref_point[b]))
            if t.kind[b] == "root":
                return consts, slides, b
            a = t.parent[b]
            if t.kind[b] == "slide_run":
                slides.append((t.ang_src[a], t.joint[b], +1.0, t.coord[b]))
            elif t.kind[b] == "slide_guide":
                slides.append((t.ang_src[b], t.joint[b], -1.0, t.coord[b]))
            p = t.entry_point[b]
            b = a

    # -------------------------------------------------------------- equations
    def _build_equations(self):
        mech, pidx = self.mech, self.point_index
        needed: list[int] = []

        def need(ref_or_idx) -> int:
            i = pidx[ref_or_idx] if isinstance(ref_or_idx, str) else int(ref_or_idx)
            if i not in needed:
                needed.append(i)
            return needed.index(i)

        # rows: loop pins (2 each), loop sliders (2 each), links, springs, then per-stage rows
        self.eq_pin = np.array([[need(p.a), need(p.b)] for p in self.loop_pins], dtype=int).reshape(-1, 2)
        self.eq_slider = np.array([[need(s.a_from), need(s.a_to), need(s.b)] for s in self.loop_sliders],
                                  dtype=int).reshape(-1, 3)
        bi = {b: i for i, b in enumerate(self.body_names)}
        self.eq_slider_bodies = np.array(
            [[bi[split_ref(s.a_from)[0]], bi[split_ref(s.b)[0]]] for s in self.loop_sliders], dtype=int).reshape(-1, 2)
        self.eq_link = np.array([[need(l.a), need(l.b)] for l in mech.links], dtype=int).reshape(-1, 2)
        self.eq_spring = np.array([[need(s.a), need(s.b)] for s in mech.springs], dtype=int).reshape(-1, 2)
        self.eq_wheel = np.array([need(c) for c in self.wheel_centre], dtype=int)
        self.needed = np.array(needed, dtype=int)
        self.n_loop_rows = 2 * len(self.eq_pin) + 2 * len(self.eq_slider)
        self.row_names_kin = (
            [f"pin {p.name} ({ax})" for p in self.loop_pins for ax in ("y", "z")]
            + [f"slider {s.name} ({k})" for s in self.loop_sliders for k in ("offset", "angle")]
            + [f"link {l.name}" for l in mech.links])
        self.row_names_spring = [f"spring {s.name}" for s in mech.springs]

        # chain tables for the needed points
        self._compile_points(self.needed, "_np")
        self._compile_points(np.arange(len(self.point_refs)), "_all")

    def _compile_points(self, points: np.ndarray, tag: str):
        """Sorted (point, angle source) pairs with their design-vector recipes."""
        pk_point, pk_src, pk_plus, pk_minus = [], [], [], []
        sl_pk, sl_slider, sl_sign, sl_coord = [], [], [], []
        roots = []
        for j, p in enumerate(points):
            consts, slides, root = self.chain_terms(int(p))
            roots.append(root)
            srcs = sorted({c[0] for c in consts} | {s[0] for s in slides})
            for src in srcs:
                k = len(pk_point)
                pk_point.append(j)
                pk_src.append(src)
                pk_plus.append([c[1] for c in consts if c[0] == src])
                pk_minus.append([c[2] for c in consts if c[0] == src])
                for s in slides:
                    if s[0] == src:
                        sl_pk.append(k)
                        sl_slider.append(s[1])
                        sl_sign.append(s[2])
                        sl_coord.append(s[3])
        n_pk = len(pk_point)
        # design vector of pair k = sum(P[plus]) - sum(P[minus]) (minus -1 = the origin): kept as a list
        # of signed terms per pair, not as a dense (n_pk, n_points) matrix (a mechanism of many points
        # would need memory and time quadratic in its size)
        t_pt, t_coef, t_start = [], [], []
        for k in range(n_pk):
            t_start.append(len(t_pt))
            terms = [(i, 1.0) for i in pk_plus[k]] + [(i, -1.0) for i in pk_minus[k] if i >= 0]
            for i, c in terms or [(0, 0.0)]:    # a pair without terms still needs its slot (reduceat)
                t_pt.append(i)
                t_coef.append(c)
        tab = dict(
            n=len(points),
            pk_point=np.array(pk_point, dtype=int),
            pk_src=np.array(pk_src, dtype=int),
            term_point=np.array(t_pt, dtype=int),
            term_coef=np.array(t_coef),
            term_start=np.array(t_start, dtype=int),
            starts=np.flatnonzero(np.r_[True, np.diff(pk_point) != 0]),
            ty=np.array([self.root_t[r][0] for r in roots], dtype=int),
            tz=np.array([self.root_t[r][1] for r in roots], dtype=int),
            sl_pk=np.array(sl_pk, dtype=int),
            sl_sign=np.array(sl_sign),
            sl_coord=np.array(sl_coord, dtype=int),
            sl_from=np.array([self.point_index[s.a_from] for s in sl_slider], dtype=int),
            sl_to=np.array([self.point_index[s.a_to] for s in sl_slider], dtype=int),
        )
        # angle pairs that carry a Jacobian column (src > 0 is a coordinate)
        has = tab["pk_src"] > 0
        tab["jac_pk"] = np.flatnonzero(has)
        tab["jac_col"] = self.ang_coord[tab["pk_src"][has] - 1] if has.any() else np.zeros(0, int)
        # slide layers with unique pk per layer (so fancy-index adds do not collide)
        layers, used = [], []
        for i, k in enumerate(sl_pk):
            for li, layer in enumerate(layers):
                if k not in used[li]:
                    layer.append(i)
                    used[li].add(k)
                    break
            else:
                layers.append([i])
                used.append({k})
        tab["sl_layers"] = [np.array(l, dtype=int) for l in layers]
        setattr(self, tag, tab)

    # ----------------------------------------------------------------- geometry
    def geometry_from(self, mech: Mechanism | None = None) -> Geometry:
        """Geometry of a single candidate (batch of one) from a mechanism of this topology."""
        mech = mech or self.mech
        pts = np.array([mech.point(r) for r in self.point_refs], dtype=float)[None]
        ws = mech.wheels
        return Geometry(
            points=pts,
            outer_radius=np.array([[w.outer_radius_mm for w in ws]]),
            crown_radius=np.array([[w.crown_radius_mm for w in ws]]),
            static_camber=np.radians([[w.static_camber_deg for w in ws]]),
            x=np.array([[mech.x_of(r) for r in self.point_refs]], dtype=float),
        )

    def batch_geometry(self, points: np.ndarray, outer_radius=None, crown_radius=None,
                       static_camber=None, x=None) -> Geometry:
        """Geometry of many candidates; wheel data and x default to the mechanism's."""
        points = np.asarray(points, dtype=float)
        if points.ndim != 3 or points.shape[1:] != (len(self.point_refs), 2):
            raise ValueError(f"points must have shape (n, {len(self.point_refs)}, 2); got {points.shape}")
        n = points.shape[0]
        d = self.default_geometry

        def fill(v, default, shape=(n, 2)):
            return np.broadcast_to(default if v is None else np.asarray(v, float), shape).copy()

        return Geometry(points, fill(outer_radius, d.outer_radius), fill(crown_radius, d.crown_radius),
                        fill(static_camber, d.static_camber), fill(x, d.x, (n, len(self.point_refs))))

    def design_vectors(self, geom: Geometry, tab: dict) -> tuple[np.ndarray, np.ndarray]:
        """Per-candidate design vectors of a point table, as complex numbers ``y + i z``.

        Returns
        -------
        V : ndarray of shape (n_candidates, n_pk), complex
            Design vector of each (point, angle source) pair.
        U : ndarray of shape (n_candidates, n_sl), complex
            Unit guide directions of the slide terms, times their sign.
        """
        P = geom.points[..., 0] + 1j * geom.points[..., 1]             # (C, n_points)
        V = np.add.reduceat(P[:, tab["term_point"]] * tab["term_coef"], tab["term_start"], axis=1)
        d = geom.points[:, tab["sl_to"]] - geom.points[:, tab["sl_from"]]
        U = d / np.linalg.norm(d, axis=-1, keepdims=True) * tab["sl_sign"][None, :, None]
        return V, U[..., 0] + 1j * U[..., 1]

    def design_q(self, n: int) -> np.ndarray:
        """Coordinates of the design position: all zero (the chassis datum at the origin)."""
        return np.zeros((n, self.n_q))

    def char_length(self, geom: Geometry) -> np.ndarray:
        """A characteristic length per candidate (mm) for scaling angles and tolerances."""
        p = geom.points
        return np.maximum(np.sqrt(np.mean(np.sum((p - p.mean(axis=1, keepdims=True)) ** 2, -1), -1)), 1.0)

    # ------------------------------------------------------------- positions
    def positions(self, q, lean, V, U, tab, jac: bool = False):
        """Positions (and elementary Jacobian entries) of the points of a table.

        A rotation ``R(a)`` of ``(y, z)`` is the complex product ``exp(-i a) (y + i z)``;
        its derivative is ``-i`` times the rotated vector, so the Jacobian entries
        of every (point, angle) pair are the rotated vectors themselves.

        Parameters
        ----------
        q : ndarray of shape (N, n_q)
        lean : ndarray of shape (N,)
            Chassis angle, radians.
        V, U : complex per-item design vectors, shapes (N, n_pk) and (N, n_sl).

        Returns
        -------
        x : ndarray of shape (N, n_points_in_table, 2)
        E : tuple of two ndarrays or None
            With ``jac``: the rotated pair vectors as interleaved (y, z) floats,
            shape (N, 2 n_pk), and the rotated slide directions, shape (N, 2 n_sl);
            :meth:`functional_map` turns them into Jacobian rows.
        ang : ndarray of shape (N, n_ang)
        """
        N = q.shape[0]
        ang = np.empty((N, self.n_ang))
        ang[:, 0] = lean
        ang[:, 1:] = q[:, self.ang_coord]
        e = np.exp(-1j * ang)
        src = tab["pk_src"]
        w = V
        if tab["sl_layers"]:
            w = V.copy()
            for layer in tab["sl_layers"]:
                w[:, tab["sl_pk"][layer]] += U[:, layer] * q[:, tab["sl_coord"][layer]]
        rw = e[:, src] * w
        rwf = rw.view(np.float64)                           # (N, 2 n_pk) interleaved y, z
        # each point is the sum of its consecutive pairs (pk_point is sorted, every point has a pair)
        x = np.ascontiguousarray(np.add.reduceat(rw, tab["starts"], axis=1)).view(np.float64).reshape(N, tab["n"], 2)
        x[..., 0] += q[:, tab["ty"]]
        x[..., 1] += q[:, tab["tz"]]
        if not jac:
            return x, None, ang
        if len(tab["sl_pk"]):
            ru = (e[:, src[tab["sl_pk"]]] * U).view(np.float64)
        else:
            ru = np.zeros((N, 0))
        return x, (rwf, ru), ang

    def functional_map(self, rows: list[list[tuple]], tab: dict | None = None):
        """Constant maps from elementary Jacobian entries to rows of linear functionals.

        A functional is a list of terms ``(j, d, coef)`` (coordinate ``d`` of
        point ``j`` of the table) or ``("q", col, coef)`` (a coordinate itself).
        Its Jacobian row is ``rwf @ W1 + ru @ W2 + Jc`` with ``(rwf, ru)`` from
        ``positions(..., jac=True)``: the fixed sparsity is built here, once, so
        a residual call assembles every linear row with two small matmuls.
        A pair vector ``w = (wy, wz)`` of angle column c contributes
        ``dy/dc = wz`` and ``dz/dc = -wy``; a slide direction ``(uy, uz)`` of
        slide column c contributes ``dy/dc = uy`` and ``dz/dc = uz``.

        Returns
        -------
        W1 : ndarray of shape (2 n_pk, n_rows * (n_q + 1))
        W2 : ndarray of shape (2 n_sl, n_rows * (n_q + 1))
        Jc : ndarray of shape (n_rows, n_q + 1)
            The last column is the derivative with respect to the prescribed
            lean (the chassis angle), used for path tangents.
        """
        tab = tab or self._np
        nq = self.n_q + 1
        n_pk, n_sl = len(tab["pk_point"]), len(tab["sl_pk"])
        pk_col = np.where(tab["pk_src"] == 0, self.n_q, -1)
        pk_col[tab["jac_pk"]] = tab["jac_col"]
        W1 = np.zeros((2 * n_pk, len(rows) * nq))
        W2 = np.zeros((2 * n_sl, len(rows) * nq))
        Jc = np.zeros((len(rows), nq))
        for r, terms in enumerate(rows):
            for j, d, coef in terms:
                if j == "q":
                    Jc[r, d] += coef
                    continue
                for k in np.flatnonzero(tab["pk_point"] == j):
                    if pk_col[k] < 0:
                        continue
                    if d == 0:   # dy/dc = wz (odd slot)
                        W1[2 * k + 1, r * nq + pk_col[k]] += coef
                    else:        # dz/dc = -wy (even slot)
                        W1[2 * k, r * nq + pk_col[k]] -= coef
                for i in np.flatnonzero(tab["pk_point"][tab["sl_pk"]] == j):
                    W2[2 * i + d, r * nq + tab["sl_coord"][i]] += coef
                Jc[r, (tab["ty"] if d == 0 else tab["tz"])[j]] += coef
        return W1, W2, Jc

    def mech_idx(self, eq: np.ndarray, col: int) -> np.ndarray:
        """Global point indices of one column of an equation table (rows of needed points)."""
        return self.needed[eq[:, col]] if len(eq) else np.zeros(0, dtype=int)

    def body_angles(self, ang: np.ndarray) -> np.ndarray:
        """Body angles (N, n_bodies) from the angle-source vector."""
        return ang[:, self.tree.ang_src]


def check_single_topology(model: Model, mech: Mechanism, src: str = "<memory>"):
    """Raise if ``mech`` does not have the topology of ``model``."""
    if mech.point_refs != model.point_refs or [p.name for p in mech.pins] != [p.name for p in model.mech.pins]:
        raise InputError("the mechanism does not have the same bodies, points and joints as the template.", src)
