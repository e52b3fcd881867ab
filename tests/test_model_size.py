"""A mechanism of many points: the compiled point tables grow linearly with it, and the points are right.

The positions of extra chassis points at a lean are checked against the rigid-body closed form
(docs/domain.md frames): a chassis point ``p`` (design position) sits at ``t + R(phi) p`` with
``R(a) = [[cos a, sin a], [-sin a, cos a]]`` on ``(y, z)`` and ``t`` the world position of the chassis
datum (the origin of the design frame).
"""
from __future__ import annotations

import numpy as np
import pytest

from tests.helpers import mech_of, twin_beam
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.solver import SolveSettings
from tiltopt.kinematics.sweep import SweepSettings, sweep

N_EXTRA = 2000


@pytest.fixture(scope="module")
def big_model():
    d = twin_beam()
    rng = np.random.default_rng(5)
    pts = rng.uniform(-800.0, 800.0, (N_EXTRA, 2))
    for i, (y, z) in enumerate(pts):
        d["bodies"]["chassis"][f"extra_{i}"] = [float(y), float(z)]
    return Model(mech_of(d)), pts


def _table_bytes(tab: dict) -> int:
    total = 0
    for v in tab.values():
        if isinstance(v, np.ndarray):
            total += v.nbytes
        elif isinstance(v, list):
            total += sum(a.nbytes for a in v if isinstance(a, np.ndarray))
    return total


def test_point_tables_grow_linearly(big_model):
    """The tables of every point hold a few entries per point, not a dense points x points matrix
    (which took 44 s and gigabytes for 20,000 points)."""
    model, _ = big_model
    n = len(model.point_refs)
    assert _table_bytes(model._all) < 400 * n


@pytest.mark.parametrize("engine", ["compiled", "numpy"])
def test_extra_points_follow_the_chassis(big_model, engine):
    model, pts = big_model
    lean = np.array([0.0, 12.0, 25.0])
    res = sweep(model, lean_deg=lean, settings=SweepSettings(solve=SolveSettings(engine=engine)))
    assert res.converged.all()
    P = res.points[0, 0]                                        # (L, n_points, 2)
    datum = P[:, model.point_index["chassis.datum"]]             # world position of the datum
    idx = [model.point_index[f"chassis.extra_{i}"] for i in range(N_EXTRA)]
    for k, phi in enumerate(np.radians(lean)):
        c, s = np.cos(phi), np.sin(phi)
        want = datum[k] + np.stack([c * pts[:, 0] + s * pts[:, 1], -s * pts[:, 0] + c * pts[:, 1]], -1)
        np.testing.assert_allclose(P[k, idx], want, atol=1e-9)
