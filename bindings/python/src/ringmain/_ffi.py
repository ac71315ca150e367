"""The native library: where it is found, and the declaration of every function and constant.

This is the only module that knows the C signatures. ``tests/test_declarations.py`` parses
``ffi/include/ringmain.h`` and fails when these declarations drift from it.

The library is looked for, in order:

1. the file named by the environment variable ``RINGMAIN_LIBRARY``;
2. inside the package, where ``pip install`` puts it (``libringmain*.so``), then beside it: the
   package directory, then the directory that holds it;
3. in the Cargo workspace the package sits in (found by walking up from the package directory to
   a ``Cargo.toml`` with a ``[workspace]`` table): ``$CARGO_TARGET_DIR/release`` when that
   variable is set, else ``target/release``.
"""

from __future__ import annotations

import ctypes
import os
import sys
from ctypes import POINTER, c_bool, c_char_p, c_double, c_size_t, c_uint32, c_void_p
from pathlib import Path

LIBRARY_NAME = {"darwin": "libringmain.dylib", "win32": "ringmain.dll"}.get(sys.platform, "libringmain.so")

status = c_uint32
model_p = c_void_p
results_p = c_void_p
run_p = c_void_p
out_handle = POINTER(c_void_p)
size_p = POINTER(c_size_t)
u32_p = POINTER(c_uint32)
double_p = POINTER(c_double)
bool_p = POINTER(c_bool)
text_p = POINTER(c_char_p)

