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
