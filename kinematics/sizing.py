"""Member sizing from the load cases, the fatigue screening, the tilt lock and the linkage mass.

Members and their sections are those of :mod:`tiltopt.kinematics.sections`: links
(two-force members) and every body other than the chassis as round tubes along a
spanning tree of its loaded points; each member is checked at every station (both
ends of every segment and both sides of every load that enters along a segment).

Static checks per member, load case and catalogue tube (all with the safety factor
SF on the material's allowable, see ``kinematics/data/materials.toml``):

- every station: axial, bending, combined axial + bending, and transverse shear
  (von Mises with the axial stress at the neutral axis), as in
  :func:`tiltopt.kinematics.sections.tube_checks`;
- two-force members (links, and bodies with exactly two loaded points and no
  wheel, slider or tilt lock) in compression: buckling with effective length
  ``K L``, K = 1 (pinned ends): Euler ``sigma_cr = pi^2 E / lambda^2`` above the
  transition slenderness ``lambda_c = pi sqrt(2 E / sigma_a)``, Johnson's
  parabola ``sigma_cr = sigma_a - (sigma_a lambda / (2 pi))^2 / E`` below it, with
  ``lambda = K L / r_g`` and ``sigma_a`` the allowable. Beam-columns (bending
  members in compression) are not checked for buckling.

A member's utilisation is its largest check over stations and cases; the
governing case, the governing section (station) and the figures there (axial
force, shear, bending moment, each check's utilisation) are kept. The lightest
catalogue tube of the member's material that passes every case is chosen (same
length and density, so the smallest section area); if none passes, the
candidate is infeasible and the reason names the member and the case. Linkage
mass = all members + ``pivot_allowance_g`` per pivot (pins, both ends of each
link and spring, sliders); springs themselves are bought parts and not included.

Fatigue screening (not a fatigue design): the welded joints of each member
are assumed to lie at any station (conservative). One fatigue cycle is the load
change from the static state (1 g) to ``fatigue.peak_g`` on the front axle; at a
fixed pose the force analysis is linear in the loads, so the section loads of
one cycle are those of the ``fatigue range`` state (the load change alone). The
stress range at a station is ``|dN| / A + |dM| / S`` (the outer fibre) in the
chosen tube; the fatigue utilisation is ``gamma_Mf x range / range_R(n)`` with
the S-N curve of the material's welded-joint class,
``range_R(n) = FAT (2e6 / n)^(1/m)`` (the form of IIW's recommendations and
EN 1993-1-9; no fatigue limit is used, which is conservative for the variable
amplitudes of road use), ``n = fatigue.cycles``. The classes and their sources
are in the materials file; a material without one (a member that is not
welded) is not screened.

Tilt lock: the torque it must hold is the largest |lock torque| of the states
with the tilt locked (parked, one-wheel bump). A disc-and-caliper lock with
``faces`` friction faces at the effective radius ``r`` and friction
coefficient ``mu`` holds ``faces mu F r``, so its clamp force must be at least
``SF T / (faces mu r)`` (the same safety factor as the members).

Default safety factor 2.0 (``tiltopt.kinematics.loads.DEFAULT_SAFETY_FACTOR``): the
aerospace factor of safety on limit loads is 1.5 (14 CFR 25.303), used where
loads are well known and the structure is tested; here the loads are
quasi-static estimates, fatigue is only screened and welded joints of a
prototype vary, so a larger factor of 2.0 is applied to the allowable stress
and to the buckling load (common practice, no single source).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .forces import ForceModel, ForceResult, analyse_forces
from .loads import Catalogue, LoadsSpec
from .model import Geometry, Model
from .sections import Member, build_members, section_loads, shear_factor, station_label, tube_checks


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


def fatigue_strength(fat_mpa, slope, cycles):
    """Stress range a welded joint of class ``fat_mpa`` survives ``cycles`` times, MPa:
    ``FAT (2e6 / n)^(1/m)`` (the S-N form of the IIW recommendations and EN 1993-1-9)."""
    return np.asarray(fat_mpa, float) * (2.0e6 / np.asarray(cycles, float)) ** (1.0 / np.asarray(slope, float))


CHECKS = ("axial", "bending", "combined", "shear", "buckling")


@dataclass
class SizingResult:
    """Sizing of C candidates over S load states and M members.

    Attributes
    ----------
    linkage_mass_kg, max_utilisation : ndarray of shape (C,)
    feasible : ndarray of shape (C,), bool
    reason : list of str, length C
        Empty where feasible; else which member fails in which case (or which state
        was not reached).
    length_mm, mass_kg, utilisation : ndarray of shape (C, M)
        ``utilisation``: the governing (largest) check over stations and cases.
    tube_index : ndarray of shape (C, M), int
        Row of the catalogue, -1 where no tube passes (then the largest tube's figures are shown).
    worst_case : ndarray of shape (C, M), int
        Index into ``states`` of the case that governs the chosen tube.
    station : ndarray of shape (C, M, 2), int
        Governing section (segment, station) in that case (:meth:`section_name`).
    section_force : ndarray of shape (C, M, 3)
        Axial force (tension +, N), shear (N) and bending moment (N*m, in- and out-of-plane
        added as vectors) at the governing section.
    check : dict of str -> ndarray of shape (C, M)
        Each check's utilisation at the governing section and case (:data:`CHECKS`; NaN where a
        check does not apply, as buckling of a beam).
    fatigue_utilisation, fatigue_range_mpa : ndarray of shape (C, M)
        Screening of the welded joints (NaN where the material has no welded-joint class).
    fatigue_station : ndarray of shape (C, M, 2), int
    fatigue_allowable_mpa : ndarray of shape (M,)
        Stress range the member's joints survive for the stated cycles (NaN: not screened).
    tilt_lock_torque_nm, tilt_lock_clamp_n : ndarray of shape (C,)
        Largest |torque| of the locked states (NaN without one) and the clamp force of the
        disc-and-caliper lock that holds it.
    tilt_lock_case : ndarray of shape (C,), int
        Index into ``states`` of the locked state that governs the lock (-1: none).
    spring_static_n, spring_max_n : ndarray of shape (C, n_springs)
        Spring force in the static state and the largest over the cases (compression +).
    spring_max_case : ndarray of shape (C, n_springs), int
    min_wheel_load_n : ndarray of shape (C,)
        Smallest tyre vertical load over the cases; negative means a wheel lifts (the vehicle
        would tip over in that case; the forces then assume the tyre holds down).
    """

    members: list[Member]
    states: list
    catalogue: Catalogue
    model: Model
    linkage_mass_kg: np.ndarray
    max_utilisation: np.ndarray
    feasible: np.ndarray
    reason: list[str]
    length_mm: np.ndarray
    tube_index: np.ndarray
    mass_kg: np.ndarray
    worst_case: np.ndarray
    utilisation: np.ndarray
    member_passes: np.ndarray
    station: np.ndarray
    section_force: np.ndarray
    check: dict
    fatigue_utilisation: np.ndarray
    fatigue_range_mpa: np.ndarray
    fatigue_station: np.ndarray
    fatigue_allowable_mpa: np.ndarray
    tilt_lock_torque_nm: np.ndarray
    tilt_lock_clamp_n: np.ndarray
    tilt_lock_case: np.ndarray
    spring_static_n: np.ndarray
    spring_max_n: np.ndarray
    spring_max_case: np.ndarray
    n_pivots: int
    pivot_mass_kg: float
    loads: LoadsSpec | None = None
    min_wheel_load_n: np.ndarray | None = None
    forces: ForceResult | None = None
    state_status: np.ndarray | None = None
    safety_factor: float = 2.0
    notes: list[str] = field(default_factory=list)

    @property
    def member_names(self) -> list[str]:
        return [m.name for m in self.members]

    @property
    def case_states(self) -> list[int]:
        """Indices of the states that are load cases (not the reference or fatigue states)."""
        return [i for i, s in enumerate(self.states) if s.role == "case"]

    @property
    def max_fatigue_utilisation(self) -> np.ndarray:
        f = np.where(np.isnan(self.fatigue_utilisation), -np.inf, self.fatigue_utilisation)
        m = f.max(1) if f.shape[1] else np.full(len(f), -np.inf)
        return np.where(np.isfinite(m), m, np.nan)

    def tube_label(self, c: int, j: int) -> str:
        i = int(self.tube_index[c, j])
        if i < 0:
            return "none passes"
        return f"{self.catalogue.outer_diameter_mm[i]:g} x {self.catalogue.wall_mm[i]:g}"

    def worst_case_name(self, c: int, j: int) -> str:
        return self.states[int(self.worst_case[c, j])].name

    def section_name(self, c: int, j: int, fatigue: bool = False) -> str:
        e, k = (self.fatigue_station if fatigue else self.station)[c, j]
        return station_label(self.model, self.members[j], int(e), int(k))

    def governing_check(self, c: int, j: int) -> str:
        vals = {k: self.check[k][c, j] for k in CHECKS}
        vals = {k: v for k, v in vals.items() if np.isfinite(v)}
        return max(("combined", "shear", "buckling"), key=lambda k: vals.get(k, -np.inf)) if vals else ""


def _pick(a, idx):
    """a[c, idx[c]] for a of shape (C, X, ...), idx of shape (C,)."""
    return a[np.arange(len(idx)), idx]


def size_linkage(model: Model, geom: Geometry | None, loads: LoadsSpec, sweep_result=None,
                 catalogue: Catalogue | None = None, force_model: ForceModel | None = None) -> SizingResult:
    """Size every member of every candidate for every load case (one batch).

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
    members = build_members(fm, loads.member_material, loads.material)
    M = len(members)
    sf = loads.safety_factor
    ok = forces.ok.reshape(C, S)
    is_case = np.array([s.role == "case" for s in states])
    i_fat = next(i for i, s in enumerate(states) if s.role == "fatigue")
    cols = _MemberColumns.empty(C, M)
    for j, mb in enumerate(members):
        _size_member(cols, j, mb, geom.points, fm, forces, loads, cat, ok, is_case, i_fat)
    out = cols.out

    mech = model.mech
    n_piv = len(mech.pins) + 2 * len(mech.links) + 2 * len(mech.springs) + len(mech.sliders)
    piv_kg = n_piv * loads.pivot_allowance_g / 1000.0
    reached = np.all(ok, axis=1)
    feasible = reached & np.all(cols.passes, axis=1)
    util = out["util"]
    maxu = np.where(reached, np.nanmax(np.where(np.isnan(util), -np.inf, util), axis=1) if M else 0.0, np.nan)
    lock, lock_case = _tilt_lock(states, forces.lean_moment.reshape(C, S), ok)
    tl = loads.tilt_lock
    clamp = sf * lock * 1000.0 / (tl.faces * tl.friction * tl.effective_radius_mm)
    sp_static, sp_max, sp_case = _spring_forces(states, forces.spring_force.reshape(C, S, -1), ok)
    case_idx = np.flatnonzero(is_case)
    wl = forces.wheel_load.reshape(C, S, 2)[:, case_idx]
    min_wl = np.where(reached, np.min(np.where(ok[:, case_idx, None], wl, np.inf), axis=(1, 2)), np.nan)
    res = SizingResult(
        members=members, states=states, catalogue=cat, model=model, linkage_mass_kg=out["mass"].sum(1) + piv_kg,
        max_utilisation=maxu, feasible=feasible, reason=[""] * C, length_mm=out["length"], tube_index=cols.tube,
        mass_kg=out["mass"], worst_case=cols.worst, utilisation=util, member_passes=cols.passes,
        station=cols.station, section_force=cols.sforce, check=cols.checks, fatigue_utilisation=out["fat_u"],
        fatigue_range_mpa=out["fat_r"], fatigue_station=cols.fstation, fatigue_allowable_mpa=cols.fat_allow,
        tilt_lock_torque_nm=lock,
        tilt_lock_clamp_n=clamp, tilt_lock_case=lock_case, spring_static_n=sp_static, spring_max_n=sp_max,
        spring_max_case=sp_case, n_pivots=n_piv, pivot_mass_kg=piv_kg, loads=loads, min_wheel_load_n=min_wl,
        forces=forces, state_status=status, safety_factor=sf)
    res.reason = _reasons(res, ok, status, cols.largest)
    res.notes = _notes(res, fm)
    return res


