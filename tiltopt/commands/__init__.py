"""CLI command modules; each adds its commands to :data:`tiltopt.cli.main`."""
from __future__ import annotations

from pathlib import Path

from tiltopt.base.errors import InputError


def output_path(ctx, param, value):
    """Click callback of an output option: every existing folder above the path must be a folder.

    (``-o afile/page.html`` with ``afile`` a file would otherwise fail in the middle of writing.)
    """
    if value is None:
        return value
    p = Path(value)
    for up in p.parents:
        if up.exists():
            if not up.is_dir():
                raise InputError(f"cannot write there: {up} is a file, not a folder.", str(value),
                                 "/".join(param.opts) if param.opts else param.name)
            break
    return value
