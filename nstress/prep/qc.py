"""Quality control of the sample table: atomic C:N and its accepted range per tissue.

Also holds the small helpers the other preparation steps share: the
per-row QC text (:class:`QCLog`), the mapping from sample rows to ledger
keys (:func:`ledger_keys`) and column access (:func:`numeric`,
:func:`tissue_names`).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from itertools import chain
from typing import Any

import numpy as np
import pandas as pd

from nstress._chem_equations import cn_atomic
from nstress.intake.ledger import Ledger
from nstress.tissues import Tissue

MASS_ATOMIC_GAP = 1.0 - 12.011 / 14.007
"""Relative gap between a mass and an atomic C:N of the same sample (about 14 %)."""


class QCLog:
    """Short per-row QC remarks, joined with ``"; "`` into the ``qc`` column.

    Parameters
    ----------
    n
        Number of sample rows.
    """

    def __init__(self, n: int) -> None:
        self.text = np.full(n, "", dtype=object)

    def add(self, mask: np.ndarray, *parts: str | np.ndarray | tuple[np.ndarray, str]) -> None:
        """Append a remark to the rows in ``mask``.

        Parameters
        ----------
        mask
            Rows to annotate.
        *parts
            Pieces of the remark: text, or a full-length float array
            (formatted ``"%.2f"``), or ``(array, printf_spec)``. Only the
            masked rows are formatted.
        """
        mask = np.asarray(mask, dtype=bool)
        k = int(mask.sum())
        if k == 0:
            return
        remark = np.full(k, "", dtype=object)
        for part in parts:
            if isinstance(part, str):
                remark = remark + part
            else:
                values, spec = part if isinstance(part, tuple) else (part, "%.2f")
                sel = np.asarray(values, dtype=float)[mask]
                remark = remark + np.char.mod(spec, sel).astype(object)
        old = self.text[mask]
        sep = np.where(old == "", "", "; ").astype(object)
        self.text[mask] = old + sep + remark


def one_reason(reason: str) -> str:
    """Return ``reason`` safe to join with others: the ledger separates reasons by ``"; "``."""
    return reason.replace("; ", ", ")


def numeric(frame: pd.DataFrame, column: str) -> np.ndarray:
    """Return ``column`` as a float array (NaN where absent or not a number)."""
    if column not in frame.columns:
        return np.full(len(frame), np.nan)
    return pd.to_numeric(frame[column], errors="coerce").to_numpy(dtype=float, na_value=np.nan)


def _by_distinct(s: pd.Series, func: Callable[[pd.Series], pd.Series]) -> np.ndarray:
    """``func(s)`` as an object array, for an elementwise ``func``.

    On a text column ``func`` runs once per distinct value, not once per row.
    """
    if isinstance(s.dtype, pd.StringDtype):
        codes, uniq = pd.factorize(s, use_na_sentinel=False)
        return func(pd.Series(uniq, dtype=s.dtype)).to_numpy(dtype=object)[codes]
    return func(s).to_numpy(dtype=object)


def text(frame: pd.DataFrame, column: str) -> np.ndarray:
    """Return ``column`` as stripped text (``""`` where absent or missing), as an object array."""
    if column not in frame.columns:
        return np.full(len(frame), "", dtype=object)
    return _by_distinct(frame[column], lambda s: s.astype("string").fillna("").str.strip())


def tissue_names(samples: pd.DataFrame) -> np.ndarray:
    """Return the lower-case tissue name of each row."""
    if "tissue" not in samples.columns:
        return np.full(len(samples), "", dtype=object)
    return _by_distinct(
        samples["tissue"], lambda s: s.astype("string").fillna("").str.strip().str.lower()
    )


def _flat_keys(vals: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Flatten a ``keys`` column: per-row counts and the keys in row order.

    Cells that are not a tuple, list or array count as no keys.
    """
    if set(map(type, vals)) <= {tuple, list}:  # the intake's tuples: no per-row checks
        lens = np.fromiter(map(len, vals), dtype=np.int64, count=len(vals))
        flat = np.fromiter(chain.from_iterable(vals), dtype=np.int64, count=int(lens.sum()))
        return lens, flat
    ok = [v if isinstance(v, tuple | list | np.ndarray) else () for v in vals]
    lens = np.fromiter(map(len, ok), dtype=np.int64, count=len(ok))
    return lens, np.fromiter(chain.from_iterable(ok), dtype=np.int64)


