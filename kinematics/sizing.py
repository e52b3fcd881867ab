"""Member sizing from the load cases, and the linkage mass.

Members are the links (two-force members) and every body other than the
chassis. A body is modelled as round tubes along the minimum spanning tree
of its loaded points (joint ends and the wheel centre), the tree taken from
the design position of the mechanism file (the same for every candidate of a
topology); its length is the tree's total length per candidate.

Checks per member, state and catalogue tube (all with the safety factor SF
on the material's allowable, see ``kinematics/data/materials.toml``):

- two-force members (links, and bodies with exactly two loaded points and no
  wheel or slider): axial stress ``|N| / A`` (plus out-of-plane braking bending
  ``M / S`` at a chassis pivot) and, in compression, buckling with effective
  length ``K L``, K = 1 (pinned ends): Euler ``sigma_cr = pi^2 E / lambda^2``
  above the transition slenderness ``lambda_c = pi sqrt(2 E / sigma_a)``,
  Johnson's parabola ``sigma_cr = sigma_a - (sigma_a lambda / (2 pi))^2 / E``
  below it, with ``lambda = K L / r_g`` and ``sigma_a`` the allowable;
- bodies with three or more loaded points (beams, uprights, rockers, arms
  with a spring mount): axial plus bending ``|N| / A + M / S`` at the worst
  section. Along a straight tube the bending moment is linear between load
  points, so the worst section is at a load point: both ends of every tree
  segment are checked. In-plane and out-of-plane (braking) moments add as
  vectors, ``M = sqrt(M_in^2 + M_out^2)``, which is exact for a round tube.
  Shear and beam-column buckling are not checked.

The lightest catalogue tube of the member's material that passes every state
is chosen (same length and density, so the smallest section area); if none
passes, the candidate is infeasible and the reason names the member and the
state. Linkage mass = all members + ``pivot_allowance_g`` per pivot (pins,
both ends of each link and spring, sliders); springs themselves are bought
parts and not included.

Default safety factor 2.0 (``tiltopt.kinematics.loads.DEFAULT_SAFETY_FACTOR``): the
aerospace factor of safety on limit loads is 1.5 (14 CFR 25.303), used where
loads are well known and the structure is tested; here the loads are
quasi-static estimates, fatigue is not checked and welded joints of a
prototype vary, so a larger factor of 2.0 is applied to the allowable stress
and to the buckling load (common practice, no single source).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .forces import ForceModel, ForceResult, analyse_forces
from .loads import Catalogue, LoadsSpec
from .model import Geometry, Model


# ------------------------------------------------------------ section helpers
def tube_section(outer_diameter_mm, wall_mm):
    """Section properties of round tubes.

    Returns
    -------
    area_mm2, second_moment_mm4, section_modulus_mm3, radius_of_gyration_mm : ndarrays
        ``A = pi (D^2 - d^2) / 4``, ``I = pi (D^4 - d^4) / 64``, ``S = 2 I / D``, ``r = sqrt(I / A)``.
    """
    D = np.asarray(outer_diameter_mm, float)
    d = D - 2.0 * np.asarray(wall_mm, float)
    A = np.pi * (D ** 2 - d ** 2) / 4.0
    I = np.pi * (D ** 4 - d ** 4) / 64.0
    return A, I, 2.0 * I / D, np.sqrt(I / A)


def euler_load(elastic_modulus_mpa, second_moment_mm4, length_mm, k=1.0):
    """Euler critical load ``pi^2 E I / (k L)^2``, N (MPa, mm^4, mm); k = 1 pinned-pinned, 2 fixed-free."""
    return np.pi ** 2 * elastic_modulus_mpa * second_moment_mm4 / (k * length_mm) ** 2


def critical_stress(elastic_modulus_mpa, allowable_mpa, slenderness):
    """Column critical stress, MPa: Euler above the transition slenderness, Johnson's parabola below."""
    E, sa, lam = (np.asarray(v, float) for v in (elastic_modulus_mpa, allowable_mpa, slenderness))
    lam_c = np.pi * np.sqrt(2.0 * E / sa)
    euler = np.pi ** 2 * E / np.maximum(lam, 1e-12) ** 2
    johnson = sa - (sa * lam / (2.0 * np.pi)) ** 2 / E
    return np.where(lam >= lam_c, euler, johnson)


