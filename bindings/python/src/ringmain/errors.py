"""Exceptions raised by ringmain, each carrying the library's full message."""

from __future__ import annotations

from . import _ffi


class RingmainError(Exception):
    """An error reported by the ringmain library.

    Attributes:
        status: the library's status code (an int, see ``ringmain.STATUS``).
        status_name: its name, such as ``"RINGMAIN_MODEL_INVALID"``.
        message: the library's message, naming the file, element and key where there is one.
    """

    def __init__(self, status: int, message: str) -> None:
        super().__init__(message)
        self.status = status
        self.status_name = _ffi.STATUS_NAMES.get(status, f"status {status}")
        self.message = message


class ModelError(RingmainError):
    """A model that cannot be read, or a value, id, index or element kind the model rejects."""


class SolveError(RingmainError):
    """The solver could not produce an answer (not converged, or failed otherwise)."""


_SOLVE = {_ffi.CONSTANTS["ringmain_status"][k] for k in ("RINGMAIN_NOT_CONVERGED", "RINGMAIN_SOLVE_FAILED")}
_MODEL = {
    _ffi.CONSTANTS["ringmain_status"][k]
    for k in (
        "RINGMAIN_MODEL_INVALID",
        "RINGMAIN_IO",
        "RINGMAIN_NOT_FOUND",
        "RINGMAIN_OUT_OF_RANGE",
        "RINGMAIN_WRONG_KIND",
        "RINGMAIN_INVALID_ARGUMENT",
    )
}


def check(code: int) -> None:
    """Raises the exception for a status code other than OK."""
    if code == _ffi.OK:
        return
    message = _ffi.last_error()
    if code in _SOLVE:
        raise SolveError(code, message)
    if code in _MODEL:
        raise ModelError(code, message)
    raise RingmainError(code, message)