# name: (restype, argtypes), in the order of the header.
FUNCTIONS: dict[str, tuple[object, list[object]]] = {
    "ringmain_status_text": (c_char_p, [c_uint32]),
    "ringmain_version": (c_char_p, []),
    "ringmain_last_error": (status, [c_char_p, c_size_t, size_p]),
    "ringmain_live_handles": (status, [size_p, size_p]),
    "ringmain_model_new": (status, [c_uint32, c_uint32, c_uint32, c_uint32, c_uint32, c_uint32, out_handle]),
    "ringmain_model_load": (status, [c_char_p, out_handle]),
    "ringmain_model_from_toml": (status, [c_char_p, c_size_t, out_handle]),
    "ringmain_model_from_json": (status, [c_char_p, c_size_t, out_handle]),
    "ringmain_model_clone": (status, [model_p, out_handle]),
    "ringmain_model_free": (None, [model_p]),
    "ringmain_model_validate": (status, [model_p]),
    "ringmain_model_save": (status, [model_p, c_char_p]),
    "ringmain_model_write": (status, [model_p, c_uint32, c_char_p, c_size_t, size_p]),
    "ringmain_model_node_count": (status, [model_p, size_p]),
    "ringmain_model_link_count": (status, [model_p, size_p]),
    "ringmain_model_node_index": (status, [model_p, c_char_p, size_p]),
    "ringmain_model_link_index": (status, [model_p, c_char_p, size_p]),
    "ringmain_model_node_id": (status, [model_p, c_size_t, c_char_p, c_size_t, size_p]),
    "ringmain_model_link_id": (status, [model_p, c_size_t, c_char_p, c_size_t, size_p]),
    "ringmain_model_title": (status, [model_p, c_char_p, c_size_t, size_p]),
    "ringmain_model_node_kind": (status, [model_p, c_size_t, u32_p]),
    "ringmain_model_link_kind": (status, [model_p, c_size_t, u32_p]),
    "ringmain_model_link_nodes": (status, [model_p, c_size_t, size_p, size_p]),
    "ringmain_model_unit_label": (status, [model_p, c_uint32, c_char_p, c_size_t, size_p]),
    "ringmain_model_get_headloss": (status, [model_p, u32_p]),
    "ringmain_model_get_elevation": (status, [model_p, c_size_t, double_p]),
    "ringmain_model_get_demand": (status, [model_p, c_size_t, double_p]),
    "ringmain_model_get_reservoir_head": (status, [model_p, c_size_t, double_p]),
    "ringmain_model_get_tank_level": (status, [model_p, c_size_t, double_p]),
    "ringmain_model_get_link_status": (status, [model_p, c_size_t, u32_p]),
    "ringmain_model_get_pump_speed": (status, [model_p, c_size_t, double_p]),
    "ringmain_model_get_valve_setting": (status, [model_p, c_size_t, double_p]),
    "ringmain_model_get_valve_type": (status, [model_p, c_size_t, u32_p]),
    "ringmain_model_get_pipe_roughness": (status, [model_p, c_size_t, double_p]),
    "ringmain_model_get_pipe_diameter": (status, [model_p, c_size_t, double_p]),
    "ringmain_model_add_junction": (status, [model_p, c_char_p, c_double, c_double, size_p]),
    "ringmain_model_add_reservoir": (status, [model_p, c_char_p, c_double, size_p]),
    "ringmain_model_add_tank": (
        status,
        [model_p, c_char_p, c_double, c_double, c_double, c_double, c_double, size_p],
    ),
    "ringmain_model_add_pipe": (
        status,
        [model_p, c_char_p, c_char_p, c_char_p, c_double, c_double, c_double, c_double, c_bool, size_p],
    ),
    "ringmain_model_add_pump_curve": (
        status,
        [model_p, c_char_p, c_char_p, c_char_p, double_p, double_p, c_size_t, c_double, size_p],
    ),
    "ringmain_model_add_pump_power": (status, [model_p, c_char_p, c_char_p, c_char_p, c_double, c_double, size_p]),
    "ringmain_model_add_valve": (
        status,
        [model_p, c_char_p, c_char_p, c_char_p, c_uint32, c_double, c_double, c_double, size_p],
    ),
    "ringmain_model_set_demand": (status, [model_p, c_size_t, c_double]),
    "ringmain_model_set_reservoir_head": (status, [model_p, c_size_t, c_double]),
    "ringmain_model_set_tank_level": (status, [model_p, c_size_t, c_double]),
    "ringmain_model_set_link_status": (status, [model_p, c_size_t, c_uint32]),
    "ringmain_model_set_pump_speed": (status, [model_p, c_size_t, c_double]),
    "ringmain_model_set_pump_efficiency": (status, [model_p, c_size_t, c_double]),
    "ringmain_model_set_pump_efficiency_curve": (status, [model_p, c_size_t, double_p, double_p, c_size_t]),
    "ringmain_model_set_valve_setting": (status, [model_p, c_size_t, c_double]),
    "ringmain_model_set_pipe_roughness": (status, [model_p, c_size_t, c_double]),
    "ringmain_model_set_pipe_diameter": (status, [model_p, c_size_t, c_double]),
    "ringmain_model_set_water_temperature": (status, [model_p, c_double]),
    "ringmain_model_set_solver_options": (status, [model_p, c_uint32, c_double, c_double]),
    "ringmain_model_set_warm_start": (status, [model_p, c_bool]),
    "ringmain_model_solve": (status, [model_p, out_handle]),
    "ringmain_set_threads": (status, [c_size_t]),
    "ringmain_get_threads": (status, [size_p]),
    "ringmain_model_set_demands": (status, [model_p, double_p, c_size_t]),
    "ringmain_model_get_demands": (status, [model_p, double_p, c_size_t, size_p]),
    "ringmain_model_set_reservoir_heads": (status, [model_p, double_p, c_size_t]),
    "ringmain_model_get_reservoir_heads": (status, [model_p, double_p, c_size_t, size_p]),
    "ringmain_model_set_pump_speeds": (status, [model_p, double_p, c_size_t]),
    "ringmain_model_get_pump_speeds": (status, [model_p, double_p, c_size_t, size_p]),
    "ringmain_model_set_valve_settings": (status, [model_p, double_p, c_size_t]),
    "ringmain_model_get_valve_settings": (status, [model_p, double_p, c_size_t, size_p]),
    "ringmain_model_set_pipe_roughnesses": (status, [model_p, double_p, c_size_t]),
    "ringmain_model_get_pipe_roughnesses": (status, [model_p, double_p, c_size_t, size_p]),
    "ringmain_model_set_pipe_diameters": (status, [model_p, double_p, c_size_t]),
    "ringmain_model_get_pipe_diameters": (status, [model_p, double_p, c_size_t, size_p]),
    "ringmain_model_set_link_statuses": (status, [model_p, u32_p, c_size_t]),
    "ringmain_model_get_link_statuses": (status, [model_p, u32_p, c_size_t, size_p]),
    "ringmain_model_node_ids": (status, [model_p, c_char_p, c_size_t, size_p]),
    "ringmain_model_link_ids": (status, [model_p, c_char_p, c_size_t, size_p]),
    "ringmain_model_node_zones": (status, [model_p, c_char_p, c_size_t, size_p]),
    "ringmain_model_node_kinds": (status, [model_p, u32_p, c_size_t, size_p]),
    "ringmain_model_link_kinds": (status, [model_p, u32_p, c_size_t, size_p]),
    "ringmain_model_elevations": (status, [model_p, double_p, c_size_t, size_p]),
    "ringmain_model_link_ends": (status, [model_p, size_p, size_p, c_size_t, size_p]),
    "ringmain_model_coordinates": (status, [model_p, double_p, double_p, c_size_t, size_p]),
    "ringmain_model_simulate": (status, [model_p, out_handle]),
    "ringmain_run_free": (None, [run_p]),
    "ringmain_run_get_summary": (status, [run_p, c_void_p]),
    "ringmain_run_times": (status, [run_p, double_p, c_size_t, size_p]),
    "ringmain_run_columns": (status, [run_p, c_uint32, size_p, c_size_t, size_p]),
    "ringmain_run_series": (status, [run_p, c_uint32, double_p, c_size_t, size_p]),
    "ringmain_run_event": (status, [run_p, c_size_t, double_p, c_char_p, c_size_t, size_p]),
    "ringmain_run_constituent_count": (status, [run_p, size_p]),
    "ringmain_run_constituent": (status, [run_p, c_size_t, c_bool, c_char_p, c_size_t, size_p]),
    "ringmain_run_quality": (status, [run_p, c_size_t, c_bool, double_p, c_size_t, size_p]),
    "ringmain_results_free": (None, [results_p]),
    "ringmain_results_node_count": (status, [results_p, size_p]),
    "ringmain_results_link_count": (status, [results_p, size_p]),
    "ringmain_results_node_index": (status, [results_p, c_char_p, size_p]),
    "ringmain_results_link_index": (status, [results_p, c_char_p, size_p]),
    "ringmain_results_iterations": (status, [results_p, u32_p]),
    "ringmain_results_status_changes": (status, [results_p, u32_p]),
    "ringmain_results_residuals": (status, [results_p, double_p, double_p]),
    "ringmain_results_last_changes": (status, [results_p, double_p, double_p]),
    "ringmain_results_heads": (status, [results_p, double_p, c_size_t, size_p]),
    "ringmain_results_pressures": (status, [results_p, double_p, c_size_t, size_p]),
    "ringmain_results_demands": (status, [results_p, double_p, c_size_t, size_p]),
    "ringmain_results_connected": (status, [results_p, bool_p, c_size_t, size_p]),
    "ringmain_results_flows": (status, [results_p, double_p, c_size_t, size_p]),
    "ringmain_results_velocities": (status, [results_p, double_p, c_size_t, size_p]),
    "ringmain_results_headlosses": (status, [results_p, double_p, c_size_t, size_p]),
    "ringmain_results_link_states": (status, [results_p, u32_p, c_size_t, size_p]),
    "ringmain_results_node_head": (status, [results_p, c_size_t, double_p]),
    "ringmain_results_node_pressure": (status, [results_p, c_size_t, double_p]),
    "ringmain_results_node_demand": (status, [results_p, c_size_t, double_p]),
    "ringmain_results_link_flow": (status, [results_p, c_size_t, double_p]),
    "ringmain_results_link_velocity": (status, [results_p, c_size_t, double_p]),
    "ringmain_results_link_headloss": (status, [results_p, c_size_t, double_p]),
    "ringmain_results_link_state": (status, [results_p, c_size_t, u32_p]),
    "ringmain_results_pump_head": (status, [results_p, c_size_t, double_p]),
    "ringmain_results_pump_power": (status, [results_p, c_size_t, double_p, double_p, double_p]),
    "ringmain_results_warning_count": (status, [results_p, size_p]),
    "ringmain_results_warning": (status, [results_p, c_size_t, c_char_p, c_size_t, size_p]),
    "ringmain_link_state_text": (status, [c_uint32, text_p, text_p]),
}