@dataclass
class _MemberColumns:
    """Per-member results of :func:`size_linkage` as they are filled in, arrays (C, M, ...)."""

    out: dict              # length mm, mass kg, util, fat_u, fat_r MPa: (C, M)
    tube: np.ndarray       # chosen catalogue row, -1 where none passes
    worst: np.ndarray      # governing state of the chosen tube
    passes: np.ndarray
    station: np.ndarray    # (C, M, 2) governing (span, section)
    fstation: np.ndarray   # (C, M, 2) governing fatigue section
    sforce: np.ndarray     # (C, M, 3) axial N, shear N, moment N*m at the governing section
    checks: dict           # CHECKS -> (C, M)
    fat_allow: np.ndarray  # (M,) MPa
    largest: dict          # member -> largest catalogue row of its material

    @classmethod
    def empty(cls, C: int, M: int) -> _MemberColumns:
        return cls(out={k: np.zeros((C, M)) for k in ("length", "mass", "util", "fat_u", "fat_r")},
                   tube=np.full((C, M), -1, dtype=int), worst=np.zeros((C, M), dtype=int),
                   passes=np.zeros((C, M), bool), station=np.zeros((C, M, 2), dtype=int),
                   fstation=np.zeros((C, M, 2), dtype=int), sforce=np.full((C, M, 3), np.nan),
                   checks={k: np.full((C, M), np.nan) for k in CHECKS}, fat_allow=np.full(M, np.nan), largest={})


