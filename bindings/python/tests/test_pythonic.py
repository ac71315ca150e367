"""The Python surface: error classes, argument checks, ids refused, copying and pickling."""

from __future__ import annotations

import copy
import gc
import pickle

import numpy as np
import pytest
from conftest import HILLSIDE

import ringmain


def test_error_classes_are_also_the_standard_ones():
    with ringmain.Model.load(HILLSIDE) as m:
        with pytest.raises(KeyError) as e:
            m.demand("J-999")
        assert isinstance(e.value, ringmain.NotFoundError) and isinstance(e.value, ringmain.ModelError)
        # A KeyError prints its message as it is (not quoted).
        assert str(e.value).startswith("no node has the id 'J-999'")
        with pytest.raises(IndexError):
            m.pipe_diameter(10_000)
        with pytest.raises(ValueError):
            m.set_demand("J-109", float("inf"))
        with pytest.raises(TypeError):
            m.set_pump_speed(m.link_ids("pipe")[0], 0.5)


@pytest.mark.parametrize(
    "call, argument, expected",
    [
        (lambda m: m.set_demand("J-109", "3"), "demand", "a real number, got str"),
        (lambda m: m.set_demand("J-109", None), "demand", "a real number, got NoneType"),
        (lambda m: m.set_demand(3.5, 1.0), "node", "id (str) or index (int), got float"),
        (lambda m: m.add_junction(42, 1.0), "id", "an id (str), got int"),
        (lambda m: m.add_pipe("P-new", "J-109", b"J-101", 10, 100, 120), "end", "an id (str), got bytes"),
        (lambda m: m.set_link_status("P-218", 1.5), "status", "a str, got float"),
        (lambda m: m.add_pipe("P-new", "J-109", "J-101", 10, 100, 120, check_valve="yes"), "check_valve", "True or False"),
        (lambda m: m.set_demands("1,2,3"), "demands", "an array of numbers or a mapping"),
        (lambda m: m.set_pipe_roughness("P-218", True), "roughness", "a real number, got bool"),
    ],
)
def test_wrong_types_name_the_argument_and_what_was_expected(call, argument, expected):
    with ringmain.Model.load(HILLSIDE) as m:
        with pytest.raises(ringmain.ArgumentTypeError) as e:
            call(m)
        assert isinstance(e.value, TypeError)
        assert f"argument '{argument}'" in str(e.value) and expected in str(e.value)


@pytest.mark.parametrize(
    "bad",
    [
        "A\x00B",  # NUL: C would cut the id at it and change node "A"
        "J-109\x00hidden",
        "J\u202e901",  # right-to-left override: reads as another id
        "J\u2066109\u2069",  # isolates
        "J\u200b109",  # zero-width space
        "\ufeffJ-109",  # byte-order mark
        "J\u00ad109",  # soft hyphen
        "J-1\x07",  # control character
    ],
)
def test_ids_with_nul_or_invisible_characters_are_refused(bad):
    with ringmain.Model.load(HILLSIDE) as m:
        before = m.demands()
        with pytest.raises(ringmain.InvalidValueError, match="argument 'node'"):
            m.set_demand(bad, 99.0)
        with pytest.raises(ringmain.InvalidValueError, match="argument 'id'"):
            m.add_junction(bad, 10.0)
        np.testing.assert_array_equal(m.demands(), before)
        assert m.node_count == len(before)


def test_copies_are_independent_models():
    before = ringmain.live_handles()
    with ringmain.Model.load(HILLSIDE) as m:
        m.warm_start = True
        for c in (copy.copy(m), copy.deepcopy(m), pickle.loads(pickle.dumps(m))):
            assert c._ptr != m._ptr and c.warm_start
            c.set_demand("J-109", 30.0)
            assert m.demand("J-109") != 30.0
            with m.solve() as a, c.solve() as b:
                assert b.node_pressure("J-109") < a.node_pressure("J-109")
            c.close()
        # A deep copy inside a container copies the model too.
        box = copy.deepcopy({"model": m})
        assert box["model"]._ptr != m._ptr
        box["model"].close()
    gc.collect()
    assert ringmain.live_handles() == before


def test_pickling_round_trips_through_the_model_text():
    with ringmain.Model.load(HILLSIDE) as m, pickle.loads(pickle.dumps(m)) as back:
        assert back.to_json() == m.to_json()
        with m.solve() as a, back.solve() as b:
            np.testing.assert_array_equal(a.heads, b.heads)


def test_results_refuse_copy_and_pickle():
    with ringmain.Model.load(HILLSIDE) as m, m.solve() as r:
        for attempt in (copy.copy, copy.deepcopy, pickle.dumps):
            with pytest.raises(TypeError, match="cannot be"):
                attempt(r)
        # Still usable, freed once.
        assert r.iterations >= 1  # an answer (a solve that does not converge raises SolveError)


def test_errors_survive_pickling():
    with ringmain.Model.load(HILLSIDE) as m:
        with pytest.raises(ringmain.NotFoundError) as e:
            m.demand("nowhere")
    back = pickle.loads(pickle.dumps(e.value))
    assert type(back) is ringmain.NotFoundError and back.message == e.value.message
    assert back.status_name == "RINGMAIN_NOT_FOUND"


def test_with_blocks_keep_the_type():
    # __enter__ returns Self: inside `with`, a Model is a Model (checked by mypy in CI too).
    with ringmain.Model.load(HILLSIDE) as m:
        assert type(m) is ringmain.Model
        with m.solve() as r:
            assert type(r) is ringmain.Results