def ledger_keys(samples: pd.DataFrame, mask: np.ndarray) -> np.ndarray:
    """Return the ledger keys of the input rows behind the sample rows in ``mask``.

    A sample that combines several input rows (replicates) carries them
    all in ``keys``; every one of them gets the ledger entry. For many
    look-ups on one table, :class:`RowKeys` flattens the keys once.
    """
    mask = np.asarray(mask, dtype=bool)
    if not mask.any():
        return np.empty(0, dtype=np.int64)
    parts = []
    if "key" in samples.columns:
        parts.append(pd.to_numeric(samples.loc[mask, "key"], errors="coerce").dropna().to_numpy())
    if "keys" in samples.columns:
        parts.append(_flat_keys(samples["keys"].to_numpy(dtype=object)[mask])[1])
    if not parts:
        return np.empty(0, dtype=np.int64)
    return np.unique(np.concatenate(parts).astype(np.int64))


class RowKeys:
    """The ledger keys behind each sample row, flattened once for many look-ups.

    ``RowKeys(samples).of(mask)`` equals ``ledger_keys(samples, mask)``; the
    table's ``key`` and ``keys`` columns must not change in between.

    Parameters
    ----------
    samples
        Sample table with ``key`` and/or ``keys`` (tuples of input-row keys).
    """

    def __init__(self, samples: pd.DataFrame) -> None:
        n = len(samples)
        has_key = np.zeros(n, dtype=bool)
        key = np.zeros(n, dtype=np.int64)
        if "key" in samples.columns:
            k = pd.to_numeric(samples["key"], errors="coerce").to_numpy(dtype=float)
            has_key = ~np.isnan(k)
            key = np.where(has_key, k, 0).astype(np.int64)
        lens, flat = np.zeros(n, dtype=np.int64), np.empty(0, dtype=np.int64)
        if "keys" in samples.columns:
            lens, flat = _flat_keys(samples["keys"].to_numpy(dtype=object))
        self._count = has_key.astype(np.int64) + lens
        self._start = np.cumsum(self._count) - self._count
        keys = np.empty(int(self._count.sum()), dtype=np.int64)
        keys[self._start[has_key]] = key[has_key]
        first = self._start + has_key  # where each row's ``keys`` begin
        keys[np.repeat(first - (np.cumsum(lens) - lens), lens) + np.arange(flat.size)] = flat
        self._keys = keys

    def of(self, mask: np.ndarray) -> np.ndarray:
        """Return the sorted distinct ledger keys behind the rows in ``mask``.

        Parameters
        ----------
        mask
            Boolean mask over the sample rows.

        Returns
        -------
        numpy.ndarray
            int64 keys.
        """
        return self.of_rows(np.flatnonzero(np.asarray(mask, dtype=bool)))

    def of_rows(self, rows: np.ndarray) -> np.ndarray:
        """Return the sorted distinct ledger keys behind the sample rows at positions ``rows``.

        Parameters
        ----------
        rows
            Integer positions of sample rows.

        Returns
        -------
        numpy.ndarray
            int64 keys.
        """
        count = self._count[rows]
        total = int(count.sum())
        if total == 0:
            return np.empty(0, dtype=np.int64)
        pos = np.repeat(self._start[rows] - (np.cumsum(count) - count), count) + np.arange(total)
        keys = self._keys[pos]
        if (keys[1:] > keys[:-1]).all():  # already sorted and distinct (the usual case)
            return keys
        return np.unique(keys)


def _keys_of(samples: pd.DataFrame, row_keys: RowKeys | None) -> Callable[[np.ndarray], np.ndarray]:
    """``row_keys.of`` when given, else :func:`ledger_keys` on ``samples``."""
    if row_keys is not None:
        return row_keys.of
    return lambda mask: ledger_keys(samples, mask)


