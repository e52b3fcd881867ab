"""Checkpoints that cannot run code: numbers in an uncompressed ``.npz``, everything else as JSON in it.

``checkpoint.npz`` (written atomically by the runner) holds numeric arrays
``a0``, ``a1``, ... and one ``uint8`` array ``checkpoint.json``: the UTF-8 JSON
document that says what each array is. Nothing in the file is unpickled
(``numpy.load(..., allow_pickle=False)``); every member must be stored
uncompressed, so reading it never needs more memory than the file's size.

The algorithm is not stored as an object. Resume builds a fresh NSGA-II /
NSGA-III from the run settings (the same code path as a new run) and puts back
the state that changes from generation to generation:

- the generation counter, initialisation flag and termination progress;
- the random generator (``bit_generator.state``, plain integers);
- the population: ``X``, ``F``, ``G``, ``H``, the cached ``CV``, the
  ``evaluated`` sets and each individual's data (rank, crowding, niche ...);
- NSGA-III: the survival's hyperplane normalisation (ideal, worst and nadir
  points, extreme points) and its current optimum.

With the run state (archive columns, generation rows, pending evaluation
rows, hypervolume normalisation, timings) this is everything the next
generation reads, so a resumed run continues bit for bit as an uninterrupted
one (``tests/test_runner.py`` compares the whole algorithm object after a
restore with the one of a straight run).
"""
from __future__ import annotations

import io
import json
import math
import os
import stat
import time
import zipfile
from pathlib import Path
from typing import Any

import numpy as np

from tiltopt.base.errors import InputError

FORMAT = "tiltopt-checkpoint-2"
JSON_KEY = "checkpoint.json"
_POP_FIELDS = ("X", "F", "G", "H")
_NORM_FIELDS = ("ideal_point", "worst_point", "nadir_point", "extreme_points")
_NUMERIC = "biuf"
MAX_MEMBERS = 100_000


class _Bad(Exception):
    """A checkpoint that does not hold what it should (the message says what)."""


# ------------------------------------------------------------------ writing
class _Arrays:
    """Numeric arrays to store, named a0, a1, ... in the order they are added."""

    def __init__(self):
        self.items: dict[str, np.ndarray] = {}

    def add(self, a) -> str:
        a = np.asarray(a)
        if a.dtype.kind not in _NUMERIC:
            raise TypeError(f"checkpoint arrays are numeric; got dtype {a.dtype}")
        key = f"a{len(self.items)}"
        self.items[key] = np.ascontiguousarray(a)
        return key


def _plain(v):
    """A JSON value for a scalar of an individual's data, or None when it is not plain.

    numpy scalars first: ``np.float64`` is also a Python ``float``, and must come back as itself.
    """
    if isinstance(v, np.generic):
        return {"np": v.dtype.str, "v": v.item()} if v.dtype.kind in _NUMERIC else None
    if isinstance(v, (bool, int, float, str)) or v is None:
        return {"py": v}
    return None


_MISSING = object()


def _pop_doc(pop, arrays: _Arrays) -> dict:
    inds = list(pop)
    doc: dict[str, Any] = {"n": len(inds)}
    for f in _POP_FIELDS:
        vals = [np.asarray(getattr(ind, "_" + f), dtype=float) for ind in inds]
        shapes = {v.shape for v in vals}
        if len(shapes) > 1:
            raise TypeError(f"individuals differ in the shape of {f}: {sorted(shapes)}")
        width = vals[0].shape if vals else (0,)
        doc[f] = {"shape": list(width), "key": arrays.add(np.stack(vals) if vals else np.zeros((0,) + width))}
    cv = [ind._CV for ind in inds]
    doc["CV"] = {"cached": [c is not None for c in cv],
                 "key": arrays.add(np.array([np.asarray(c, float).reshape(-1)[0] if c is not None else 0.0
                                             for c in cv], dtype=float))}
    doc["evaluated"] = [sorted(map(str, ind.evaluated or ())) for ind in inds]
    keys: dict[str, None] = {}
    for ind in inds:
        keys.update(dict.fromkeys(ind.data))
    data = {}
    for k in keys:
        if not isinstance(k, str):
            raise TypeError(f"individual data key {k!r} is not a string")
        vals = [ind.data.get(k, _MISSING) for ind in inds]
        if all(v is not _MISSING for v in vals) and all(isinstance(v, np.ndarray) and v.dtype.kind in _NUMERIC
                                                        for v in vals) and len({v.shape for v in vals}) == 1:
            data[k] = {"array": arrays.add(np.stack(vals))}
            continue
        if all(isinstance(v, np.generic) and v.dtype.kind in _NUMERIC for v in vals) \
                and len({v.dtype for v in vals}) == 1:
            data[k] = {"scalars": arrays.add(np.array(vals))}
            continue
        out = []
        for v in vals:
            if v is _MISSING:
                out.append({"missing": True})
                continue
            p = _plain(v)
            if p is None:
                raise TypeError(f"individual data {k!r} holds a {type(v).__name__}, which a checkpoint cannot keep")
            out.append(p)
        data[k] = {"values": out}
    doc["data"] = data
    return doc



