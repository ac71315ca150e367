"""Exceptions raised by ringmain, each carrying the library's full message.

Every exception is a :class:`RingmainError`. Where a standard exception fits, the ringmain one is
also a subclass of it, so that code written for Python's own types catches it:

==========================  =============================  ==============================
exception                   raised for                     also a
==========================  =============================  ==============================
:class:`NotFoundError`      an unknown node or link id     ``ModelError``, ``KeyError``
:class:`ElementIndexError`  an index past the last element ``ModelError``, ``IndexError``
:class:`InvalidValueError`  a value or model text refused  ``ModelError``, ``ValueError``
:class:`WrongKindError`     a value for the wrong kind     ``ModelError``, ``TypeError``
:class:`ArgumentTypeError`  an argument of the wrong type  ``RingmainError``, ``TypeError``
:class:`SolveError`         no answer from the solver      ``RingmainError``
==========================  =============================  ==============================
"""

from __future__ import annotations

from . import _ffi


class RingmainError(Exception):
    """An error reported by ringmain.

    Attributes
    ----------
    status : int
        The library's status code (0 for errors found in Python before any native call).
    status_name : str
        Its name, such as ``"RINGMAIN_MODEL_INVALID"``.
    message : str
        The message, naming the file, element and key where there is one.
    """

    def __init__(self, status: int, message: str) -> None:
        super().__init__(message)
        self.status = status
        self.status_name = _ffi.STATUS_NAMES.get(status, f"status {status}")
        self.message = message

    def __str__(self) -> str:
        # KeyError would quote the message; every ringmain error prints it as it is.
        return self.message

    def __reduce__(self) -> tuple[object, tuple[type[RingmainError], int, str]]:
        # Pickled by class, status and message (sweeps on a cluster send errors back).
        return (_rebuild, (type(self), self.status, self.message))


def _rebuild(cls: type[RingmainError], status: int, message: str) -> RingmainError:
    error = cls.__new__(cls)
    Exception.__init__(error, message)
    error.status = status
    error.status_name = _ffi.STATUS_NAMES.get(status, f"status {status}")
    error.message = message
    return error


class ModelError(RingmainError):
    """A model that cannot be read, or a value, id, index or element kind the model rejects."""


class SolveError(RingmainError):
    """The solver could not produce an answer (not converged, or failed otherwise)."""


class NotFoundError(ModelError, KeyError):
    """No node or link has the id given."""


class ElementIndexError(ModelError, IndexError):
    """An index past the last node, link or event."""


class InvalidValueError(ModelError, ValueError):
    """A value, an id or a model text the library refuses (the message names the element and key)."""


class WrongKindError(ModelError, TypeError):
    """A value for an element of another kind (a demand for a reservoir, a speed for a pipe)."""


class ArgumentTypeError(RingmainError, TypeError):
    """An argument of a type the function does not take (the message names the argument and
    what was expected)."""

    def __init__(self, message: str) -> None:
        super().__init__(0, message)


_S = _ffi.CONSTANTS["ringmain_status"]
_CLASSES: dict[int, type[RingmainError]] = {
    _S["RINGMAIN_NOT_CONVERGED"]: SolveError,
    _S["RINGMAIN_SOLVE_FAILED"]: SolveError,
    _S["RINGMAIN_NOT_FOUND"]: NotFoundError,
    _S["RINGMAIN_OUT_OF_RANGE"]: ElementIndexError,
    _S["RINGMAIN_MODEL_INVALID"]: InvalidValueError,
    _S["RINGMAIN_INVALID_ARGUMENT"]: InvalidValueError,
    _S["RINGMAIN_WRONG_KIND"]: WrongKindError,
    _S["RINGMAIN_IO"]: ModelError,
}


def error_for(code: int, message: str) -> RingmainError:
    """The exception for a status code and message."""
    return _CLASSES.get(code, RingmainError)(code, message)


def check(code: int) -> None:
    """Raises the exception for a status code other than OK."""
    if code == _ffi.OK:
        return
    raise error_for(code, _ffi.last_error())
