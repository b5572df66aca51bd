"""Counts of what the fuzz, odd-data and fault tests tried and how each attempt ended.

Each test calls :func:`record` with its class (``intake``, ``workflow``,
``cli``, ``fault`` ...) and the outcome (``result``, ``clear_error`` or
``other``). With ``NSTRESS_FUZZ_TALLY=path.json`` in the environment the
totals are merged into that file when the test process ends, so the
figures of a run can be quoted; otherwise nothing is written.
"""

from __future__ import annotations

import atexit
import collections
import json
import os
from pathlib import Path

TALLY: collections.Counter[tuple[str, str]] = collections.Counter()


def record(kind: str, outcome: str) -> None:
    """Count one attempt of class ``kind`` that ended in ``outcome``."""
    TALLY[(kind, outcome)] += 1


def _dump() -> None:
    target = os.environ.get("NSTRESS_FUZZ_TALLY")
    if not target or not TALLY:
        return
    path = Path(target)
    old: dict[str, dict[str, int]] = {}
    if path.exists():
        try:
            old = json.loads(path.read_text())
        except ValueError:
            old = {}
    for (kind, outcome), n in TALLY.items():
        old.setdefault(kind, {})
        old[kind][outcome] = old[kind].get(outcome, 0) + n
    path.write_text(json.dumps(old, indent=2, sort_keys=True))


atexit.register(_dump)