# The constants of the header's enums, by enum.
CONSTANTS: dict[str, dict[str, int]] = {
    "ringmain_status": {
        "RINGMAIN_OK": 0,
        "RINGMAIN_INVALID_ARGUMENT": 1,
        "RINGMAIN_NULL_POINTER": 2,
        "RINGMAIN_MODEL_INVALID": 3,
        "RINGMAIN_NOT_CONVERGED": 4,
        "RINGMAIN_IO": 5,
        "RINGMAIN_NOT_FOUND": 6,
        "RINGMAIN_OUT_OF_RANGE": 7,
        "RINGMAIN_BUFFER_TOO_SMALL": 8,
        "RINGMAIN_PANIC": 9,
        "RINGMAIN_WRONG_KIND": 10,
        "RINGMAIN_SOLVE_FAILED": 11,
    },
    "ringmain_length_unit": {"RINGMAIN_LENGTH_M": 0, "RINGMAIN_LENGTH_FT": 1},
    "ringmain_diameter_unit": {
        "RINGMAIN_DIAMETER_MM": 0,
        "RINGMAIN_DIAMETER_M": 1,
        "RINGMAIN_DIAMETER_IN": 2,
        "RINGMAIN_DIAMETER_FT": 3,
    },
    "ringmain_flow_unit": {
        "RINGMAIN_FLOW_LPS": 0,
        "RINGMAIN_FLOW_M3S": 1,
        "RINGMAIN_FLOW_M3H": 2,
        "RINGMAIN_FLOW_MLD": 3,
        "RINGMAIN_FLOW_GPM": 4,
        "RINGMAIN_FLOW_CFS": 5,
        "RINGMAIN_FLOW_MGD": 6,
    },
    "ringmain_pressure_unit": {
        "RINGMAIN_PRESSURE_M": 0,
        "RINGMAIN_PRESSURE_KPA": 1,
        "RINGMAIN_PRESSURE_BAR": 2,
        "RINGMAIN_PRESSURE_PSI": 3,
        "RINGMAIN_PRESSURE_FT": 4,
    },
    "ringmain_roughness_unit": {
        "RINGMAIN_ROUGHNESS_MM": 0,
        "RINGMAIN_ROUGHNESS_M": 1,
        "RINGMAIN_ROUGHNESS_IN": 2,
        "RINGMAIN_ROUGHNESS_FT": 3,
    },
    "ringmain_headloss": {"RINGMAIN_HEADLOSS_HAZEN_WILLIAMS": 0, "RINGMAIN_HEADLOSS_DARCY_WEISBACH": 1},
    "ringmain_quantity": {
        "RINGMAIN_QUANTITY_LENGTH": 0,
        "RINGMAIN_QUANTITY_DIAMETER": 1,
        "RINGMAIN_QUANTITY_FLOW": 2,
        "RINGMAIN_QUANTITY_PRESSURE": 3,
        "RINGMAIN_QUANTITY_ROUGHNESS": 4,
        "RINGMAIN_QUANTITY_VELOCITY": 5,
        "RINGMAIN_QUANTITY_POWER": 6,
    },
    "ringmain_node_kind": {"RINGMAIN_NODE_JUNCTION": 0, "RINGMAIN_NODE_RESERVOIR": 1, "RINGMAIN_NODE_TANK": 2},
    "ringmain_link_kind": {"RINGMAIN_LINK_PIPE": 0, "RINGMAIN_LINK_PUMP": 1, "RINGMAIN_LINK_VALVE": 2},
    "ringmain_valve_type": {
        "RINGMAIN_VALVE_PRESSURE_REDUCING": 0,
        "RINGMAIN_VALVE_PRESSURE_SUSTAINING": 1,
        "RINGMAIN_VALVE_FLOW_CONTROL": 2,
        "RINGMAIN_VALVE_THROTTLE": 3,
    },
    "ringmain_link_status": {"RINGMAIN_STATUS_OPEN": 0, "RINGMAIN_STATUS_CLOSED": 1, "RINGMAIN_STATUS_AUTOMATIC": 2},
    "ringmain_format": {"RINGMAIN_FORMAT_TOML": 0, "RINGMAIN_FORMAT_JSON": 1},
    "ringmain_link_state": {
        "RINGMAIN_STATE_OPEN": 0,
        "RINGMAIN_STATE_CLOSED": 1,
        "RINGMAIN_STATE_CHECK_VALVE_CLOSED": 2,
        "RINGMAIN_STATE_DISCONNECTED": 3,
        "RINGMAIN_STATE_PUMP_STOPPED": 4,
        "RINGMAIN_STATE_PUMP_SHUTOFF": 5,
        "RINGMAIN_STATE_ACTIVE": 6,
        "RINGMAIN_STATE_OPEN_UPSTREAM_LOW": 7,
        "RINGMAIN_STATE_OPEN_ABOVE_SETTING": 8,
        "RINGMAIN_STATE_OPEN_BELOW_SETTING": 9,
        "RINGMAIN_STATE_VALVE_CLOSED": 10,
        "RINGMAIN_STATE_OTHER": 255,
    },
    "ringmain_series": {
        "RINGMAIN_SERIES_HEAD": 0,
        "RINGMAIN_SERIES_PRESSURE": 1,
        "RINGMAIN_SERIES_DEMAND": 2,
        "RINGMAIN_SERIES_FLOW": 3,
        "RINGMAIN_SERIES_STATUS": 4,
        "RINGMAIN_SERIES_LEVEL": 5,
        "RINGMAIN_SERIES_VOLUME": 6,
        "RINGMAIN_SERIES_PUMP_SPEED": 7,
        "RINGMAIN_SERIES_PUMP_POWER": 8,
    },
}


