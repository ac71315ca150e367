"""Checks of the arguments given from Python, before they cross into the native library.

Each check names the argument and says what was expected. ctypes would otherwise turn a wrong
type into a bare ``ctypes.ArgumentError``, ``True`` into the index 1, and cut an id at its first
NUL character.
"""

from __future__ import annotations

import math
import numbers
import operator
import unicodedata

from .errors import ArgumentTypeError, ElementIndexError, InvalidValueError

__all__ = ["ArgumentTypeError", "choice", "flag", "index", "optional_real", "real", "text_id"]

#: Characters refused in ids besides control characters: they change how the text is shown
#: (bidirectional overrides and isolates, which can make an id read as another one) or are not
#: shown at all (zero-width characters, the byte-order mark, the soft hyphen).
_INVISIBLE = {
    "\u00ad",  # soft hyphen
    "\u034f",  # combining grapheme joiner
    "\u061c",  # Arabic letter mark
    "\u115f",
    "\u1160",  # Hangul fillers
    "\u17b4",
    "\u17b5",
    "\u180e",  # Mongolian vowel separator
    "\u3164",  # Hangul filler
    "\ufeff",  # byte-order mark / zero-width no-break space
    "\uffa0",
}


def _bad_char(text: str) -> str | None:
    """A description of the first character an id must not contain, or None."""
    for position, ch in enumerate(text):
        if ch == "\x00":
            return f"a NUL character at position {position}"
        category = unicodedata.category(ch)
        # Cc: control characters; Cf: format characters (bidirectional overrides U+202A-U+202E,
        # isolates U+2066-U+2069, zero-width joiners U+200B-U+200F...); Zl/Zp: line and paragraph
        # separators; Co/Cn: private-use and unassigned code points.
        if category in ("Cc", "Cf", "Zl", "Zp", "Co", "Cn", "Cs") or ch in _INVISIBLE:
            name = unicodedata.name(ch, "unnamed character")
            return f"the invisible or control character U+{ord(ch):04X} ({name}) at position {position}"
    return None


def text_id(value: object, argument: str) -> bytes:
    """An id argument as UTF-8 bytes for the library; refuses non-strings, NUL characters,
    control characters and invisible or bidirectional-override characters."""
    if not isinstance(value, str):
        raise ArgumentTypeError(f"argument '{argument}' must be an id (str), got {type(value).__name__}")
    bad = _bad_char(value)
    if bad is not None:
        raise InvalidValueError(0, f"argument '{argument}': the id {value!r} contains {bad}; ids must be visible text")
    return value.encode("utf-8")


def index(value: object, argument: str, count: int, what: str) -> int:
    """An integer index in ``0..count``: Python and numpy integers are taken, ``bool`` is not."""
    if isinstance(value, bool) or not _is_integer(value):
        raise ArgumentTypeError(
            f"argument '{argument}' must be a {what} id (str) or index (int), got {type(value).__name__}"
        )
    i = operator.index(value)  # type: ignore[arg-type]
    if not 0 <= i < count:
        valid = f"0 to {count - 1}" if count else f"none: there are no {what}s"
        raise ElementIndexError(0, f"argument '{argument}': {what} index {i} is out of range (valid: {valid})")
    return i


def _is_integer(value: object) -> bool:
    if isinstance(value, numbers.Integral):
        return True
    try:
        operator.index(value)  # type: ignore[arg-type]
    except TypeError:
        return False
    return True


def real(value: object, argument: str, *, allow_nan: bool = False) -> float:
    """A real-number argument as a float; refuses bools, strings and other types by name."""
    if isinstance(value, (bool, str, bytes)) or not isinstance(value, numbers.Real):
        raise ArgumentTypeError(f"argument '{argument}' must be a real number, got {type(value).__name__}")
    x = float(value)
    if math.isnan(x) and not allow_nan:
        raise InvalidValueError(0, f"argument '{argument}' must be a number, found NaN")
    return x


def optional_real(value: object, argument: str) -> float:
    """``None`` as NaN (a value not given), else as :func:`real`."""
    return math.nan if value is None else real(value, argument)


def flag(value: object, argument: str) -> bool:
    """A ``bool`` argument (numpy booleans too); refuses other types."""
    if isinstance(value, bool):
        return value
    if type(value).__name__ == "bool_":  # numpy.bool_ without importing numpy here
        return bool(value)
    raise ArgumentTypeError(f"argument '{argument}' must be True or False, got {type(value).__name__}")


def choice(value: object, table: dict[str, int], argument: str, what: str = "value") -> int:
    """The code of a name from ``table``; refuses unknown names and non-strings."""
    if not isinstance(value, str):
        raise ArgumentTypeError(f"argument '{argument}' must be a str, got {type(value).__name__}")
    try:
        return table[value]
    except KeyError:
        choices = ", ".join(repr(k) for k in table)
        raise InvalidValueError(0, f"argument '{argument}': unknown {what} {value!r}; expected one of {choices}") from None
