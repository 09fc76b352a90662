"""Text taken from input files, checked once at the boundary.

Ids, keys and units are compared with one another (a reading's id against a standard's, a
formula's names against the quantities), so they are normalised once, by Unicode NFKC
(Unicode Standard Annex #15), with the Greek small mu read as the micro sign the unit table
uses. Characters that cannot be seen (control, format and private-use characters such as a
byte-order mark, a zero-width space or a bidirectional override) would make two ids that look
equal differ, or hide text on a terminal: they are refused, and the message shows them escaped.
Sizes are bounded so that a runaway file stops with a message that gives the limit.
"""

from __future__ import annotations

import unicodedata

from validate.inputs.errors import InputError

MAX_ID_LENGTH = 64  # characters in an id or key: room for a descriptive name, fits a table cell
MAX_TEXT_LENGTH = 2000  # characters in a free text (title, description, provenance)
MAX_NESTING = 8  # tables and lists inside one another in a method file; the format needs 4
# Free texts are kept as written (NFKC would turn "cm²" into "cm2" in a description);
# they are still checked for invisible characters and length.
FREE_TEXT_KEYS = frozenset({"title", "measurand", "scope", "description", "provenance", "step"})
_INVISIBLE = frozenset({"Cc", "Cf", "Co", "Cs", "Cn", "Zl", "Zp"})
_ALLOWED_IN_TEXT = frozenset("\t\n")


def escaped(text: str) -> str:
    """The text with every invisible or control character written as a \\u escape."""
    return "".join(f"\\u{ord(c):04x}" if is_invisible(c) else c for c in text)


def is_invisible(char: str) -> bool:
    """A control, format, private-use, unassigned or line/paragraph-separator character."""
    return unicodedata.category(char) in _INVISIBLE


def trimmed(cell: str) -> str:
    """A table cell without the spaces and tabs around it. Only these: str.strip would also drop
    invisible separators (U+2028, U+0085, U+001C ...) at the ends of an id without a word,
    which must reach the id check instead."""
    return cell.strip(" \t")


def normal_id(text: str) -> str:
    """NFKC, with the Greek mu the micro sign (so "μL" and "µL" are one unit)."""
    return unicodedata.normalize("NFKC", text).replace("\u03bc", "\u00b5")


def clean_id(text: str, *, file=None, where: str | None = None, what: str = "id") -> str:
    """An id or key normalised (NFKC), or InputError when it holds an invisible character or
    is longer than MAX_ID_LENGTH."""
    bad = [c for c in text if is_invisible(c)]
    if bad:
        raise InputError(f"the {what} '{escaped(text)}' holds an invisible or control character "
                         f"({', '.join(dict.fromkeys(f'U+{ord(c):04X}' for c in bad))})", file=file, where=where,
                         fix="retype the id; a copy from a word processor or a web page can carry such "
                             "characters")
    if len(text) > MAX_ID_LENGTH:
        raise InputError(f"the {what} '{text[:20]}...' is {len(text)} characters long; the limit is "
                         f"{MAX_ID_LENGTH}", file=file, where=where, fix="give a shorter id")
    return normal_id(text)


def clean_text(text: str, *, file=None, where: str | None = None) -> str:
    """A free text as written, or InputError when it holds an invisible or control character
    (a tab and a line break are allowed) or is longer than MAX_TEXT_LENGTH."""
    bad = [c for c in text if is_invisible(c) and c not in _ALLOWED_IN_TEXT]
    if bad:
        raise InputError(f"the text '{escaped(text)[:80]}' holds an invisible or control character "
                         f"({', '.join(dict.fromkeys(f'U+{ord(c):04X}' for c in bad))})", file=file, where=where,
                         fix="retype the text without it")
    if len(text) > MAX_TEXT_LENGTH:
        raise InputError(f"the text is {len(text)} characters long; the limit is {MAX_TEXT_LENGTH}",
                         file=file, where=where, fix="shorten it; a reference to a document can replace a long text")
    return text


def clean_document(data: dict, file) -> dict:
    """A parsed method file with every key and id normalised and every text checked; nesting
    deeper than MAX_NESTING is refused."""
    return _clean_table(data, file, "", 0)


def _place(label: str, key: str) -> str:
    return f"{label}.{key}" if label else f"[{key}]"


def _clean_table(table: dict, file, label: str, depth: int) -> dict:
    if depth > MAX_NESTING:
        raise InputError(f"tables and lists are nested more than {MAX_NESTING} deep", file=file,
                         where=label or None, fix="write the method file as its template shows")
    out = {}
    for key, value in table.items():
        clean = clean_id(key, file=file, where=_place(label, escaped(key)), what="key")
        if clean in out:
            raise InputError(f"the key `{clean}` appears twice once its characters are normalised",
                             file=file, where=_place(label, clean), fix="keep one of the two")
        out[clean] = _clean_value(value, file, _place(label, clean), depth + 1, clean in FREE_TEXT_KEYS)
    return out


def _clean_value(value, file, where: str, depth: int, free_text: bool):
    if isinstance(value, dict):
        return _clean_table(value, file, where, depth)
    if isinstance(value, list):
        if depth > MAX_NESTING:
            raise InputError(f"tables and lists are nested more than {MAX_NESTING} deep", file=file,
                             where=where, fix="write the method file as its template shows")
        return [_clean_value(v, file, where, depth + 1, free_text) for v in value]
    if isinstance(value, str):
        if free_text:
            return clean_text(value, file=file, where=where)
        clean_text(value, file=file, where=where)  # invisible characters and length, with their message
        return normal_id(value)
    return value
