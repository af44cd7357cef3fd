"""Safe writing: atomic files, strict JSON, staged folders, folder locks and the output-folder check.

Every file orbitmass writes goes through this module, so a crash, a full disk
or a second process never leaves a half-written file or deletes a user's file.

Atomic files
    :func:`atomic_file` and :func:`atomic_path` write to a temporary file in
    the destination folder (``.<name>.<random>.tmp``, created with mode 0666
    less the umask, like a plain ``open``) and :func:`os.replace` it into
    place only when the write succeeded. :func:`write_atomic` writes text or
    bytes that way, :func:`write_json_atomic` strict JSON (non-finite numbers
    become ``null``, see :func:`jsonable`).

Staged folders
    :func:`staged_folder` yields a hidden sibling folder
    ``.<name>.staging-<random>``; when the block succeeds, the staging folder
    is swapped in for the destination (the old folder is renamed aside and
    removed only after the new one is in place).

Marker and lock
    A folder orbitmass writes carries a marker file :data:`MARKER_NAME`
    (JSON: kind, orbitmass version, creation time, the files it wrote), so
    that replacing it is possible without ever touching a folder of the user.
    :class:`FolderLock` (file :data:`LOCK_NAME`, taken with ``O_EXCL``) gives
    one writer per folder; a lock left by a dead process is reported, never
    silently taken over.

The output-folder check
    :func:`check_output_folder` decides whether a folder may be written or
    replaced. Its errors speak of the ``overwrite`` argument in neutral words
    ("pass overwrite to replace it") and carry the attribute ``remedy``
    (``"overwrite"`` or ``None``) so a command line can name its own option.

The module is a little over 600 lines, half of them docstrings: it is kept
whole on purpose, as the one place where every rule of safe writing lives.

Examples
--------
>>> import tempfile, pathlib
>>> folder = pathlib.Path(tempfile.mkdtemp())
>>> p = write_json_atomic({"x": float("nan"), "y": [1.5]}, folder / "a.json")
>>> p.read_text()
'{\\n  "x": null,\\n  "y": [\\n    1.5\\n  ]\\n}\\n'
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import json
import logging
import os
import re
import secrets
import shutil
import socket
from collections.abc import Callable, Iterable, Iterator
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np

from orbitmass._version import __version__
from orbitmass.exceptions import RunFolderError

__all__ = [
    "MARKER_NAME",
    "LOCK_NAME",
    "atomic_file",
    "atomic_path",
    "write_atomic",
    "jsonable",
    "dumps_strict",
    "write_json_atomic",
    "array_sha256",
    "json_sha256",
    "staged_folder",
    "publish_folder",
    "write_marker",
    "read_marker",
    "folder_entries",
    "foreign_entries",
    "FolderLock",
    "check_writable",
    "check_output_folder",
]

log = logging.getLogger(__name__)

#: Marker file in every folder orbitmass writes (JSON: kind, version, created_utc, files).
MARKER_NAME = ".orbitmass-run"
#: Lock file of the one process writing a folder (JSON: pid, host, created_utc, token).
LOCK_NAME = ".orbitmass-lock"
_TMP_RE = re.compile(r"^\.(?P<base>.+)\.[0-9A-Za-z_-]+\.tmp$")


def _error(message: str, remedy: str | None = None) -> RunFolderError:
    exc = RunFolderError(message)
    exc.remedy = remedy
    return exc


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


# ----------------------------------------------------------------- atomic files
def _open_temp(dest: Path) -> tuple[int, Path]:
    """Open a new temporary file beside ``dest`` (mode 0666 less the umask, like a plain open)."""
    for _ in range(100):
        tmp = dest.parent / f".{dest.name}.{secrets.token_hex(6)}.tmp"
        try:
            return os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666), tmp
        except FileExistsError:
            continue
    raise FileExistsError(f"no free temporary name beside {dest}")


@contextlib.contextmanager
def atomic_path(dest: str | os.PathLike[str]) -> Iterator[Path]:
    """A temporary file name beside ``dest``, renamed onto ``dest`` when the block succeeds.

    For writers that need a file name (h5py, pandas). The file exists (empty)
    when the block starts; on any exception it is removed and ``dest`` is untouched.
    """
    dest = Path(dest)
    fd, tmp = _open_temp(dest)
    os.close(fd)
    try:
        yield tmp
        os.replace(tmp, dest)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


@contextlib.contextmanager
def atomic_file(dest: str | os.PathLike[str], *, fsync: bool = False) -> Iterator[Any]:
    """Binary file handle whose content replaces ``dest`` only when the block succeeds."""
    dest = Path(dest)
    fd, tmp = _open_temp(dest)
    try:
        with os.fdopen(fd, "wb") as fh:
            yield fh
            if fsync:
                fh.flush()
                os.fsync(fh.fileno())
        os.replace(tmp, dest)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def write_atomic(path: str | os.PathLike[str], data: str | bytes) -> Path:
    """Write ``data`` to ``path`` atomically (temporary file, then :func:`os.replace`).

    Parameters
    ----------
    path : str or path-like
        Destination file; its folder must exist.
    data : str or bytes
        Text (written as UTF-8) or raw bytes.

    Returns
    -------
    Path
        The destination path.
    """
    path = Path(path)
    payload = data.encode("utf-8") if isinstance(data, str) else bytes(data)
    with atomic_file(path) as fh:
        fh.write(payload)
    return path


# ----------------------------------------------------------------- strict JSON
def jsonable(obj: Any) -> Any:
    """Plain JSON types; non-finite floats become ``None`` (``null``) so the file is strict JSON.

    >>> jsonable({"a": np.float64("inf"), "b": (np.int64(2), np.array([0.5]))})
    {'a': None, 'b': [2, [0.5]]}
    """
    if isinstance(obj, float | np.floating):
        value = float(obj)
        return value if np.isfinite(value) else None
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return jsonable(obj.tolist())
    if isinstance(obj, np.generic):
        return obj.item()
    return obj


def dumps_strict(obj: Any, **kwargs: Any) -> str:
    """``json.dumps`` of :func:`jsonable` ``(obj)`` with ``allow_nan=False``."""
    return json.dumps(jsonable(obj), allow_nan=False, **kwargs)


def write_json_atomic(obj: Any, path: str | os.PathLike[str], *, indent: int = 2) -> Path:
    """Write ``obj`` as strict JSON (UTF-8, trailing newline) to ``path`` atomically, flushed to disk."""
    path = Path(path)
    with atomic_file(path, fsync=True) as fh:
        sink = _TextSink(fh)  # json.dump streams str chunks; the atomic handle takes bytes
        json.dump(jsonable(obj), sink, indent=indent, allow_nan=False)
        sink.write("\n")
    return path


class _TextSink:
    """Minimal text adaptor: json.dump writes str chunks, the atomic handle takes bytes."""

    def __init__(self, fh):
        self._fh = fh

    def write(self, chunk: str) -> int:
        return self._fh.write(chunk.encode("utf-8"))


def array_sha256(array: Any) -> str:
    """SHA-256 (hex) of an array's dtype, shape and bytes (C order): a changed value, shape or type changes it.

    >>> array_sha256(np.zeros(2)) == array_sha256(np.zeros(2)), array_sha256(np.zeros(2)) == array_sha256(np.zeros(3))
    (True, False)
    """
    a = np.ascontiguousarray(np.asarray(array))
    h = hashlib.sha256(f"{a.dtype.str}{a.shape}".encode())
    h.update(a.tobytes())
    return h.hexdigest()


def json_sha256(obj: Any) -> str:
    """SHA-256 (hex) of the canonical strict JSON of ``obj`` (sorted keys, no spaces)."""
    return hashlib.sha256(dumps_strict(obj, sort_keys=True, separators=(",", ":")).encode()).hexdigest()


# ----------------------------------------------------------------- marker
def write_marker(folder: str | os.PathLike[str], kind: str, *, files: Iterable[str] = (),
                 created_utc: str | None = None) -> Path:
    """Write the marker file that says orbitmass wrote ``folder`` (and which files)."""
    folder = Path(folder)
    info = {"kind": kind, "orbitmass_version": __version__, "created_utc": created_utc or _now(),
            "files": sorted(set(files))}
    return write_json_atomic(info, folder / MARKER_NAME)


def read_marker(folder: str | os.PathLike[str]) -> dict | None:
    """The marker of ``folder`` as a dict, or None when it has none (or an unreadable one)."""
    path = Path(folder) / MARKER_NAME
    try:
        info = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError):
        return None
    if not isinstance(info, dict) or not isinstance(info.get("files", []), list):
        return None
    return info


def folder_entries(folder: str | os.PathLike[str]) -> list[str]:
    """Relative POSIX paths of every file and folder below ``folder``, sorted (folders end in ``/``)."""
    folder = Path(folder)
    out = []
    for root, dirs, files in os.walk(folder):
        rel = Path(root).relative_to(folder)
        out += [(rel / d).as_posix() + "/" for d in dirs]
        out += [(rel / f).as_posix() for f in files]
    return sorted(out)


def _is_ours_by_name(name: str, known: set[str]) -> bool:
    if name in known or name in (MARKER_NAME, LOCK_NAME):
        return True
    m = _TMP_RE.match(name)  # a temporary file of an interrupted atomic write
    return bool(m) and (m.group("base") in known or m.group("base") == MARKER_NAME)


def foreign_entries(folder: str | os.PathLike[str], *, kind: str, known_names: Iterable[str] = (),
                    known_dirs: Iterable[str] = (), core_names: Iterable[str] = ()) -> tuple[bool, list[str]]:
    """Whether orbitmass recognises ``folder`` as its own, and the entries it did not write.

    A folder is recognised when it carries a marker of ``kind``, or (folders of
    earlier versions, which had no marker) when it holds at least one of
    ``core_names``. Entries count as orbitmass's own when the marker lists
    them, when they bear one of ``known_names`` (top level) or lie inside one
    of ``known_dirs``, or are the marker, the lock or a leftover temporary
    file of an atomic write; every other entry is foreign.

    Returns
    -------
    (bool, list of str)
        Recognised, and the foreign entries (relative paths, folders with a trailing ``/``).
    """
    folder = Path(folder)
    known, dirs = set(known_names), set(known_dirs)
    marker = read_marker(folder)
    recognised = bool(marker and marker.get("kind") == kind)
    listed = set(marker["files"]) if recognised else set()
    foreign: list[str] = []
    tops = sorted(folder.iterdir(), key=lambda p: p.name)
    for top in tops:
        name = top.name
        if not top.is_dir() or top.is_symlink():
            if name not in listed and not _is_ours_by_name(name, known):
                foreign.append(name)
            continue
        if name not in dirs and not any(e.startswith(name + "/") for e in listed):
            foreign.append(name + "/")  # a foreign folder is listed once and never walked
            continue
        for entry in folder_entries(top):
            rel = f"{name}/{entry}"
            if entry.endswith("/") or rel in listed:
                continue
            # a run that recorded its files owns only those (and temporary files); one without a
            # list (earlier versions) owns what lies in its known folders
            if listed and not _TMP_RE.match(Path(entry).name):
                foreign.append(rel)
    if not recognised:
        recognised = bool({p.name for p in tops} & set(core_names))
    return recognised, foreign


# ----------------------------------------------------------------- lock
def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # alive, owned by someone else
        return True
    except (OverflowError, ValueError):
        return False
    return True


class FolderLock:
    """One writer per folder: the lock file :data:`LOCK_NAME` in it, created exclusively.

    Use :meth:`acquire`; release with :meth:`release` or a ``with`` block.

    Attributes
    ----------
    folder : Path
        The locked folder.
    token : str
        Random token written into the lock file; the lock is held while the file carries it.
    created : bool
        True when the folder was created for this writer (see :meth:`release`).
    published : bool
        Set by a writer after its staged folder was swapped in.
    """

    def __init__(self, folder: Path, token: str, info: dict, *, created: bool = False):
        self.folder = Path(folder)
        self.token = token
        self.info = info
        self.created = created
        self.published = False
        self.options: dict[str, Any] = {}

    @property
    def path(self) -> Path:
        """The lock file."""
        return self.folder / LOCK_NAME

    @classmethod
    def acquire(cls, folder: str | os.PathLike[str], *, created: bool = False) -> FolderLock:
        """Take the lock of ``folder`` (which must exist).

        Raises
        ------
        RunFolderError
            Another process holds the lock, or a stale lock of a process that is
            no longer running is there (the message says which file to remove).
        """
        folder = Path(folder)
        token = secrets.token_hex(16)
        info = {"pid": os.getpid(), "host": socket.gethostname(), "created_utc": _now(), "token": token,
                "orbitmass_version": __version__}
        path = folder / LOCK_NAME
        try:
            fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
        except FileExistsError:
            raise cls._held_error(folder, path) from None
        except OSError as exc:
            raise _error(f"{folder}: cannot create the lock file {LOCK_NAME} ({exc.strerror or exc})") from None
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            json.dump(info, fh)
        return cls(folder, token, info, created=created)

    @staticmethod
    def _held_error(folder: Path, path: Path) -> RunFolderError:
        try:
            other = json.loads(path.read_text(encoding="utf-8"))
            pid, host, since = int(other["pid"]), str(other["host"]), str(other.get("created_utc", "?"))
        except (OSError, UnicodeDecodeError, ValueError, KeyError, TypeError):
            return _error(f"{folder}: another orbitmass process is writing this folder (lock file {path}); "
                          "wait for it to finish or choose another folder")
        if host == socket.gethostname() and not _pid_alive(pid):
            return _error(f"{folder}: a stale lock {path} was left by process {pid} (started {since}), which is "
                          "no longer running; if no other fit is writing this folder, remove that file and "
                          "start again")
        return _error(f"{folder}: another orbitmass process (pid {pid} on {host}, since {since}) is writing "
                      f"this folder (lock file {path}); wait for it to finish or choose another folder")

    def held(self) -> bool:
        """True while the lock file in :attr:`folder` carries this lock's token."""
        try:
            return json.loads(self.path.read_text(encoding="utf-8")).get("token") == self.token
        except (OSError, UnicodeDecodeError, ValueError, AttributeError):
            return False

    def verify(self) -> None:
        """Raise :class:`RunFolderError` unless this lock is still held."""
        if not self.held():
            raise _error(f"{self.folder}: this process no longer holds the folder's lock ({LOCK_NAME} was "
                         "removed or replaced by another process); nothing was replaced")

    def copy_into(self, folder: Path) -> None:
        """Put this lock's file into ``folder`` (a staging folder about to replace :attr:`folder`)."""
        with atomic_file(Path(folder) / LOCK_NAME) as fh:
            fh.write(json.dumps(self.info).encode("utf-8"))

    def release(self) -> None:
        """Remove the lock file (if still ours); a folder created for this writer and left
        holding nothing but the marker is removed too."""
        if self.held():
            with contextlib.suppress(FileNotFoundError):
                os.unlink(self.path)
        if self.created and not self.published:
            with contextlib.suppress(OSError):
                if [p.name for p in self.folder.iterdir()] == [MARKER_NAME]:
                    os.unlink(self.folder / MARKER_NAME)
                    os.rmdir(self.folder)

    def __enter__(self) -> FolderLock:
        return self

    def __exit__(self, *exc: Any) -> None:
        self.release()

    def __repr__(self) -> str:
        return f"FolderLock({str(self.folder)!r}, held={self.held()})"


