"""The shared text helpers of pipeline.types."""

from __future__ import annotations

import pickle

import numpy as np

from pipeline.types import constant_text, shared_text


def _objects(values) -> int:
    return len({id(v) for v in values})


def test_shared_text_keeps_the_values_and_one_object_per_value():
    made = np.array(["tv", "phone", "tv", "tv", ""]).astype(object)  # a str per row
    assert _objects(made) == 5
    shared = shared_text(made)
    assert shared.dtype == object and shared.tolist() == made.tolist()
    assert _objects(shared) == 3


def test_shared_text_keeps_missing_values_missing():
    shared = shared_text(np.array(["a", None, "a", np.nan], dtype=object))
    assert shared[0] == "a" and shared[2] == "a"
    assert shared[1] is None or shared[1] != shared[1]
    assert shared[3] != shared[3]  # NaN


def test_shared_rows_pickle_once():
    # what the workers send back: pickle writes an object once however often it recurs
    made = np.array([f"participant_{i % 2}" for i in range(5000)]).astype(object)
    assert len(pickle.dumps(shared_text(made))) < len(pickle.dumps(made)) / 5


def test_constant_text_is_one_object():
    column = constant_text("p01", 4)
    assert column.dtype == object and column.tolist() == ["p01"] * 4
    assert _objects(column) == 1
    assert constant_text("p01", 0).shape == (0,)
