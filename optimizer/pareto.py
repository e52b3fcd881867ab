"""Dominance filters, objective normalisation and hypervolume (all objectives minimised)."""
from __future__ import annotations

import numpy as np

_CHUNK = 256


def _dominates_any(Q: np.ndarray, B: np.ndarray) -> np.ndarray:
    """For each row of B, whether some row of Q dominates it; Q (k, m), B (b, m)."""
    le = Q[:, None, 0] <= B[None, :, 0]                       # (k, b), narrowed one objective at a time
    for j in range(1, Q.shape[1]):
        le &= Q[:, None, j] <= B[None, :, j]
    qi, bi = np.nonzero(le)                                   # few pairs: check strictness only there
    strict = (Q[qi] < B[bi]).any(axis=1)
    out = np.zeros(B.shape[0], dtype=bool)
    out[bi[strict]] = True
    return out


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
    for s in range(0, n, _CHUNK):
        keep[s:s + _CHUNK] = ~_dominates_any(F, F[s:s + _CHUNK])
    return keep


def dominated_by(P, Q) -> np.ndarray:
    """Which rows of ``P`` some row of ``Q`` dominates.

    Parameters
    ----------
    P : ndarray of shape (n, n_obj)
    Q : ndarray of shape (k, n_obj)

    Returns
    -------
    mask : ndarray of shape (n,), bool
    """
    P = np.asarray(P, dtype=float)
    Q = np.asarray(Q, dtype=float)
    out = np.zeros(P.shape[0], dtype=bool)
    if P.shape[0] == 0 or Q.shape[0] == 0:
        return out
    for s in range(0, P.shape[0], _CHUNK):
        out[s:s + _CHUNK] = _dominates_any(Q, P[s:s + _CHUNK])
    return out


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

    @classmethod
    def restored(cls, lower, upper) -> "Normaliser":
        """A normaliser with exactly these (already processed) bounds, as a checkpoint stores them."""
        n = cls.__new__(cls)
        n.lower = np.array(lower, dtype=float)
        n.upper = np.array(upper, dtype=float)
        return n

    def __call__(self, F) -> np.ndarray:
        return (np.asarray(F, dtype=float) - self.lower) / (self.upper - self.lower)

    def to_dict(self) -> dict:
        return {"lower": self.lower.tolist(), "upper": self.upper.tolist()}


HV_REFERENCE = 1.1   # reference point in normalised objectives (each objective)


def hypervolume(F, reference, nondominated: bool = False) -> float:
    """Hypervolume dominated by the rows of ``F`` up to ``reference`` (minimisation).

    Exact: a sweep for 2 objectives, pymoo's indicator (compiled) for more.

    Parameters
    ----------
    F : ndarray of shape (n, n_obj)
    reference : ndarray of shape (n_obj,)
    nondominated : bool
        The rows are known to be mutually non-dominated (skips a filter).
    """
    F = np.asarray(F, dtype=float)
    ref = np.asarray(reference, dtype=float)
    if F.size == 0:
        return 0.0
    F = F[(F < ref).all(axis=1)]
    if F.shape[0] == 0:
        return 0.0
    if not nondominated:
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
    from pymoo.indicators.hv import HV

    return float(HV(ref_point=ref)(F))
