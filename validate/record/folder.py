"""A record folder written as one transaction.

The whole record (results.json, budget.csv, report.pdf, the copies of the inputs and registers,
manifest.json) is built in a hidden sibling folder (`.NAME.new-XXXX` beside `--out`) and then
swapped into place, so `--out` holds either the complete old record or the complete new one:

- on Linux the two folders are exchanged by one renameat2(RENAME_EXCHANGE) call, atomic at
  every instant; the old record, now under the hidden name, is then deleted;
- where the system has no atomic exchange, the old folder is renamed aside and the new one
  renamed into place; should the process die between these two renames, the next run into the
  same `--out` puts the old record back before doing anything else.

A lock file beside the folder (`.NAME.lock`, held with flock) makes a second writer into the
same `--out` fail at once with a clear message instead of silently replacing the first one's
record. Every precondition (validate.record.output_checks) is checked when the folder is
opened, before any computation. Folders of the path that had to be made are removed again
when no record is written. A failure of the disk while the record is written (full,
read-only, gone) is an `OutputError` that says what `--out` still holds, never a traceback.

`checkpoint(step)` is called before every file operation; tests replace it to interrupt the
write between any two operations (tests/test_record_folder.py).
"""

from __future__ import annotations

import contextlib
import ctypes
import errno
import os
import shutil
import tempfile
from pathlib import Path

from validate.record.output_checks import (
    OutputError,
    check_place,
    check_space,
    check_target,
    check_writable,
    make_parents,
    reason_of,
)

try:
    import fcntl
except ImportError:  # not a POSIX system: the lock falls back to an exclusive lock file
    fcntl = None  # type: ignore[assignment]


def checkpoint(step: str) -> None:
    """Called before every file operation of a write; does nothing (tests interrupt here)."""


class OutputFolder:
    """`--out` opened for one record: checked, locked and staged; `commit()` swaps it into place.

        with OutputFolder(out, overwrite, expected_bytes) as target:
            ... compute ...
            target.write("results.json", data)
            target.commit()
    """

    def __init__(self, out, overwrite: bool = False, expected_bytes: int = 0):
        self.out = Path(os.path.abspath(out))
        self.overwrite = overwrite
        self.expected_bytes = expected_bytes
        self.staging: Path | None = None
        self.committed = False
        self._lock: _Lock | None = None
        self._made: list[Path] = []  # folders of the path made for this record, outermost first

    # ---- opening: every precondition before any computation ----

    def __enter__(self) -> OutputFolder:
        self.open()
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def open(self) -> None:
        check_place(self.out)
        check_target(self.out, self.overwrite)
        parent = self.out.parent
        try:
            self._made = make_parents(parent)
            check_writable(parent)
            self._lock = _Lock(parent / f".{self.out.name}.lock", self.out)
            _recover(self.out)
            check_target(self.out, self.overwrite)  # again: another run may have written it meanwhile
            check_space(parent, self.expected_bytes)
            self.staging = Path(tempfile.mkdtemp(dir=parent, prefix=f".{self.out.name}.new-"))
            os.chmod(self.staging, 0o755)  # mkdtemp makes it private; a record is meant to be read
        except OSError as exc:
            self.close()
            raise OutputError(f"cannot prepare the folder for the record ({reason_of(exc)}); nothing was "
                              f"written", file=self.out, fix="choose a folder you may write in with --out") from None
        except BaseException:
            self.close()
            raise

    def close(self) -> None:
        if self.staging is not None and self.staging.exists():
            shutil.rmtree(self.staging, ignore_errors=True)
        self.staging = None
        if self._lock is not None:
            self._lock.release()
            self._lock = None
        if not self.committed:  # the folders made for a record that was not written
            for folder in reversed(self._made):
                with contextlib.suppress(OSError):
                    folder.rmdir()
        self._made = []

    def failed(self, exc: OSError, step: str) -> OutputError:
        """The message for a write that failed (`step`: what was being done); --out is as it was."""
        held = "the old record, unchanged" if self.out.exists() else "nothing (no record was written)"
        return OutputError(f"the record could not be written: {step} failed ({reason_of(exc)}); --out holds "
                           f"{held}", file=self.out,
                           fix="free some space or fix the disk, or choose another folder with --out, "
                               "then run again")

    # ---- staging the files ----

    @property
    def staged(self) -> Path:
        """The hidden folder the new record is built in."""
        if self.staging is None:
            raise RuntimeError("the output folder is not open")
        return self.staging

    def reserve(self, name: str) -> Path:
        """Where `name` (relative, e.g. "inputs/readings.csv") goes in the staged record; its folder is made."""
        checkpoint(name)
        target = self.staged / name
        try:
            target.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise self.failed(exc, f"making the folder for {name}") from None
        return target

    def write(self, name: str, data: bytes) -> Path:
        target = self.reserve(name)
        try:
            with open(target, "wb") as out:
                out.write(data)
                out.flush()
                os.fsync(out.fileno())
            os.chmod(target, 0o644)
        except OSError as exc:
            raise self.failed(exc, f"writing {name}") from None
        return target

    # ---- the swap ----

    def commit(self) -> None:
        """Swap the staged record into place: `--out` holds the old or the new record at every instant."""
        if self.staging is None:
            raise RuntimeError("the output folder is not open")
        checkpoint("sync")
        _sync_tree(self.staging)
        checkpoint("swap")
        try:
            old = _swap(self.staging, self.out)
        except OSError as exc:  # _swap leaves the old record in place when it fails
            raise self.failed(exc, "moving the new record into place") from None
        self.committed = True
        _sync_dir(self.out.parent)
        if old is not None:
            checkpoint("remove old record")
            shutil.rmtree(old, ignore_errors=True)
        self.staging = None