class RunSummary(ctypes.Structure):
    """``struct ringmain_run_summary`` of the header."""

    _fields_ = [
        ("duration", c_double),
        ("start_clock", c_double),
        ("times", c_size_t),
        ("events", c_size_t),
        ("supplied", c_double),
        ("delivered", c_double),
        ("storage_change", c_double),
        ("not_delivered", c_double),
        ("discrepancy", c_double),
        ("has_lowest_pressure", c_bool),
        ("lowest_pressure_node", c_size_t),
        ("lowest_pressure", c_double),
        ("lowest_pressure_time", c_double),
        ("steps", ctypes.c_uint64),
        ("rejected_steps", ctypes.c_uint64),
        ("solves", ctypes.c_uint64),
    ]

OK = CONSTANTS["ringmain_status"]["RINGMAIN_OK"]
BUFFER_TOO_SMALL = CONSTANTS["ringmain_status"]["RINGMAIN_BUFFER_TOO_SMALL"]
STATUS_NAMES = {v: k for k, v in CONSTANTS["ringmain_status"].items()}


class LibraryNotFound(ImportError):
    """The native library ringmain could not be found (the message lists where it looked)."""


def _workspace_release_dirs(start: Path) -> list[Path]:
    for directory in [start, *start.parents]:
        manifest = directory / "Cargo.toml"
        try:
            is_workspace = manifest.is_file() and "[workspace]" in manifest.read_text(encoding="utf-8")
        except OSError:
            is_workspace = False
        if is_workspace:
            target = os.environ.get("CARGO_TARGET_DIR")
            base = (directory / target) if target else directory / "target"
            return [base / "release"]
    return []