def _cols_doc(cols: dict, arrays: _Arrays) -> dict:
    """Column dict (name -> 1-d array): numeric columns as arrays, the others (strings) as JSON lists."""
    out = []
    for name, a in cols.items():
        a = np.asarray(a)
        if a.dtype.kind in _NUMERIC:
            out.append({"name": str(name), "key": arrays.add(a)})
        else:
            out.append({"name": str(name), "dtype": "object",
                        "values": [v if isinstance(v, str) else (None if v is None else float(v)) for v in a.tolist()]})
    return {"columns": out}


def _norm_doc(survival, arrays: _Arrays) -> dict | None:
    norm = getattr(survival, "norm", None)
    if norm is None:
        return None
    return {f: (None if getattr(norm, f) is None else arrays.add(np.asarray(getattr(norm, f), float)))
            for f in _NORM_FIELDS}


def encode(algorithm, state, info: dict, settings: dict, versions: dict) -> bytes:
    """The bytes of ``checkpoint.npz`` for an algorithm after ``tell`` and the runner's state."""
    arrays = _Arrays()
    term = algorithm.termination
    survival = getattr(algorithm, "survival", None)
    sopt = getattr(survival, "opt", None)
    alg = {"class": type(algorithm).__name__, "n_iter": algorithm.n_iter,
           "is_initialized": bool(algorithm.is_initialized),
           "termination": {"perc": float(term.perc), "force_termination": bool(term.force_termination)},
           "random_state": algorithm.random_state.bit_generator.state,
           "pop": _pop_doc(algorithm.pop, arrays),
           "survival_norm": _norm_doc(survival, arrays),
           "survival_opt": None if sopt is None else _pop_doc(sopt, arrays)}
    st = {"generation": state.generation, "n_evals": state.n_evals, "generations": state.generations,
          "archive": None if not state.archive else _cols_doc(state.archive, arrays),
          "normaliser": None if state.normaliser is None else {
              "lower": arrays.add(state.normaliser.lower), "upper": arrays.add(state.normaliser.upper)},
          "elapsed_s": state.elapsed_s, "evaluation_s": state.evaluation_s, "part_start": state.part_start,
          "pending": [_cols_doc(b, arrays) for b in state.pending], "started_utc": state.started_utc}
    doc = {"format": FORMAT, "problem": info, "settings": settings, "versions": versions, "algorithm": alg,
           "state": st}
    text = json.dumps(doc, allow_nan=True, separators=(",", ":"))
    buf = io.BytesIO()
    np.savez(buf, **{JSON_KEY: np.frombuffer(text.encode("utf-8"), dtype=np.uint8)}, **arrays.items)
    return buf.getvalue()


# ------------------------------------------------------------------ reading
def _need(cond, what: str):
    if not cond:
        raise _Bad(what)


class _Reader:
    def __init__(self, npz):
        self.npz = npz
        self.names = set(npz.files)

    def array(self, key, what: str, ndim: int | None = None, rows: int | None = None) -> np.ndarray:
        _need(isinstance(key, str) and key in self.names and key != JSON_KEY, f"{what}: array {key!r} is missing")
        try:
            a = self.npz[key]
        except ValueError as exc:   # an object array (pickled): refused, never loaded
            raise _Bad(f"{what}: array {key!r} cannot be read without running code ({exc})") from None
        _need(a.dtype.kind in _NUMERIC, f"{what}: array {key!r} has dtype {a.dtype}, expected numbers")
        if ndim is not None:
            _need(a.ndim == ndim, f"{what}: expected {ndim} dimensions, got shape {a.shape}")
        if rows is not None:
            _need(a.shape[0] == rows, f"{what}: expected {rows} rows, got shape {a.shape}")
        return a


def _int(v, what, lo=0):
    _need(isinstance(v, int) and not isinstance(v, bool) and v >= lo, f"{what}: expected a whole number >= {lo}, "
                                                                       f"got {v!r}")
    return v


