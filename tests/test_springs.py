"""Springs as fitted (tiltopt.kinematics.springs): curves, setup for a sag, bottoming, stroke; in the optimiser.

References: the points given in the file (a curve must reproduce them), the default shape's stated
points, closed forms of a linear spring, and the kinematics of the sprung twin beam: its legs slide
in vertical guides with the spring along the guide, so the spring shortens exactly as the wheel
rises (motion ratio 1, docs/domain.md), and the static spring force equals the static tyre load
(free body of the leg: tyre load and spring force both vertical, the slider takes the couple).
"""
from __future__ import annotations

import numpy as np
import pytest

from tests.helpers import CONFIGS, G, mech_of, sprung_twin_beam
from tiltopt.base.errors import InputError
from tiltopt.kinematics.loads import SpringSetup, parse_loads
from tiltopt.kinematics.mechanism import Spring, mechanism_to_toml, parse_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.sizing import size_linkage
from tiltopt.kinematics.springs import DEFAULT_SHAPE, analyse_springs, characteristic
from tiltopt.kinematics.sweep import sweep

POINTS = [[0.0, 0.0], [10.0, 100.0], [20.0, 220.0], [30.0, 360.0], [40.0, 530.0]]
VEHICLE = dict(total_mass_kg=160.0, com_height_mm=600.0, front_share=0.5, wheelbase_mm=1500.0, lean_limit_deg=20.0,
               parked_lean_deg=5.0)


def _sprung(**spring):
    d = sprung_twin_beam()
    for s in d["springs"]:
        s.pop("rate_n_per_mm")
        s.update(spring)
    return d


def test_elastomer_curve_reproduces_its_points():
    # The points in the file, at their deflections; linear between them (the stated rule); past the
    # last point its segment's rate goes on; the inverse returns the deflections.
    s = Spring("s", "a.p", "b.q", kind="elastomer", curve=tuple(map(tuple, POINTS)))
    cv = characteristic(s)
    x = np.array([p[0] for p in POINTS])
    f = np.array([p[1] for p in POINTS])
    assert cv.force(x) == pytest.approx(f)
    assert cv.force(15.0) == pytest.approx(160.0) and cv.force(35.0) == pytest.approx(445.0)
    assert cv.force(45.0) == pytest.approx(530.0 + 5.0 * 17.0)             # last rate 170 N / 10 mm
    assert cv.deflection(f) == pytest.approx(x) and cv.deflection(445.0) == pytest.approx(35.0)
    assert cv.force(-3.0) == 0.0                                           # loose: no force
    assert cv.max_deflection_mm == 40.0 and "points in the mechanism file" in cv.source


def test_default_elastomer_shape():
    # The stated default (common practice, no source): initial rate k0 to half the usable
    # deflection x_b, then twice, then four times it: F(x_b/2) = k0 x_b/2, F(3 x_b/4) = k0 x_b,
    # F(x_b) = 2 k0 x_b.
    k0, xb = 30.0, 40.0
    cv = characteristic(Spring("s", "a.p", "b.q", kind="elastomer", rate_n_per_mm=k0, max_deflection_mm=xb))
    assert cv.force([xb / 4, xb / 2, 3 * xb / 4, xb]) == pytest.approx([k0 * xb / 4, k0 * xb / 2, k0 * xb,
                                                                         2 * k0 * xb])
    assert DEFAULT_SHAPE[-1] == (1.0, 2.0) and "no source" in cv.source
    coil = characteristic(Spring("c", "a.p", "b.q", rate_n_per_mm=50.0))
    assert coil.force(12.0) == pytest.approx(600.0) and np.isnan(coil.max_deflection_mm)


@pytest.mark.parametrize("spring, key", [
    ({"kind": "rubber"}, "springs[0].kind"),
    ({"kind": "elastomer"}, "springs[0]"),                                     # no curve, no rate
    ({"kind": "elastomer", "curve": [[0.0, 0.0], [10.0, 50.0], [8.0, 80.0]]}, "springs[0].curve"),
    ({"kind": "elastomer", "curve": [[0.0, 5.0], [10.0, 50.0]]}, "springs[0].curve[0]"),
    ({"kind": "elastomer", "curve": [[0.0, 0.0]]}, "springs[0].curve"),
    ({"kind": "elastomer", "curve": POINTS, "max_deflection_mm": 60.0}, "springs[0].max_deflection_mm"),
])
def test_spring_keys_are_checked(spring, key):
    with pytest.raises(InputError) as e:
        mech_of(_sprung(**spring))
    assert e.value.key == key


