"""The limits every input is held to, in one place (README "Limits").

Values outside them are refused up front with an :class:`~tiltopt.base.errors.InputError`, before
anything is allocated or solved: a typo such as ``--lean 0:1e10:1`` must cost a message, not the
machine's memory. Each limit is far beyond any real tilting vehicle and any useful sampling.
"""
from __future__ import annotations

import math

from .errors import InputError

#: largest |coordinate| or length in a file or option, mm (100 m): mechanism points, shell
#: sections, jig datum, template bounds and fixed values
MAX_COORD_MM = 1.0e5
#: a vehicle's total mass, kg (100 tonnes)
MAX_MASS_KG = 1.0e5
#: every lean a user gives is strictly within +-90 deg (at 90 deg the vehicle lies on its side)
MAX_ABS_LEAN_DEG = 90.0
#: design lean limits (run configs, loads files, the sheet's --lean-limit): at most 60 deg
MAX_LEAN_LIMIT_DEG = 60.0
#: suspension travel, mm either way (run configs, loads cases, --travel)
MAX_TRAVEL_MM = 200.0
#: a static wheel load (the sheet's --corner-load-n), N: 100 tonnes
MAX_FORCE_N = 1.0e6
#: a factor on a load or stress (loads [sizing] safety_factor, [fatigue] partial_factor)
MAX_SAFETY_FACTOR = 100.0
#: a load case's vertical factor, g (bump, one-wheel bump)
MAX_LOAD_FACTOR_G = 100.0
#: load cycles of a fatigue screening (loads [fatigue] cycles)
MAX_FATIGUE_CYCLES = 1.0e12
#: the S-N exponent m of a material's welded joints (materials fatigue_slope; the standards use 3 to 22)
MAX_SN_EXPONENT = 25.0
#: friction faces of a tilt lock (loads [tilt_lock] faces; a caliper on one disc has 2)
MAX_FRICTION_FACES = 100
#: values of one typed range or list (``--lean 0:40:0.001`` is 40,001 values)
MAX_RANGE_VALUES = 100_000
#: lean x travel states of one mechanism (a sweep, a clearance check, one candidate of a run)
MAX_STATES = 200_000
#: candidates x states evaluated in one generation of a run (memory: about 1-2 kB per state)
MAX_GENERATION_STATES = 500_000
#: population of a run
MAX_POPULATION = 100_000
#: variables of a [benchmark] test problem (the ZDT papers use 30)
MAX_BENCHMARK_VARIABLES = 1000
#: NSGA-III reference directions (Das-Dennis: C(partitions + n_obj - 1, n_obj - 1))
MAX_REFERENCE_DIRECTIONS = 100_000
#: coarse clearance samples round a tyre's crown circle, across the steer range, and their product
#: with the states and wheels of a check (single-precision points held at once)
MAX_CROWN_SAMPLES = 3600
MAX_STEER_SAMPLES = 361
MAX_CLEARANCE_SAMPLES = 50_000_000
#: a steering input's range, deg either way (mechanism [steering] input_range_deg: two turns of a column)
MAX_STEER_INPUT_DEG = 720.0
#: |gain| of a steering drive, mm or deg per input degree (mechanism [[steering.drives]] gain)
MAX_STEER_GAIN = 1000.0
#: drives, points of one drive, Ackermann inputs of a steering linkage
MAX_STEER_ITEMS = 100
#: vertices of a polygon shell (sections x vertices per section, after resampling)
MAX_SHELL_VERTICES = 1_000_000
#: a user's text file (mechanism, shell, loads, config, batch, template, run.json), bytes
MAX_FILE_BYTES = 64 * 1024 * 1024
#: runs a batch starts without ``--yes``, and the most it starts at all
BATCH_CONFIRM_RUNS = 1000
MAX_BATCH_RUNS = 1_000_000


def check_count(n: float, limit: int, what: str, hint: str, source: str | None = None,
                key: str | None = None) -> int:
    """``n`` (a count, possibly computed in floating point) as an int, or an error above ``limit``.

    ``what`` names the count ("lean values", "states"), ``hint`` says how to get below the limit.
    """
    if not math.isfinite(n) or n > limit:
        shown = f"{n:.3g}" if math.isfinite(n) else "an unbounded number of"
        raise InputError(f"{shown} {what}: more than the limit of {limit:,}. {hint}", source, key)
    return int(n)


def check_coord(v: float, source: str | None, key: str | None, what: str = "coordinate") -> float:
    """A finite length or coordinate within +-MAX_COORD_MM."""
    if not math.isfinite(v) or abs(v) > MAX_COORD_MM:
        raise InputError(f"a {what} must be finite and within +-{MAX_COORD_MM:g} mm. Got {v!r} instead.",
                         source, key)
    return float(v)
