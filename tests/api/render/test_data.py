"""Contract form of the rows a request used."""

from service.api.encode import to_jsonable
from service.api.render.data import data_summary
from service.core.data import DROPPED_LIST_CAP, prepare


def test_dropped_rows_are_numbered_from_one_and_counted_beyond_the_list():
    # a table with every other response value missing: rows 1, 3, 5, ... are dropped
    n = DROPPED_LIST_CAP + 5
    y = [None if i % 2 == 0 else float(i) for i in range(2 * n)]
    x = [float(i % 7) for i in range(2 * n)]
    out = to_jsonable(prepare({"columns": {"y": y, "x": x}}, "y", ["x"]).data_summary())
    assert set(out) == {"rows_received", "rows_used", "rows_dropped", "dropped", "dropped_listed"}
    assert out["rows_received"] == 2 * n and out["rows_used"] == n and out["rows_dropped"] == n
    assert out["dropped_listed"] == len(out["dropped"]) == DROPPED_LIST_CAP
    assert out["dropped"][:2] == [
        {"row": 1, "reason": "missing value in 'y'"},
        {"row": 3, "reason": "missing value in 'y'"},
    ]


def test_a_table_without_gaps_drops_nothing():
    prep = prepare({"columns": {"y": [1.0, 2.0, 4.0, 3.0], "x": [1.0, 2.0, 3.0, 4.0]}}, "y", ["x"])
    assert data_summary(prep.data_summary()) == {
        "rows_received": 4,
        "rows_used": 4,
        "rows_dropped": 0,
        "dropped": [],
        "dropped_listed": 0,
    }
