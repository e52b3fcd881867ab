"""Dominance filters, objective normalisation and hypervolume (all objectives minimised)."""
from __future__ import annotations

import numpy as np

_CHUNK = 256


def nondominated_mask(F) -> np.ndarray:
    """Rows of ``F`` that no other row dominates.

    Row a dominates row b when a <= b in every objective and a < b in at least
    one. Identical rows do not dominate each other, so both stay.

    Parameters
    ----------
    F : ndarray of shape (n, n_obj)

    Returns
    -------
    mask : ndarray of shape (n,), bool
    """
    F = np.asarray(F, dtype=float)
    n = F.shape[0]
    keep = np.ones(n, dtype=bool)
    if n == 0:
        return keep
    for s in range(0, n, _CHUNK):
        B = F[s:s + _CHUNK]                                    # (b, m) candidates to test
        le = (F[:, None, :] <= B[None, :, :]).all(axis=2)      # (n, b): row i <= row j everywhere
        lt = (F[:, None, :] < B[None, :, :]).any(axis=2)       # (n, b): and better somewhere
        keep[s:s + _CHUNK] = ~(le & lt).any(axis=0)
    return keep


class Normaliser:
    """Fixed affine map of objectives to [0, 1] from a reference set of rows.

    The bounds are taken once (from the first generation with a feasible
    design) and then kept, so hypervolumes of later generations compare.

    Parameters
    ----------
    lower, upper : ndarray of shape (n_obj,)
    """

    def __init__(self, lower, upper):
        lower = np.asarray(lower, dtype=float)
        upper = np.asarray(upper, dtype=float)
        span = upper - lower
        span = np.where(span > 1e-12 * np.maximum(1.0, np.abs(lower)), span, 1.0)
        self.lower = lower
        self.upper = lower + span

    @classmethod
    def from_points(cls, F) -> "Normaliser":
        F = np.asarray(F, dtype=float)
        return cls(F.min(axis=0), F.max(axis=0))

    def __call__(self, F) -> np.ndarray:
        return (np.asarray(F, dtype=float) - self.lower) / (self.upper - self.lower)

    def to_dict(self) -> dict:
        return {"lower": self.lower.tolist(), "upper": self.upper.tolist()}


HV_REFERENCE = 1.1   # reference point in normalised objectives (each objective)
_MC_SAMPLES = 20000


def hypervolume(F, reference) -> float:
    """Hypervolume dominated by the rows of ``F`` up to ``reference`` (minimisation).

    Exact (pymoo's indicator) for up to 4 objectives; above that a
    Monte Carlo estimate with a fixed generator (repeatable, about 1 % error).

    Parameters
    ----------
    F : ndarray of shape (n, n_obj)
    reference : ndarray of shape (n_obj,)
    """
    F = np.asarray(F, dtype=float)
    ref = np.asarray(reference, dtype=float)
    if F.size == 0:
        return 0.0
    F = F[(F < ref).all(axis=1)]
    if F.shape[0] == 0:
        return 0.0
    F = F[nondominated_mask(F)]
    m = F.shape[1]
    if m == 1:
        return float(ref[0] - F[:, 0].min())
    if m == 2:
        order = np.argsort(F[:, 0], kind="stable")
        f1, f2 = F[order, 0], F[order, 1]
        f2_best = np.minimum.accumulate(f2)
        widths = np.diff(np.append(f1, ref[0]))
        return float(np.sum(widths * (ref[1] - f2_best)))
    if m <= 4:
        from pymoo.indicators.hv import HV

        return float(HV(ref_point=ref)(F))
    lo = F.min(axis=0)
    rng = np.random.default_rng(12345)
    box = float(np.prod(ref - lo))
    hit = 0
    for _ in range(_MC_SAMPLES // 2000):
        S = lo + rng.random((2000, m)) * (ref - lo)
        dom = np.zeros(2000, dtype=bool)
        for s in range(0, F.shape[0], 64):
            dom |= (F[None, s:s + 64, :] <= S[:, None, :]).all(axis=2).any(axis=1)
        hit += int(dom.sum())
    return box * hit / _MC_SAMPLES
