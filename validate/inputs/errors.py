"""The one error type for bad input: it names the file, the place and the fix."""

from __future__ import annotations


class InputError(Exception):
    """A problem with the user's input. Printed without a traceback; exit code 2."""

    kind = "input error"  # how the command labels it (a subclass may say more exactly what failed)

    def __init__(self, what: str, *, file=None, where: str | None = None, fix: str | None = None):
        self.what = what
        self.file = str(file) if file is not None else None
        self.where = where
        self.fix = fix
        super().__init__(self.message())

    def message(self) -> str:
        place = ""
        if self.file:
            place = self.file
            if self.where:
                place += f", {self.where}"
            place += ": "
        elif self.where:
            place = f"{self.where}: "
        text = f"{place}{self.what}"
        if self.fix:
            text += f"\n  what to do: {self.fix}"
        return text
