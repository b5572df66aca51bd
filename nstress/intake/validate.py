"""Parse and check one raw table: types, required values, plausibility.

All checks are vectorised masks over the table; an error names the file,
the 1-based data row, the column, the value as written and what was
expected. Numbers may use the typographic minus sign (U+2212); in
``;``-separated files, a decimal comma. Errors of a file are gathered (at
most :data:`ROW_ERROR_LIMIT` spelled out per check, the rest counted) and
raised together by the caller.

Plausibility of δ values
------------------------
* Soft ranges (:data:`SOFT_RANGES`, from memory): animal tissue rarely lies
  outside δ15N -5..+30 ‰ or δ13C -40..-5 ‰. A sample outside is *flagged*,
  not rejected (reference-material rows are not checked: their values are
  certified, e.g. USGS41a δ15N +47.55 ‰).
* Hard limit (:data:`HARD_LIMIT`): |δ| > 100 ‰ is far beyond natural
  abundance in any tissue and is an *error* (common practice).
* Wrong scale, an *error* for the whole column (file-level):
  - 13C/12C ratios: every δ13C value in 0.0100..0.0125 (R_VPDB ≈ 0.01118,
    from memory; the band covers ±100 ‰ around it);
  - 15N/14N ratios: every δ15N value in 0.0033..0.0041 (R_AIR ≈ 0.003677,
    from memory);
  - fractions (δ not multiplied by 1000): every δ13C value within ±0.1
    (for animal tissue δ13C near 0 ‰ is implausible), or every δ15N value
    within ±0.1 when there are at least 3 values or δ13C looks wrong too
    (a single δ15N near 0 ‰ can be real).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date as _date

import numpy as np
import pandas as pd

from nstress.aminoacids import DEFAULT_AA_SD
from nstress.errors import InputError
from nstress.intake.columns import (
    AMINO_ACIDS,
    CANONICAL,
    DATES,
    FALSE_WORDS,
    ISOTOPES,
    MISSING,
    NUMERIC,
    TEXT,
    TRUE_WORDS,
    normalise_tissue_name,
)
from nstress.intake.files import RawTable
from nstress.tissues import Tissue

ROW_ERROR_LIMIT = 10
SOFT_RANGES = {"d15N": (-5.0, 30.0), "d13C": (-40.0, -5.0)}
HARD_LIMIT = 100.0
RATIO_BANDS = {"d13C": (0.0100, 0.0125), "d15N": (0.0033, 0.0041)}
FRACTION_LIMIT = 0.1
AA_SOFT_RANGE = (-20.0, 40.0)
AA_PHE_ONLY = (
    "amino-acid pair incomplete: d15N_Phe without d15N_Glu "
    "(no trophic position, Phe still sets the baseline offset)"
)
AA_GLU_ONLY = "amino-acid pair incomplete: d15N_Glu without d15N_Phe (Glu not used)"

# column: (lower bound, lower bound allowed?, upper bound or None, what is expected)
LIMITS: dict[str, tuple[float, bool, float | None, str]] = {
    "position_mm": (0.0, True, None, "a distance >= 0 mm from the growing end"),
    "segment_length_mm": (0.0, False, None, "a segment length > 0 mm"),
    "sd_d15N": (0.0, False, None, "an analytical SD > 0 ‰"),
    "sd_d13C": (0.0, False, None, "an analytical SD > 0 ‰"),
    "sd_d15N_Glu": (0.0, False, None, "an analytical SD > 0 ‰"),
    "sd_d15N_Phe": (0.0, False, None, "an analytical SD > 0 ‰"),
    "pct_C": (0.0, True, 100.0, "a mass percentage 0-100"),
    "pct_N": (0.0, True, 100.0, "a mass percentage 0-100"),
    "cn_ratio": (0.0, False, None, "an atomic C:N ratio > 0"),
    "growth_mm_per_day": (0.0, False, None, "a growth rate > 0 mm/d"),
    "growth_sd_mm_per_day": (0.0, True, None, "an SD >= 0 mm/d"),
    "mass_kg": (0.0, False, None, "a body mass > 0 kg"),
}
REQUIRED_BY_CLASS = {
    "keratin": {
        "position_mm": "the distance (mm) from the growing end to the segment midpoint",
        "collected": "the ISO date (YYYY-MM-DD) the keratin was removed",
    },
    "blood": {"date": "the ISO date (YYYY-MM-DD) the sample was drawn"},
}
ISO_DATE = (
    r"\d{4}-\d{2}-\d{2}"
    r"(?:[T ](?:[01]\d|2[0-3]):[0-5]\d(?::[0-5]\d(?:[.,]\d+)?)?"
    r"(?:Z|[+-](?:[01]\d|2[0-3]):?[0-5]\d)?)?"
)
_FIRST_DAY = pd.Timestamp("1700-01-01")  # inside what a nanosecond timestamp holds
_LAST_DAY = pd.Timestamp("2200-12-31")
EMPTY_ROW = "empty row"
NO_ISOTOPES = "no d15N or d13C value"
FUTURE_DATE = "date in the future"
REFERENCE = "reference material"


def soft_range_reason(col: str) -> str:
    """Return the ledger reason for a δ value outside the soft range of ``col``."""
    lo, hi = SOFT_RANGES[col]
    return f"{col} outside plausible animal-tissue range ({lo:g} to {hi:g} ‰)"


@dataclass
class Checked:
    """One file after parsing and checking.

    Attributes
    ----------
    frame
        Typed table, one row per input row (``key``, ``source_file``,
        ``source_row``, ``is_reference``, every canonical column, extras).
    ledger_frame
        The input rows for the ledger (as written, stripped), indexed by key.
    errors
        Every problem found.
    marks
        ``(action, mask, reason)`` with action ``note``/``flag``/``exclude``.
    notes
        File-level remarks.
    extras
        Names of the extra columns.
    """

    frame: pd.DataFrame
    ledger_frame: pd.DataFrame
    errors: list[InputError] = field(default_factory=list)
    marks: list[tuple[str, np.ndarray, str]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    extras: list[str] = field(default_factory=list)


class _Errors:
    def __init__(self, file: str) -> None:
        self.file = file
        self.items: list[InputError] = []

    def sorted(self) -> list[InputError]:
        """File-level problems first, then by row (stable within a row)."""
        return sorted(self.items, key=lambda e: (e.row is not None, e.row or 0))

    def whole(
        self, message: str, column: str | None = None, row: int | None = None, value: object = None
    ) -> None:
        self.items.append(InputError(message, file=self.file, row=row, column=column, value=value))

    def rows(self, mask: np.ndarray, column: str, values: pd.Series, message: str) -> None:
        idx = np.flatnonzero(mask)
        if idx.size == 0:
            return
        shown = values.iloc[idx[:ROW_ERROR_LIMIT]].tolist()
        for i, v in zip(idx[:ROW_ERROR_LIMIT].tolist(), shown, strict=True):
            self.whole(message, column, i + 1, str(v))
        if idx.size > ROW_ERROR_LIMIT:
            more = idx.size - ROW_ERROR_LIMIT
            self.whole(f"{more} more row(s) with the same problem: {message}", column)


def _case_variants(words: tuple[str, ...]) -> list[str]:
    out: set[str] = set()
    for w in words:
        forms = [""]
        for ch in w:
            forms = [f + c for f in forms for c in {ch.lower(), ch.upper()}]
        out.update(forms)
    return sorted(out)


_MISSING_FORMS = _case_variants(MISSING)


def _missing(s: pd.Series) -> np.ndarray:
    """Cells that read as missing (:data:`~nstress.intake.columns.MISSING`, any case)."""
    return s.isin(_MISSING_FORMS).to_numpy()


def _where(s: pd.Series, cond: np.ndarray, other: object) -> pd.Series:
    """``s.where(cond, other)``, without its pass over the column when ``cond`` holds everywhere."""
    return s if cond.all() else s.where(cond, other)


def _blank_missing(s: pd.Series, miss: np.ndarray) -> pd.Series:
    """``s.where(~miss, "")``: skipped when every missing cell is ``""`` already."""
    if not miss.any() or not (miss & (s != "").to_numpy(dtype=bool)).any():
        return s
    return s.where(~miss, "")


def _all_empty(f: pd.DataFrame) -> np.ndarray:
    """Rows whose every cell is ``""``: each column is compared on the rows still in question."""
    n = len(f)
    rows = np.arange(n)
    for c in f.columns:
        if rows.size == 0:
            break
        v = f[c] if rows.size == n else f[c].iloc[rows]
        rows = rows[(v == "").to_numpy(dtype=bool)]
    out = np.zeros(n, dtype=bool)
    out[rows] = True
    return out


def _take(values: list[object], codes: np.ndarray, dtype: str) -> pd.Series:
    """Expand one value per distinct input back to every row (fast ``take``)."""
    return pd.Series(values, dtype=dtype).take(codes).reset_index(drop=True)


def check_table(raw: RawTable, tissues: dict[str, Tissue], default_sd: float, key0: int) -> Checked:
    """Parse and check one raw table.

    Parameters
    ----------
    raw
        The file as strings (:func:`nstress.intake.files.read_raw`).
    tissues
        Tissue registry, name -> :class:`~nstress.tissues.Tissue`.
    default_sd
        Analytical SD (‰) for empty ``sd_d15N``/``sd_d13C`` cells.
    key0
        Ledger key of the file's first row.

    Returns
    -------
    Checked
        With ``errors`` non-empty when the file is unusable.
    """
    f = raw.frame
    n = len(f)
    err = _Errors(raw.path)
    notes = list(raw.notes)
    marks: list[tuple[str, np.ndarray, str]] = []
    present = set(f.columns)
    extras = [c for c in f.columns if c not in CANONICAL]
    blank = pd.Series("", index=f.index, dtype=str)

    def col(name: str) -> pd.Series:
        return f[name] if name in present else blank

    raw_values = {c: col(c) for c in CANONICAL}
    miss = {c: _missing(f[c]) if c in present else np.ones(n, bool) for c in CANONICAL}

    no_iso = [c for c in ISOTOPES if c not in present]
    if len(no_iso) == 2:
        err.whole(
            "no d15N or d13C column; expected columns named d15N and d13C (‰ vs AIR / VPDB)",
            column="d15N",
        )
    elif no_iso:
        notes.append(f"{raw.path}: no {no_iso[0]} column; {no_iso[0]} treated as empty")
        marks.append(("note", np.ones(n, bool), f"no {no_iso[0]} column in file"))

    text = {c: _blank_missing(col(c), miss[c]) for c in TEXT}
    is_ref = (text["reference_material"] != "").to_numpy()
    both_empty = miss["d15N"] & miss["d13C"]
    all_empty = _all_empty(f)
    marks.append(("exclude", all_empty, EMPTY_ROW))
    marks.append(("exclude", both_empty & ~all_empty, NO_ISOTOPES))
    if n and both_empty.all() and len(no_iso) < 2:
        err.whole(
            "no row has a d15N or d13C value; expected per-mil values in columns d15N and d13C",
            column="d15N",
        )
    samp = ~both_empty & ~is_ref
    marks.append(("note", is_ref & ~both_empty, REFERENCE))

    for name in ("individual", "tissue"):
        if name not in present and samp.any():
            err.whole(f"required column {name!r} is missing", column=name)
    if err.items:
        return Checked(pd.DataFrame(), pd.DataFrame(), err.sorted(), marks, notes, extras)

    err.rows(
        samp & (text["individual"] == "").to_numpy(),
        "individual",
        raw_values["individual"],
        "individual is empty; expected an animal identifier",
    )
    tissue, tclass = _tissues(text["tissue"], tissues)
    known = ", ".join(sorted(tissues))
    t_empty = (tissue == "").to_numpy()
    t_unknown = ~t_empty & (tclass == "").to_numpy()
    err.rows(
        samp & t_empty, "tissue", raw_values["tissue"], f"tissue is empty; expected one of: {known}"
    )
    err.rows(
        samp & t_unknown,
        "tissue",
        raw_values["tissue"],
        f"unknown tissue; expected one of: {known} (or declare it in a workflow file)",
    )

    nums = {c: _numbers(col(c), miss[c], c, raw.decimal_comma, raw_values[c], err) for c in NUMERIC}
    for c, (lo, lo_ok, hi, what) in LIMITS.items():
        x = nums[c]
        with np.errstate(invalid="ignore"):
            bad = (x < lo) if lo_ok else (x <= lo)
            if hi is not None:
                bad |= x > hi
        err.rows(bad, c, raw_values[c], f"expected {what}")
    _isotope_checks(nums, samp, raw_values, err, marks)
    _amino_acid_checks(nums, samp, raw_values, err, marks)

    dates = {c: _dates(col(c), miss[c], c, raw_values[c], err) for c in DATES}
    today = np.datetime64(_date.today(), "ns")
    for klass, needed in REQUIRED_BY_CLASS.items():
        rows = samp & (tclass == klass).to_numpy()
        if not rows.any():
            continue
        first = int(np.argmax(rows))
        for c, what in needed.items():
            if c not in present:
                err.whole(
                    f"required column {c!r} is missing: {klass} rows need {what} "
                    f"(first {klass} row: {first + 1}, tissue {str(tissue.iloc[first])!r})",
                    column=c,
                )
            else:
                err.rows(rows & miss[c], c, raw_values[c], f"{klass} rows need {what}")
        for c in needed:
            if c in DATES:
                marks.append(("flag", rows & (dates[c].to_numpy() > today), FUTURE_DATE))

    lipid = _booleans(col("lipid_extracted"), miss["lipid_extracted"], raw_values, err)
    role = text["reference_role"].str.lower()
    err.rows(
        ~role.isin(["", "anchor", "check"]).to_numpy(),
        "reference_role",
        raw_values["reference_role"],
        "expected 'anchor', 'check' or empty",
    )

    for c in ("sd_d15N", "sd_d13C"):
        nums[c] = np.where(np.isnan(nums[c]), default_sd, nums[c])
    for c in AMINO_ACIDS:
        nums[f"sd_{c}"] = np.where(np.isnan(nums[f"sd_{c}"]), DEFAULT_AA_SD, nums[f"sd_{c}"])
    group = _where(text["group"], (text["group"] != "").to_numpy(), "all")
    out = pd.DataFrame(
        {
            "key": np.arange(key0, key0 + n, dtype=np.int64),
            "source_file": pd.Series(raw.path, index=f.index, dtype=str),
            "source_row": np.arange(1, n + 1, dtype=np.int64),
            "is_reference": is_ref,
            "individual": text["individual"],
            "tissue": tissue,
            "tissue_class": tclass,
            "group": group,
            **nums,
            **dates,
            "sample_id": text["sample_id"],
            "lipid_extracted": lipid,
            "reference_material": text["reference_material"],
            "reference_role": role,
            "analysis_batch": text["analysis_batch"],
        },
        index=f.index,
    )
    for c in extras:
        out[c] = f[c]
    led = {
        "source_file": out["source_file"],
        "source_row": out["source_row"],
        "individual": out["individual"],
        "tissue": _where(tissue, ~t_empty, col("tissue")),
    }
    led.update({c: f[c] for c in f.columns if c not in ("individual", "tissue")})
    ledger_frame = pd.DataFrame(led)
    ledger_frame.index = pd.RangeIndex(key0, key0 + n, name="key")
    return Checked(out, ledger_frame, err.sorted(), marks, notes, extras)


def _tissues(values: pd.Series, tissues: dict[str, Tissue]) -> tuple[pd.Series, pd.Series]:
    """Normalise tissue names (once per distinct value) and look up their class."""
    codes, uniq = pd.factorize(values)
    known = frozenset(tissues)
    names = [normalise_tissue_name(str(u), known) for u in uniq] or [""]
    klass = [tissues[t].klass if t in tissues else "" for t in names]
    return _take(names, codes, "str"), _take(klass, codes, "str")


def _numbers(
    s: pd.Series, miss: np.ndarray, c: str, decimal_comma: bool, raw: pd.Series, err: _Errors
) -> np.ndarray:
    """Parse a numeric column; text is an error (value shown as written)."""
    if miss.all():
        return np.full(len(s), np.nan)
    t = s.str.replace(",", ".", regex=False) if decimal_comma else s
    if t.str.contains("\u2212", regex=False).any():  # typographic minus from word processors
        t = t.str.replace("\u2212", "-", regex=False)
    x = _fast_floats(t, miss)
    if x is None:
        parsed = pd.to_numeric(_where(t, ~miss, np.nan), errors="coerce")
        x = parsed.to_numpy(dtype=float, na_value=np.nan, copy=True)
    bad = ~miss & ~np.isfinite(x)
    if bad.any():
        comma = np.zeros(len(s), bool)
        if not decimal_comma:
            comma[bad] = s[bad].str.fullmatch(r"[+-]?\d*,\d+").to_numpy()
        err.rows(bad & ~comma, c, raw, "expected a number")
        err.rows(
            comma,
            c,
            raw,
            "expected a number with '.' as decimal mark "
            "(a decimal comma is read only in ';'-separated files)",
        )
        x[bad] = np.nan
    return x


def _fast_floats(t: pd.Series, miss: np.ndarray) -> np.ndarray | None:
    """Parse with pyarrow when every value not ``miss`` is a valid number; ``None`` otherwise.

    Missing cells become NaN (nulls in pyarrow, not a pandas pass over the column).
    """
    try:
        import pyarrow as pa
        import pyarrow.compute as pc
    except ImportError:
        return None
    try:
        arr = pa.array(t, from_pandas=True)
        if miss.any():
            arr = pc.if_else(pa.array(~miss), arr, pa.scalar(None, type=arr.type))
        arr = pc.cast(arr, pa.float64())
    except (pa.ArrowInvalid, pa.ArrowTypeError, pa.ArrowNotImplementedError):
        return None
    return np.array(arr.to_numpy(zero_copy_only=False), dtype=float)


def _dates(s: pd.Series, miss: np.ndarray, c: str, raw: pd.Series, err: _Errors) -> pd.Series:
    """Parse ISO 8601 dates, keeping the calendar day as written (once per distinct value)."""
    if miss.all():
        return pd.Series(pd.NaT, index=s.index, dtype="datetime64[ns]")
    codes, uniq = pd.factorize(s)
    u = pd.Series(uniq, dtype=str)
    u_iso = u.str.fullmatch(ISO_DATE).to_numpy(dtype=bool, na_value=False)
    u_day = pd.to_datetime(u.str.slice(0, 10).where(u_iso), format="%Y-%m-%d", errors="coerce")
    iso = u_iso[codes] & ~miss
    other = ~miss & ~iso
    if other.any():
        if iso.any():
            msg = (
                f"mixed date formats in this column ({int(iso.sum())} ISO, "
                f"{int(other.sum())} other); expected ISO 8601 dates (YYYY-MM-DD) throughout"
            )
        else:
            msg = "expected an ISO 8601 date (YYYY-MM-DD)"
        err.rows(other, c, raw, msg)
    u_ok = (u_day >= _FIRST_DAY) & (u_day <= _LAST_DAY)  # NaT compares False
    u_far = u_day.notna().to_numpy() & ~u_ok.to_numpy()
    far = u_far[codes] & ~miss
    err.rows(
        far,
        c,
        raw,
        f"date out of range; expected a date from {_FIRST_DAY:%Y-%m-%d} to {_LAST_DAY:%Y-%m-%d}",
    )
    u_day = u_day.where(u_ok)
    d = u_day.where(pd.Series(u_iso)).astype("datetime64[ns]").take(codes).reset_index(drop=True)
    err.rows(
        iso & ~far & d.isna().to_numpy(), c, raw, "impossible date; expected a real calendar date"
    )
    d.index = s.index
    return d.where(~miss)


def _booleans(s: pd.Series, miss: np.ndarray, raw: dict[str, pd.Series], err: _Errors) -> pd.Series:
    low = s.str.lower()
    yes = low.isin(TRUE_WORDS).to_numpy()
    no = low.isin(FALSE_WORDS).to_numpy()
    err.rows(
        ~(yes | no | miss),
        "lipid_extracted",
        raw["lipid_extracted"],
        "expected true or false (also yes/no, y/n, 1/0)",
    )
    out = pd.array(np.where(yes, True, False), dtype="boolean")
    out[~(yes | no)] = pd.NA
    return pd.Series(out, index=s.index)


def _isotope_checks(
    nums: dict[str, np.ndarray],
    samp: np.ndarray,
    raw: dict[str, pd.Series],
    err: _Errors,
    marks: list[tuple[str, np.ndarray, str]],
) -> None:
    """Scale (fraction/ratio), hard-limit and soft-range checks of δ columns."""
    scale = {c: _scale_problem(c, nums[c], nums["d13C"]) for c in ISOTOPES}
    for c in ISOTOPES:
        x = nums[c]
        if scale[c] is not None:
            first = int(np.argmax(np.isfinite(x)))
            err.whole(scale[c], c, first + 1, str(raw[c].iloc[first]))
            continue
        with np.errstate(invalid="ignore"):
            hard = np.abs(x) > HARD_LIMIT
            lo, hi = SOFT_RANGES[c]
            soft = samp & ~hard & ((x < lo) | (x > hi))
        err.rows(
            hard,
            c,
            raw[c],
            f"|{c}| > {HARD_LIMIT:g} ‰ is beyond natural abundance; expected a per-mil δ value",
        )
        marks.append(("flag", soft, soft_range_reason(c)))


def aa_soft_range_reason(col: str) -> str:
    """Return the ledger reason for an amino-acid δ15N outside :data:`AA_SOFT_RANGE`."""
    lo, hi = AA_SOFT_RANGE
    return f"{col} outside plausible amino-acid range ({lo:g} to {hi:g} ‰)"


def _amino_acid_checks(
    nums: dict[str, np.ndarray],
    samp: np.ndarray,
    raw: dict[str, pd.Series],
    err: _Errors,
    marks: list[tuple[str, np.ndarray, str]],
) -> None:
    """Hard limit and soft range of the amino-acid δ15N columns; incomplete pairs."""
    for c in AMINO_ACIDS:
        x = nums[c]
        with np.errstate(invalid="ignore"):
            hard = np.abs(x) > HARD_LIMIT
            lo, hi = AA_SOFT_RANGE
            soft = samp & ~hard & ((x < lo) | (x > hi))
        err.rows(
            hard,
            c,
            raw[c],
            f"|{c}| > {HARD_LIMIT:g} ‰ is beyond natural abundance; expected a per-mil δ value",
        )
        marks.append(("flag", soft, aa_soft_range_reason(c)))
    glu, phe = (np.isfinite(nums[c]) for c in AMINO_ACIDS)
    marks.append(("note", samp & phe & ~glu, AA_PHE_ONLY))
    marks.append(("note", samp & glu & ~phe, AA_GLU_ONLY))


def _scale_problem(c: str, x: np.ndarray, d13c: np.ndarray) -> str | None:
    v = x[np.isfinite(x)]
    if v.size == 0:
        return None
    lo, hi = RATIO_BANDS[c]
    heavy, light = ("13C", "12C") if c == "d13C" else ("15N", "14N")
    if np.all((v >= lo) & (v <= hi)):
        return (
            f"values look like {heavy}/{light} isotope ratios (about {np.median(v):.5f}) "
            f"or fractions, not δ in per mil; expected per-mil {c} values (e.g. "
            f"{'-18.2' if c == 'd13C' else '12.3'})"
        )
    fraction = bool(np.all(np.abs(v) <= FRACTION_LIMIT) and np.any(v != 0))
    if fraction and c == "d15N" and v.size < 3:
        w = d13c[np.isfinite(d13c)]
        fraction = bool(w.size and np.all(np.abs(w) <= FRACTION_LIMIT))
    if fraction:
        ex = float(np.median(v))
        return (
            f"values look like fractions (e.g. {ex:.4g} for {ex * 1000:.3g} ‰), not per mil; "
            f"expected per-mil {c} values (multiply by 1000)"
        )
    return None
