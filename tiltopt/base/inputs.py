"""Which input files a config reads, and reading a run folder's own copies of them instead.

A run config names up to five files of its own (``template.mechanism``,
``shell``, ``loads`` and the loads' ``sizing.materials`` / ``sizing.catalogue``);
each has one *role*, the config key that names it. The two places that turn
such a key into a path (``tiltopt.problems.spec`` and ``tiltopt.kinematics.loads``)
pass it through :func:`resolve`, which

- under :func:`recording`, notes the role and the absolute path (so a run can
  hash and copy exactly the files its problem was built from), and
- under :func:`reading_copies`, returns the run folder's copy for that role
  instead (so resume, explorer and sheet use the files the run started with).

Both are context variables: threads and Dask tasks each see their own.
"""
from __future__ import annotations

import contextvars
import os
from contextlib import contextmanager
from pathlib import Path

_RECORD: contextvars.ContextVar[dict | None] = contextvars.ContextVar("tiltopt_inputs_record", default=None)
_COPIES: contextvars.ContextVar[dict | None] = contextvars.ContextVar("tiltopt_inputs_copies", default=None)


def resolve(path, role: str) -> Path:
    """The file to read for ``role`` (``path``, or the run's copy under :func:`reading_copies`)."""
    copies = _COPIES.get()
    if copies is not None and role in copies:
        return Path(copies[role])
    rec = _RECORD.get()
    if rec is not None:
        rec.setdefault(role, Path(os.path.abspath(path)))
    return Path(path)


@contextmanager
def recording():
    """``with recording() as seen:`` -- ``seen`` maps each role read to its absolute path."""
    seen: dict[str, Path] = {}
    token = _RECORD.set(seen)
    try:
        yield seen
    finally:
        _RECORD.reset(token)


@contextmanager
def reading_copies(copies: dict):
    """Read ``copies[role]`` wherever a config names a file for ``role``."""
    token = _COPIES.set(dict(copies))
    try:
        yield
    finally:
        _COPIES.reset(token)
