"""The preconditions of a record folder, checked before any computation, and the error for
an output folder that cannot take the record (validate.record.folder writes it).

`--out` must be a folder or not there yet: not a link, a file, a pipe or a device; no file or
broken link where a folder of its path must be; nothing in it that is not part of a record
(a record replaces the whole folder) and, without --overwrite, no record; the folder above
writable and not on a read-only file system; a name short enough for the hidden siblings the
record is built in; enough free space for the expected size. Each refusal says why.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import stat
from pathlib import Path

from validate.inputs.errors import InputError

# what a record folder may hold; anything else is the analyst's and is never swapped away
RECORD_ENTRIES = frozenset({"results.json", "budget.csv", "report.pdf", "manifest.json", "inputs", "registers"})
# room for results.json, budget.csv and report.pdf before their size is known (the demos' records
# take about 1 MB; figures make the PDF the largest part)
RECORD_ALLOWANCE = 16 * 1024 * 1024


# the hidden siblings add ".", ".new-" and 8 random characters to the folder's name
SIBLING_EXTRA = 14


class OutputError(InputError):
    """`--out` cannot take the record. Shown like bad input (exit 2), labelled as a problem of
    the output folder; the message says what `--out` holds."""

    kind = "output error"


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
    check_writable(base)
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


def check_writable(folder: Path) -> None:
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


def reason_of(exc: OSError) -> str:
    return exc.strerror or str(exc) or type(exc).__name__


def check_target(out: Path, overwrite: bool) -> None:
    """Refuse (OutputError) to write where the result would destroy something or cannot be written."""
    if out.is_symlink() or (out.exists() and not out.is_dir()):
        check_place(out)  # says which
    if not out.exists():
        return
    names = _record_entries(out)
    if names and not overwrite:
        raise OutputError("this folder already holds a record; it is not overwritten", file=out,
                         fix="choose another folder with --out, or add --overwrite to replace it")
    if names and not _removable(out):
        raise OutputError("the record in this folder cannot be replaced: a folder in it is not writable",
                         file=out, fix="make the folder writable, or choose another folder with --out")


def _record_entries(out: Path) -> list[str]:
    """What the folder holds, refused when anything in it is not part of a record."""
    try:
        names = sorted(p.name for p in out.iterdir())
    except OSError as exc:
        raise OutputError(f"the output folder cannot be read ({reason_of(exc)})", file=out,
                          fix="choose another folder with --out") from None
    foreign = [n for n in names if n not in RECORD_ENTRIES]
    if foreign:
        shown = ", ".join(foreign[:5]) + (" ..." if len(foreign) > 5 else "")
        raise OutputError(f"the folder holds files that are not part of a record ({shown}); a record "
                          f"replaces the whole folder, so it is not written here", file=out,
                          fix="choose a new or empty folder with --out, or move those files elsewhere")
    return names


def check_space(folder: Path, expected_bytes: int) -> None:
    free = shutil.disk_usage(folder).free
    if expected_bytes > free:
        raise OutputError(f"not enough free space for the record: {free / 1e6:.1f} MB free, about "
                         f"{expected_bytes / 1e6:.1f} MB needed", file=folder,
                         fix="free some space on that disk, or choose a folder on another disk with --out")


def _removable(out: Path) -> bool:
    folders = [out] + [p for p in out.rglob("*") if p.is_dir() and not p.is_symlink()]
    return all(os.access(p, os.W_OK | os.X_OK) for p in folders)


def make_parents(parent: Path) -> list[Path]:
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
            raise OutputError(f"cannot make the folder for the record ({reason_of(exc)})", file=folder,
                              fix="choose a folder you may write in with --out") from None
        made.append(folder)
    return made
