"""Ledger: the vectorised reason strings and summary against a row-by-row reference.

All rows and reasons here are invented (synthetic) for the tests.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from nstress.intake.ledger import EXCLUDED, FLAGGED, LEDGER_COLUMNS, USED, Ledger


def _frame(n: int) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "source_file": "t.csv",
            "source_row": np.arange(1, n + 1),
            "individual": [f"A{i % 7}" for i in range(n)],
            "tissue": "whisker",
            "comment": [f"c{i}" for i in range(n)],
        },
        index=pd.RangeIndex(n, name="key"),
    )


def _reference(n: int, events: list[tuple[str, np.ndarray, str]]) -> tuple[list, list]:
    """Row by row: status (max rank) and distinct reasons in the order first given."""
    rank = {USED: 0, FLAGGED: 1, EXCLUDED: 2}
    order: dict[str, int] = {}
    for _, keys, text in events:
        if text and keys.size:  # a call without keys records nothing
            order.setdefault(text, len(order))
    status = [0] * n
    sets: list[set[str]] = [set() for _ in range(n)]
    for action, keys, text in events:
        for k in keys.tolist():
            status[k] = max(status[k], rank[action])
            if text:
                sets[k].add(text)
    names = [USED, FLAGGED, EXCLUDED]
    reasons = ["; ".join(sorted(s, key=order.__getitem__)) for s in sets]
    return [names[s] for s in status], reasons


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_reasons_and_status_match_row_by_row_reference(seed):
    rng = np.random.default_rng(seed)
    n = 500
    # more than 64 distinct reasons (the old bit-set used 64-bit words), repeats,
    # keys listed twice in one call, empty reasons, and rows with no event at all
    texts = [f"reason {j}" for j in range(90)] + [""]
    events = []
    for _ in range(400):
        action = [USED, FLAGGED, EXCLUDED][rng.integers(0, 3)]
        size = int(rng.integers(0, 40))
        keys = rng.integers(0, n - 50, size)  # the last 50 rows never get an event
        events.append((action, keys, texts[rng.integers(0, len(texts))]))
    led = Ledger(_frame(n))
    for action, keys, text in events:
        {USED: led.note, FLAGGED: led.flag, EXCLUDED: led.exclude}[action](keys, text)
    status, reasons = _reference(n, events)
    f = led.to_frame()
    assert f["status"].tolist() == status
    assert f["reason"].tolist() == reasons
    assert (f["reason"].iloc[-50:] == "").all()
    assert list(f.columns) == LEDGER_COLUMNS + ["comment"]
    # the summary counts what to_frame shows
    g = f.assign(reason=f["reason"].replace("", "-")).groupby(["status", "reason"]).size()
    expected = g.rename("rows").reset_index()
    pd.testing.assert_frame_equal(led.summary(), expected)


def test_scalar_keys_and_no_events():
    led = Ledger(_frame(4))
    assert led.to_frame()["reason"].tolist() == ["", "", "", ""]
    assert led.summary().to_dict("records") == [{"status": USED, "reason": "-", "rows": 4}]
    led.flag(2, "odd value")
    led.note([2, 2, 3], "combined")
    led.exclude(np.array([0]), "empty row")
    f = led.to_frame()
    assert f["reason"].tolist() == ["empty row", "", "odd value; combined", "combined"]
    assert f["status"].tolist() == [EXCLUDED, USED, FLAGGED, USED]
    assert led.excluded_keys().tolist() == [0]


def test_ledger_is_not_changed_through_its_input_or_output():
    frame = _frame(3)
    led = Ledger(frame)
    frame.loc[0, "comment"] = "changed by the caller"
    out = led.to_frame()
    out.loc[1, "comment"] = "changed in the output"
    again = led.to_frame()
    assert again["comment"].tolist() == ["c0", "c1", "c2"]
    assert "status" not in frame.columns
