"""The long table -> groups: checks naming the column, one array per group, sorted."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from service.batch.table import Columns, TableError, parse_group_by, split_groups

COLUMNS = Columns(("warehouse", "family"))


def _rows(*rows: tuple) -> pd.DataFrame:
    return pd.DataFrame(rows, columns=["date", "warehouse", "family", "series", "value"])


def test_groups_are_sorted_with_their_own_dates_and_series():
    table = _rows(("2024-02-01", "lyon", "brakes", "pads", 2.0),
                  ("2024-01-01", "lyon", "brakes", "pads", 1.0),
                  ("2024-01-01", "lyon", "brakes", "cables", 5.0),
                  ("2024-01-01", "leeds", "wheels", "tyres", 7.0),
                  ("2024-03-01", "leeds", "wheels", "tyres", 9.0))
    groups = split_groups(table, COLUMNS)
    assert [g.key for g in groups.groups] == [("leeds", "wheels"), ("lyon", "brakes")]
    leeds, lyon = groups.groups
    assert leeds.names == ("tyres",) and leeds.values.tolist() == [[7.0], [9.0]]
    assert leeds.dates.dtype == np.dtype("datetime64[ns]")
    assert lyon.names == ("cables", "pads")
    np.testing.assert_array_equal(lyon.values, [[5.0, 1.0], [np.nan, 2.0]])
    assert lyon.values.dtype == np.float64 and not groups.rejected


def test_numeric_labels_become_text_so_csv_and_parquet_agree():
    table = _rows(("2024-01-01", 3, 10, "pads", 1.0))
    assert split_groups(table, COLUMNS).groups[0].key == ("3", "10")


def test_a_series_twice_on_one_date_fails_only_its_group():
    table = _rows(("2024-01-01", "lyon", "brakes", "pads", 1.0),
                  ("2024-01-01", "lyon", "brakes", "pads", 2.0),
                  ("2024-01-01", "leeds", "wheels", "tyres", 7.0))
    groups = split_groups(table, COLUMNS)
    assert [g.key for g in groups.groups] == [("leeds", "wheels")]
    (bad,) = groups.rejected
    assert bad.key == ("lyon", "brakes") and bad.error_type == "DuplicateRowsError"
    assert "'pads' has 2 rows for 2024-01-01" in bad.error
    assert groups.keys == [("leeds", "wheels"), ("lyon", "brakes")]


@pytest.mark.parametrize(("change", "column", "message"), [
    (lambda t: t.drop(columns="value"), "value", "no column 'value'"),
    (lambda t: t.assign(date=["2024-01-01", "soon"]), "date", "row 2 ('soon')"),
    (lambda t: t.assign(value=[1.0, "many"]), "value", "row 2 ('many') is not a number"),
    (lambda t: t.assign(family=["brakes", None]), "family", "empty in row 2"),
    (lambda t: t.assign(series=[None, "pads"]), "series", "empty in row 1"),
    (lambda t: t.iloc[:0], "value", "no rows"),
])
def test_table_problems_name_the_column(change, column, message):
    table = _rows(("2024-01-01", "lyon", "brakes", "pads", 1.0),
                  ("2024-02-01", "lyon", "brakes", "pads", 2.0))
    with pytest.raises(TableError, match=re.escape(message)) as info:
        split_groups(change(table), COLUMNS)
    assert info.value.column == column


def test_group_columns_cannot_be_the_value_column_or_missing():
    table = _rows(("2024-01-01", "lyon", "brakes", "pads", 1.0))
    with pytest.raises(TableError, match="is the value column"):
        split_groups(table, Columns(("warehouse", "value")))
    with pytest.raises(TableError, match="at least one group column"):
        split_groups(table, Columns(()))


def test_missing_values_stay_missing_for_the_model_to_judge():
    table = _rows(("2024-01-01", "lyon", "brakes", "pads", 1.0),
                  ("2024-02-01", "lyon", "brakes", "pads", None))
    (group,) = split_groups(table, COLUMNS).groups
    assert np.isnan(group.values[1, 0])


def test_parse_group_by():
    assert parse_group_by(" warehouse, family ,") == ("warehouse", "family")