def add_cn(
    samples: pd.DataFrame,
    ledger: Ledger,
    qc: QCLog,
    *,
    tolerance: float,
    check: bool,
    row_keys: RowKeys | None = None,
) -> dict[str, Any]:
    """Fill ``cn_ratio`` from %C and %N where it is missing, in place, and check agreement.

    Adds ``cn_source``: ``"table"`` (given), ``"computed"`` (from mass
    percentages, :func:`nstress._chem_equations.cn_atomic`) or ``""``
    (unknown). Where both are given and differ by more than
    ``tolerance`` (relative), the rows are flagged: a mass C:N entered as
    atomic differs by about 14 %.

    Parameters
    ----------
    samples
        Sample table (changed in place).
    ledger
        Ledger to write flags to.
    qc
        Per-row QC remarks.
    tolerance
        Relative tolerance between the table's C:N and the one from %C/%N.
    check
        Whether to flag disagreements.
    row_keys
        :class:`RowKeys` of ``samples`` when the caller has them.

    Returns
    -------
    dict
        Counts for the report.
    """
    table = numeric(samples, "cn_ratio")
    pc, pn = numeric(samples, "pct_C"), numeric(samples, "pct_N")
    ok = (pc > 0) & (pc <= 100) & (pn > 0) & (pn <= 100)
    computed = np.where(ok, cn_atomic(pc, pn), np.nan)
    has_table = np.isfinite(table) & (table > 0)
    has_comp = np.isfinite(computed)
    cn = np.where(has_table, table, computed)
    source = np.where(has_table, "table", np.where(has_comp, "computed", "")).astype(object)
    disagree = np.zeros(len(samples), dtype=bool)
    if check:
        both = has_table & has_comp
        with np.errstate(invalid="ignore"):
            disagree = both & (np.abs(table - computed) > tolerance * computed)
        ledger.flag(
            _keys_of(samples, row_keys)(disagree),
            f"cn_ratio disagrees with %C/%N by more than {tolerance:.0%} "
            f"(a mass C:N entered as atomic differs by {MASS_ATOMIC_GAP:.0%})",
        )
        qc.add(disagree, "C:N ", table, " in table vs ", computed, " from %C/%N")
    samples["cn_ratio"] = cn
    samples["cn_source"] = source
    return {
        "from_table": int(has_table.sum()),
        "computed": int((~has_table & has_comp).sum()),
        "missing": int((~has_table & ~has_comp).sum()),
        "table_disagrees_with_percent": int(disagree.sum()),
        "tolerance": float(tolerance),
        "basis": "atomic C:N = (%C/12.011)/(%N/14.007)",
    }


def check_cn_range(
    samples: pd.DataFrame,
    tissues: Mapping[str, Tissue],
    ledger: Ledger,
    qc: QCLog,
    *,
    row_keys: RowKeys | None = None,
) -> dict[str, Any]:
    """Flag rows whose C:N lies outside their tissue's accepted range.

    The ledger reason names the tissue, the range, its source
    (``Tissue.sources["cn"]``) and whether the C:N was given or computed
    from %C/%N; the QC text gives the row's value.

    Parameters
    ----------
    samples
        Sample table with ``cn_ratio`` and ``cn_source`` (see :func:`add_cn`).
    tissues
        Tissue registry.
    ledger
        Ledger to write flags to.
    qc
        Per-row QC remarks.
    row_keys
        :class:`RowKeys` of ``samples`` when the caller has them.

    Returns
    -------
    dict
        Per tissue: range, source and counts below, above and without C:N.
    """
    names = tissue_names(samples)
    cn = numeric(samples, "cn_ratio")
    source = text(samples, "cn_source")
    known = np.isfinite(cn)
    keys_of = _keys_of(samples, row_keys)
    out: dict[str, Any] = {}
    for name in sorted(set(names.tolist())):
        tissue = tissues.get(name)
        if tissue is None:
            continue
        m = names == name
        lo, hi = (float(v) for v in tissue.cn_range)
        src = one_reason(tissue.sources.get("cn", "no source given"))
        with np.errstate(invalid="ignore"):
            below, above = m & known & (cn < lo), m & known & (cn > hi)
        for origin, label in (("table", "C:N as given"), ("computed", "C:N from %C/%N")):
            bad = (below | above) & (source == origin)
            ledger.flag(
                keys_of(bad),
                f"C:N outside the {name} range {lo:g}-{hi:g} ({src}), {label}",
            )
        qc.add(below, "C:N ", cn, f" below {lo:g}")
        qc.add(above, "C:N ", cn, f" above {hi:g}")
        out[name] = {
            "range": [lo, hi],
            "source": src,
            "n_rows": int(m.sum()),
            "n_below": int(below.sum()),
            "n_above": int(above.sum()),
            "n_without_cn": int((m & ~known).sum()),
        }
    return out
