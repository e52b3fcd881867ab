"""User-facing input errors.

Every problem with a file or a value a person typed is raised as an
:class:`InputError` at one boundary (loading a file, parsing a CLI option).
The CLI prints its message and exits with status 2, without a traceback.
"""
from __future__ import annotations


class InputError(ValueError):
    """A bad input file or value, with a message that says how to fix it.

    Parameters
    ----------
    message : str
        What was expected and what arrived.
    source : str, optional
        The file (or option) the problem is in.
    key : str, optional
        The dotted key inside the file, e.g. ``wheels[0].crown_radius_mm``.
    """

    def __init__(self, message: str, source: str | None = None, key: str | None = None):
        self.source = source
        self.key = key
        self.detail = message
        where = []
        if source:
            where.append(str(source))
        if key:
            where.append(f"key '{key}'")
        prefix = (": ".join([", ".join(where)]) + ": ") if where else ""
        super().__init__(prefix + message)


def read_text(path, what: str, limit: int | None = None) -> str:
    """Read a user's text file, turning every failure into an :class:`InputError`.

    ``what`` names the kind of file in the message ("mechanism .toml"). Only regular files are read
    (a device such as /dev/zero or a named pipe would never end), at most ``limit`` bytes (default
    :data:`tiltopt.base.limits.MAX_FILE_BYTES`); a UTF-8 byte-order mark at the start is dropped.
    """
    import os
    import stat
    from pathlib import Path

    from .limits import MAX_FILE_BYTES

    limit = MAX_FILE_BYTES if limit is None else limit
    p = Path(path)
    try:
        mode = p.stat().st_mode
    except FileNotFoundError:
        raise InputError(f"file not found. Give the path of a {what} file.", str(p)) from None
    except OSError as exc:
        raise InputError(f"cannot read the file ({exc}).", str(p)) from None
    if stat.S_ISDIR(mode):
        raise InputError(f"this is a folder. Give the path of a {what} file.", str(p))
    try:
        # non-blocking: a pipe swapped in after the check above must not hang the open
        fd = os.open(p, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
        with os.fdopen(fd, "rb") as fh:
            st = os.fstat(fh.fileno())
            if not stat.S_ISREG(st.st_mode):
                raise InputError(f"not a regular file (a device, pipe or socket). Give the path of a {what} "
                                 f"file.", str(p))
            data = fh.read(limit + 1) if st.st_size <= limit else b""
    except InputError:
        raise
    except OSError as exc:
        raise InputError(f"cannot read the file ({exc}).", str(p)) from None
    if st.st_size > limit or len(data) > limit:
        raise InputError(f"the file is larger than the limit of {limit / 2 ** 20:g} MiB for a {what} file.", str(p))
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(f"cannot read the file: it is not UTF-8 text ({exc}).", str(p)) from None
    return text[1:] if text.startswith("\ufeff") else text


def read_toml(path, what: str) -> dict:
    """Read and decode a user's TOML file (see :func:`read_text`)."""
    return decode_toml(read_text(path, what), str(path))


def decode_toml(text: str, source: str) -> dict:
    """TOML text as a dict; bad TOML (or TOML nested too deeply to decode) is an :class:`InputError`."""
    import tomllib

    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML ({exc}).", source) from None
    except RecursionError:
        raise InputError("not a usable TOML file: its arrays or tables are nested too deeply.", source) from None


def check_keys(table, allowed, src: str, where: str, required=()) -> None:
    """Unknown keys and missing required keys of a TOML table are errors naming the key."""
    if not isinstance(table, dict):
        raise InputError(f"expected a table. Got {table!r} instead.", src, where or None)
    allowed = set(allowed)
    for k in table:
        if k not in allowed:
            raise InputError(f"unknown key '{k}'. Expected one of: {', '.join(sorted(allowed))}.", src,
                             f"{where}.{k}" if where else k)
    for k in required:
        if k not in table:
            raise InputError("this key is required but missing.", src, f"{where}.{k}" if where else k)
