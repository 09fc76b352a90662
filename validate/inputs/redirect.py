"""Where the loader reads the files a method file names, when they are not to be read from
the places the method file gives.

Re-running a filed record must read only the copies kept in the record's folder: a readings
table named by an absolute path, or the package's built-in registers (which change with the
installed version), would otherwise be read from outside the record. The record stage
supplies an object of this shape; the loader asks it for every file it opens.
"""

from __future__ import annotations

from pathlib import Path
from typing import Protocol


class Redirect(Protocol):
    def locate(self, path: Path, what: str) -> Path:
        """The file to read for `path` as the method file names it (`what`: e.g. "readings table");
        raises InputError when there is none."""
        ...

    @property
    def builtin_registers(self) -> tuple[Path, ...]:
        """The register files to use in place of the package's built-in ones."""
        ...