# ------------------------------------------------------------------- members
@dataclass
class Member:
    name: str
    kind: str              # "two-force" | "beam"
    body: int              # body index, -1 for a link
    link: int              # link index, -1 for a body
    nodes: list[int]       # loaded points (global point indices)
    edges: list[tuple[int, int]]   # tree segments, as positions in ``nodes``
    sides: np.ndarray      # (n_edges, n_nodes) bool: nodes on the first end's side of each edge
    material: str = ""


def build_members(fm: ForceModel, loads: LoadsSpec) -> list[Member]:
    """Members of a topology (bodies other than the chassis, then links)."""
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
        # Prim's minimum spanning tree on the design positions
        n = len(nodes)
        d = np.linalg.norm(P0[nodes][:, None] - P0[nodes][None], axis=-1)
        inside, edges = [0], []
        while len(inside) < n:
            best = None
            for i in inside:
                for j in range(n):
                    if j not in inside and (best is None or d[i, j] < best[0]):
                        best = (d[i, j], i, j)
            edges.append((best[1], best[2]))
            inside.append(best[2])
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
        two = n == 2 and b not in wheel_bodies and b not in slider_bodies
        out.append(Member(name, "two-force" if two else "beam", b, -1, nodes, edges, sides))
    for k, l in enumerate(model.mech.links):
        pa, pb = model.point_index[l.a], model.point_index[l.b]
        out.append(Member(l.name, "two-force", -1, k, [pa, pb], [(0, 1)], np.array([[True, False]])))
    for m in out:
        m.material = loads.member_material.get(m.name, loads.material)
    return out


@dataclass
class SizingResult:
    """Sizing of C candidates over S load states and M members.

    Attributes
    ----------
    linkage_mass_kg, max_utilisation, tilt_lock_torque_nm : ndarray of shape (C,)
        ``tilt_lock_torque_nm`` is the largest |torque| of the parked states (NaN without one).
    feasible : ndarray of shape (C,), bool
    reason : list of str, length C
        Empty where feasible; else which member fails in which state (or which state
        was not reached).
    length_mm, mass_kg, utilisation : ndarray of shape (C, M)
    tube_index : ndarray of shape (C, M), int
        Row of the catalogue, -1 where no tube passes (then the largest tube's figures are shown).
    worst_case : ndarray of shape (C, M), int
        Index into ``states`` of the state that governs the chosen tube.
    min_wheel_load_n : ndarray of shape (C,)
        Smallest tyre vertical load over all states; negative means a wheel lifts (the
        vehicle would tip over in that state; the forces then assume the tyre holds down).
    """

    members: list[Member]
    states: list
    catalogue: Catalogue
    linkage_mass_kg: np.ndarray
    max_utilisation: np.ndarray
    feasible: np.ndarray
    reason: list[str]
    tilt_lock_torque_nm: np.ndarray
    length_mm: np.ndarray
    tube_index: np.ndarray
    mass_kg: np.ndarray
    worst_case: np.ndarray
    utilisation: np.ndarray
    member_passes: np.ndarray
    n_pivots: int
    pivot_mass_kg: float
    min_wheel_load_n: np.ndarray | None = None
    forces: ForceResult | None = None
    state_status: np.ndarray | None = None
    safety_factor: float = 2.0
    notes: list[str] = field(default_factory=list)

    @property
    def member_names(self) -> list[str]:
        return [m.name for m in self.members]

    def tube_label(self, c: int, j: int) -> str:
        i = int(self.tube_index[c, j])
        if i < 0:
            return "none passes"
        return f"{self.catalogue.outer_diameter_mm[i]:g} x {self.catalogue.wall_mm[i]:g}"

    def worst_case_name(self, c: int, j: int) -> str:
        return self.states[int(self.worst_case[c, j])].name