def _float(v, what):
    _need(isinstance(v, (int, float)) and not isinstance(v, bool), f"{what}: expected a number, got {v!r}")
    return float(v)


def _dict(v, what, keys=()):
    _need(isinstance(v, dict), f"{what}: expected a table, got {type(v).__name__}")
    for k in keys:
        _need(k in v, f"{what}: '{k}' is missing")
    return v


def _list(v, what, n=None):
    _need(isinstance(v, list), f"{what}: expected a list, got {type(v).__name__}")
    if n is not None:
        _need(len(v) == n, f"{what}: expected {n} entries, got {len(v)}")
    return v


def _restore_pop(doc, r: _Reader, n_var: int, n_obj: int, n_constr: int, what: str):
    from pymoo.core.individual import Individual
    from pymoo.core.population import Population

    doc = _dict(doc, what, ("n", "X", "F", "G", "H", "CV", "evaluated", "data"))
    n = _int(doc["n"], f"{what}.n")
    widths = {"X": n_var, "F": n_obj, "G": n_constr, "H": 0}
    fields = {}
    for f in _POP_FIELDS:
        d = _dict(doc[f], f"{what}.{f}", ("key",))
        a = r.array(d["key"], f"{what}.{f}", rows=n)
        _need(a.dtype.kind == "f", f"{what}.{f}: expected floats, got {a.dtype}")
        _need(a.ndim == 2 and a.shape[1] == widths[f] or (f == "H" and a.ndim == 2 and a.shape[1] == 0),
              f"{what}.{f}: expected shape ({n}, {widths[f]}), got {a.shape}")
        fields[f] = a
    cvd = _dict(doc["CV"], f"{what}.CV", ("cached", "key"))
    cached = _list(cvd["cached"], f"{what}.CV.cached", n)
    cv = r.array(cvd["key"], f"{what}.CV", ndim=1, rows=n)
    evaluated = _list(doc["evaluated"], f"{what}.evaluated", n)
    data = _dict(doc["data"], f"{what}.data")
    cols = {}
    for k, d in data.items():
        d = _dict(d, f"{what}.data.{k}")
        if "array" in d:
            cols[k] = ("array", r.array(d["array"], f"{what}.data.{k}", rows=n))
        elif "scalars" in d:
            cols[k] = ("array", r.array(d["scalars"], f"{what}.data.{k}", ndim=1, rows=n))
        else:
            cols[k] = ("values", _list(d.get("values"), f"{what}.data.{k}", n))
    inds = []
    for i in range(n):
        ind = Individual()
        for f in _POP_FIELDS:
            setattr(ind, "_" + f, fields[f][i].copy())
        _need(isinstance(cached[i], bool), f"{what}.CV.cached: expected true/false")
        ind._CV = np.array([cv[i]]) if cached[i] else None
        ev = _list(evaluated[i], f"{what}.evaluated[{i}]")
        _need(all(isinstance(e, str) for e in ev), f"{what}.evaluated[{i}]: expected names")
        ind.evaluated = set(ev)
        for k, (kind, v) in cols.items():
            if kind == "array":
                val = v[i]
                ind.data[k] = val.copy() if isinstance(val, np.ndarray) else val
                continue
            e = _dict(v[i], f"{what}.data.{k}[{i}]")
            if e.get("missing"):
                continue
            if "py" in e:
                _need(e["py"] is None or isinstance(e["py"], (bool, int, float, str)), f"{what}.data.{k}[{i}]")
                ind.data[k] = e["py"]
            else:
                _need(isinstance(e.get("np"), str) and np.dtype(e["np"]).kind in _NUMERIC,
                      f"{what}.data.{k}[{i}]: expected a numeric dtype")
                ind.data[k] = np.dtype(e["np"]).type(e["v"])
        inds.append(ind)
    return Population(inds) if inds else Population.empty()


def _restore_cols(doc, r: _Reader, what: str) -> dict:
    doc = _dict(doc, what, ("columns",))
    out: dict[str, np.ndarray] = {}
    n = None
    for i, c in enumerate(_list(doc["columns"], f"{what}.columns")):
        c = _dict(c, f"{what}.columns[{i}]", ("name",))
        name = c["name"]
        _need(isinstance(name, str), f"{what}.columns[{i}].name: expected a string")
        if "key" in c:
            a = r.array(c["key"], f"{what}.{name}", ndim=1)
        else:
            vals = _list(c.get("values"), f"{what}.{name}")
            _need(all(v is None or isinstance(v, (str, int, float)) and not isinstance(v, bool) for v in vals),
                  f"{what}.{name}: expected strings")
            a = np.array(vals, dtype=object)
        _need(n is None or len(a) == n, f"{what}.{name}: {len(a)} rows, the other columns {n}")
        n = len(a)
        out[name] = a
    return out


