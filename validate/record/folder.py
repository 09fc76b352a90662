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
record. Every precondition (a folder, not a link, a file, a pipe or a device; no file where a
folder of the path must be; nothing in it that is not part of a record; writable, not on a
read-only file system; a name short enough for the hidden sibling; enough free space for the
expected size) is checked when the folder is opened, before any computation. Folders of the
path that had to be made are removed again when no record is written. A failure of the disk
while the record is written (full, read-only, gone) is an `OutputError` that says what `--out`
still holds, never a traceback.

`checkpoint(step)` is called before every file operation; tests replace it to interrupt the
write between any two operations (tests/test_record_folder.py).
"""

from __future__ import annotations

import contextlib
import ctypes
import errno
import os
import shutil
import stat
import tempfile
from pathlib import Path

from validate.inputs.errors import InputError

try:
    import fcntl
except ImportError:  # not a POSIX system: the lock falls back to an exclusive lock file
    fcntl = None  # type: ignore[assignment]

# what a record folder may hold; anything else is the analyst's and is never swapped away
RECORD_ENTRIES = frozenset({"results.json", "budget.csv", "report.pdf", "manifest.json", "inputs", "registers"})
# room for results.json, budget.csv and report.pdf before their size is known (the demos' records
# take about 1 MB; figures make the PDF the largest part)
RECORD_ALLOWANCE = 16 * 1024 * 1024


# the hidden siblings add ".", ".new-" and 8 random characters to the folder's name
SIBLING_EXTRA = 14


def checkpoint(step: str) -> None:
    """Called before every file operation of a write; does nothing (tests interrupt here)."""


class OutputError(InputError):
    """`--out` cannot take the record. Shown like bad input (exit 2), labelled as a problem of
    the output folder; the message says what `--out` holds."""

    kind = "output error"


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
            self._made = _make_parent(parent)
            _check_writable(parent)
            self._lock = _Lock(parent / f".{self.out.name}.lock", self.out)
            _recover(self.out)
            check_target(self.out, self.overwrite)  # again: another run may have written it meanwhile
            check_space(parent, self.expected_bytes)
            self.staging = Path(tempfile.mkdtemp(dir=parent, prefix=f".{self.out.name}.new-"))
            os.chmod(self.staging, 0o755)  # mkdtemp makes it private; a record is meant to be read
        except OSError as exc:
            self.close()
            raise OutputError(f"cannot prepare the folder for the record ({_reason(exc)}); nothing was "
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
        return OutputError(f"the record could not be written: {step} failed ({_reason(exc)}); --out holds "
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


def check_place(out: Path) -> None:
    """Refuse (OutputError) a path where no record folder can be: a link, something that is not
    a folder, a file or a broken link where a folder of the path must be, a folder that cannot
    be written or is on a read-only file system, a mount point, a name too long."""
    if out.is_symlink():
        target = os.readlink(out)
        broken = "" if out.exists() else ", which does not exist"
        raise OutputError(f"the output path is a symbolic link (to {target}{broken}); a record replaces the folder "
                          f"at --out and never follows a link", file=out,
                          fix="give a real folder with --out" + (f" (e.g. the link's target, {out.resolve()})"
                                                                 if out.is_dir() else ""))
    if out.exists() and not out.is_dir():
        raise OutputError(f"the output path exists and is {_kind(out)}, not a folder", file=out,
                          fix="choose a folder name with --out")
    if out.exists() and os.path.ismount(out):
        raise OutputError("the output path is a mount point, which cannot be replaced by a record", file=out,
                          fix="choose a folder inside it with --out")
    base = _nearest_existing(out.parent)
    if base.is_symlink() and not base.exists():
        raise OutputError(f"a folder of the output path is a symbolic link to {os.readlink(base)}, which does "
                          f"not exist", file=base, fix="make the link's target, or choose another folder with --out")
    if not base.is_dir():
        raise OutputError(f"a folder of the output path is {_kind(base)}, so no folder can be made inside it",
                          file=base, fix="choose another folder with --out")
    _check_writable(base)
    _check_name_length(out, base)


def _nearest_existing(folder: Path) -> Path:
    """`folder` or its nearest ancestor that is there (a broken link counts as there)."""
    while not os.path.lexists(folder) and folder != folder.parent:
        folder = folder.parent
    return folder


def _kind(path: Path) -> str:
    mode = path.stat().st_mode
    if stat.S_ISFIFO(mode):
        return "a named pipe"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "a file"


def _check_writable(folder: Path) -> None:
    """The folder in which the record's folders and hidden siblings will be made."""
    if _read_only(folder):
        raise OutputError("the folder that holds --out is on a read-only file system", file=folder,
                          fix="choose a folder on a writable disk with --out")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputError("the folder that holds --out is not writable", file=folder,
                          fix="choose a folder you may write in with --out")


