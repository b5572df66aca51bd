"""Test-suite guards shared by every test module."""

from __future__ import annotations

import sys

import pytest

_PATCHABLE = (
    ("nstress.workflow.pipeline", "fit_tables"),
    ("nstress.products.report", "write_report"),
)


def _current() -> dict[tuple[str, str], object]:
    return {
        (mod, name): getattr(sys.modules[mod], name)
        for mod, name in _PATCHABLE
        if mod in sys.modules
    }


@pytest.fixture(autouse=True)
def _no_leaked_stubs():
    """Fail the test that leaves the unit fit or the report stubbed for the tests after it."""
    before = _current()
    yield
    after = _current()
    leaked = [key for key, value in before.items() if after.get(key) is not value]
    for mod, name in leaked:
        setattr(sys.modules[mod], name, before[(mod, name)])
    if leaked:
        pytest.fail(f"the test left {', '.join(f'{m}.{n}' for m, n in leaked)} replaced")
