"""Read one input file into a table of stripped strings with canonical headers.

Every cell is read as text first, so that messages can show the value as
written. Supported files:

* delimited text (``.csv``, ``.tsv``, ``.txt``): UTF-8 with or without a
  byte-order mark (UTF-16 with a mark), otherwise Latin-1 (a note says so);
  the delimiter is sniffed among ``,`` ``;`` and tab from the header line;
  in ``;``-separated files a decimal comma is accepted in numeric columns;
* Parquet (``.parquet``, ``.pq``) when :mod:`pyarrow` imports;
* Excel (``.xlsx``, ``.xlsm``) when :mod:`openpyxl` imports (first sheet).

Blank lines are skipped; the header is data row 0 and the first data row is
row 1.
"""

from __future__ import annotations

import csv
import datetime
import hashlib
import io
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from nstress.errors import InputError, InputErrors
from nstress.intake.columns import RESERVED, canonical_name

TEXT_SUFFIXES = (".csv", ".tsv", ".txt")
PARQUET_SUFFIXES = (".parquet", ".pq")
EXCEL_SUFFIXES = (".xlsx", ".xlsm")
SUFFIXES = TEXT_SUFFIXES + PARQUET_SUFFIXES + EXCEL_SUFFIXES
_DELIMITERS = {",": "comma", ";": "semicolon", "\t": "tab"}


@dataclass
class RawTable:
    """One input file as stripped strings.

    Attributes
    ----------
    path
        The path as the user gave it (used in every message).
    sha256
        Hex digest of the file's bytes.
    frame
        One column per input column (canonical name, or the header as written
        for an extra column), all values ``str``, whitespace stripped.
    headers
        Column name -> header as written.
    decimal_comma
        Whether numeric columns may use ``,`` as the decimal mark.
    notes
        File-level remarks (encoding fallback, renamed columns ...).
    """

    path: str
    sha256: str
    frame: pd.DataFrame
    headers: dict[str, str]
    decimal_comma: bool = False
    notes: list[str] = field(default_factory=list)


def read_raw(path: str | Path) -> RawTable:
    """Read one file into a :class:`RawTable`.

    Parameters
    ----------
    path
        A ``.csv``/``.tsv``/``.txt``, ``.parquet``/``.pq`` or ``.xlsx``/``.xlsm`` file.

    Returns
    -------
    RawTable

    Raises
    ------
    InputError
        Unknown extension, unreadable, empty or header-only file, or clashing headers.
    """
    name = str(path)
    p = Path(path)
    suffix = p.suffix.lower()
    if suffix not in SUFFIXES:
        raise InputError(
            f"unknown file type {suffix or '(no extension)'!r}; expected one of "
            + ", ".join(SUFFIXES),
            file=name,
        )
    try:
        data = p.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read file: {exc.strerror or exc}", file=name) from exc
    digest = hashlib.sha256(data).hexdigest()
    if not data or data.isspace():  # as ``not data.strip()``, without copying the file
        raise InputError("file is empty; expected a header row and data rows", file=name)
    notes: list[str] = []
    decimal_comma = False
    stripped = False
    if suffix in TEXT_SUFFIXES:
        cells, decimal_comma = _read_text(data, name, notes)
    elif suffix in PARQUET_SUFFIXES:
        cells = _read_parquet(data, name)
    else:
        cells = _read_excel(data, name)
    if isinstance(cells, _Cells):  # header apart and every cell stripped already
        header, body, stripped = cells.header, cells.body, True
    else:
        if len(cells) < 1:
            raise InputError("file is empty; expected a header row and data rows", file=name)
        header = [str(h) for h in cells.iloc[0].tolist()]
        body = cells.iloc[1:].reset_index(drop=True)
    header = [h.strip() for h in header]
    if len(body) == 0:
        raise InputError("file has a header but no data rows", file=name)
    body.columns = range(body.shape[1])
    frame, headers = _name_columns(body, header, name, notes, stripped=stripped)
    return RawTable(name, digest, frame, headers, decimal_comma, notes)


@dataclass
class _Cells:
    """A reader's result with the header row apart and every body cell already stripped."""

    header: list[str]
    body: pd.DataFrame


