"""Run folders and batch folders: plain names, OS locks, what tiltopt may delete, the run's own input copies.

- :func:`check_name`: run ids and batch names are plain folder names.
- :class:`FolderLock`: an ``fcntl.flock`` on ``run.lock`` / ``batch.lock`` inside the
  folder; the OS releases it when the process ends, however it ends (kill -9
  included), so a lock that can be taken means nobody is writing.
- :func:`folder_kind`, :func:`clear_run_files`, :func:`clean_temp_files`: tiltopt
  removes only the files it writes itself (:data:`RUN_FILES`, the part files, the
  input copies, the report files), never a folder that is not a run folder.
- :func:`collect_inputs`, :func:`copy_inputs`, :func:`verify_inputs`: every input
  file of a run is hashed (sha256) and copied into ``inputs/``; resume, explorer
  and sheet read the copies and refuse (unless allowed) when an original changed.
"""
from __future__ import annotations

import errno
import hashlib
import json
import os
import re
import socket
import sys
from datetime import datetime, timezone
from pathlib import Path

from tiltopt.base import inputs as _inputs
from tiltopt.base.errors import InputError
from tiltopt.base.files import FILE_MODE

from . import results as R

RUN_LOCK, BATCH_LOCK = "run.lock", "batch.lock"
INPUTS_DIR = "inputs"
OLD_CHECKPOINT = "checkpoint.pkl"   # written by tiltopt before checkpoint.npz; never loaded
#: files a run writes at the top of its folder
RUN_FILES = (R.FRONT, R.EVALUATIONS, R.GENERATIONS, R.RUN_JSON, R.CHECKPOINT, OLD_CHECKPOINT, R.PROGRESS)
#: files the report commands write into a run folder (explorer page; sheets/<candidate>/...)
REPORT_FILES = ("explorer.html", "plotly.min.js")
SHEET_FILES = ("sheet.html", "pivots.csv", "candidate.toml", "linkage.dxf")
PART_RE = re.compile(r"^evaluations-g\d{6}-g\d{6}\.parquet$")
INPUT_ROLES = ("config", "template.mechanism", "template.variables", "shell", "loads", "sizing.materials",
               "sizing.catalogue")
COPY_RE = re.compile(r"^(%s)(\.[A-Za-z0-9]{1,8})?$" % "|".join(re.escape(r) for r in INPUT_ROLES))
NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._+-]{0,127}$")
DISK_FULL = {errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)}


# ------------------------------------------------------------------ names
def check_name(name, what: str, source: str | None = None, key: str | None = None) -> str:
    """A plain folder name: letters, digits, ``. _ + -``, starting with a letter or digit, at most 128."""
    if not isinstance(name, str) or not NAME_RE.match(name) or name in (".", ".."):
        raise InputError(f"expected a plain name for the {what} (letters, digits and . _ + -, starting with a letter "
                         f"or digit, at most 128 characters; it becomes a folder name). Got {name!r}.", source, key)
    return name


def safe_label(text: str) -> str:
    """``text`` with every character a plain name may not hold replaced by ``_``."""
    return re.sub(r"[^A-Za-z0-9._+-]", "_", text)


# ------------------------------------------------------------------ locks
def _read_holder(path: Path) -> dict:
    try:
        d = json.loads(path.read_text(encoding="utf-8"))
        return d if isinstance(d, dict) else {}
    except (OSError, ValueError):
        return {}


class FolderLock:
    """An exclusive OS lock on ``<folder>/<name>`` (``fcntl.flock``), held until :meth:`release`.

    The lock file holds JSON ``{pid, host, started_utc, command}`` of the holder,
    for the message another process gets. It is never deleted (deleting it would
    let two processes lock two different files).
    """

    def __init__(self, path: Path, fd: int):
        self.path = path
        self._fd: int | None = fd

    @classmethod
    def acquire(cls, folder: str | Path, name: str = RUN_LOCK, what: str = "run folder",
                command: str | None = None) -> "FolderLock":
        import fcntl

        folder = Path(folder)
        try:
            folder.mkdir(parents=True, exist_ok=True)
            path = folder / name
            # FILE_MODE: the mode an ordinary open() gives; O_NOFOLLOW: a planted link is not followed
            fd = os.open(path, os.O_RDWR | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0), FILE_MODE)
        except OSError as exc:
            if exc.errno in DISK_FULL:
                raise
            raise InputError(f"cannot create the lock file of this {what} ({exc.strerror}).", str(folder)) from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as exc:
            os.close(fd)
            if exc.errno not in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                raise
            h = _read_holder(path)
            who = f"pid {h['pid']}" if isinstance(h.get("pid"), int) else "a process that has not said its pid yet"
            where = f" on {h['host']}" if h.get("host") and h.get("host") != socket.gethostname() else ""
            since = f", since {h['started_utc']}" if h.get("started_utc") else ""
            cmd = f" ({h['command']})" if isinstance(h.get("command"), str) and h.get("command") else ""
            stop = f" (kill {h['pid']})" if isinstance(h.get("pid"), int) and not where else ""
            raise InputError(f"this {what} is in use by another tiltopt process ({who}{where}{since}){cmd}. "
                             f"Two writers would lose results: wait until it ends, or stop it first{stop}.",
                             str(folder)) from None
        info = {"pid": os.getpid(), "host": socket.gethostname(),
                "started_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
                "command": command if command is not None else " ".join(["tiltopt", *sys.argv[1:]])}
        data = (json.dumps(info) + "\n").encode("utf-8")
        try:
            os.ftruncate(fd, 0)
            os.pwrite(fd, data, 0)
        except OSError:   # a full disk: the lock holds all the same, only the holder's name is missing
            pass
        return cls(path, fd)

    def release(self) -> None:
        if self._fd is not None:
            import fcntl

            try:
                fcntl.flock(self._fd, fcntl.LOCK_UN)
            finally:
                os.close(self._fd)
                self._fd = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.release()
        return False


