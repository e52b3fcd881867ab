"""Twin-beam parallelograms against exact closed forms, and locked detection.

Sources: docs/domain.md ("the ideal linkage ... has zero scrub and zero heave at
every lean; use that as an exact check") and closed forms derived in the
docstrings below from plane geometry.
"""
from __future__ import annotations

import numpy as np
import pytest
from click.testing import CliRunner

from tests.helpers import mech_of, twin_beam
from tests.reference_solver import reference_sweep
from tiltopt.cli import main
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.solver import CONVERGED
from tiltopt.kinematics.sweep import sweep

LEANS = np.arange(0.0, 45.0 + 1e-9, 5.0)


@pytest.mark.parametrize("crown", [0.0, 23.0], ids=["knife_edge", "round_crown"])
def test_ideal_parallelogram_has_zero_scrub_and_heave(crown):
    """Ideal linkage of docs/domain.md: parallel equal beams, outer pivots on the wheel planes.

    Closed form (derived here): the uprights stay parallel to the chassis
    (gamma = phi) and, both hubs needing the same centre height, the beams stay
    level, so the track is constant. With the lower beam centre P at design
    height z_l and the hubs at h = R - z_l below the lower outer pivots, the
    centre height condition z_hub = (R - r) cos(phi) + r gives
    z_P = (R - r - h) cos(phi) + r = z_l cos(phi) + r (1 - cos(phi)). The datum
    O = P - z_l (sin phi, cos phi) then rises by exactly r (1 - cos phi): heave 0.
    The contact midpoint is y_O + R sin(phi) - (R - r) sin(phi) = y_O + r sin(phi)
    and the centre line meets the ground at y_O - r (1 - cos phi) tan(phi), so
    the lean-point offset is -r tan(phi).
    """
    mech = mech_of(twin_beam(r_left=crown, r_right=crown))
    res = sweep(Model(mech), lean_deg=np.concatenate([-LEANS[1:], LEANS]), travel_mm=[0.0])
    assert res.converged.all()
    phi = np.radians(np.concatenate([-LEANS[1:], LEANS]))
    # docs/domain.md exact check: zero scrub and zero heave at every lean
    np.testing.assert_allclose(res.scrub[0, 0], 0.0, atol=1e-9)
    np.testing.assert_allclose(res.heave[0, 0], 0.0, atol=1e-9)
    # closed form derived in the docstring
    np.testing.assert_allclose(res.track_change[0, 0], 0.0, atol=1e-9)
    np.testing.assert_allclose(res.camber_error[0, 0], 0.0, atol=1e-12)
    np.testing.assert_allclose(res.lean_point_offset[0, 0], -crown * np.tan(phi), atol=1e-9)


def inboard_track_change(phi, w, e):
    """Track change of a parallelogram whose outer pivots sit inboard of the wheel planes.

    Derivation (front view, lean sense R(a) = [[cos a, sin a], [-sin a, cos a]]):
    beams of half length w pivoted on the chassis centre line; each hub sits a
    distance e outboard of its upright's pivot line, at design height h below
    the lower outer pivot. The uprights stay parallel to the chassis, so both
    cambers equal phi and both centre heights must be (R - r) cos(phi) + r.
    Let u = (cos b, sin b) be the beam direction and P the lower beam centre.
    Left hub z = z_P - w sin b + (R(phi) (-e, h))_z = z_P - w sin b + e sin phi + h cos phi,
    right hub z = z_P + w sin b - e sin phi + h cos phi. Equal heights give
    sin b = (e / w) sin phi. The hub y positions are
    y_P -+ w cos b + (-+e cos phi + h sin phi), both contacts sit (R - r) sin phi
    to their left, so track = 2 w cos b + 2 e cos phi and
    track change = 2 w (sqrt(1 - (e sin(phi) / w)^2) - 1) + 2 e (cos(phi) - 1),
    independent of R, r and the beam heights. Heave: z_P = (R - r - h) cos phi + r,
    O = P - z_l (sin, cos), h = R - z_l, so z_O = r (1 - cos phi): heave 0;
    and as both cambers change alike, scrub = track change.
    """
    return 2 * w * (np.sqrt(1.0 - (e * np.sin(phi) / w) ** 2) - 1.0) + 2 * e * (np.cos(phi) - 1.0)