def _decode(data: bytes, name: str, notes: list[str]) -> tuple[str, bytes | None]:
    """Return the text, and its UTF-8 bytes when they are ``data`` itself (no re-encoding)."""
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    elif data.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            return data.decode("utf-16"), None
        except UnicodeDecodeError as exc:
            raise InputError("cannot decode file as UTF-16", file=name) from exc
    try:
        return data.decode("utf-8"), data  # valid UTF-8 round-trips exactly
    except UnicodeDecodeError:
        notes.append(f"{name}: not valid UTF-8; read as Latin-1")
        return data.decode("latin-1"), None


def _sniff_delimiter(text: str) -> str:
    # Quoted fields may hold delimiters and line breaks: drop them before
    # taking the first line (split on "\n" only; a lone "\r" may sit in a cell).
    head = re.sub(r'"[^"]*"', "", text[:65536])
    first = next((line for line in head.split("\n") if line.strip()), "")
    counts = {d: first.count(d) for d in _DELIMITERS}
    best = max(counts, key=lambda d: counts[d])
    return best if counts[best] > 0 else ","


def _read_text(data: bytes, name: str, notes: list[str]) -> tuple[pd.DataFrame | _Cells, bool]:
    text, utf8 = _decode(data, name, notes)
    if not text or text.isspace():  # as ``not text.strip()``, without copying the text
        raise InputError("file is empty; expected a header row and data rows", file=name)
    sep = _sniff_delimiter(text)
    table = _read_text_arrow(text, utf8, sep)
    if table is None:
        return _read_text_pandas(text, sep, name), sep == ";"
    return table, sep == ";"


def _read_text_arrow(text: str, utf8: bytes | None, sep: str) -> _Cells | None:
    """Fast path (pyarrow's multi-threaded reader); ``None`` to fall back to pandas.

    Cells are stripped by pyarrow's ``utf8_trim_whitespace``, which is what
    pandas' ``str.strip`` runs on pyarrow-backed strings.
    """
    try:
        import pyarrow as pa
        import pyarrow.compute as pc
        import pyarrow.csv as pacsv
    except ImportError:
        return None
    try:
        header = next(csv.reader(io.StringIO(text, newline=""), delimiter=sep), [])
    except csv.Error:
        return None  # pandas gives the message
    names = [f"f{i}" for i in range(len(header))]
    try:
        table = pacsv.read_csv(
            io.BytesIO(utf8 if utf8 is not None else text.encode("utf-8")),
            read_options=pacsv.ReadOptions(column_names=names),
            parse_options=pacsv.ParseOptions(delimiter=sep, newlines_in_values=True),
            convert_options=pacsv.ConvertOptions(
                column_types={n: pa.string() for n in names},
                strings_can_be_null=False,
                quoted_strings_can_be_null=False,
            ),
        )
    except (pa.ArrowInvalid, pa.ArrowTypeError):
        return None  # ragged rows etc.: pandas gives the message with a line number
    if table.num_rows < 1:
        return None
    first = [str(v) for v in table.slice(0, 1).to_pylist()[0].values()]
    body = table.slice(1)
    body = pa.table({n: pc.utf8_trim_whitespace(body[n]) for n in body.column_names})
    return _Cells(first, body.to_pandas())


def _read_text_pandas(text: str, sep: str, name: str) -> pd.DataFrame:
    try:
        table = pd.read_csv(
            io.StringIO(text),
            sep=sep,
            header=None,
            dtype=str,
            keep_default_na=False,
            na_filter=False,
            skip_blank_lines=True,
            engine="c",
        )
    except pd.errors.EmptyDataError as exc:
        raise InputError("file is empty; expected a header row and data rows", file=name) from exc
    except (pd.errors.ParserError, ValueError) as exc:
        msg = str(exc).strip().splitlines()[-1] if str(exc).strip() else type(exc).__name__
        raise InputError(
            f"cannot parse as {_DELIMITERS[sep]}-separated text: {msg}; "
            "expected the same number of fields on every line",
            file=name,
        ) from exc
    return table.fillna("")