# ------------------------------------------------------------------ what tiltopt wrote
def read_meta(d: Path) -> dict | None:
    """run.json as a dict (:func:`~tiltopt.optimizer.results.read_run_json`), or None when it is missing,
    unreadable or damaged."""
    try:
        return R.read_run_json(Path(d) / R.RUN_JSON)
    except InputError:
        return None


def _is_temp(name: str) -> bool:
    """A temp file of tiltopt's atomic writes (``.<name>.<random>.tmp``) of a file tiltopt writes."""
    if not (name.startswith(".") and name.endswith(".tmp")):
        return False
    base = name[1:-4].rsplit(".", 1)[0]
    return (base in RUN_FILES or base in REPORT_FILES or base in SHEET_FILES or base == "summary.parquet"
            or bool(PART_RE.match(base)) or bool(COPY_RE.match(base)))


def _ours(d: Path, name: str) -> bool:
    p = d / name
    if name in RUN_FILES or name in REPORT_FILES or name in (RUN_LOCK, BATCH_LOCK) or _is_temp(name):
        return not p.is_dir() or p.is_symlink()
    if name in (R.PARTS_DIR, INPUTS_DIR, "sheets"):
        return p.is_dir() and not p.is_symlink()
    return False


def folder_kind(d: str | Path) -> str:
    """'absent', 'run' (a tiltopt run or merge folder), 'leftover' (only files tiltopt writes, no run.json:
    a run killed at its very start), or 'foreign' (anything else: tiltopt does not write there)."""
    d = Path(d)
    if d.is_symlink() or (d.exists() and not d.is_dir()):
        return "foreign"
    if not d.exists():
        return "absent"
    meta = read_meta(d)
    if meta is not None and str(meta.get("format", "")).startswith(("tiltopt-run-", "tiltopt-merge-")):
        return "run"
    try:
        names = os.listdir(d)
    except OSError:
        return "foreign"
    if (d / R.RUN_JSON).exists():
        return "foreign"
    return "leftover" if all(_ours(d, n) for n in names) else "foreign"


def foreign_entries(d: Path) -> list[str]:
    try:
        return sorted(n for n in os.listdir(d) if not _ours(d, n))
    except OSError:
        return []


def refuse_foreign(d: Path, option: str = "--run-id") -> None:
    """InputError unless ``d`` is absent, a tiltopt run folder, or only holds tiltopt's own leftovers."""
    if folder_kind(d) != "foreign":
        return
    if d.is_symlink():
        why = "is a symbolic link"
    elif d.exists() and not d.is_dir():
        why = "is a file"
    else:
        some = foreign_entries(d)
        why = ("is not a tiltopt run folder (no readable run.json of tiltopt" +
               (f"; it holds {', '.join(some[:5])}{' ...' if len(some) > 5 else ''})" if some else ")"))
    raise InputError(f"this folder {why}. tiltopt never writes into or deletes such a folder; choose another "
                     f"{option} or output folder.", str(d))


def _unlink(p: Path) -> None:
    try:
        if p.is_symlink() or p.is_file():
            p.unlink()
    except FileNotFoundError:
        pass


def _rmdir_if_empty(p: Path) -> None:
    try:
        if p.is_dir() and not p.is_symlink():
            p.rmdir()
    except OSError:
        pass