@pytest.mark.parametrize("w, e, crown", [(300.0, 50.0, 23.0), (280.0, 80.0, 0.0), (330.0, 25.0, 23.0)])
def test_inboard_pivots_track_change_closed_form(w, e, crown):
    mech = mech_of(twin_beam(w_left=w, w_right=w, e_left=e, e_right=e, r_left=crown, r_right=crown,
                             z_upper=500.0, z_lower=300.0))
    res = sweep(Model(mech), lean_deg=LEANS, travel_mm=[0.0])
    assert res.converged.all()
    phi = np.radians(LEANS)
    expected = inboard_track_change(phi, w, e)
    # closed form derived in inboard_track_change's docstring
    np.testing.assert_allclose(res.track_change[0, 0], expected, atol=1e-9, rtol=0)
    np.testing.assert_allclose(res.scrub[0, 0], expected, atol=1e-9, rtol=0)
    np.testing.assert_allclose(res.heave[0, 0], 0.0, atol=1e-9)
    assert expected[-1] < -1.0  # the check is not vacuous: the track shrinks by millimetres
    # the independent reference solver meets the same closed form
    recs = reference_sweep(mech, LEANS, [0.0])
    np.testing.assert_allclose([r["track_change_mm"] for r in recs], expected, atol=1e-9, rtol=0)


def _locked():
    # upper beam ends 330 mm out, lower 300 mm: not a parallelogram
    return twin_beam(w_left=330.0, w_right=330.0, w_left_lower=300.0, w_right_lower=300.0, name="locked")


def test_non_parallelogram_twin_beam_is_locked():
    """Four moving bodies, six pins: 12 - 12 = 0 degrees of freedom relative to the chassis
    (Gruebler-Kutzbach); unlike the parallelogram no constraint is redundant, so it cannot lean.
    """
    leans = [0.0, 0.5, 1.0, 5.0, 10.0, 20.0, 45.0, -1.0, -10.0]
    mech = mech_of(_locked())
    res = sweep(Model(mech), lean_deg=leans, travel_mm=[0.0])
    assert res.status[0, 0, 0] == CONVERGED
    for li, lean in enumerate(leans):
        if lean == 0.0:
            continue
        assert res.status[0, 0, li] != CONVERGED, lean
        assert np.isnan(res.track[0, 0, li]) and np.isnan(res.scrub[0, 0, li]) and np.isnan(res.heave[0, 0, li])
        assert np.isnan(res.points[0, 0, li]).all()
    recs = res.records()
    for r in recs[1:]:
        assert r["converged"] is False
        for k in ("track_mm", "scrub_mm", "heave_mm", "camber_error_left_deg", "lean_point_offset_mm",
                  "contact_left_mm"):
            assert r[k] is None, k
    # the independent reference solver cannot reach those states either
    ref = reference_sweep(mech, leans, [0.0])
    assert [r["converged"] for r in ref] == [lean == 0.0 for lean in leans]


def test_check_command_reports_locked_and_redundant(write_mech):
    runner = CliRunner()
    out = runner.invoke(main, ["check", str(write_mech(_locked(), "locked.toml"))])
    assert out.exit_code == 0, out.output
    assert "leans: NO" in out.output
    out = runner.invoke(main, ["check", str(write_mech(twin_beam(), "ideal.toml"))])
    assert out.exit_code == 0, out.output
    assert "leans: yes" in out.output
    # a parallelogram has one redundant constraint (common practice, no source: the fourth side
    # of a parallelogram repeats what the other three fix)
    assert "redundant (over-constrained)" in out.output
    assert "Jacobian rank 1" in out.output
