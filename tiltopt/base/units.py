"""Parsing of ranges and lists typed by a user (degrees and mm at the boundary)."""
from __future__ import annotations

import math

import numpy as np

from .errors import InputError


def parse_values(text: str, option: str, unit: str) -> np.ndarray:
    """Parse ``start:stop:step`` (stop included) or a comma list ``a,b,c``.

    Raises
    ------
    InputError
        Naming the option, with what was expected.
    """
    text = str(text).strip()
    try:
        if ":" in text:
            parts = [float(p) for p in text.split(":")]
            if len(parts) != 3:
                raise ValueError
            start, stop, step = parts
            if step <= 0 or stop < start:
                raise InputError(f"expected start:stop:step with step > 0 and stop >= start ({unit}). "
                                 f"Got {text!r}.", key=option)
            n = int(math.floor((stop - start) / step + 1e-9)) + 1
            values = start + step * np.arange(n)
            if n > 100000:
                raise InputError(f"{n} values is too many. Use a larger step.", key=option)
            return values
        values = np.array([float(p) for p in text.split(",") if p.strip()])
        if not len(values) or not np.all(np.isfinite(values)):
            raise ValueError
        return values
    except InputError:
        raise
    except ValueError:
        raise InputError(f"expected start:stop:step (stop included) or a comma list of numbers, in {unit}. "
                         f"Got {text!r}.", key=option) from None