def _in_package(here: Path) -> list[Path]:
    """The library installed inside the package by `pip install` (its name carries the
    interpreter's extension suffix, e.g. libringmain.cpython-311-x86_64-linux-gnu.so)."""
    stem = LIBRARY_NAME.rsplit(".", 1)[0]
    suffix = LIBRARY_NAME.rsplit(".", 1)[1]
    return sorted(p for p in here.glob(f"{stem}*.{suffix}") if p.is_file())


def candidates() -> list[tuple[str, Path]]:
    """Where the library is looked for, in order, each with the rule that gave it."""
    given = os.environ.get("RINGMAIN_LIBRARY")
    if given:
        return [("RINGMAIN_LIBRARY", Path(given))]
    here = Path(__file__).resolve().parent
    found = [("inside the package", p) for p in _in_package(here)]
    found += [("beside the package", here / LIBRARY_NAME), ("beside the package", here.parent / LIBRARY_NAME)]
    found += [("the Cargo workspace", d / LIBRARY_NAME) for d in _workspace_release_dirs(here)]
    return found


def load_library() -> ctypes.CDLL:
    """Finds, loads and declares the native library."""
    tried = candidates()
    for _, path in tried:
        if path.is_file():
            lib = ctypes.CDLL(str(path))
            declare(lib)
            return lib
    where = "\n".join(f"  - {path} ({rule})" for rule, path in tried)
    if not _workspace_release_dirs(Path(__file__).resolve().parent) and "RINGMAIN_LIBRARY" not in os.environ:
        where += "\n  - no Cargo workspace above the package directory"
    raise LibraryNotFound(
        f"cannot find the ringmain library {LIBRARY_NAME}; looked at:\n{where}\n"
        "Install the package with `pip install ./bindings/python` (it builds the library), build it with "
        "`cargo build --release` in the ringmain workspace, or set RINGMAIN_LIBRARY to the library file."
    )


def declare(lib: ctypes.CDLL) -> None:
    """Sets argtypes and restype of every function (the library must have them all)."""
    for name, (restype, argtypes) in FUNCTIONS.items():
        function = getattr(lib, name)
        function.restype = restype
        function.argtypes = argtypes


lib = load_library()


def last_error() -> str:
    """The calling thread's last error message from the library."""
    needed = c_size_t(0)
    size = 1024
    while True:
        buf = ctypes.create_string_buffer(size)
        code = lib.ringmain_last_error(buf, size, ctypes.byref(needed))
        if code == OK:
            return buf.value.decode("utf-8", errors="replace")
        if code != BUFFER_TOO_SMALL:
            return f"(no message: ringmain_last_error returned {code})"
        size = needed.value