def _read_parquet(data: bytes, name: str) -> pd.DataFrame:
    try:
        import pyarrow  # noqa: F401
    except ImportError as exc:
        raise InputError(
            "reading Parquet needs pyarrow (pip install 'nstress[io]'), or save as CSV", file=name
        ) from exc
    try:
        df = pd.read_parquet(io.BytesIO(data))
    except Exception as exc:  # pyarrow raises many types for a corrupt file
        raise InputError(f"cannot read as Parquet: {exc}", file=name) from exc
    if any(n is not None for n in df.index.names):
        df = df.reset_index()
    header = pd.DataFrame([[str(c) for c in df.columns]])
    body = pd.DataFrame({i: _as_strings(df[c]) for i, c in enumerate(df.columns)})
    return pd.concat([header, body], ignore_index=True)


def _read_excel(data: bytes, name: str) -> pd.DataFrame:
    try:
        import openpyxl  # noqa: F401
    except ImportError as exc:
        raise InputError(
            "reading Excel needs openpyxl (pip install 'nstress[io]'), or save as CSV", file=name
        ) from exc
    try:
        df = pd.read_excel(
            io.BytesIO(data), sheet_name=0, header=None, engine="openpyxl", keep_default_na=False
        )
    except Exception as exc:  # openpyxl/zipfile raise many types for a corrupt file
        raise InputError(f"cannot read as an Excel workbook: {exc}", file=name) from exc
    out = pd.DataFrame({i: _as_strings(df[c]).str.strip() for i, c in enumerate(df.columns)})
    return out[(out != "").any(axis=1)]  # blank rows are skipped, as in text files


def _as_strings(s: pd.Series) -> pd.Series:
    """Turn a typed column (Parquet/Excel) into the strings a CSV would hold."""
    s = s.reset_index(drop=True)
    if isinstance(s.dtype, pd.DatetimeTZDtype) or pd.api.types.is_datetime64_any_dtype(s):
        with_time = bool((s.dropna() != s.dropna().dt.normalize()).any())
        fmt = "%Y-%m-%dT%H:%M:%S" if with_time else "%Y-%m-%d"
        return s.dt.strftime(fmt).fillna("").astype(str)
    if pd.api.types.is_bool_dtype(s):
        return s.map({True: "true", False: "false"}).fillna("").astype(str)
    if pd.api.types.is_numeric_dtype(s) or pd.api.types.is_string_dtype(s):
        out = s.astype(object).where(s.notna(), "")
        return out.astype(str)
    return s.map(_cell_text).astype(str)


def _cell_text(v: object) -> str:
    if v is None or (isinstance(v, float) and np.isnan(v)) or v is pd.NaT:
        return ""
    if isinstance(v, datetime.datetime):  # also pandas.Timestamp
        midnight = (v.hour, v.minute, v.second, v.microsecond) == (0, 0, 0, 0)
        return v.strftime("%Y-%m-%d") if midnight and v.tzinfo is None else v.isoformat()
    if isinstance(v, datetime.date | datetime.time):
        return v.isoformat()
    return str(v)


def _name_columns(
    body: pd.DataFrame, header: list[str], name: str, notes: list[str], *, stripped: bool = False
) -> tuple[pd.DataFrame, dict[str, str]]:
    """Strip every cell (unless ``stripped``), map headers to canonical names, reject clashes."""
    errors: list[InputError] = []
    columns: dict[str, pd.Series] = {}
    headers: dict[str, str] = {}
    reserved = set(RESERVED)
    for j, raw_name in enumerate(header):
        values = body[j] if stripped else body[j].astype(str).str.strip()
        if raw_name == "":
            if not (values != "").any():
                continue  # trailing delimiter: an unnamed, empty column
            raw_name = f"column_{j + 1}"
        canon = canonical_name(raw_name)
        col = canon if canon is not None else raw_name
        if canon is None and raw_name.lower() in reserved:
            col = f"input_{raw_name}"
            notes.append(f"{name}: column {raw_name!r} renamed {col!r} (nstress uses that name)")
        if col in columns:
            what = f"both map to {col!r}" if canon else "appears twice"
            errors.append(
                InputError(
                    f"header {raw_name!r} clashes with header {headers[col]!r} ({what}); "
                    "expected each column once",
                    file=name,
                    row=0,
                    column=col,
                )
            )
            continue
        columns[col] = values
        headers[col] = raw_name
    if errors:
        raise errors[0] if len(errors) == 1 else InputErrors(errors)
    return pd.DataFrame(columns, index=body.index), headers