def present(path: str | Path) -> bool:
    """Whether a checkpoint is there to be read: anything at its path, a dangling link included (only a
    regular file is read; anything else is refused by :func:`decode`, never taken for no checkpoint)."""
    return os.path.lexists(path)


def check_zip(path, size: int | None = None) -> None:
    """Refuse compressed members (a small file must not unpack into a huge one) and oddities.

    ``path`` is a path or an open binary file of ``size`` bytes.
    """
    try:
        with zipfile.ZipFile(path) as z:
            infos = z.infolist()
    except (zipfile.BadZipFile, OSError, ValueError) as exc:
        raise _Bad(f"not an .npz archive ({exc})") from None
    _need(len(infos) <= MAX_MEMBERS, f"{len(infos)} members")
    size = os.path.getsize(path) if size is None else size
    total = 0
    for i in infos:
        _need(i.compress_type == zipfile.ZIP_STORED, f"member {i.filename!r} is compressed; tiltopt writes none")
        total += i.file_size
    _need(total <= size, "the members are larger than the file")
    with zipfile.ZipFile(path) as z:      # every array fits in its member: nothing allocates more than the file
        for i in infos:
            _need(i.filename.endswith(".npy"), f"member {i.filename!r} is not an array")
            with z.open(i) as fh:
                try:
                    version = np.lib.format.read_magic(fh)
                    _need(version in ((1, 0), (2, 0)), f"member {i.filename!r}: .npy version {version}")
                    read = (np.lib.format.read_array_header_1_0 if version == (1, 0)
                            else np.lib.format.read_array_header_2_0)
                    shape, _fortran, dtype = read(fh)
                except ValueError as exc:
                    raise _Bad(f"member {i.filename!r}: {exc}") from None
            _need(all(isinstance(n, int) and n >= 0 for n in shape), f"member {i.filename!r}: shape {shape}")
            _need(not dtype.hasobject, f"member {i.filename!r} holds Python objects (a pickle); tiltopt writes none")
            _need(math.prod(shape) * dtype.itemsize <= i.file_size,
                  f"member {i.filename!r} claims shape {shape}, more than it holds")


#: what to do about a damaged checkpoint, for a run started with ``tiltopt run``
RESTART_HINT = "Start the run again (tiltopt run CONFIG --overwrite)."


def decode(path: Path, algorithm, info: dict, n_var: int, n_obj: int, n_constr: int,
           restart_hint: str = RESTART_HINT) -> dict:
    """Put a checkpoint's state into ``algorithm`` (freshly set up from the run settings).

    Returns the run state fields (a dict for ``RunState(**fields)``, with the
    normaliser as ``(lower, upper)`` arrays).

    Raises
    ------
    InputError
        Naming the file, when it is damaged, of another format, or of another problem; the message ends
        with ``restart_hint``.
    """
    path = Path(path)
    try:
        # non-blocking: a pipe in its place must not hang the open; only a regular file is read
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
        with os.fdopen(fd, "rb") as fh:
            st = os.fstat(fh.fileno())
            _need(stat.S_ISREG(st.st_mode), "not a regular file (a folder, device, pipe or socket)")
            check_zip(fh, st.st_size)
            fh.seek(0)
            with np.load(fh, allow_pickle=False) as npz:
                r = _Reader(npz)
                _need(JSON_KEY in r.names, f"{JSON_KEY} is missing")
                raw = r.npz[JSON_KEY]
                _need(raw.dtype == np.uint8 and raw.ndim == 1, f"{JSON_KEY}: expected bytes")
                try:
                    doc = json.loads(raw.tobytes().decode("utf-8"))
                except (UnicodeDecodeError, ValueError, RecursionError) as exc:
                    raise _Bad(f"{JSON_KEY} is not JSON ({exc})") from None
                doc = _dict(doc, JSON_KEY, ("format",))
                _need(doc["format"] == FORMAT, f"format {doc['format']!r}, expected {FORMAT!r}")
                _dict(doc, JSON_KEY, ("problem", "algorithm", "state"))
                if doc["problem"] != info:
                    raise InputError("the checkpoint belongs to a different problem (variables, objectives or "
                                     "constraints differ from the config). Start a new run instead.", str(path))
                return _restore(doc, r, algorithm, n_var, n_obj, n_constr)
    except _Bad as exc:
        raise InputError(f"damaged, or not a tiltopt checkpoint of this version: {exc}. {restart_hint}",
                         str(path)) from None
    except InputError:
        raise
    except (OSError, ValueError, TypeError, KeyError, IndexError, OverflowError, EOFError,
            zipfile.BadZipFile) as exc:
        raise InputError(f"cannot read the checkpoint ({type(exc).__name__}: {exc}). {restart_hint}",
                         str(path)) from None