def clear_run_files(d: str | Path, results_only: bool = False) -> None:
    """Delete what tiltopt wrote in a run folder (never anything else, never the lock).

    ``results_only``: the result files and part files only (a fresh start keeps
    the input copies just made).
    """
    d = Path(d)
    for name in RUN_FILES:
        _unlink(d / name)
    parts = d / R.PARTS_DIR
    if parts.is_dir() and not parts.is_symlink():
        for f in os.listdir(parts):
            if PART_RE.match(f) or _is_temp(f):
                _unlink(parts / f)
        _rmdir_if_empty(parts)
    if results_only:
        return
    for name in REPORT_FILES:
        _unlink(d / name)
    sheets = d / "sheets"
    if sheets.is_dir() and not sheets.is_symlink():
        for sub in os.listdir(sheets):
            sd = sheets / sub
            if sd.is_dir() and not sd.is_symlink():
                for f in os.listdir(sd):
                    if f in SHEET_FILES or _is_temp(f):
                        _unlink(sd / f)
                _rmdir_if_empty(sd)
        _rmdir_if_empty(sheets)
    inp = d / INPUTS_DIR
    if inp.is_dir() and not inp.is_symlink():
        for f in os.listdir(inp):
            if COPY_RE.match(f) or _is_temp(f):
                _unlink(inp / f)
        _rmdir_if_empty(inp)


def clean_temp_files(d: str | Path) -> list[str]:
    """Remove the hidden temp files a killed writer left (``.run.json.x1y2.tmp`` ...). Call with the lock held."""
    d = Path(d)
    gone = []
    for sub in (d, d / R.PARTS_DIR, d / INPUTS_DIR):
        if not sub.is_dir() or sub.is_symlink():
            continue
        for f in os.listdir(sub):
            if _is_temp(f):
                _unlink(sub / f)
                gone.append(str(sub / f))
    return gone