def _read_only(folder: Path) -> bool:
    try:
        return bool(os.statvfs(folder).f_flag & os.ST_RDONLY)
    except (OSError, AttributeError):  # no statvfs (Windows): the access check below decides
        return False


def _check_name_length(out: Path, base: Path) -> None:
    try:
        limit = os.pathconf(base, "PC_NAME_MAX")
    except (OSError, ValueError, AttributeError):
        limit = 255  # the usual limit of a file name in bytes (POSIX NAME_MAX on common file systems)
    longest = limit - SIBLING_EXTRA
    if len(os.fsencode(out.name)) > longest:
        raise OutputError(f"the folder name is {len(os.fsencode(out.name))} bytes long; the limit here is "
                          f"{longest} bytes (the hidden sibling the record is built in adds {SIBLING_EXTRA})",
                          file=out.parent, fix="choose a shorter folder name with --out")


def _reason(exc: OSError) -> str:
    return exc.strerror or str(exc) or type(exc).__name__


def check_target(out: Path, overwrite: bool) -> None:
    """Refuse (OutputError) to write where the result would destroy something or cannot be written."""
    if out.is_symlink() or (out.exists() and not out.is_dir()):
        check_place(out)  # says which
    if not out.exists():
        return
    try:
        names = sorted(p.name for p in out.iterdir())
    except OSError as exc:
        raise OutputError(f"the output folder cannot be read ({_reason(exc)})", file=out,
                          fix="choose another folder with --out") from None
    foreign = [n for n in names if n not in RECORD_ENTRIES]
    if foreign:
        shown = ", ".join(foreign[:5]) + (" ..." if len(foreign) > 5 else "")
        raise OutputError(f"the folder holds files that are not part of a record ({shown}); a record "
                         f"replaces the whole folder, so it is not written here", file=out,
                         fix="choose a new or empty folder with --out, or move those files elsewhere")
    if names and not overwrite:
        raise OutputError("this folder already holds a record; it is not overwritten", file=out,
                         fix="choose another folder with --out, or add --overwrite to replace it")
    if names and not _removable(out):
        raise OutputError("the record in this folder cannot be replaced: a folder in it is not writable",
                         file=out, fix="make the folder writable, or choose another folder with --out")


def check_space(folder: Path, expected_bytes: int) -> None:
    free = shutil.disk_usage(folder).free
    if expected_bytes > free:
        raise OutputError(f"not enough free space for the record: {free / 1e6:.1f} MB free, about "
                         f"{expected_bytes / 1e6:.1f} MB needed", file=folder,
                         fix="free some space on that disk, or choose a folder on another disk with --out")


def _removable(out: Path) -> bool:
    folders = [out] + [p for p in out.rglob("*") if p.is_dir() and not p.is_symlink()]
    return all(os.access(p, os.W_OK | os.X_OK) for p in folders)


def _make_parent(parent: Path) -> list[Path]:
    """Make the folders of the path that are not there; return them, outermost first."""
    missing = []
    folder = parent
    while not os.path.lexists(folder):
        missing.append(folder)
        folder = folder.parent
    made: list[Path] = []
    for folder in reversed(missing):
        try:
            folder.mkdir()
        except OSError as exc:
            for done in reversed(made):
                with contextlib.suppress(OSError):
                    done.rmdir()
            raise OutputError(f"cannot make the folder for the record ({_reason(exc)})", file=folder,
                              fix="choose a folder you may write in with --out") from None
        made.append(folder)
    return made


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
