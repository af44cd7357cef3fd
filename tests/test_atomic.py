"""orbitmass._atomic: atomic files, strict JSON, staged folders, locks, the output-folder check.

Facts checked here are common practice, no source: POSIX rename(2) replaces a
file atomically within one file system; a file made by open() has mode 0666
less the umask; RFC 8259 (JSON) has no NaN or Infinity; SHA-256 of known
inputs from FIPS 180-4 (checked against Python's hashlib below).
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from orbitmass import RunFolderError
from orbitmass._atomic import (
    LOCK_NAME,
    MARKER_NAME,
    FolderLock,
    array_sha256,
    check_output_folder,
    check_writable,
    foreign_entries,
    json_sha256,
    read_marker,
    staged_folder,
    write_atomic,
    write_json_atomic,
    write_marker,
)


def plain_mode(folder: Path) -> int:
    (folder / "plain-probe").write_text("x")
    mode = (folder / "plain-probe").stat().st_mode & 0o777
    (folder / "plain-probe").unlink()
    return mode


def test_write_atomic_replaces_whole_file_with_normal_permissions(tmp_path):
    dest = tmp_path / "a.txt"
    dest.write_text("old")
    write_atomic(dest, "é new")
    assert dest.read_bytes() == "é new".encode()
    assert dest.stat().st_mode & 0o777 == plain_mode(tmp_path)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.txt"]  # no temporary left


def test_failed_atomic_write_keeps_the_old_file(tmp_path):
    from orbitmass._atomic import atomic_file

    dest = tmp_path / "a.txt"
    dest.write_text("old")
    with pytest.raises(RuntimeError), atomic_file(dest) as fh:
        fh.write(b"half")
        raise RuntimeError("crash while writing")
    assert dest.read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.txt"]


def test_strict_json_writes_null_for_non_finite(tmp_path):
    path = write_json_atomic({"nan": float("nan"), "inf": np.float64("-inf"), "n": np.int64(3),
                              "arr": np.array([1.5, np.nan])}, tmp_path / "s.json")
    text = path.read_text(encoding="utf-8")
    assert "NaN" not in text and "Infinity" not in text  # RFC 8259 has neither
    assert json.loads(text) == {"nan": None, "inf": None, "n": 3, "arr": [1.5, None]}


def test_checksums_follow_values_shape_and_type():
    a = np.arange(6.0)
    assert array_sha256(a) == array_sha256(a.copy())
    assert array_sha256(a) != array_sha256(a.reshape(2, 3))
    assert array_sha256(a) != array_sha256(a.astype(np.float32))
    b = a.copy()
    b[3] = np.nextafter(b[3], 10)  # one ulp
    assert array_sha256(a) != array_sha256(b)
    # the hash is SHA-256 of header + bytes (hashlib is the reference implementation)
    assert array_sha256(a) == hashlib.sha256(f"{a.dtype.str}{a.shape}".encode() + a.tobytes()).hexdigest()
    assert json_sha256({"b": 1, "a": [0.1]}) == json_sha256({"a": [0.1], "b": 1})


def test_staged_folder_swaps_in_and_failure_leaves_destination(tmp_path):
    dest = tmp_path / "out"
    with staged_folder(dest) as staging:
        (staging / "x.txt").write_text("1")
    assert (dest / "x.txt").read_text() == "1"
    assert dest.stat().st_mode & 0o777 == (0o777 & ~plain_umask(tmp_path))
    with pytest.raises(RuntimeError), staged_folder(dest) as staging:
        (staging / "y.txt").write_text("2")
        raise RuntimeError("crash")
    assert sorted(p.name for p in dest.iterdir()) == ["x.txt"]
    with staged_folder(dest) as staging:
        (staging / "z.txt").write_text("3")
    assert sorted(p.name for p in dest.iterdir()) == ["z.txt"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]  # no staging or old folder left


def plain_umask(folder: Path) -> int:
    return 0o666 & ~plain_mode(folder)


def test_marker_and_foreign_entries(tmp_path):
    run = tmp_path / "run"
    (run / "input").mkdir(parents=True)
    (run / "summary.json").write_text("{}")
    (run / "input" / "t.toml").write_text("x")
    write_marker(run, "run", files=["summary.json", "input/t.toml"])
    assert read_marker(run)["files"] == ["input/t.toml", "summary.json"]
    kw = dict(kind="run", known_names={"summary.json", "report.md"}, known_dirs={"input"}, core_names=("summary.json",))
    assert foreign_entries(run, **kw) == (True, [])
    (run / "thesis.pdf").write_bytes(b"%PDF")
    (run / "raw").mkdir()
    (run / "raw" / "a.fits").write_bytes(b"x")
    (run / "input" / "mine.txt").write_text("user")
    (run / ".summary.json.ab12.tmp").write_text("")  # leftover of an interrupted atomic write: ours
    assert foreign_entries(run, **kw) == (True, ["input/mine.txt", "raw/", "thesis.pdf"])
    # a folder without a marker is recognised only by a core file
    other = tmp_path / "other"
    other.mkdir()
    (other / "report.md").write_text("my own report")
    assert foreign_entries(other, **kw) == (False, [])


def test_check_output_folder_refusals(tmp_path, monkeypatch):
    kw = dict(kind="run", known_names={"summary.json"}, core_names=("summary.json",))
    new = check_output_folder(tmp_path / "new" / "deeper", **kw)
    assert new == (tmp_path / "new" / "deeper").resolve()
    user = tmp_path / "user"
    user.mkdir()
    (user / "notes.txt").write_text("x")
    with pytest.raises(RunFolderError, match="not empty") as err:
        check_output_folder(user, **kw)
    assert err.value.remedy is None  # passing overwrite would not help: not ours
    with pytest.raises(RunFolderError, match=r"not a folder orbitmass wrote.*notes\.txt"):
        check_output_folder(user, overwrite=True, **kw)
    ours = tmp_path / "ours"
    ours.mkdir()
    (ours / "summary.json").write_text("{}")
    with pytest.raises(RunFolderError, match="pass overwrite") as err:
        check_output_folder(ours, **kw)
    assert err.value.remedy == "overwrite"
    assert check_output_folder(ours, overwrite=True, **kw) == ours.resolve()
    with pytest.raises(RunFolderError, match="an input of this job"):
        check_output_folder(user, overwrite=True, protected=[user / "notes.txt"], **kw)
    a_file = tmp_path / "file.txt"
    a_file.write_text("x")
    with pytest.raises(RunFolderError, match="exists and is not a folder"):
        check_output_folder(a_file, **kw)
    with pytest.raises(RunFolderError, match="is a file, not a folder"):
        check_output_folder(a_file / "run", **kw)
    link = tmp_path / "link"
    link.symlink_to(ours)
    with pytest.raises(RunFolderError, match="symbolic link"):
        check_output_folder(link, overwrite=True, **kw)
    work = tmp_path / "work" / "sub"
    work.mkdir(parents=True)
    monkeypatch.chdir(work)
    for place, why in ((".", "working directory"), ("..", "contains the working directory"),
                       ("/", "root of the file system")):
        with pytest.raises(RunFolderError, match=why):
            check_output_folder(place, overwrite=True, **kw)
    monkeypatch.setenv("HOME", str(tmp_path / "user"))
    with pytest.raises(RunFolderError, match="home folder"):
        check_output_folder(tmp_path / "user", overwrite=True, **kw)


def test_library_errors_do_not_name_command_line_flags(tmp_path):
    (tmp_path / "user").mkdir()
    (tmp_path / "user" / "a").write_text("x")
    messages = []
    for kwargs in ({}, {"overwrite": True}):
        with pytest.raises(RunFolderError) as err:
            check_output_folder(tmp_path / "user", **kwargs)
        messages.append(str(err.value))
    assert all("--" not in m for m in messages), messages


def test_check_writable_reports_read_only_folder(tmp_path):
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o555)
    try:
        can_write = True
        try:
            (ro / "probe").write_text("x")
            (ro / "probe").unlink()
        except PermissionError:
            can_write = False
        if can_write:
            pytest.skip("running as root (or with CAP_DAC_OVERRIDE): chmod 0555 does not stop writes; "
                        "the path-under-a-file tests cover the refusal instead")
        with pytest.raises(RunFolderError, match="read-only"):
            check_writable(ro)
        with pytest.raises(RunFolderError, match="read-only"):
            check_writable(ro / "new")
    finally:
        ro.chmod(0o755)


def test_lock_one_writer_and_release(tmp_path):
    folder = tmp_path / "f"
    folder.mkdir()
    lock = FolderLock.acquire(folder)
    assert lock.held() and (folder / LOCK_NAME).is_file()
    with pytest.raises(RunFolderError, match=r"another orbitmass process \(pid \d+"):
        FolderLock.acquire(folder)
    assert lock.held()  # the failed attempt did not disturb the holder
    lock.release()
    assert not (folder / LOCK_NAME).exists()
    with FolderLock.acquire(folder) as again:
        assert again.held()
    assert not (folder / LOCK_NAME).exists()


def test_stale_lock_is_reported_not_stolen(tmp_path):
    folder = tmp_path / "f"
    folder.mkdir()
    proc = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True,
                          check=True)
    dead = int(proc.stdout)  # that process has exited
    import socket

    (folder / LOCK_NAME).write_text(json.dumps({"pid": dead, "host": socket.gethostname(),
                                                "created_utc": "2026-01-01T00:00:00+00:00", "token": "x"}))
    with pytest.raises(RunFolderError, match="stale lock") as err:
        FolderLock.acquire(folder)
    assert str(folder / LOCK_NAME) in str(err.value) and "remove that file" in str(err.value)
    assert json.loads((folder / LOCK_NAME).read_text())["token"] == "x"  # left in place


def test_created_folder_left_empty_is_removed_on_release(tmp_path):
    folder = tmp_path / "f"
    folder.mkdir()
    write_marker(folder, "run")
    lock = FolderLock.acquire(folder, created=True)
    lock.release()
    assert not folder.exists()
    assert MARKER_NAME == ".orbitmass-run"


@pytest.mark.parametrize("code, words", [(errno.EROFS, "read-only file system"), (errno.EACCES, "read-only")])
def test_check_writable_tries_a_file_and_names_the_reason(tmp_path, monkeypatch, code, words):
    # root ignores permission bits, so the refusal is simulated at os.open (what a read-only mount or
    # a folder without write permission makes it raise: EROFS / EACCES, POSIX open(2))
    real_open = os.open

    def refusing_open(path, *args, **kwargs):
        if "write-probe" in str(path):
            raise OSError(code, os.strerror(code), str(path))
        return real_open(path, *args, **kwargs)

    monkeypatch.setattr("orbitmass._atomic.os.open", refusing_open)
    with pytest.raises(RunFolderError, match=words):
        check_writable(tmp_path)
    with pytest.raises(RunFolderError, match=f"cannot be created in {tmp_path}: .*{words}"):
        check_writable(tmp_path / "new" / "run")