# ------------------------------------------------------------------ hashes and input copies
def sha256_bytes(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def sha256_file(path: str | Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def config_hash(data) -> str:
    """sha256 of a resolved config (canonical JSON: sorted keys, no spaces)."""
    text = json.dumps(data, sort_keys=True, separators=(",", ":"), default=str)
    return sha256_bytes(text.encode("utf-8"))


def collect_inputs(data: dict, src: str, base_dir, config_file: str | Path | None = None):
    """Parse a run config and list the files its problem is built from: ``(cfg, [{role, path, builtin}])``.

    The config is parsed again while :mod:`tiltopt.base.inputs` records each file
    it names; the built-in files behind a built-in template (its variable file and
    mechanism) and the built-in materials / tube catalogue a loads file falls back
    to are listed as ``builtin`` (hashed, not copied: they belong to the install).
    """
    from tiltopt.base.resources import data_path

    from .config import parse_config

    with _inputs.recording() as seen:
        cfg = parse_config(data, src, base_dir)
    out = []
    if config_file is not None and Path(config_file).is_file():
        out.append({"role": "config", "path": os.path.abspath(config_file), "builtin": False})
    for role, p in seen.items():
        out.append({"role": role, "path": str(p), "builtin": False})
    spec = cfg.spec
    if spec is not None:
        t = cfg.data.get("template", {})
        if isinstance(t, dict) and "mechanism" not in t:
            from tiltopt.problems.templates import TEMPLATES

            e = TEMPLATES[t["name"]]
            out.append({"role": "template.variables", "path": str(e.path), "builtin": True})
            out.append({"role": "template.mechanism", "path": str(e.mechanism_file), "builtin": True})
        if spec.loads is not None:
            for role, name in (("sizing.materials", "materials.toml"), ("sizing.catalogue", "tubes.csv")):
                if role not in seen:
                    out.append({"role": role, "path": str(data_path(name)), "builtin": True})
    return cfg, out


def copy_inputs(run_dir: Path, entries: list) -> list:
    """Copy the non-built-in inputs into ``inputs/<role><suffix>``; hash every one. Returns the run.json records."""
    run_dir = Path(run_dir)
    out = []
    for e in entries:
        src = Path(e["path"])
        try:
            data = src.read_bytes()
        except OSError as exc:
            if exc.errno in DISK_FULL:
                raise
            raise InputError(f"cannot read this input file ({exc.strerror}).", str(src)) from None
        rec = {"role": e["role"], "path": str(src), "sha256": sha256_bytes(data), "bytes": len(data),
               "builtin": bool(e["builtin"]), "copy": None}
        if not e["builtin"]:
            suffix = src.suffix if re.match(r"^\.[A-Za-z0-9]{1,8}$", src.suffix) else ""
            name = f"{e['role']}{suffix}"
            R.write_bytes(run_dir / INPUTS_DIR / name, data)
            rec["copy"] = f"{INPUTS_DIR}/{name}"
        out.append(rec)
    return out


def _records(meta: dict, run_dir: Path) -> list:
    recs = meta.get("inputs")
    if recs is None:
        return []
    bad = InputError("the 'inputs' list is damaged (expected role, path, sha256 and copy of each input).",
                     str(run_dir / R.RUN_JSON), "inputs")
    if not isinstance(recs, list):
        raise bad
    for r in recs:
        if not (isinstance(r, dict) and r.get("role") in INPUT_ROLES and isinstance(r.get("path"), str)
                and isinstance(r.get("sha256"), str) and re.fullmatch(r"[0-9a-f]{64}", r["sha256"])):
            raise bad
        c = r.get("copy")
        if c is not None and not (isinstance(c, str) and c.startswith(INPUTS_DIR + "/")
                                  and COPY_RE.match(c[len(INPUTS_DIR) + 1:])):
            raise bad
    return recs


MAX_INPUT_BYTES = 1 << 30     # an input file above 1 GiB is not one tiltopt wrote down: never hashed


def _file_state(path: Path, sha: str, size=None) -> str:
    """'same', 'changed' or 'missing'. Only a regular file is read (a path in someone's run.json may name
    /dev/zero or a FIFO), and only when its size is the recorded one."""
    import stat

    if path is None:
        return "missing"
    try:
        st = os.stat(path)
        if not stat.S_ISREG(st.st_mode):
            return "missing"
        if (isinstance(size, int) and st.st_size != size) or st.st_size > MAX_INPUT_BYTES:
            return "changed"
        return "same" if sha256_file(path) == sha else "changed"
    except OSError:
        return "missing"


def _copy_path(run_dir: Path, rel: str) -> Path | None:
    """The copy's path inside the run folder, or None when ``inputs/`` or the copy is a symbolic link."""
    p = Path(run_dir) / rel
    if (Path(run_dir) / INPUTS_DIR).is_symlink() or p.is_symlink():
        return None
    return p


def copies_of(meta: dict, run_dir: str | Path) -> dict:
    """role -> path of the run's input copies that are whole (their hash as recorded); no checks of originals."""
    run_dir = Path(run_dir)
    try:
        recs = _records(meta, run_dir)
    except InputError:
        return {}
    out = {}
    for r in recs:
        if r.get("copy") and not r.get("builtin") and r["role"] != "config":
            p = _copy_path(run_dir, r["copy"])
            if _file_state(p, r["sha256"], r.get("bytes")) == "same":
                out[r["role"]] = p
    return out


def verify_inputs(run_dir: str | Path, meta: dict, allow_changed: bool = False, notice=None,
                  include_config: bool = True, flag: str = "--allow-changed-inputs") -> dict:
    """Check a run's inputs against their recorded hashes; role -> copy to read.

    An original that changed since the run started is refused (naming the file),
    unless ``allow_changed`` (then ``notice`` gets one line per file and the copy
    is read). A missing original is fine: the copy stands in. A damaged copy is
    fine when the original is still the same; otherwise the run cannot go on.
    """
    run_dir = Path(run_dir)
    recs = _records(meta, run_dir)
    copies, changed = {}, []
    for r in recs:
        role = r["role"]
        if role == "config" and not include_config:
            continue
        orig = _file_state(Path(r["path"]), r["sha256"], r.get("bytes"))
        copy_ok = False
        if r.get("copy") and not r.get("builtin"):
            cp = _copy_path(run_dir, r["copy"])
            copy_ok = _file_state(cp, r["sha256"], r.get("bytes")) == "same"
            cp = cp if cp is not None else run_dir / r["copy"]
            if copy_ok and role != "config":
                copies[role] = cp
            if not copy_ok and orig != "same" and role != "config":
                raise InputError(f"the run's copy of its {role} file is missing or damaged, and the original "
                                 f"({r['path']}) is {orig if orig == 'missing' else 'changed'}: the run cannot go "
                                 f"on with the file it started with.", str(cp))
        if orig == "changed":
            changed.append(r)
    if changed:
        lines = []
        for r in changed:
            kind = "tiltopt's built-in file" if r.get("builtin") else "file"
            lines.append(f"{r['role']} {kind} {r['path']}")
        uses = ("the run folder's copies (inputs/)" if all(r.get("copy") or r["role"] == "config" for r in changed)
                else "its copies, and the built-in files as they are now")
        if not allow_changed:
            raise InputError(f"changed since the run started: {'; '.join(lines)}. The results were computed with "
                             f"the files as they were (copies in {run_dir / INPUTS_DIR}). Pass {flag} to go on "
                             f"with {uses}, or start a new run for the new files.", str(run_dir))
        if notice is not None:
            for ln in lines:
                notice(f"note: changed since the run started: {ln}; going on with {uses}")
    return copies
