"""Parsing of ranges, lists and numbers typed by a user (degrees and mm at the boundary), and the unit
a column or metric name says by its ending (:func:`unit_of_name`, the one table of name endings).

Every value is checked against :mod:`tiltopt.base.limits` before anything is allocated: the size of
a range is worked out from its start, stop and step first.
"""
from __future__ import annotations

import math

import numpy as np

from .errors import InputError
from .limits import MAX_ABS_LEAN_DEG, MAX_COORD_MM, MAX_RANGE_VALUES, MAX_STATES, MAX_TRAVEL_MM, check_count

#: the unit a name's ending gives (docs/formats.md, "Units"); the longest ending that matches wins
NAME_UNITS = (("_n_per_mm", "N/mm"), ("_share", "1"), ("_mpa", "MPa"), ("_pct", "%"), ("_deg", "deg"),
              ("_mm", "mm"), ("_kg", "kg"), ("_nm", "N*m"), ("_n", "N"), ("_s", "s"))


def name_ending(name: str) -> tuple[str, str] | None:
    """The ``(ending, unit)`` of :data:`NAME_UNITS` that ``name`` ends with (longest first), or None."""
    low = name.lower()
    for end, unit in sorted(NAME_UNITS, key=lambda e: -len(e[0])):
        if low.endswith(end):
            return end, unit
    return None


def unit_of_name(name: str, default: str = "1") -> str:
    """Unit of a metric or column from the end of its name (``_mm`` -> mm, ``_n_per_mm`` -> N/mm ...)."""
    e = name_ending(name)
    return e[1] if e else default


def _expected(text: str, unit: str) -> str:
    return (f"expected start:stop:step (stop included) or a comma list of numbers, in {unit}. "
            f"Got {text!r}.")


def parse_values(text: str, option: str, unit: str, *, limit: float | None = None,
                 inclusive: bool = True) -> np.ndarray:
    """Parse ``start:stop:step`` (stop included) or a comma list ``a,b,c``.

    Parameters
    ----------
    limit : float, optional
        Every value must lie within ``+-limit`` (``inclusive=False``: strictly within).

    Raises
    ------
    InputError
        Naming the option, with what was expected: not numbers, not finite, an empty item
        (``1,,2``), a range of more than :data:`~tiltopt.base.limits.MAX_RANGE_VALUES` values (found
        before any is made), or a value beyond the limit.
    """
    text = str(text).strip()
    try:
        parts = [float(p) for p in text.split(":" if ":" in text else ",")]
    except ValueError:
        raise InputError(_expected(text, unit), key=option) from None
    if ":" in text:
        if len(parts) != 3:
            raise InputError(_expected(text, unit), key=option)
        start, stop, step = parts
        if not all(math.isfinite(v) for v in parts) or step <= 0 or stop < start:
            raise InputError(f"expected start:stop:step with finite numbers, step > 0 and stop >= start ({unit}). "
                             f"Got {text!r}.", key=option)
        span = (stop - start) / step            # inf when it overflows: refused below, never allocated
        check_count(span + 1, MAX_RANGE_VALUES, f"values for {option} {text}", "Use a larger step or a shorter "
                    "range.", key=option)
        values = start + step * np.arange(int(math.floor(span + 1e-9)) + 1)
    else:
        check_count(len(parts), MAX_RANGE_VALUES, f"values for {option}", "Give fewer values.", key=option)
        values = np.array(parts)
        if not np.all(np.isfinite(values)):
            raise InputError(_expected(text, unit), key=option)
    if limit is not None:
        bad = values[np.abs(values) > limit] if inclusive else values[np.abs(values) >= limit]
        if len(bad):
            within = f"within +-{limit:g} {unit}" if inclusive else f"strictly between -{limit:g} and {limit:g} {unit}"
            raise InputError(f"every value must lie {within}. Got {bad[0]:g} in {text!r}.", key=option)
    return values


def parse_leans(text: str, option: str = "--lean") -> np.ndarray:
    """Leans, deg: every one strictly within +-90 (:data:`~tiltopt.base.limits.MAX_ABS_LEAN_DEG`)."""
    return parse_values(text, option, "deg", limit=MAX_ABS_LEAN_DEG, inclusive=False)


def parse_travels(text: str, option: str = "--travel") -> np.ndarray:
    """Travels, mm: every one within +-200 (:data:`~tiltopt.base.limits.MAX_TRAVEL_MM`)."""
    return parse_values(text, option, "mm", limit=MAX_TRAVEL_MM)


def parse_states(lean: str, travel: str) -> tuple[np.ndarray, np.ndarray]:
    """``--lean`` and ``--travel`` of a sweep, their product within :data:`~tiltopt.base.limits.MAX_STATES`."""
    leans, travels = parse_leans(lean), parse_travels(travel)
    check_count(len(leans) * len(travels), MAX_STATES, f"lean x travel states ({len(leans)} x {len(travels)})",
                "Use fewer leans or travels.", key="--lean / --travel")
    return leans, travels


def parse_number(value: float | None, option: str, unit: str, *, lo: float | None = None, hi: float | None = None,
                 lo_open: bool = False, hi_open: bool = False) -> float | None:
    """A finite number typed for an option, within [lo, hi] (open ends with ``lo_open`` / ``hi_open``).

    None stays None (the option was not given).
    """
    if value is None:
        return None
    v = float(value)
    low_bad = lo is not None and (v < lo or (lo_open and v == lo))
    high_bad = hi is not None and (v > hi or (hi_open and v == hi))
    if not math.isfinite(v) or low_bad or high_bad:
        lo_s = "" if lo is None else f"{'>' if lo_open else '>='} {lo:g}"
        hi_s = "" if hi is None else f"{'<' if hi_open else '<='} {hi:g}"
        rule = " and ".join(s for s in (lo_s, hi_s) if s)
        raise InputError(f"expected a finite number{' ' + rule if rule else ''} ({unit}). Got {value!r} instead.",
                         key=option)
    return v


def parse_point(text: str, option: str) -> tuple[float, float]:
    """Two coordinates 'Y,Z' in mm, each finite and within +-MAX_COORD_MM."""
    try:
        parts = [float(p) for p in str(text).split(",")]
        if len(parts) != 2:
            raise ValueError
    except ValueError:
        raise InputError(f"expected two numbers 'Y,Z' in mm (for example 0,150). Got {text!r}.", key=option) from None
    if not all(math.isfinite(v) and abs(v) <= MAX_COORD_MM for v in parts):
        raise InputError(f"expected two finite numbers 'Y,Z' within +-{MAX_COORD_MM:g} mm. Got {text!r}.", key=option)
    return parts[0], parts[1]