def test_spring_keys_round_trip():
    mech = mech_of(_sprung(kind="elastomer", curve=POINTS, max_deflection_mm=35.0))
    import tomllib

    again = parse_mechanism(tomllib.loads(mechanism_to_toml(mech)), "<rt>")
    assert again == mech and again.springs[0].curve == tuple(map(tuple, POINTS))
    # a curve starting above zero deflection gets the free length's (0, 0) point
    m2 = mech_of(_sprung(kind="elastomer", curve=POINTS[1:]))
    assert m2.springs[0].curve[0] == (0.0, 0.0)


def _setup(mech, sag, travel=(-30.0, 30.0), cases=None):
    model = Model(mech)
    spec = parse_loads({"vehicle": VEHICLE, "cases": cases or [{"name": "static", "kind": "static"}]}, "<test>")
    res = size_linkage(model, None, spec)
    return model, res, analyse_springs(model, None, res, SpringSetup(sag, travel))


def test_elastomer_bottoms_at_the_right_travel():
    # Sprung twin beam (motion ratio 1): the static spring force is the static tyre load
    # F_s = m g share / 2 = 392.27 N; the curve gives the static deflection x_s = F^-1(F_s)
    # (between 30 and 40 mm: 30 + (392.27 - 360) / 17 = 31.90 mm). Solid at 40 mm, the spring
    # bottoms when the wheel has risen 40 - x_s = 8.10 mm: inside the +-30 mm envelope, so it
    # bottoms, with margin 40 - (x_s + 30).
    mech = mech_of(_sprung(kind="elastomer", curve=POINTS))
    model, res, sp = _setup(mech, sag=20.0)
    Fs = 160.0 * G * 0.5 / 2
    xs = 30.0 + (Fs - 360.0) / 17.0
    assert res.spring_static_n[0] == pytest.approx([Fs, Fs], rel=1e-9)
    assert sp.static_deflection_mm[0] == pytest.approx([xs, xs], rel=1e-9)
    assert sp.bottoming_travel_mm[0] == pytest.approx([40.0 - xs] * 2, rel=1e-9)
    assert sp.bottoms[0].all() and sp.bottoming_margin_mm[0] == pytest.approx([40.0 - xs - 30.0] * 2, rel=1e-9)
    # the travel where the solver puts the spring at its solid length (an independent sweep)
    at = sweep(model, None, lean_deg=[0.0], travel_mm=[float(sp.bottoming_travel_mm[0, 0])])
    assert at.spring_length[0, 0, 0, 0] == pytest.approx(sp.design_length_mm[0, 0] - (40.0 - xs), abs=1e-6)
    # suggested preload for the 20 mm sag: the force at top-out, x_s - 20 mm compression
    assert sp.preload_deflection_mm[0, 0] == pytest.approx(xs - 20.0, rel=1e-9)
    assert sp.preload_n[0, 0] == pytest.approx(100.0 + (xs - 20.0 - 10.0) * 12.0, rel=1e-9)
    assert sp.stroke_mm[0] == pytest.approx([60.0, 60.0], abs=1e-6)


def test_coil_setup_closed_forms():
    # Linear coil k on the motion-ratio-1 legs: static deflection F_s / k, preload for the sag
    # F_s - k sag (the force at top-out), the rate that gives the sag with no preload F_s / sag,
    # solid after max_deflection: bottoming travel x_max - F_s / k.
    k, xmax, sag = 20.0, 45.0, 15.0
    mech = mech_of(_sprung(rate_n_per_mm=k, max_deflection_mm=xmax))
    model, res, sp = _setup(mech, sag=sag)
    Fs = 160.0 * G * 0.5 / 2
    assert sp.static_deflection_mm[0, 0] == pytest.approx(Fs / k)
    assert sp.preload_n[0, 0] == pytest.approx(Fs - k * sag)
    assert sp.suggested_rate_n_per_mm[0, 0] == pytest.approx(Fs / sag)
    assert sp.bottoming_travel_mm[0, 0] == pytest.approx(xmax - Fs / k)
    assert sp.full_bump_force_n[0, 0] == pytest.approx(Fs + k * 30.0)
    # a stiffer spring than the sag allows: no preload can help; reported as 0 with the shortfall
    stiff = mech_of(_sprung(rate_n_per_mm=200.0))
    _, _, sp2 = _setup(stiff, sag=sag)
    assert sp2.preload_deflection_mm[0, 0] < 0 and sp2.preload_n[0, 0] == 0.0


