"""The ledger: every input row, with a status and a reason.

Each input row gets one integer ``key`` (its position in the concatenated
input, 0-based) when it is read. Every later step that drops, flags or
combines rows says so here, so that at the end every row is accounted for
exactly once as ``used``, ``flagged`` or ``excluded``.

Status precedence: ``excluded`` > ``flagged`` > ``used``. Reasons
accumulate (joined with ``"; "``).
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
import pandas as pd

USED, FLAGGED, EXCLUDED = "used", "flagged", "excluded"
_RANK = {USED: 0, FLAGGED: 1, EXCLUDED: 2}
LEDGER_COLUMNS = ["source_file", "source_row", "individual", "tissue", "status", "reason"]


_COPY_ON_WRITE = int(pd.__version__.split(".")[0]) >= 3
"""pandas 3 always copies on write: a shallow copy is then as private as a deep one."""


def _private_copy(frame: pd.DataFrame) -> pd.DataFrame:
    """Return a copy that in-place changes of either frame cannot reach (shallow under CoW)."""
    return frame.copy(deep=not _COPY_ON_WRITE)


class Ledger:
    """Row accounting for one or more input tables.

    Parameters
    ----------
    frame
        One row per input row, indexed by ``key`` (0..n-1), with at least
        ``source_file`` and ``source_row`` (1-based data row). Other columns
        (``individual``, ``tissue`` and any extra input columns) are carried.
    """

    def __init__(self, frame: pd.DataFrame) -> None:
        self._frame = _private_copy(frame)
        n = len(self._frame)
        self._status = np.zeros(n, dtype=np.int8)
        self._events: list[tuple[np.ndarray, str]] = []

    def __len__(self) -> int:
        return len(self._frame)

    @property
    def keys(self) -> np.ndarray:
        """All row keys."""
        return self._frame.index.to_numpy()

    def _mark(self, keys: Iterable[int] | int, status: str, reason: str) -> None:
        if np.isscalar(keys):
            keys = [int(keys)]  # type: ignore[list-item]
        if not isinstance(keys, np.ndarray | pd.Index | pd.Series | list | tuple):
            keys = list(keys)
        idx = np.asarray(keys, dtype=np.int64).ravel()
        if idx.size == 0:
            return
        rank = _RANK[status]
        self._status[idx] = np.maximum(self._status[idx], rank)
        if reason:
            self._events.append((idx, reason))

    def note(self, keys: Iterable[int] | int, reason: str) -> None:
        """Record a reason without changing the status (e.g. a correction applied)."""
        self._mark(keys, USED, reason)

    def flag(self, keys: Iterable[int] | int, reason: str) -> None:
        """Mark rows as used but questionable, with a reason."""
        self._mark(keys, FLAGGED, reason)

    def exclude(self, keys: Iterable[int] | int, reason: str) -> None:
        """Mark rows as not used, with a reason."""
        self._mark(keys, EXCLUDED, reason)

    def status_of(self, keys: Iterable[int]) -> np.ndarray:
        """Return the current status strings of ``keys``."""
        names = np.array([USED, FLAGGED, EXCLUDED])
        return names[self._status[np.asarray(keys, dtype=np.int64).ravel()]]

    def excluded_keys(self) -> np.ndarray:
        """Keys of rows that are excluded."""
        return self.keys[self._status == _RANK[EXCLUDED]]

    def to_frame(self) -> pd.DataFrame:
        """Return the ledger table (contract columns first, extra columns after)."""
        out = _private_copy(self._frame)
        names = np.array([USED, FLAGGED, EXCLUDED])
        out["status"] = names[self._status]
        out["reason"] = self._reason_strings()
        for col in LEDGER_COLUMNS:
            if col not in out.columns:
                out[col] = pd.NA
        rest = [c for c in out.columns if c not in LEDGER_COLUMNS]
        return out[LEDGER_COLUMNS + rest]

    def _reason_codes(self) -> tuple[np.ndarray, list[str]]:
        """Each row's set of distinct reasons as a code into a list of joined strings.

        Reasons are taken in the order first given. A row's code is built one
        reason at a time: the rows that carry reason ``r`` move from their
        current code to the code of (current set + ``r``), so the string work
        is done once per distinct set, not once per row. Code 0 is no reason.
        """
        n = len(self._frame)
        code = np.zeros(n, dtype=np.int64)
        strings = [""]
        rows_of: dict[str, list[np.ndarray]] = {}
        for idx, text in self._events:
            rows_of.setdefault(text, []).append(idx)
        for text, parts in rows_of.items():
            rows = parts[0] if len(parts) == 1 else np.concatenate(parts)
            inverse, parents = pd.factorize(code[rows])
            base = len(strings)
            strings.extend(text if p == 0 else f"{strings[p]}; {text}" for p in parents.tolist())
            code[rows] = base + inverse  # a row listed twice gets the same new code twice
        return code, strings

    def _reason_strings(self) -> np.ndarray:
        """Join each row's distinct reasons in the order first given (vectorised)."""
        code, strings = self._reason_codes()
        return np.asarray(strings, dtype=object)[code]

    def summary(self) -> pd.DataFrame:
        """Count rows by status and reason."""
        code, strings = self._reason_codes()
        pair = code * 3 + self._status
        uniq, counts = np.unique(pair, return_counts=True)
        names = np.array([USED, FLAGGED, EXCLUDED])
        text = np.asarray(strings, dtype=object)[uniq // 3]
        text[text == ""] = "-"
        f = pd.DataFrame({"status": names[uniq % 3], "reason": text, "rows": counts})
        return f.groupby(["status", "reason"])["rows"].sum().reset_index()
