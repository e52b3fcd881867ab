"""The ``tiltopt`` command line.

Each command lives in a module of :mod:`tiltopt.commands` and is added here.
User errors (:class:`kinematics.InputError`, click usage errors) and a full disk
print one message and exit with status 2, without a traceback; Ctrl-C ends with
status 130, as shells report it.
"""
from __future__ import annotations

import errno
import sys

import click

from tiltopt.base.errors import InputError

from . import __version__

DISK_FULL = {errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)}


class _Group(click.Group):
    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except InputError as exc:
            click.echo(f"error: {exc}", err=True)
            sys.exit(2)
        except OSError as exc:
            if exc.errno not in DISK_FULL:
                raise
            where = f" (writing {exc.filename})" if exc.filename else ""
            click.echo(f"error: the disk is full{where}. Files tiltopt wrote before are whole (it writes each to "
                       f"a temporary file first); free some space and run the command again.", err=True)
            sys.exit(2)
        except KeyboardInterrupt:       # a second Ctrl-C: stopped at once (a run's last checkpoint stays valid)
            click.echo("\naborted", err=True)
            sys.exit(130)


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="tiltopt")
def main():
    """Design the twin-wheel linkage of a narrow tilting vehicle.

    Lengths are mm and angles degrees everywhere a person reads or writes them.
    """


def _register():
    from .commands import clearance, kin, loads, reports, runs  # noqa: F401  (each adds its commands to main)


_register()

if __name__ == "__main__":
    main()
