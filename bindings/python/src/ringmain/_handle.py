"""The base class of the objects that own a native handle."""

from __future__ import annotations

import sys
from typing import Any, Callable, ClassVar

if sys.version_info >= (3, 11):
    from typing import Self
else:  # pragma: no cover
    from typing_extensions import Self


class Handle:
    """Owns one native handle: freed by ``close()``, at the end of a ``with`` block, or (as a
    backstop) when the object is collected. Using the object after it is closed raises
    ``ValueError``."""

    _free: ClassVar[Callable[[Any], None]]
    _what: ClassVar[str] = "handle"

    def __init__(self, pointer: int) -> None:
        self._pointer: int | None = pointer

    @property
    def _ptr(self) -> int:
        if self._pointer is None:
            raise ValueError(f"this {self._what} is closed")
        return self._pointer

    @property
    def closed(self) -> bool:
        """Whether the native handle has been freed."""
        return self._pointer is None

    def close(self) -> None:
        """Frees the native handle now (closing twice is harmless)."""
        pointer, self._pointer = self._pointer, None
        if pointer is not None:
            type(self)._free(pointer)

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __del__(self) -> None:
        try:
            self.close()
        except Exception:  # pragma: no cover - at interpreter shutdown the library may be gone
            pass