# ----------------------------------------------------------------- staged folders
def _mkdir_fresh(parent: Path, prefix: str) -> Path:
    for _ in range(100):
        path = parent / f"{prefix}{secrets.token_hex(4)}"
        try:
            os.mkdir(path, 0o777)  # permissions of a plain mkdir (umask applies), not mkdtemp's 0700
            return path
        except FileExistsError:
            continue
    raise FileExistsError(f"no free temporary folder name in {parent}")


def publish_folder(staging: Path, dest: Path) -> None:
    """Swap ``staging`` in for ``dest``: the old ``dest`` is renamed aside and removed after.

    The caller has checked that an existing ``dest`` may be replaced. If the
    swap fails half-way the old folder is put back.
    """
    staging, dest = Path(staging), Path(dest)
    if not os.path.lexists(dest):
        os.replace(staging, dest)
        return
    aside = _mkdir_fresh(dest.parent, f".{dest.name}.old-")
    os.rmdir(aside)
    os.replace(dest, aside)
    try:
        os.replace(staging, dest)
    except BaseException:
        with contextlib.suppress(OSError):
            os.replace(aside, dest)
        raise
    shutil.rmtree(aside, ignore_errors=True)


@contextlib.contextmanager
def staged_folder(dest: str | os.PathLike[str], *,
                  before_publish: Callable[[Path], None] | None = None) -> Iterator[Path]:
    """Yield a hidden sibling staging folder; on success swap it in for ``dest``.

    Parameters
    ----------
    dest : path
        Destination folder (its parent must exist).
    before_publish : callable, optional
        Called with the staging folder just before the swap; an exception
        from it stops the publication (and the staging folder is removed
        unless the callable moved it).
    """
    dest = Path(dest)
    staging = _mkdir_fresh(dest.parent, f".{dest.name}.staging-")
    try:
        yield staging
        if before_publish is not None:
            before_publish(staging)
        publish_folder(staging, dest)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise


# ----------------------------------------------------------------- the output-folder check
def _nearest_existing(path: Path) -> Path:
    p = path
    while not os.path.lexists(p) and p != p.parent:
        p = p.parent
    return p


def _probe_writable(folder: Path) -> str | None:
    """None when a file can be created in ``folder``, else the reason (actually tried: root ignores modes)."""
    try:
        fd, tmp = _open_temp(folder / "write-probe")
    except OSError as exc:
        if exc.errno == errno.EROFS:
            return "it is on a read-only file system"
        if exc.errno in (errno.EACCES, errno.EPERM):
            return "it is read-only (no permission to create files)"
        return exc.strerror or str(exc)
    os.close(fd)
    os.unlink(tmp)
    return None


def check_writable(path: str | os.PathLike[str]) -> Path:
    """Check that the folder ``path`` exists and is writable, or can be created; returns it.

    Creating a file is actually tried (permission bits alone say nothing for root).

    Raises
    ------
    RunFolderError
        ``path`` is a file, lies under a file, or the folder (or its nearest
        existing ancestor) does not accept new files.
    """
    path = Path(path)
    if os.path.lexists(path):
        if not path.is_dir():
            raise _error(f"{path}: exists and is not a folder")
        reason = _probe_writable(path)
        if reason:
            raise _error(f"{path}: cannot write into this folder: {reason}")
        return path
    base = _nearest_existing(path.absolute())
    if not base.is_dir():
        raise _error(f"{path}: cannot be created: {base} is a file, not a folder")
    reason = _probe_writable(base)
    if reason:
        raise _error(f"{path}: cannot be created in {base}: {reason}")
    return path