def _section_loads(member: Member, fm: ForceModel, forces: ForceResult, x: np.ndarray):
    """Axial force (tension +) and bending moments at the ends of each tree segment.

    Returns
    -------
    axial : ndarray of shape (N, n_edges)
    moment : ndarray of shape (N, n_edges, 2)
        In-plane bending moment magnitude at [first, second] end, N*mm.
    out_of_plane : ndarray of shape (N, n_edges, 2)
        Braking bending moment at chassis-pivot ends, N*mm.
    """
    N = x.shape[0]
    ne = len(member.edges)
    if member.link >= 0:
        axial = forces.link_tension[:, member.link][:, None]
        return axial, np.zeros((N, 1, 2)), np.zeros((N, 1, 2))
    node_pos = {p: k for k, p in enumerate(member.nodes)}
    loads = forces.body_loads[member.body]
    lk = np.array([node_pos[l[0]] for l in loads])
    pos = np.stack([l[1] for l in loads], 1)          # (N, nl, 2)
    frc = np.stack([l[2] for l in loads], 1)
    cpl = np.stack([l[3] for l in loads], 1)          # (N, nl)
    on = member.sides[:, lk]                          # (ne, nl)
    ends = np.array([[member.nodes[i], member.nodes[j]] for i, j in member.edges])   # (ne, 2)
    xe = x[:, ends]                                   # (N, ne, 2, 2)
    F = np.einsum("el,nld->ned", on, frc)             # (N, ne, 2)
    t = xe[:, :, 1] - xe[:, :, 0]
    t = t / np.linalg.norm(t, axis=-1, keepdims=True)
    axial = -np.sum(F * t, -1)
    # moment about each end of the loads on the first end's side
    w = pos[:, None, None] - xe[:, :, :, None]        # (N, ne, 2, nl, 2)
    mom = frc[:, None, None, :, 1] * w[..., 0] - frc[:, None, None, :, 0] * w[..., 1]
    M = np.einsum("el,nekl->nek", on, mom + cpl[:, None, None, :])
    # out-of-plane braking moment at chassis pivots of this body
    Mo = np.zeros((N, ne, 2))
    for k in fm.chassis_pins:
        pa, ba, pb, bb = fm.pins[k]
        p = pa if ba == member.body else (pb if bb == member.body else -1)
        if p < 0:
            continue
        hit = ends == p
        Mo = Mo + hit[None] * forces.brake_pivot_moment[:, k][:, None, None]
    return axial, np.abs(M), Mo