def test_user_setup_is_compared():
    # A free length in the file fixes the setup: F = k (free length - installed length); here the
    # installed length at the design position is 170 mm (cap 470, seat 300 on the legs).
    k = 20.0
    mech = mech_of(_sprung(rate_n_per_mm=k, free_length_mm=190.0))
    _, _, sp = _setup(mech, sag=15.0)
    assert sp.design_length_mm[0, 0] == pytest.approx(170.0)
    assert sp.given_setup_force_n[0, 0] == pytest.approx(k * 20.0)


def test_demo_springs_in_loads_report():
    # tiltopt loads on both demo mechanisms: the coil-over (wishbone rocker) and the elastomer
    # stacks (sprung twin beam) are set up, checked for bottoming and reported with their curves.
    from tiltopt.commands.loads import loads_report

    for name, kind in (("wishbone_rocker", "coil"), ("twin_beam_sprung", "elastomer")):
        rep = loads_report(str(CONFIGS / f"{name}.toml"), str(CONFIGS / "loads_demo.toml"))
        assert [s["kind"] for s in rep["springs"]] == [kind, kind]
        sp = rep["springs"][0]
        assert sp["static_force_n"] > 0 and sp["suggested_preload_n"] >= 0 and sp["bottoming_margin_mm"] > 0
        assert sp["max_case_force_n"] >= sp["static_force_n"] and sp["stroke_mm"] > 0


# ------------------------------------------------------------------ the optimiser
def _cfg(**constraints):
    return {"template": {"name": "twin_beam_sprung"}, "objectives": ["overall_width", "max_scrub"],
            "loads": str(CONFIGS / "loads_demo.toml"), "constraints": dict(stress=False, **constraints)}


def test_spring_constraints_in_the_optimiser():
    # G = (figure - limit) / scale for force and stroke, -bottoming margin / scale (the registry's
    # scales: 100 N, 10 mm, 10 mm); the figures come from the same parts as tiltopt loads (checked on
    # the template's base design: the demo mechanism).
    from tiltopt.problems.problem import TiltProblem
    from tiltopt.problems.registry import CONSTRAINTS
    from tiltopt.problems.spec import parse_problem

    spec = parse_problem(_cfg(max_spring_force_n=1000.0, max_spring_stroke_mm=50.0, spring_bottoming=True), "c.toml")
    assert spec.constraints[-4:] == ("spring_force", "spring_stroke", "spring_bottoming", "max_lean_steer") \
        and spec.needs_sizing
    prob = TiltProblem(spec)
    ev = prob.evaluate_designs(spec.template.defaults[None])
    G = dict(zip(ev.constraint_names, ev.G[0]))
    model = spec.template.model
    res = size_linkage(model, spec.template.geometry(spec.template.defaults[None]), spec.loads)
    force = float(res.spring_max_n.max())
    scale = {k: CONSTRAINTS[k].scale for k in ("spring_force", "spring_stroke", "spring_bottoming")}
    assert ev.metrics["max_spring_force_n"][0] == pytest.approx(force) and G["spring_force"] == pytest.approx(
        (force - 1000.0) / scale["spring_force"])
    assert ev.metrics["spring_stroke_mm"][0] == pytest.approx(60.0, abs=1e-6)        # +-30 mm at motion ratio 1
    assert G["spring_stroke"] == pytest.approx(10.0 / scale["spring_stroke"], abs=1e-6)
    sp = analyse_springs(model, None, res, spec.loads.springs)
    assert G["spring_bottoming"] == pytest.approx(-sp.bottoming_margin_mm.min() / scale["spring_bottoming"], abs=1e-9)
    assert not ev.feasible[0] and "spring force" in ev.reason[0] and "spring stroke" in ev.reason[0]


@pytest.mark.parametrize("template, constraints, key", [
    ("twin_beam", {"max_spring_stroke_mm": 40.0}, "constraints.max_spring_stroke_mm"),    # no springs
    ("twin_beam_sprung", {"spring_bottoming": "yes"}, "constraints.spring_bottoming"),
])
def test_spring_constraint_errors(template, constraints, key):
    from tiltopt.problems.spec import parse_problem

    cfg = _cfg(**constraints)
    cfg["template"] = {"name": template}
    with pytest.raises(InputError) as e:
        parse_problem(cfg, "c.toml")
    assert e.value.key == key


def test_spring_force_needs_loads():
    from tiltopt.problems.spec import parse_problem

    cfg = _cfg(max_spring_force_n=900.0)
    del cfg["loads"]
    cfg["constraints"].pop("stress")
    with pytest.raises(InputError) as e:
        parse_problem(cfg, "c.toml")
    assert e.value.key == "constraints.max_spring_force_n"