def _restore(doc, r: _Reader, algorithm, n_var, n_obj, n_constr) -> dict:
    a = _dict(doc["algorithm"], "algorithm", ("class", "n_iter", "is_initialized", "termination", "random_state",
                                              "pop", "survival_norm", "survival_opt"))
    _need(a["class"] == type(algorithm).__name__,
          f"algorithm {a['class']!r}, the run settings say {type(algorithm).__name__!r}")
    _need(a["is_initialized"] is True, "the algorithm was not initialised")
    n_iter = _int(a["n_iter"], "algorithm.n_iter", 1)
    term = _dict(a["termination"], "algorithm.termination", ("perc", "force_termination"))
    perc = _float(term["perc"], "algorithm.termination.perc")
    _need(isinstance(term["force_termination"], bool), "algorithm.termination.force_termination")
    rs = _dict(a["random_state"], "algorithm.random_state")
    try:
        algorithm.random_state.bit_generator.state = rs
    except (TypeError, ValueError, KeyError, OverflowError) as exc:
        raise _Bad(f"algorithm.random_state: {exc}") from None
    algorithm.pop = _restore_pop(a["pop"], r, n_var, n_obj, n_constr, "algorithm.pop")
    _need(len(algorithm.pop) > 0, "algorithm.pop is empty")
    survival = getattr(algorithm, "survival", None)
    norm = getattr(survival, "norm", None)
    if a["survival_norm"] is not None:
        _need(norm is not None, "survival_norm given for an algorithm without one")
        nd = _dict(a["survival_norm"], "algorithm.survival_norm", _NORM_FIELDS)
        for f in _NORM_FIELDS:
            setattr(norm, f, None if nd[f] is None else r.array(nd[f], f"algorithm.survival_norm.{f}"))
    if a["survival_opt"] is not None:
        _need(survival is not None and hasattr(survival, "opt"), "survival_opt given for a survival without one")
        survival.opt = _restore_pop(a["survival_opt"], r, n_var, n_obj, n_constr, "algorithm.survival_opt")
    algorithm.n_iter = n_iter
    algorithm.is_initialized = True
    algorithm.start_time = time.time()     # a wall clock for pymoo's result(), not part of the search state
    algorithm.termination.perc = perc
    algorithm.termination.force_termination = term["force_termination"]

    s = _dict(doc["state"], "state", ("generation", "n_evals", "generations", "archive", "normaliser", "elapsed_s",
                                      "evaluation_s", "part_start", "pending", "started_utc"))
    gens = _list(s["generations"], "state.generations")
    for i, g in enumerate(gens):
        g = _dict(g, f"state.generations[{i}]")
        _need(all(isinstance(k, str) and (isinstance(v, (int, float)) and not isinstance(v, bool))
                  for k, v in g.items()), f"state.generations[{i}]: expected numbers")
    norm_s = None
    if s["normaliser"] is not None:
        nd = _dict(s["normaliser"], "state.normaliser", ("lower", "upper"))
        norm_s = (r.array(nd["lower"], "state.normaliser.lower", ndim=1, rows=n_obj),
                  r.array(nd["upper"], "state.normaliser.upper", ndim=1, rows=n_obj))
    _need(isinstance(s["started_utc"], str), "state.started_utc: expected a string")
    elapsed = _float(s["elapsed_s"], "state.elapsed_s")
    evaluation = _float(s["evaluation_s"], "state.evaluation_s")
    _need(math.isfinite(elapsed) and math.isfinite(evaluation), "state: timings must be finite")
    return {"generation": _int(s["generation"], "state.generation"), "n_evals": _int(s["n_evals"], "state.n_evals"),
            "generations": gens,
            "archive": None if s["archive"] is None else _restore_cols(s["archive"], r, "state.archive"),
            "normaliser": norm_s, "elapsed_s": elapsed, "evaluation_s": evaluation,
            "part_start": _int(s["part_start"], "state.part_start", 1),
            "pending": [_restore_cols(b, r, f"state.pending[{i}]")
                        for i, b in enumerate(_list(s["pending"], "state.pending"))],
            "started_utc": s["started_utc"]}
