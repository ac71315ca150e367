"""The ctypes declarations of ringmain._ffi must match the C header exactly."""

from __future__ import annotations

import ctypes
import re
from ctypes import POINTER, c_bool, c_char_p, c_double, c_size_t, c_uint32, c_void_p

from conftest import HEADER
from ringmain import _ffi

# C type (as cbindgen writes it) -> ctypes type.
C_TYPES = {
    "void": None,
    "ringmain_status": c_uint32,
    "uint32_t": c_uint32,
    "size_t": c_size_t,
    "double": c_double,
    "bool": c_bool,
    "const char *": c_char_p,
    "char *": c_char_p,
    "const char **": POINTER(c_char_p),
    "double *": POINTER(c_double),
    "const double *": POINTER(c_double),
    "size_t *": POINTER(c_size_t),
    "uint32_t *": POINTER(c_uint32),
    "bool *": POINTER(c_bool),
    "ringmain_model *": c_void_p,
    "const ringmain_model *": c_void_p,
    "ringmain_results *": c_void_p,
    "const ringmain_results *": c_void_p,
    "ringmain_model **": POINTER(c_void_p),
    "ringmain_results **": POINTER(c_void_p),
    "ringmain_run *": c_void_p,
    "const ringmain_run *": c_void_p,
    "ringmain_run **": POINTER(c_void_p),
    "const uint32_t *": POINTER(c_uint32),
    "ringmain_run_summary *": c_void_p,
}


def _code() -> str:
    text = HEADER.read_text(encoding="utf-8")
    text = re.sub(r"/\*.*?\*/", "", text, flags=re.S)
    text = re.sub(r"//[^\n]*", "", text)
    text = text.replace("RINGMAIN_MUST_USE", "")
    return "\n".join(line for line in text.splitlines() if not line.lstrip().startswith("#"))


def _type_of(declaration: str) -> str:
    """The type part of `TYPE NAME` (the name is the last word)."""
    declaration = " ".join(declaration.replace("*", " * ").split())
    words = declaration.split(" ")
    c_type = " ".join(words[:-1])
    return c_type.replace(" * *", " **").replace(" *", " *")


def header_functions() -> dict[str, tuple[str, list[str]]]:
    functions = {}
    for match in re.finditer(r"([A-Za-z_][\w \*]*?)\b(ringmain_\w+)\s*\(([^)]*)\)\s*;", _code()):
        restype = " ".join(match.group(1).replace("*", " * ").split()).replace(" * *", " **")
        params = match.group(3).strip()
        args = [] if params in ("", "void") else [_type_of(p) for p in params.split(",")]
        functions[match.group(2)] = (restype, args)
    return functions


def header_constants() -> dict[str, dict[str, int]]:
    enums = {}
    for match in re.finditer(r"enum (ringmain_\w+)\s*(?::\s*\w+\s*)?\{([^}]*)\}", _code()):
        enums[match.group(1)] = {k: int(v) for k, v in re.findall(r"(RINGMAIN_\w+)\s*=\s*(\d+)", match.group(2))}
    return enums


def test_the_header_parses_into_many_functions():
    functions = header_functions()
    assert len(functions) > 80
    assert functions["ringmain_model_new"] == (
        "ringmain_status",
        ["uint32_t", "uint32_t", "uint32_t", "uint32_t", "uint32_t", "uint32_t", "ringmain_model **"],
    )
    assert functions["ringmain_version"] == ("const char *", [])


def test_every_function_is_declared_and_nothing_else():
    header = set(header_functions())
    declared = set(_ffi.FUNCTIONS)
    assert header - declared == set(), "declare these in ringmain/_ffi.py"
    assert declared - header == set(), "these are no longer in ringmain.h"


def test_every_declaration_matches_the_header():
    mismatches = []
    for name, (restype, args) in header_functions().items():
        want = (C_TYPES[restype], [C_TYPES[a] for a in args])
        got = _ffi.FUNCTIONS[name]
        if got[0] != want[0] or list(got[1]) != want[1]:
            mismatches.append(f"{name}: header ({restype}; {', '.join(args)}), _ffi.py {got}")
    assert not mismatches, "\n".join(mismatches)


def test_the_loaded_library_uses_these_declarations():
    for name, (restype, argtypes) in _ffi.FUNCTIONS.items():
        function = getattr(_ffi.lib, name)
        assert function.restype == restype and list(function.argtypes) == list(argtypes), name


def test_every_constant_matches_the_header():
    assert header_constants() == _ffi.CONSTANTS


def test_the_drift_check_would_see_a_change():
    # A declaration changed on one side only must be caught by the comparison above.
    header = header_functions()
    restype, args = header["ringmain_model_set_demand"]
    assert [C_TYPES[a] for a in args] == _ffi.FUNCTIONS["ringmain_model_set_demand"][1]
    assert [C_TYPES[a] for a in args] != [c_void_p, c_size_t, ctypes.c_float]
