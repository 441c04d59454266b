"""The link's Taylor scale and table sort: parsing, ordering and what a header click writes.

Orders are checked against Python's own ``sorted`` (common practice: ascending numbers,
missing values last), never against the module's output.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from app.state import SORT_KEYS, TAYLOR_SCALES, parse_sort
from app.views.scores import sort_value, sorted_runs
from evaluation.errors import InputError
from evaluation.metrics import METRICS


def test_sort_keys_are_the_tidy_tables_names() -> None:
    # one name for one idea: the run column of the tidy table and the metric keys
    assert SORT_KEYS == ("model", *METRICS)
    assert set(TAYLOR_SCALES) == {"normalised", "absolute"}


@pytest.mark.parametrize(("text", "expected"), [
    ("", None), ("  ", None), ("rmse", ("rmse", False)), ("-rmse", ("rmse", True)), (" -corr ", ("corr", True)), ("model", ("model", False)),
])
def test_sort_values_are_read(text: str, expected) -> None:
    assert parse_sort(text) == expected


@pytest.mark.parametrize("text", ["rmsee", "--rmse", "Run", "-", "rmse;drop", "<b>"])
def test_a_sort_value_that_names_no_column_is_refused(text: str) -> None:
    with pytest.raises(InputError):
        parse_sort(text)


@pytest.fixture
def shown() -> pd.DataFrame:
    return pd.DataFrame({"Run": ["b-run", "a-run", "c-run", "d-run"], "rmse": [1.5, np.nan, 0.25, 2.0], "corr": [0.9, 0.95, 0.5, 0.99]})


@pytest.mark.parametrize("descending", [False, True])
def test_runs_are_ordered_by_a_metric_with_missing_values_last(shown: pd.DataFrame, descending: bool) -> None:
    ordered, sorter = sorted_runs(shown, ("-" if descending else "") + "rmse")
    finite = sorted((v for v in shown["rmse"] if not math.isnan(v)), reverse=descending)
    assert list(ordered["rmse"].iloc[:3]) == finite and math.isnan(ordered["rmse"].iloc[3])
    # each run keeps its own numbers
    assert dict(zip(ordered["Run"], ordered["corr"], strict=True)) == dict(zip(shown["Run"], shown["corr"], strict=True))
    assert sorter == {"field": "rmse", "dir": "desc" if descending else "asc"}


def test_runs_are_ordered_by_name_and_left_alone_without_a_sort(shown: pd.DataFrame) -> None:
    ordered, sorter = sorted_runs(shown, "model")
    assert list(ordered["Run"]) == sorted(shown["Run"])
    assert sorter == {"field": "Run", "dir": "asc"}
    same, none = sorted_runs(shown, "")
    assert same is shown and none is None
    # a metric this table lacks (a table without trends, say): the collection's order
    other, none = sorted_runs(shown, "trend")
    assert list(other["Run"]) == list(shown["Run"]) and none is None


def test_a_header_click_becomes_the_link_value() -> None:
    assert sort_value([{"field": "rmse", "dir": "desc"}]) == "-rmse"
    assert sort_value([{"field": "corr", "dir": "asc"}]) == "corr"
    assert sort_value([{"field": "Run", "dir": "asc"}]) == "model"
    assert sort_value([]) == ""
    # the text column of ties is no sort key: the link keeps its value
    assert sort_value([{"field": "≈ best (obs. uncertainty)", "dir": "asc"}]) is None
    # read back, each gives what was clicked
    for field, direction in [("rmse", "desc"), ("bias", "asc"), ("Run", "desc")]:
        key, descending = parse_sort(sort_value([{"field": field, "dir": direction}]))
        assert (("Run" if key == "model" else key), descending) == (field, direction == "desc")