# ---- the lock ----

class _Lock:
    """An exclusive lock on `.NAME.lock` beside the record; released (and the file removed) on exit."""

    def __init__(self, path: Path, out: Path):
        self.path = path
        self.fd: int | None = None
        try:
            self.fd = _acquire(path)
        except (BlockingIOError, FileExistsError):
            raise OutputError("another run is writing a record into this folder right now", file=out,
                             fix="wait for it to finish, or choose another folder with --out"
                                 + ("" if fcntl is not None else f"; if no run is active, delete {path}")) from None
        except PermissionError:
            raise OutputError("the folder that holds --out is not writable", file=path.parent,
                             fix="choose a folder you may write in with --out") from None

    def release(self) -> None:
        if self.fd is None:
            return
        with contextlib.suppress(OSError):
            os.unlink(self.path)  # still locked here: a waiting writer then finds a new file
        os.close(self.fd)
        self.fd = None


def _acquire(path: Path) -> int:
    if fcntl is None:
        return os.open(path, os.O_RDWR | os.O_CREAT | os.O_EXCL, 0o644)
    for _ in range(3):  # the file may be removed by the previous holder between open and flock
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BaseException:
            os.close(fd)
            raise
        with contextlib.suppress(FileNotFoundError):
            if os.fstat(fd).st_ino == os.stat(path).st_ino:
                return fd
        os.close(fd)
    raise BlockingIOError(errno.EWOULDBLOCK, "lock file keeps changing")


# ---- renames ----

_AT_FDCWD = -100
_RENAME_EXCHANGE = 2


def _exchange(a: Path, b: Path) -> bool:
    """Swap two folders atomically (Linux renameat2); False where the system cannot."""
    libc = ctypes.CDLL(None, use_errno=True)
    renameat2 = getattr(libc, "renameat2", None)
    if renameat2 is None:
        return False
    if renameat2(_AT_FDCWD, os.fsencode(a), _AT_FDCWD, os.fsencode(b), _RENAME_EXCHANGE) == 0:
        return True
    code = ctypes.get_errno()
    if code in (errno.ENOSYS, errno.EINVAL, errno.ENOTSUP):
        return False
    raise OSError(code, os.strerror(code), str(a), None, str(b))


def _swap(staging: Path, out: Path) -> Path | None:
    """Put `staging` at `out`; return where the old record now is (None when there was none)."""
    if not out.exists():
        os.rename(staging, out)
        return None
    if _exchange(staging, out):
        return staging
    aside = Path(tempfile.mkdtemp(dir=out.parent, prefix=f".{out.name}.old-"))
    os.rmdir(aside)
    os.rename(out, aside)
    try:
        checkpoint("swap, second rename")
        os.rename(staging, out)
    except BaseException:
        os.rename(aside, out)  # the old record back in place at once
        raise
    return aside


def _recover(out: Path) -> None:
    """Under the lock: put back an old record left aside by an interrupted swap, and remove
    the hidden folders of interrupted writes."""
    parent = out.parent
    aside = sorted(parent.glob(f".{out.name}.old-*"))
    if not out.exists() and aside:
        os.rename(aside.pop(), out)
    for stale in aside + sorted(parent.glob(f".{out.name}.new-*")):
        shutil.rmtree(stale, ignore_errors=True)


def _sync_tree(folder: Path) -> None:
    for directory, _, _ in os.walk(folder):
        _sync_dir(Path(directory))


def _sync_dir(folder: Path) -> None:
    """Make renames and new files in `folder` durable (a no-op where folders cannot be opened)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
