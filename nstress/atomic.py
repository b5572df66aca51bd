"""Atomic file writes: write to a temporary path in the same folder, then rename.

An interrupted run never leaves a half-written file under a final name.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Callable, Iterator
from pathlib import Path

from nstress.errors import NstressError


class OutputError(NstressError):
    """An output could not be written (read-only folder, full disk, ...)."""

    exit_code = 2


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path next to ``path``; rename it onto ``path`` on success.

    Parameters
    ----------
    path
        The final file name.

    Yields
    ------
    pathlib.Path
        Where to write. On an exception the temporary file is removed and
        ``path`` is left as it was.
    """
    final = Path(path)
    try:
        final.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{final.name}.", suffix=".tmp", dir=final.parent)
        os.close(fd)
    except OSError as exc:
        raise OutputError(f"cannot write {final}: {exc.strerror or exc}") from exc
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        os.replace(tmp_path, final)
    except OSError as exc:
        tmp_path.unlink(missing_ok=True)
        raise OutputError(f"cannot write {final}: {exc.strerror or exc}") from exc
    except BaseException:
        tmp_path.unlink(missing_ok=True)
        raise


def atomic_write(path: str | os.PathLike[str], writer: Callable[[Path], object]) -> Path:
    """Call ``writer(tmp_path)`` and move the result onto ``path`` atomically.

    Parameters
    ----------
    path
        Final file name.
    writer
        Function that writes the file at the path it is given.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    with atomic_path(path) as tmp:
        writer(tmp)
    return Path(path)


def atomic_write_text(path: str | os.PathLike[str], text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` atomically."""
    return atomic_write(path, lambda p: p.write_text(text, encoding="utf-8"))