def size_linkage(model: Model, geom: Geometry | None, loads: LoadsSpec, sweep_result=None,
                 catalogue: Catalogue | None = None, force_model: ForceModel | None = None) -> SizingResult:
    """Size every member of every candidate for every load state (one batch).

    Parameters
    ----------
    model : Model
    geom : Geometry or None
        C candidates of the model's topology (default: the mechanism itself).
    loads : LoadsSpec
    sweep_result : SweepResult, optional
        A sweep whose lean x travel grid holds every load state; otherwise one batched
        sweep at the load states is run.
    catalogue : Catalogue, optional
        Default: the loads file's (or the built-in) catalogue.

    Returns
    -------
    SizingResult
    """
    geom = geom or model.default_geometry
    cat = catalogue or loads.catalogue
    states, forces, status, fm = analyse_forces(model, geom, loads, sweep_result, force_model)
    C, S = status.shape
    members = build_members(fm, loads)
    M = len(members)
    sf = loads.safety_factor
    A_all, _, Z_all, r_all = tube_section(cat.outer_diameter_mm, cat.wall_mm)
    mats = np.array(cat.material)
    ok = forces.ok.reshape(C, S)

    length = np.zeros((C, M))
    tube = np.full((C, M), -1, dtype=int)
    mass = np.zeros((C, M))
    worst = np.zeros((C, M), dtype=int)
    util = np.zeros((C, M))
    passes = np.zeros((C, M), bool)
    largest_fail = {}
    P = geom.points
    for j, mb in enumerate(members):
        mat = loads.materials[mb.material]
        rows = np.flatnonzero(mats == mb.material)
        if not len(rows):
            from tiltopt.base.errors import InputError
            raise InputError(f"the tube catalogue {cat.source} has no tubes of {mb.material!r} (member "
                             f"'{mb.name}'). Add rows for it or choose another material.", loads.source,
                             f"members.{mb.name}.material")
        rows = rows[np.argsort(A_all[rows], kind="stable")]
        A, Z, rg = A_all[rows], Z_all[rows], r_all[rows]
        ends = np.array([[mb.nodes[a], mb.nodes[b]] for a, b in mb.edges])
        seg = np.linalg.norm(P[:, ends[:, 1]] - P[:, ends[:, 0]], axis=-1)    # (C, ne)
        length[:, j] = seg.sum(1)
        axial, Min, Mout = _section_loads(mb, fm, forces, forces.positions)
        Mtot = np.sqrt(Min ** 2 + Mout ** 2)                                  # (N, ne, 2)
        Mmax = Mtot.max(-1)                                                   # (N, ne)
        sa = mat.allowable_mpa
        E = mat.elastic_modulus_gpa * 1000.0
        # stress utilisation (N, ne, T)
        u = sf * (np.abs(axial)[..., None] / A + Mmax[..., None] / Z) / sa
        if mb.kind == "two-force":
            Lseg = np.repeat(seg, S, axis=0)                                  # (N, ne)
            lam = Lseg[..., None] / rg
            scr = critical_stress(E, sa, lam)
            comp = np.maximum(-axial, 0.0)[..., None]
            u = np.maximum(u, sf * comp / (scr * A))
        u = u.max(1).reshape(C, S, -1)                                        # (C, S, T)
        u = np.where(ok[..., None], u, np.nan)
        ucase = np.where(np.isnan(u), -np.inf, u)
        umax = ucase.max(1)                                                   # (C, T)
        good = umax <= 1.0
        anyg = good.any(1)
        first = np.where(anyg, np.argmax(good, 1), len(rows) - 1)
        ci = np.arange(C)
        tube[:, j] = np.where(anyg, rows[first], -1)
        passes[:, j] = anyg
        util[:, j] = np.where(np.isfinite(umax[ci, first]), umax[ci, first], np.nan)
        worst[:, j] = np.argmax(ucase[ci, :, first], axis=1)
        mass[:, j] = mat.density_g_cm3 * 1e-6 * A[first] * length[:, j]
        largest_fail[j] = (rows[-1], mb)

    mech = model.mech
    n_piv = len(mech.pins) + 2 * len(mech.links) + 2 * len(mech.springs) + len(mech.sliders)
    piv_kg = n_piv * loads.pivot_allowance_g / 1000.0
    reached = np.all(ok, axis=1)
    feasible = reached & np.all(passes, axis=1)
    linkage = mass.sum(1) + piv_kg
    maxu = np.where(reached, np.nanmax(np.where(np.isnan(util), -np.inf, util), axis=1) if M else 0.0, np.nan)
    parked = [i for i, s in enumerate(states) if s.locked]
    lean_m = forces.lean_moment.reshape(C, S)
    if parked:
        pk = np.abs(lean_m[:, parked])
        lock = np.where(np.all(np.isfinite(pk), 1), np.max(np.where(np.isfinite(pk), pk, 0.0), 1), np.nan)
    else:
        lock = np.full(C, np.nan)
    reasons = [""] * C
    from .solver import STATUS_TEXT
    bad_c = np.flatnonzero(~feasible)
    for c in bad_c:   # text for failing candidates only
        parts = []
        for s in np.flatnonzero(~ok[c]):
            st = states[s]
            why = STATUS_TEXT[int(status[c, s])] if status[c, s] != 0 else \
                "no static equilibrium (the mechanism has unwanted freedom, or the tilt lock does not hold it)"
            parts.append(f"state '{st.name}' (lean {st.lean_deg:g} deg, travel {st.travel_mm:g} mm): {why}")
        if not parts:
            for j in np.flatnonzero(~passes[c]):
                mb = members[j]
                parts.append(f"member '{mb.name}' ({mb.material}): no catalogue tube passes; the largest "
                             f"({cat.outer_diameter_mm[largest_fail[j][0]]:g} x {cat.wall_mm[largest_fail[j][0]]:g} mm) "
                             f"reaches utilisation {util[c, j]:.2f} in case '{states[worst[c, j]].name}'")
        reasons[c] = "; ".join(parts)
    notes = []
    if forces.indeterminate:
        notes.append(f"over-constrained linkage ({forces.redundant} redundant constraint(s)): internal forces are "
                     f"statically indeterminate; the minimum-norm solution is shown (no self-stress), real "
                     f"forces depend on fit-up and stiffness")
    missing = [mech.pins[k].name for k in fm.chassis_pins if not fm.base_given[k]]
    if missing and any(s.brake_g > 0 for s in states):
        notes.append(f"chassis pivots without base_mm ({', '.join(missing)}): braking bending uses the default "
                     f"pivot base {loads.default_pivot_base_mm:g} mm")
    return SizingResult(
        members=members, states=states, catalogue=cat, linkage_mass_kg=linkage, max_utilisation=maxu,
        feasible=feasible, reason=reasons, tilt_lock_torque_nm=lock, length_mm=length, tube_index=tube,
        mass_kg=mass, worst_case=worst, utilisation=util, member_passes=passes, n_pivots=n_piv,
        pivot_mass_kg=piv_kg, min_wheel_load_n=np.where(
            reached, np.min(np.where(ok[..., None], forces.wheel_load.reshape(C, S, 2), np.inf), axis=(1, 2)), np.nan),
        forces=forces, state_status=status, safety_factor=sf, notes=notes)
