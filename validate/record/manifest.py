"""manifest.json: the SHA-256 of every file of a record folder and the record's content hash.

The content hash is the SHA-256 of results.json as written, without its run metadata (the
`run` block: record id and date, which differ between any two runs by design). The same
inputs, seed and software version give the same content hash; it is printed on page 1 of the
PDF and by `validate verify`, so a paper copy can be matched with its record.
"""

from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass
from pathlib import Path

from validate.inputs.errors import InputError
from validate.record.files import json_bytes, members_json, read_json_file, sha256_of
from validate.record.tree import RecordPart, RecordShapeError, described

MANIFEST_FILE = "manifest.json"
MANIFEST_VERSION = "1.0"
RUN_METADATA = "run"


def content_hash(record: dict) -> str:
    """SHA-256 of the record's JSON form as results.json holds it, without the run metadata."""
    return hashlib.sha256(json_bytes({k: v for k, v in record.items() if k != RUN_METADATA})).hexdigest()


def content_hash_of_members(members: dict[str, str]) -> str:
    """content_hash from the record's members as json_members gives them (no second serialisation)."""
    return hashlib.sha256(members_json(members, frozenset({RUN_METADATA}))).hexdigest()


@dataclass(frozen=True, kw_only=True)
class ManifestEntry(RecordPart):
    path: str = described("relative to the record folder, with forward slashes")
    sha256: str
    size: int = described("in bytes")


@dataclass(frozen=True, kw_only=True)
class Manifest(RecordPart):
    """The files of one record folder (every file but manifest.json itself)."""

    manifest_version: str
    content_hash: str = described("SHA-256 of results.json without its `run` block")
    files: tuple[ManifestEntry, ...]

    def to_json(self) -> bytes:
        return json_bytes(self.to_dict())


def files_of(folder: Path) -> list[str]:
    """Every file under `folder` but the manifest, relative, in a fixed order."""
    return sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*")
                  if (p.is_file() or p.is_symlink()) and p.relative_to(folder).as_posix() != MANIFEST_FILE)


def make_manifest(folder: Path, record: dict, known_hash: str | None = None) -> Manifest:
    """The manifest of `folder`; `known_hash`: the record's content hash when already computed."""
    entries = tuple(ManifestEntry(path=name, sha256=sha256_of(folder / name), size=(folder / name).stat().st_size)
                    for name in files_of(folder))
    return Manifest(manifest_version=MANIFEST_VERSION, content_hash=known_hash or content_hash(record),
                    files=entries)


def read_manifest(folder: Path) -> Manifest | None:
    """The folder's manifest; None when there is none (a record written before manifests)."""
    path = folder / MANIFEST_FILE
    if not os.path.lexists(path):
        return None
    fix = "the file was damaged or edited by hand; restore the folder from the archive"
    try:
        manifest = Manifest.from_dict(read_json_file(path, "manifest.json", fix))
    except RecordShapeError as exc:
        raise InputError(f"manifest.json is not readable ({exc})", file=path, fix=fix) from None
    except OSError as exc:
        raise InputError(f"manifest.json cannot be read ({exc.strerror})", file=path, fix=fix) from None
    for entry in manifest.files:
        check_inside(folder, entry.path, path)
    return manifest


def check_inside(folder: Path, name: str, listed_in: Path) -> Path:
    """`folder / name`, refused (InputError) when `name` leads out of the folder."""
    relative = Path(name)
    target = folder / relative
    inside = (not relative.is_absolute() and ".." not in relative.parts and name != ""
              and _within(target.resolve(), folder.resolve()))
    if not inside:
        raise InputError(f"the record names a file outside its folder: {name!r}", file=listed_in,
                         fix="a record is checked only from its own files; restore the folder from the archive")
    return target


def _within(path: Path, folder: Path) -> bool:
    return path == folder or folder in path.parents


@dataclass(frozen=True)
class FileCheck:
    """One file of the folder against the manifest: state "unchanged", "changed", "missing" or "not listed"."""

    path: str
    state: str

    def to_dict(self) -> dict:
        return {"path": self.path, "state": self.state}


def check_files(folder: Path, manifest: Manifest) -> tuple[FileCheck, ...]:
    """Every listed file against its size and SHA-256, every file present but not listed, and
    manifest.json itself against the bytes its content gives (it cannot list its own hash, but
    the one JSON writer gives one text for one content, so an edit of its layout shows too)."""
    own = folder / MANIFEST_FILE
    same = own.is_file() and own.stat().st_size == len(manifest.to_json()) and own.read_bytes() == manifest.to_json()
    checks = [FileCheck(MANIFEST_FILE, "unchanged" if same else "changed")]
    for entry in manifest.files:
        target = folder / entry.path
        if not target.is_file():
            checks.append(FileCheck(entry.path, "missing"))
            continue
        same = target.stat().st_size == entry.size and sha256_of(target) == entry.sha256
        checks.append(FileCheck(entry.path, "unchanged" if same else "changed"))
    listed = {entry.path for entry in manifest.files}
    checks += [FileCheck(name, "not listed") for name in files_of(folder) if name not in listed]
    return tuple(checks)