def _forbidden(resolved: Path) -> str | None:
    try:
        cwd = Path.cwd().resolve()
    except OSError:  # the working directory was removed
        cwd = None
    if resolved == Path(resolved.anchor):
        return "it is the root of the file system"
    with contextlib.suppress(RuntimeError, KeyError):
        if resolved == Path.home().resolve():
            return "it is the home folder"
    if cwd is not None and resolved == cwd:
        return "it is the working directory"
    if cwd is not None and cwd.is_relative_to(resolved):
        return "it contains the working directory"
    return None


def _listing(entries: list[str], limit: int = 12) -> str:
    shown = ", ".join(entries[:limit])
    return shown + (f" and {len(entries) - limit} more" if len(entries) > limit else "")


def check_output_folder(path: str | os.PathLike[str], *, overwrite: bool = False, protected: Iterable[Any] = (),
                        kind: str = "run", known_names: Iterable[str] = (), known_dirs: Iterable[str] = (),
                        core_names: Iterable[str] = (), ignore: Iterable[str] = ()) -> Path:
    """Decide whether ``path`` may be written (a new or empty folder) or replaced (``overwrite``).

    Refused always: the file-system root, the home folder, the working
    directory or any folder containing it; a folder that equals or contains
    one of ``protected`` (e.g. the target file and its tables); a symbolic
    link; a path that is a file or lies under one; a place where no file can
    be created. A non-empty folder is refused unless ``overwrite``, and even
    then unless orbitmass recognises it as its own (see
    :func:`foreign_entries`) and it holds nothing orbitmass did not write;
    the error lists the foreign entries.

    Parameters
    ----------
    path : path
        The folder to write.
    overwrite : bool
        Allow replacing a folder orbitmass wrote.
    protected : iterable of path
        Paths that must survive (inputs of the job).
    kind, known_names, known_dirs, core_names
        How to recognise the folder (see :func:`foreign_entries`).
    ignore : iterable of str
        Top-level names that do not make the folder non-empty (the marker is always ignored).

    Returns
    -------
    Path
        ``path`` made absolute (symbolic links resolved).

    Raises
    ------
    RunFolderError
        With ``remedy = "overwrite"`` when passing overwrite would allow the write.
    """
    path = Path(path)
    if path.is_symlink():
        raise _error(f"{path}: is a symbolic link; give the folder it points to ({path.resolve()}) instead")
    resolved = path.resolve()
    why = _forbidden(resolved)
    if why:
        raise _error(f"{path}: refusing to write output here: {why}; choose a new folder for the output")
    for item in protected:
        if not item:
            continue
        prot = Path(item).resolve()
        if prot == resolved or prot.is_relative_to(resolved):
            raise _error(f"{path}: refusing to write output here: this folder holds {prot}, an input of this job, "
                         "which replacing the folder would delete; choose another folder")
    check_writable(path)
    if path.is_dir():
        if not os.access(resolved.parent, os.W_OK) or _probe_writable(resolved.parent):
            raise _error(f"{path}: cannot replace this folder: its parent {resolved.parent} is read-only")
        skip = {MARKER_NAME, *ignore}
        present = sorted(p.name + ("/" if p.is_dir() else "") for p in path.iterdir() if p.name not in skip)
        if present:
            recognised, foreign = foreign_entries(path, kind=kind, known_names=known_names, known_dirs=known_dirs,
                                                  core_names=core_names)
            if not overwrite and recognised and not foreign:
                raise _error(f"{path}: folder exists and is not empty ({_listing(present)}); choose another "
                             "folder, or pass overwrite to replace it", remedy="overwrite")
            if not overwrite:
                raise _error(f"{path}: folder exists and is not empty, and orbitmass did not write "
                             f"{_listing(foreign or present)}; choose another folder")
            if not recognised:
                raise _error(f"{path}: not a folder orbitmass wrote (no {MARKER_NAME} marker), so it is never "
                             f"replaced; it holds {_listing(present)}; choose another folder")
            if foreign:
                raise _error(f"{path}: holds files orbitmass did not write ({_listing(foreign)}), so it is never "
                             "replaced; move them away or choose another folder")
    return resolved