def _size_member(cols: _MemberColumns, j: int, mb: Member, P: np.ndarray, fm, forces, loads: LoadsSpec,
                 cat: Catalogue, ok: np.ndarray, is_case: np.ndarray, i_fat: int) -> None:
    """Member ``j``: the lightest catalogue tube of its material that passes every case, for every candidate
    at once (its utilisation, governing case and section, the checks there), and its fatigue screening."""
    C, S = ok.shape
    ci = np.arange(C)
    out = cols.out
    sf = loads.safety_factor
    A_all, _, Z_all, r_all = tube_section(cat.outer_diameter_mm, cat.wall_mm)
    k_all = shear_factor(cat.outer_diameter_mm, cat.wall_mm)
    mat = loads.materials[mb.material]
    rows = np.flatnonzero(np.array(cat.material) == mb.material)
    if not len(rows):
        from tiltopt.base.errors import InputError
        raise InputError(f"the tube catalogue {cat.source} has no tubes of {mb.material!r} (member "
                         f"'{mb.name}'). Add rows for it or choose another material.", loads.source,
                         f"members.{mb.name}.material")
    rows = rows[np.argsort(A_all[rows], kind="stable")]
    A, Z, rg, ks = A_all[rows], Z_all[rows], r_all[rows], k_all[rows]
    ends = np.array([[mb.nodes[a], mb.nodes[b]] for a, b in mb.edges])
    seg = np.linalg.norm(P[:, ends[:, 1]] - P[:, ends[:, 0]], axis=-1)    # (C, E)
    out["length"][:, j] = seg.sum(1)
    sec = section_loads(mb, fm, forces)
    E, K = sec.axial.shape[1:]
    chk = tube_checks(sec, A, Z, ks, mat.allowable_mpa, sf)
    u = chk.governing                                                     # (N, E, K, T)
    buck = None
    if mb.kind == "two-force":
        lam = np.repeat(seg, S, axis=0)[..., None] / rg                  # (N, E, T)
        scr = critical_stress(mat.elastic_modulus_gpa * 1000.0, mat.allowable_mpa, lam)
        buck = sf * np.maximum(-sec.axial, 0.0)[..., None] / (scr * A)[:, :, None, :]
        u = np.maximum(u, buck)
    ucase = u.reshape(C, S, E * K, -1).max(2)                             # (C, S, T)
    ucase = np.where(ok[..., None] & is_case[None, :, None], ucase, -np.inf)
    umax = ucase.max(1)                                                   # (C, T)
    good = umax <= 1.0
    anyg = good.any(1)
    first = np.where(anyg, np.argmax(good, 1), len(rows) - 1)
    cols.tube[:, j] = np.where(anyg, rows[first], -1)
    cols.passes[:, j] = anyg
    out["util"][:, j] = np.where(np.isfinite(umax[ci, first]), umax[ci, first], np.nan)
    w = np.argmax(ucase[ci, :, first], axis=1)
    cols.worst[:, j] = w
    out["mass"][:, j] = mat.density_g_cm3 * 1e-6 * A[first] * out["length"][:, j]
    cols.largest[j] = rows[-1]
    # the governing section of the chosen tube in the governing case
    item = ci * S + w
    ug = u[item, :, :, first].reshape(C, -1)                            # (C, E * K)
    g = np.argmax(ug, 1)
    e_g, k_g = g // K, g % K
    cols.station[:, j] = np.stack([e_g, k_g], -1)
    at = (item, e_g, k_g)
    cols.sforce[:, j] = np.stack([sec.axial[at], np.hypot(sec.shear[at], sec.out_of_plane_shear[at]),
                             np.hypot(sec.moment[at], sec.out_of_plane_moment[at]) / 1000.0], -1)
    here = chk.at((item, e_g, k_g, first))
    for name in ("axial", "bending", "combined", "shear"):
        cols.checks[name][:, j] = getattr(here, name)
    if buck is not None:
        cols.checks["buckling"][:, j] = buck[item, e_g, k_g, first]
    reached = ok[ci, w] & is_case[w]
    for v in cols.checks.values():
        v[:, j] = np.where(reached, v[:, j], np.nan)
    cols.sforce[:, j] = np.where(reached[:, None], cols.sforce[:, j], np.nan)
    # fatigue screening of the chosen tube: the fatigue-range state
    if mat.fatigue_fat_mpa is not None:
        allow = float(fatigue_strength(mat.fatigue_fat_mpa, mat.fatigue_slope, loads.fatigue.cycles))
        cols.fat_allow[j] = allow
        fi = ci * S + i_fat
        rng = (np.abs(sec.axial[fi]) / A[first][:, None, None]
               + np.abs(sec.moment[fi]) / Z[first][:, None, None]).reshape(C, -1)
        gf = np.argmax(rng, 1)
        cols.fstation[:, j] = np.stack([gf // K, gf % K], -1)
        r = np.where(ok[:, i_fat], rng[ci, gf], np.nan)
        out["fat_r"][:, j] = r
        out["fat_u"][:, j] = loads.fatigue.partial_factor * r / allow
    else:
        out["fat_r"][:, j] = np.nan
        out["fat_u"][:, j] = np.nan


def _tilt_lock(states, lean_m, ok):
    """Largest |lock torque| over the locked cases (C,) and the state that gives it (C,), -1 without one."""
    C = lean_m.shape[0]
    locked = [i for i, s in enumerate(states) if s.locked and s.role == "case"]
    if not locked:
        return np.full(C, np.nan), np.full(C, -1)
    pk = np.abs(lean_m[:, locked])
    good = np.all(ok[:, locked], 1)
    k = np.argmax(np.where(np.isfinite(pk), pk, -np.inf), 1)
    return np.where(good, pk[np.arange(C), k], np.nan), np.where(good, np.array(locked)[k], -1)


def _spring_forces(states, sf, ok):
    """Static spring force (C, n), the largest over the cases (C, n) and the case index (C, n)."""
    C, S, n = sf.shape
    stat = next(i for i, s in enumerate(states) if s.kind == "static" and s.role in ("case", "reference")
                and s.lean_deg == 0.0 and s.travel_mm == 0.0)
    cases = np.array([i for i, s in enumerate(states) if s.role == "case"])
    v = np.where(ok[:, cases, None], sf[:, cases], -np.inf)
    k = np.argmax(v, 1)                                                       # (C, n)
    mx = np.take_along_axis(v, k[:, None], 1)[:, 0]
    good = np.all(ok[:, cases], 1)[:, None]
    return (np.where(ok[:, stat, None], sf[:, stat], np.nan), np.where(good, mx, np.nan),
            np.where(good, cases[k], -1))


def _reasons(res: SizingResult, ok, status, largest) -> list[str]:
    from .solver import STATUS_TEXT

    cat, states, members = res.catalogue, res.states, res.members
    reasons = [""] * len(res.feasible)
    for c in np.flatnonzero(~res.feasible):   # text for failing candidates only
        parts = []
        for s in np.flatnonzero(~ok[c]):
            st = states[s]
            why = STATUS_TEXT[int(status[c, s])] if status[c, s] != 0 else \
                "no static equilibrium (the mechanism has unwanted freedom, or the tilt lock does not hold it)"
            parts.append(f"state '{st.name}' (lean {st.lean_deg:g} deg, travel {st.travel_mm:g} mm): {why}")
        if not parts:
            for j in np.flatnonzero(~res.member_passes[c]):
                mb, i = members[j], largest[j]
                parts.append(f"member '{mb.name}' ({mb.material}): no catalogue tube passes; the largest "
                             f"({cat.outer_diameter_mm[i]:g} x {cat.wall_mm[i]:g} mm) reaches utilisation "
                             f"{res.utilisation[c, j]:.2f} in case '{states[res.worst_case[c, j]].name}' "
                             f"{res.section_name(c, j)}")
        reasons[c] = "; ".join(parts)
    return reasons


def _notes(res: SizingResult, fm: ForceModel) -> list[str]:
    forces, states, mech = res.forces, res.states, res.model.mech
    notes = []
    if forces.indeterminate:
        notes.append(f"over-constrained linkage ({forces.redundant} redundant constraint(s)): internal forces are "
                     f"statically indeterminate; the minimum-norm solution is shown (no self-stress), real "
                     f"forces depend on fit-up and stiffness")
    missing = [mech.pins[k].name for k in fm.chassis_pins if not fm.base_given[k]]
    if missing and any(s.brake_g > 0 for s in states):
        notes.append(f"chassis pivots without base_mm ({', '.join(missing)}): braking bending uses the default "
                     f"pivot base {res.loads.default_pivot_base_mm:g} mm")
    over = [m.name for j, m in enumerate(res.members) if res.fatigue_utilisation[0, j] > 1.0]
    if over:
        notes.append(f"fatigue screening above 1 for {', '.join(over)}: these welded joints need a fatigue design "
                     f"(larger tubes, better joint details, or a measured load spectrum); the screening is not one")
    unscreened = sorted({m.material for j, m in enumerate(res.members) if np.isnan(res.fatigue_allowable_mpa[j])})
    if unscreened:
        notes.append(f"fatigue not screened for {', '.join(unscreened)}: the materials file gives no welded-joint "
                     f"class (a member that is not welded: bolted or bonded joints need their own check)")
    return notes
