"""The copies of the inputs kept in a record folder, and reading them back for a re-run.

Layout: the method file, its readings table and the laboratory's registers go under
`inputs/`, keeping their folders relative to one another (so a stored method still finds its
readings table by the relative name it gives); the built-in registers that were loaded go
under `registers/`. A re-run of a filed record reads only these copies (`StoredCopies`): a
file named by an absolute path is found by the path the record holds for it, and a name that
leads to no stored copy is refused, never read from outside the folder.
"""

from __future__ import annotations

import dataclasses
import hashlib
import os
from pathlib import Path, PurePosixPath

from validate.inputs.errors import InputError
from validate.inputs.readings import read_bounded_bytes
from validate.inputs.registers import default_register_files
from validate.record.build import BUILTIN_REGISTER, METHOD_FILE
from validate.record.manifest import check_inside
from validate.record.types import InputFile, Record

INPUTS_FOLDER = "inputs"
REGISTERS_FOLDER = "registers"
RECORD_FILE = "results.json"


def stored_names(entries: tuple[InputFile, ...]) -> list[str]:
    """Where each input's copy goes, relative to the record folder (same order)."""
    local = [Path(e.path).resolve() for e in entries if e.role != BUILTIN_REGISTER]
    base = Path(os.path.commonpath([str(p.parent) for p in local])) if local else Path("/")
    names = []
    for entry in entries:
        if entry.role == BUILTIN_REGISTER:
            names.append(f"{REGISTERS_FOLDER}/{PurePosixPath(entry.path).name}")
        else:
            resolved = Path(entry.path).resolve()
            names.append((PurePosixPath(INPUTS_FOLDER) / resolved.relative_to(base).as_posix()).as_posix())
    return names


def with_stored_names(record: Record) -> Record:
    inputs = tuple(dataclasses.replace(entry, stored=name)
                   for entry, name in zip(record.inputs, stored_names(record.inputs), strict=True))
    return dataclasses.replace(record, inputs=inputs)


def copy_bytes(entry: InputFile) -> bytes:
    """The bytes to store for an input; refused when the file changed since it was analysed
    (read with the inputs' own bounds: a file swapped for a pipe meanwhile would hang the write).
    A built-in register, named by its stable name, is read from the package's register folder."""
    path = _builtin_file(entry.path) if entry.role == BUILTIN_REGISTER else Path(entry.path)
    if not path.exists():
        raise InputError("cannot read the input again to store its copy (it is gone)", file=entry.path,
                         fix="leave the input files in place until the run has finished")
    data = read_bounded_bytes(path, "the input")
    if hashlib.sha256(data).hexdigest() != entry.sha256:
        raise InputError("the file changed while the run was in progress; the record is not written",
                         file=entry.path, fix="run the method again once the file is no longer being edited")
    return data


def _builtin_file(name: str) -> Path:
    """The installed file behind a built-in register's stable name (`builtin_register_name`)."""
    wanted = PurePosixPath(name).name
    found = [p for p in default_register_files() if p.name == wanted]
    if not found:
        raise InputError("the built-in register is no longer installed", file=name,
                         fix="run the method again with the installed version of validate")
    return found[0]


class StoredCopies:
    """The files a filed record's method names, found among the record's own copies
    (the loader's `validate.inputs.redirect.Redirect`)."""

    def __init__(self, folder: Path, inputs: tuple[InputFile, ...]):
        listed_in = folder / RECORD_FILE
        copies = [(entry, check_inside(folder, entry.stored or "", listed_in)) for entry in inputs]
        self.folder = folder
        self.method_file = next((copy for entry, copy in copies if entry.role == METHOD_FILE), copies[0][1])
        self._by_place = {str(copy.resolve()): copy for _, copy in copies}
        self._by_original = {entry.path: copy for entry, copy in copies if Path(entry.path).is_absolute()}
        self._builtin = tuple(copy for entry, copy in copies if entry.role == BUILTIN_REGISTER)

    @property
    def builtin_registers(self) -> tuple[Path, ...]:
        return self._builtin

    def locate(self, path: Path, what: str) -> Path:
        found = self._by_place.get(str(Path(path).resolve())) or self._by_original.get(str(path))
        if found is None:
            raise InputError(f"the stored method names a {what} that is not among the record's stored copies: "
                             f"{path}", file=self.method_file,
                             fix="a record is re-run only from its own copies; run the method again from the "
                                 "original files to make a complete record")
        return found
