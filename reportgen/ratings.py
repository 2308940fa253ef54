"""Ratings intake: CSV or xlsx files -> :class:`reportgen.model.Ratings`, checked against a study.

Layouts (documented in the README, "Ratings files"):

* **long**: one rating per row, columns ``item, rater, trial, rating`` and optionally
  ``reference``; ``trial`` may be left out when the study has ``trials: 1``.
* **wide**: one item per row; first column ``item``, optionally a ``reference`` column, then one
  column per rater and trial named ``<rater>/<trial>`` (``R1/1``, ``R1/2`` …); with
  ``trials: 1`` a column may be named by the rater id alone (``R1``).  A blank cell is an
  absent rating.
* **.xlsx**: either layout on the first sheet, or on the sheet named in the study definition.

Reading is exact: codes, ids and items are compared as text after trimming spaces (``007``
stays ``007``), and every problem names the file, the physical line (or cell) and the column.

Speed: a regular CSV over ``SMALL_BYTES`` or ``SMALL_ROWS`` lines (same number of delimiters on every non-blank line,
well-formed quotes without line breaks inside, no bare carriage returns) is parsed by pandas' C reader into categorical
columns (no NA guessing, blank lines kept so that record *n* is physical line *n*).  Every
column is factorised once, trimmed per distinct value, and all checks run on the integer codes
with numpy; there is no Python loop per row.  Small files, and files with quotes, ragged rows or
odd line ends or quoted line breaks, go through the stdlib ``csv`` reader, which reports the exact physical line of
each record.  pandas is imported inside the functions only, and not at all for small files.

The plainest large files (no quote, no bare carriage return, no blank line, the header's number of
fields on every line) are read first by pyarrow's columnar CSV reader (imported lazily), about
five times faster than pandas' C reader; anything else it meets sends the file on to the readers
above, so every message keeps its file, line and column (``tests/test_arrow_reader.py``).
"""

from __future__ import annotations

import codecs
import csv
import hashlib
import io
import os
import zipfile
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .errors import InputError, Location, Problem, ProblemCollector
from .model import MISSING, Ratings, SourceFile, Study
from .study import suggest
from .yamlio import display_path

#: largest ratings/reference/key file read, in bytes
MAX_TABLE_BYTES = 500_000_000
#: largest total uncompressed size of an .xlsx archive
MAX_XLSX_UNZIPPED = 200_000_000
#: below these sizes the stdlib reader and dict-based factorising are used (no pandas import)
SMALL_BYTES = 2_000_000
SMALL_ROWS = 50_000
#: problems of one kind listed one by one before the rest are summarised
PER_KIND = 10
DELIMITERS = (",", ";", "\t")
DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab"}


# --------------------------------------------------------------------------------------------
# Tables
# --------------------------------------------------------------------------------------------


@dataclass
class Column:
    """One column of a table, factorised: ``uniques[codes[i]]`` is the trimmed text of row i."""

    name: str  # header as written, trimmed
    codes: np.ndarray  # int64, one per record
    uniques: list[str]  # trimmed texts, distinct, in order of first appearance
    letter: str | None = None  # xlsx column letter

    def values(self) -> np.ndarray:
        return np.asarray(self.uniques, dtype=object)[self.codes]

    def blank_code(self) -> int | None:
        try:
            return self.uniques.index("")
        except ValueError:
            return None


@dataclass
class Table:
    """A CSV or xlsx table as read: header, factorised columns, and where each record sits."""

    path: Path
    shown: str
    columns: list[Column]
    lines: np.ndarray  # int64: physical line (CSV) or sheet row (xlsx) of each record
    header_line: int
    kind: str  # "csv" | "xlsx"
    sha256: str
    size: int
    encoding: str | None = None
    delimiter: str | None = None
    sheet: str | None = None
    notes: list[str] = field(default_factory=list)

    @property
    def n_rows(self) -> int:
        return int(self.lines.shape[0])

    def names(self) -> list[str]:
        return [c.name for c in self.columns]

    def find(self, name: str) -> int | None:
        """Index of a column by name, ignoring case."""
        low = name.lower()
        for i, c in enumerate(self.columns):
            if c.name.lower() == low:
                return i
        return None

    def location(self, row: int | None, col: int | None) -> Location:
        line = self.header_line if row is None else int(self.lines[row])
        key = self.columns[col].name if col is not None else None
        return Location(self.shown, line, None, key)

    def cell(self, row: int | None, col: int | None) -> str:
        """``"cell C7: "`` for xlsx, empty for CSV (the line is in the location)."""
        if self.kind != "xlsx" or col is None:
            return ""
        line = self.header_line if row is None else int(self.lines[row])
        return f"cell {self.columns[col].letter}{line}: "

    def problem(
        self, row: int | None, col: int | None, message: str, hint: str | None = None
    ) -> Problem:
        return Problem(self.location(row, col), self.cell(row, col) + message, hint)


def _factorize(values: Any) -> tuple[np.ndarray, list[str]]:
    """Codes and trimmed distinct texts, in order of first appearance.

    ``values`` is a sequence of texts, or a pair ``(codes, texts)`` already factorised.
    """
    if isinstance(values, tuple):
        codes, raw = values
    elif len(values) > SMALL_ROWS:
        import pandas as pd

        codes, uniques = pd.factorize(values)
        codes = np.asarray(codes, dtype=np.int64)
        raw = [str(u) for u in uniques]
    else:  # small tables: skip importing pandas
        index: dict[str, int] = {}
        codes = np.fromiter(
            (index.setdefault(v, len(index)) for v in values), dtype=np.int64, count=len(values)
        )
        raw = list(index)
    stripped = [u.strip() for u in raw]
    if stripped == raw and len(set(stripped)) == len(stripped):
        return codes, raw
    merged: dict[str, int] = {}
    remap = np.empty(len(stripped), dtype=np.int64)
    out: list[str] = []
    for j, s in enumerate(stripped):
        if s not in merged:
            merged[s] = len(out)
            out.append(s)
        remap[j] = merged[s]
    return (remap[codes] if len(codes) else codes), out


def _decode(raw: bytes, shown: str) -> tuple[str, str, list[str]]:
    """Text, encoding name and notes.  BOMs first, then strict UTF-8, then cp1252 (said)."""
    if raw.startswith(codecs.BOM_UTF8):
        enc = "utf-8-sig"
    elif raw.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        enc = "utf-16"
    else:
        enc = "utf-8"
    try:
        return raw.decode(enc), enc, []
    except UnicodeDecodeError as exc:
        if enc != "utf-8":
            line = raw.count(b"\n", 0, exc.start) + 1
            raise InputError.single(
                shown, f"cannot decode as {enc}: {exc.reason}", line=line
            ) from None
        first_bad = raw.count(b"\n", 0, exc.start) + 1
    try:
        text = raw.decode("cp1252")
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        raise InputError.single(
            shown,
            f"neither UTF-8 nor Windows-1252 text (byte 0x{raw[exc.start]:02x})",
            line=line,
            hint="save the file as CSV UTF-8",
        ) from None
    note = (
        f"{shown} is not UTF-8 (first odd byte on line {first_bad}); read as Windows-1252 (cp1252)"
    )
    return text, "cp1252", [note]


def read_table(
    path: str | os.PathLike[str], *, sheet: str | None = None, what: str = "ratings"
) -> Table:
    """Read a CSV (comma, semicolon or tab) or .xlsx table; blank rows dropped, cells trimmed.

    Raises :class:`InputError` for files that cannot be read as a table: missing or empty file,
    undecodable text, no header, duplicate or empty column names, rows with the wrong number of
    fields, values under a column without a name.
    """
    p = Path(path)
    shown = display_path(p)
    try:
        size = p.stat().st_size
    except FileNotFoundError:
        raise InputError.single(shown, f"{what} file not found") from None
    if size > MAX_TABLE_BYTES:
        raise InputError.single(
            shown, f"{what} file is {size:,} bytes; the limit is {MAX_TABLE_BYTES:,}"
        )
    from .safeio import read_limited, require_regular

    require_regular(p, shown=shown, what=what)  # a FIFO or device is refused before reading
    if p.suffix.lower() == ".xlsx":
        return _read_xlsx(p, shown, sheet, what)
    raw = read_limited(p, MAX_TABLE_BYTES, shown=shown, what=what)
    digest = hashlib.sha256(raw).hexdigest()
    text, encoding, notes = _decode(raw, shown)
    if not text.strip().strip("\ufeff"):
        raise InputError.single(
            shown, f"the {what} file is empty", line=1, hint="the first line must name the columns"
        )
    # skip blank lines and an Excel "sep=;" line before the header
    pos, line_no, delimiter = 0, 1, None
    while True:
        end = text.find("\n", pos)
        end = len(text) if end < 0 else end
        first = text[pos:end].strip()
        if first and delimiter is None and first.lower().startswith("sep=") and len(first) <= 6:
            d = text[pos:end].rstrip("\r\n").lstrip()[4:5] or ","  # the tab of "sep=\t" survives
            delimiter = "\t" if first[4:] == "\\t" else d
        elif first:
            break
        pos, line_no = end + 1, line_no + 1
        if pos >= len(text):
            raise InputError.single(shown, f"the {what} file has no header line", line=1)
    header_text = text[pos:end]
    if delimiter is None:
        counts = {d: header_text.count(d) for d in DELIMITERS}
        delimiter = max(DELIMITERS, key=lambda d: counts[d]) if any(counts.values()) else ","
    body = text[pos:]
    parsed = None
    # many short lines (a reference file of 100,000 items is ~1.3 MB) are slow in the stdlib
    # reader too, so the line count decides as well as the size
    if size > SMALL_BYTES or body.count("\n") > SMALL_ROWS:
        data = None
        if encoding in ("utf-8", "utf-8-sig"):  # the file's own bytes, without re-encoding
            data = raw[len(text[:pos].encode("utf-8")) + (3 if encoding == "utf-8-sig" else 0) :]
        parsed = _parse_fast(body, delimiter, data)
    del text, raw
    if parsed is None:
        header, columns_raw, lines = _parse_stdlib(body, delimiter, shown, line_no)
    else:
        header, columns_raw, lines = parsed
    table = _build_table(p, shown, header, columns_raw, lines + line_no, line_no, "csv", None, what)
    table.sha256, table.size = digest, size
    table.encoding, table.delimiter = encoding, delimiter
    table.notes.extend(notes)
    return table


def _parse_fast(
    body: str, delimiter: str, data: bytes | None = None
) -> tuple[list[str], list[Any], np.ndarray] | None:
    """pandas C reader for regular files; None when the file needs the careful reader.

    ``data`` is ``body`` encoded as UTF-8 when the caller has it already.  Regular means: no
    bare carriage returns, well-formed quotes with no line break inside, and the same number of
    delimiters outside quotes on every non-empty line, so that record *n* is physical line *n*
    and no row is short or long.
    """
    if data is None:
        data = body.encode("utf-8")
    fast = _parse_arrow(data, delimiter)
    if fast is not None:
        return fast
    import pandas as pd

    n_cr = data.count(b"\r")
    if n_cr and n_cr != data.count(b"\r\n"):
        return None  # bare carriage returns: old line ends or odd content
    arr = np.frombuffer(data, dtype=np.uint8)
    nl = np.flatnonzero(arr == 10)
    ends = nl if data.endswith(b"\n") else np.append(nl, len(data))
    n_lines = len(ends)
    starts = np.concatenate(([0], nl[: n_lines - 1] + 1)) if n_lines else np.zeros(0, np.int64)
    lengths = ends - starts
    if n_cr:
        one = np.flatnonzero(lengths == 1)
        lengths[one[arr[starts[one]] == 13]] = 0  # a line holding only "\r" is blank
    dpos = np.flatnonzero(arr == ord(delimiter))
    qpos = np.flatnonzero(arr == 34)
    if len(qpos):
        # Quoted fields: well formed (every quote at a field edge or doubled inside), and no line
        # break inside quotes, or else the careful reader takes over.  The parity of the quotes
        # before a position tells whether it lies inside a quoted field.
        if len(qpos) % 2 or (np.searchsorted(qpos, nl) % 2).any():
            return None
        d = ord(delimiter)
        prev = np.where(qpos > 0, arr[np.maximum(qpos - 1, 0)], 10)
        after = np.where(qpos + 1 < len(arr), arr[np.minimum(qpos + 1, len(arr) - 1)], 10)
        opens = (prev == d) | (prev == 10) | (prev == 34)
        closes = (after == d) | (after == 10) | (after == 13) | (after == 34)
        if not np.where(np.arange(len(qpos)) % 2 == 0, opens, closes).all():
            return None
        dpos = dpos[np.searchsorted(qpos, dpos) % 2 == 0]
    per_line = np.diff(np.searchsorted(dpos, ends), prepend=0)  # delimiters on each line
    expected = per_line[0]
    regular = (per_line == expected) | (lengths == 0)
    if not regular.all():
        return None
    first = body[: body.find("\n")] if "\n" in body else body
    header = next(csv.reader([first.rstrip("\r")], delimiter=delimiter))
    if n_lines == 1:
        return (
            header,
            [np.zeros(0, dtype=object) for _ in range(expected + 1)],
            np.zeros(0, np.int64),
        )
    try:
        frame = _read_regular(pd, data, delimiter, int(expected) + 1)
    except (pd.errors.ParserError, ValueError):
        return None
    if len(frame) != n_lines - 1 or frame.shape[1] != expected + 1:
        return None
    cols = [_first_appearance(frame[j].cat) for j in range(frame.shape[1])]
    return header, cols, np.arange(1, n_lines, dtype=np.int64)


def _parse_arrow(data: bytes, delimiter: str) -> tuple[list[str], list[Any], np.ndarray] | None:
    """pyarrow's columnar CSV reader, for the plainest files only; None for anything else.

    Taken only when the bytes hold no quote at all, no carriage return except in ``\\r\\n``
    line ends and no blank line, and only when every record has exactly the header's number
    of fields (pyarrow stops otherwise), so that record *n* is physical line *n*, as in the
    careful readers.  Any other file, or a file pyarrow refuses, goes on to the pandas reader
    and from there, when irregular, to the stdlib reader with its line-and-column messages.
    Each column is dictionary-encoded by pyarrow in order of first appearance, as
    :func:`_first_appearance` does for pandas.
    """
    if b'"' in data or b"\n\n" in data or b"\n\r\n" in data or data.startswith((b"\n", b"\r")):
        return None
    n_cr = data.count(b"\r")
    if n_cr and n_cr != data.count(b"\r\n"):
        return None
    n_lines = data.count(b"\n") + (0 if data.endswith(b"\n") else 1)
    if n_lines < 2:
        return None
    try:
        import pyarrow as pa
        import pyarrow.csv as pacsv
    except ImportError:  # pragma: no cover - pyarrow is a dependency; pandas then reads
        return None
    first = data[: data.find(b"\n")].rstrip(b"\r").decode("utf-8")
    header = first.split(delimiter)
    names = [str(j) for j in range(len(header))]
    try:
        table = pacsv.read_csv(
            pa.py_buffer(data),
            read_options=pacsv.ReadOptions(column_names=names, skip_rows=1),
            parse_options=pacsv.ParseOptions(
                delimiter=delimiter,
                quote_char=False,
                double_quote=False,
                escape_char=False,
                newlines_in_values=False,
                ignore_empty_lines=False,
            ),
            convert_options=pacsv.ConvertOptions(
                column_types={n: pa.string() for n in names},
                null_values=[],
                strings_can_be_null=False,
                quoted_strings_can_be_null=False,
                check_utf8=False,  # decoded as UTF-8 by the caller already
            ),
        )
    except (pa.ArrowInvalid, pa.ArrowException, ValueError):
        return None
    if table.num_rows != n_lines - 1 or table.num_columns != len(header):
        return None
    cols: list[Any] = []
    for j in range(table.num_columns):
        enc = table.column(j).combine_chunks().dictionary_encode()
        ind = enc.indices  # int32, no nulls; read from its buffer (to_numpy imports pandas)
        width = ind.type.bit_width // 8
        raw = np.frombuffer(
            ind.buffers()[1], dtype=f"<i{width}", count=len(ind), offset=ind.offset * width
        )
        cols.append((raw.astype(np.int64), enc.dictionary.to_pylist()))
    return header, cols, np.arange(1, n_lines, dtype=np.int64)


def _read_regular(pd: Any, data: bytes, delimiter: str, n_columns: int) -> Any:
    return pd.read_csv(
        io.BytesIO(data),
        sep=delimiter,
        header=None,
        names=list(range(n_columns)),
        skiprows=1,
        # categorical columns: the C reader keeps one text per distinct value (always as text)
        dtype="category",
        keep_default_na=False,
        na_filter=False,
        skip_blank_lines=False,
        engine="c",
        encoding="utf-8",
        quotechar='"',
        doublequote=True,
        low_memory=False,
    )


def _first_appearance(cat: Any) -> tuple[np.ndarray, list[str]]:
    """Codes and texts of a pandas categorical, renumbered in order of first appearance."""
    import pandas as pd

    raw = np.asarray(cat.codes)  # int8/int16/int32: hashing the narrow codes is faster
    order = np.asarray(pd.unique(raw), dtype=np.int64)
    # iterating over a pandas Index is slow; an object array and tolist() are not
    picked = np.asarray(cat.categories, dtype=object)[order].tolist()
    texts = [t if type(t) is str else str(t) for t in picked]
    n = len(order)
    if n == len(cat.categories) and (order == np.arange(n)).all():
        return raw.astype(np.int64), texts  # already in order of first appearance
    renumber = np.empty(len(cat.categories), dtype=np.int64)
    renumber[order] = np.arange(n)
    return renumber[raw], texts


def _parse_stdlib(
    body: str, delimiter: str, shown: str, first_line: int
) -> tuple[list[str], list[Any], np.ndarray]:
    reader = csv.reader(io.StringIO(body, newline=""), delimiter=delimiter, strict=True)
    pc = ProblemCollector()
    header: list[str] | None = None
    rows: list[list[str]] = []
    lines: list[int] = []
    prev = 0
    ncols = 0
    try:
        for row in reader:
            start = prev + 1
            prev = reader.line_num
            if header is None:
                header = row
                names = [h.strip() for h in row]
                while names and not names[-1]:
                    names.pop()
                ncols = len(names)
                continue
            if not any(f.strip() for f in row):
                continue
            if len(row) != ncols:
                if len(row) > ncols and not any(f.strip() for f in row[ncols:]):
                    row = row[:ncols]
                elif ncols < len(row) <= len(header):
                    j = next(k for k in range(ncols, len(row)) if row[k].strip())
                    pc.add(
                        shown,
                        f"a value ({row[j].strip()!r}) under a column without a name (column {j + 1})",
                        line=start + first_line - 1,
                        hint="name the column in the header or delete the value",
                    )
                    continue
                else:
                    pc.add(
                        shown,
                        f"expected {ncols} fields, found {len(row)}",
                        line=start + first_line - 1,
                        hint=f"the header has {ncols} columns; check the separators on this line",
                    )
                    continue
            rows.append(row)
            lines.append(start - 1)
    except csv.Error as exc:
        if "unexpected end of data" in str(exc) and reader.line_num > prev + 1:
            # a quote opened on the first line of the record is never closed: name that line
            pc.add(
                shown,
                "a quoted field starts on this line and is never closed (the rest of the file was read into it)",
                line=prev + first_line,
                hint='check this line for a stray " character',
            )
        else:
            pc.add(
                shown, f"cannot read this line as CSV: {exc}", line=reader.line_num + first_line - 1
            )
    pc.raise_if_any()
    if header is None:
        raise InputError.single(shown, "no header line", line=first_line)
    ncols_all = max(len(header), ncols)
    cols: list[Any] = []
    for j in range(ncols_all):
        cols.append(np.asarray([r[j] if j < len(r) else "" for r in rows], dtype=object))
    return header, cols, np.asarray(lines, dtype=np.int64)


def _build_table(
    p: Path,
    shown: str,
    header: list[str],
    columns_raw: list[Any],
    lines: np.ndarray,
    header_line: int,
    kind: str,
    letters: list[str] | None,
    what: str,
) -> Table:
    pc = ProblemCollector()
    names = [h.strip().lstrip("\ufeff").strip() for h in header]
    keep = len(names)
    while keep and not names[keep - 1]:
        keep -= 1
    if keep == 0:
        raise InputError.single(shown, "the header line is blank", line=header_line)

    def where(j: int) -> str:
        return f"cell {letters[j]}{header_line}: " if letters else ""

    seen: dict[str, int] = {}
    for j, name in enumerate(names[:keep]):
        if not name:
            pc.add(
                shown,
                f"{where(j)}column {j + 1} has no name",
                line=header_line,
                hint="name every column in the header line, or delete the empty column",
            )
        elif name.lower() in seen:
            pc.add(
                shown,
                f"{where(j)}duplicate column {name!r} (columns {seen[name.lower()] + 1} and {j + 1})",
                line=header_line,
                key=name,
            )
        else:
            seen[name.lower()] = j
    columns = [
        Column(
            names[j] if j < len(names) else "",
            *_factorize(columns_raw[j]),
            letter=letters[j] if letters else None,
        )
        for j in range(len(columns_raw))
    ]
    # blank records: every cell empty after trimming
    if columns and len(lines):
        blank = np.ones(len(lines), dtype=bool)
        for c in columns:
            b = c.blank_code()
            blank &= (c.codes == b) if b is not None else False
        if blank.any():
            keep_rows = ~blank
            lines = lines[keep_rows]
            for c in columns:
                c.codes = c.codes[keep_rows]
    for j in range(keep, len(columns)):
        c = columns[j]
        b = c.blank_code()
        stray = np.flatnonzero(c.codes != (b if b is not None else -1))
        if len(stray):
            row = int(stray[0])
            ref = f"cell {letters[j]}{int(lines[row])}: " if letters else ""
            pc.add(
                shown,
                f"{ref}a value ({c.uniques[c.codes[row]]!r}) under a column without a name (column {j + 1})",
                line=int(lines[row]),
                hint="name the column in the header or delete the value",
            )
    pc.raise_if_any()
    return Table(
        path=p,
        shown=shown,
        columns=columns[:keep],
        lines=lines,
        header_line=header_line,
        kind=kind,
        sha256="",
        size=0,
    )


def _cell_text(v: Any) -> str:
    if v is None:
        return ""
    if isinstance(v, str):
        return v
    if isinstance(v, bool):
        return "TRUE" if v else "FALSE"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return str(int(v)) if v.is_integer() else repr(v)
    iso = getattr(v, "isoformat", None)
    return iso() if callable(iso) else str(v)


def _refuse_unsaved_formulas(raw: bytes, shown: str, title: str, header_line: int) -> None:
    """A formula cell whose value was never saved (a workbook written by a script and not
    opened in a spreadsheet program since) reads as blank: say so instead of 'blank cell'."""
    import openpyxl
    from openpyxl.utils import get_column_letter

    wb = openpyxl.load_workbook(io.BytesIO(raw), read_only=True, data_only=False)
    cached = openpyxl.load_workbook(io.BytesIO(raw), read_only=True, data_only=True)
    try:
        cells: list[str] = []
        rows = zip(
            wb[title].iter_rows(min_row=header_line, values_only=True),
            cached[title].iter_rows(min_row=header_line, values_only=True),
            strict=False,
        )
        for r, (formulas, values) in enumerate(rows, start=header_line):
            for j, (f, v) in enumerate(zip(formulas, values, strict=False)):
                if v is None and isinstance(f, str) and f.startswith("="):
                    cells.append(f"{get_column_letter(j + 1)}{r}")
    finally:
        wb.close()
        cached.close()
    if cells:
        more = f" and {len(cells) - 5} more" if len(cells) > 5 else ""
        raise InputError.single(
            shown,
            f"formula cells with no saved value (read as blank): {', '.join(cells[:5])}{more}",
            hint="open the workbook in a spreadsheet program and save it, or save the sheet as CSV",
        )


def _read_xlsx(p: Path, shown: str, sheet: str | None, what: str) -> Table:
    try:
        with zipfile.ZipFile(p) as zf:
            unzipped = sum(i.file_size for i in zf.infolist())
    except zipfile.BadZipFile:
        raise InputError.single(shown, "not a valid .xlsx workbook (not a zip archive)") from None
    if unzipped > MAX_XLSX_UNZIPPED:
        raise InputError.single(
            shown,
            f"the workbook unpacks to {unzipped:,} bytes; the limit is {MAX_XLSX_UNZIPPED:,}",
            hint="save the ratings as CSV",
        )
    import openpyxl
    from openpyxl.utils import get_column_letter

    if not getattr(openpyxl, "DEFUSEDXML", False):
        raise InputError.single(
            shown,
            "refusing to open .xlsx files without the defusedxml package",
            hint="pip install defusedxml",
        )
    raw = p.read_bytes()
    try:
        wb = openpyxl.load_workbook(io.BytesIO(raw), read_only=True, data_only=True)
    except (OSError, KeyError, ValueError, zipfile.BadZipFile) as exc:
        raise InputError.single(shown, f"cannot open the workbook: {exc}") from None
    try:
        if sheet is None:
            if not wb.worksheets:
                raise InputError.single(shown, "the workbook has no sheets")
            ws = wb.worksheets[0]
        elif sheet in wb.sheetnames:
            ws = wb[sheet]
        else:
            hint = suggest(sheet, wb.sheetnames)
            raise InputError.single(
                shown,
                f"no sheet named {sheet!r}; sheets: {', '.join(wb.sheetnames)}",
                key="sheet",
                hint=f"did you mean {hint!r}?" if hint else None,
            )
        rows: list[list[str]] = []
        numbers: list[int] = []
        header: list[str] | None = None
        header_line = 0
        for r, values in enumerate(ws.iter_rows(min_row=1, values_only=True), start=1):
            texts = [_cell_text(v) for v in values]
            if not any(t.strip() for t in texts):
                continue
            if header is None:
                header, header_line = texts, r
                continue
            rows.append(texts)
            numbers.append(r)
        title = ws.title
    finally:
        wb.close()
    if header is not None and any(not t.strip() for row in rows for t in row[: len(header)]):
        _refuse_unsaved_formulas(raw, shown, title, header_line)
    if header is None:
        raise InputError.single(
            shown,
            f"the {what} sheet {title!r} is empty",
            hint="the first row must name the columns",
        )
    width = max([len(header)] + [len(r) for r in rows])
    header = header + [""] * (width - len(header))
    cols = [
        np.asarray([r[j] if j < len(r) else "" for r in rows], dtype=object) for j in range(width)
    ]
    letters = [get_column_letter(j + 1) for j in range(width)]
    table = _build_table(
        p,
        shown,
        header,
        cols,
        np.asarray(numbers, dtype=np.int64),
        header_line,
        "xlsx",
        letters,
        what,
    )
    table.sha256, table.size, table.sheet = hashlib.sha256(raw).hexdigest(), len(raw), title
    return table


# --------------------------------------------------------------------------------------------
# Problems, listed one by one up to a limit per kind, then summarised
# --------------------------------------------------------------------------------------------


class _Problems:
    def __init__(self) -> None:
        self.collector = ProblemCollector(limit=50)
        self.kinds: dict[str, int] = {}
        self.last: dict[str, Location] = {}

    def add(self, kind: str, problem: Problem) -> None:
        n = self.kinds.get(kind, 0)
        self.kinds[kind] = n + 1
        if n < PER_KIND:
            self.collector.extend([problem])
            self.last[kind] = problem.location

    def count(self, kind: str, n: int) -> None:
        """Count ``n`` further problems of a kind already listed ``PER_KIND`` times."""
        if n > 0:
            self.kinds[kind] = self.kinds.get(kind, 0) + n

    def raise_if_any(self) -> None:
        # file by file (in the order first met), lines in order, file-wide problems last
        files: dict[str, int] = {}
        for p in self.collector.items:
            files.setdefault(p.location.path, len(files))
        self.collector.items.sort(
            key=lambda p: (
                files[p.location.path],
                p.location.line is None,
                p.location.line or 0,
            )
        )
        for kind, n in self.kinds.items():
            if n > PER_KIND:
                loc = self.last[kind]
                self.collector.extend(
                    [
                        Problem(
                            Location(loc.path, None, None, loc.key),
                            f"{n - PER_KIND} more {kind} not listed",
                        )
                    ]
                )
        self.collector.raise_if_any()

    def __bool__(self) -> bool:
        return bool(self.kinds)


def _map_column(
    table: Table,
    col: int,
    lookup: Callable[[str], int],
    problems: _Problems,
    *,
    describe: Callable[[str], tuple[str, str | None]],
    kind: str,
    blank_ok: bool = False,
    blank_kind: str | None = None,
    blank_message: str = "blank cell",
    blank_hint: str | None = None,
) -> np.ndarray:
    """Map a column's texts to indices with ``lookup`` (-1 = unknown); -2 for blank cells.

    Each unknown text is reported once, at its first row, with how many rows carry it.
    """
    c = table.columns[col]
    table_map = np.empty(len(c.uniques), dtype=np.int64)
    bad: list[int] = []
    for j, u in enumerate(c.uniques):
        if u == "":
            table_map[j] = -2
            continue
        idx = lookup(u)
        table_map[j] = idx
        if idx < 0:
            bad.append(j)
    mapped = table_map[c.codes] if len(c.codes) else np.zeros(0, dtype=np.int64)
    for j in bad:
        rows = np.flatnonzero(c.codes == j)
        if not len(rows):
            continue
        message, hint = describe(c.uniques[j])
        more = f" ({len(rows)} rows; first here)" if len(rows) > 1 else ""
        problems.add(kind, table.problem(int(rows[0]), col, message + more, hint))
    if not blank_ok:
        blanks = np.flatnonzero(mapped == -2)
        for row in blanks[:PER_KIND]:
            problems.add(
                blank_kind or f"blank {c.name} cells",
                table.problem(int(row), col, blank_message, blank_hint),
            )
        problems.count(blank_kind or f"blank {c.name} cells", len(blanks) - PER_KIND)
    return mapped


def _code_lookup(
    codes: Sequence[str],
    labels: Sequence[str] = (),
) -> tuple[Callable[[str], int], Callable[[str], tuple[str, str | None]]]:
    index = {c: i for i, c in enumerate(codes)}
    # a label typed instead of its code (case ignored): named in the hint, never accepted
    by_label = {lab.casefold(): c for c, lab in zip(codes, labels, strict=False) if lab != c}

    def lookup(u: str) -> int:
        return index.get(u, -1)

    def describe(u: str) -> tuple[str, str | None]:
        code = by_label.get(u.casefold())
        s = code or suggest(u, list(codes))
        hint = (
            f"{u!r} is the label of category {code!r}: write the code. declared codes: {', '.join(codes)}"
            if code
            else f"did you mean {s!r}? declared codes: {', '.join(codes)}"
            if s
            else f"declared codes: {', '.join(codes)}"
        )
        return f"unknown category {u!r}", hint

    return lookup, describe


# --------------------------------------------------------------------------------------------
# Ratings
# --------------------------------------------------------------------------------------------

LONG_COLUMNS = ("item", "rater", "trial", "rating", "reference")


@dataclass
class _Records:
    """Ratings as parallel arrays, one entry per rating cell read."""

    item: np.ndarray  # int64 index into item_names; -2 blank
    rater: np.ndarray  # int64 rater index; <0 bad
    trial: np.ndarray  # int64 0-based trial; <0 bad
    rating: np.ndarray  # int64 category index; -1 unknown, -2 blank
    row: np.ndarray  # int64 table row (for messages)
    col: np.ndarray  # int64 table column of the rating
    item_names: list[str]
    label: np.ndarray | None = None  # int64 index into the label column's uniques, when coded
    label_col: int = 0  # the table column holding the coded labels


def load_ratings(study: Study) -> Ratings:
    """Read and check the ratings (and reference, and key) of ``study``.

    Raises :class:`InputError` listing every problem (up to 50, then a count).  ``Ratings.items``
    is in order of first appearance in the ratings file (with a key: in key order).
    """
    table = read_table(study.ratings_path, sheet=study.ratings_sheet, what="ratings")
    problems = _Problems()
    notes = list(table.notes)
    if table.n_rows == 0:
        raise InputError(
            [table.problem(None, None, "the ratings file has a header but no ratings")]
        )
    key = _load_key(study, study.key_path, problems) if study.key_path is not None else None
    layout = _detect_layout(table, study, key is not None)
    if layout == "long":
        recs, ref_col = _long_records(table, study, problems, notes, key)
    else:
        recs, ref_col = _wide_records(table, study, problems, notes, key)
    n_raters, n_trials = len(study.raters), study.trials

    # duplicates: the same item, rater and trial twice
    ok_cell = (recs.item >= 0) & (recs.rater >= 0) & (recs.trial >= 0)
    cell_key = np.where(ok_cell, (recs.item * n_raters + recs.rater) * n_trials + recs.trial, -1)
    if ok_cell.any() and _has_duplicates(
        cell_key[ok_cell], len(recs.item_names) * n_raters * n_trials
    ):
        dup_rows = _later_repeats(cell_key, ok_cell)
        for i in dup_rows[:PER_KIND]:
            first = int(np.flatnonzero(cell_key == cell_key[i])[0])
            item = recs.item_names[recs.item[i]]
            rater = study.raters[recs.rater[i]].id
            what = f"item {item!r}, rater {rater}, trial {recs.trial[i] + 1}"
            first_line = int(table.lines[recs.row[first]])
            if recs.label is not None:
                label = table.columns[recs.label_col].uniques[recs.label[i]]
                msg = f"label {label!r} used twice by rater {rater} ({what}); also on line {first_line}"
            else:
                msg = f"second rating for {what}; first on line {first_line}"
            problems.add(
                "duplicate ratings",
                table.problem(
                    int(recs.row[i]),
                    int(recs.col[i]),
                    msg,
                    "keep one rating per item, rater and trial",
                ),
            )
        problems.count("duplicate ratings", len(dup_rows) - PER_KIND)

    n_items = len(recs.item_names)
    codes = np.full((n_items, n_raters, n_trials), MISSING, dtype=np.int8)
    good = ok_cell & (recs.rating >= 0)
    codes[recs.item[good], recs.rater[good], recs.trial[good]] = recs.rating[good].astype(np.int8)

    # absent ratings: cells with no row at all (rows with a blank or unknown rating are
    # reported where they are)
    absent = codes == MISSING
    touched = ok_cell & ~good
    if touched.any() or not ok_cell.all():
        seen = np.zeros(absent.shape, dtype=bool)
        seen[recs.item[touched], recs.rater[touched], recs.trial[touched]] = True
        # a row whose item, rater or trial could not be read (reported where it is) may be
        # the rating of any cell it could stand for: those cells are not called absent too
        parts = (recs.item, recs.rater, recs.trial)
        for known in (
            (True, True, False),
            (True, False, True),
            (False, True, True),
            (True, False, False),
            (False, True, False),
            (False, False, True),
        ):
            sel = np.ones(len(recs.item), dtype=bool)
            for arr, k in zip(parts, known, strict=True):
                sel &= (arr >= 0) == k
            if sel.any():
                seen[
                    tuple(
                        arr[sel] if k else slice(None) for arr, k in zip(parts, known, strict=True)
                    )
                ] = True
        if (~ok_cell & (recs.item < 0) & (recs.rater < 0) & (recs.trial < 0)).any():
            seen[:] = True
        unexplained = absent & ~seen
    else:
        unexplained = absent
    n_absent = int(absent.sum())
    if study.missing == "refuse" and unexplained.any():
        _report_missing(table, study, recs.item_names, unexplained, problems)
    elif study.missing == "allow" and n_absent:
        notes.append(f"{n_absent} of {codes.size} ratings absent (missing: allow)")
        silent = [study.raters[r].id for r in range(n_raters) if absent[:, r, :].all()]
        if silent:
            notes.append(f"no ratings at all from rater(s) {', '.join(silent)}")

    sources = [_source(table, "ratings", layout)]
    reference = None
    if ref_col is not None and study.reference_path is not None:
        loc = study.locate("reference")
        problems.add(
            "reference conflicts",
            Problem(
                loc,
                f"the reference is given twice: in the {table.columns[ref_col].name!r} column of {table.shown} and in {display_path(study.reference_path)}",
                "keep one of the two",
            ),
        )
    elif ref_col is not None:
        reference = _reference_from_column(table, ref_col, recs, study, problems)
    elif study.reference_path is not None:
        reference, ref_table = _reference_from_file(
            study, study.reference_path, recs.item_names, problems
        )
        if ref_table is not None:
            sources.append(_source(ref_table, "reference", None))
            notes.extend(ref_table.notes)
    if key is not None:
        sources.append(_source(key.table, "key", None))
        notes.extend(key.table.notes)
    problems.raise_if_any()
    return Ratings(
        items=tuple(recs.item_names),
        raters=study.rater_ids,
        categories=study.category_codes,
        codes=codes,
        reference=reference,
        sources=tuple(sources),
        notes=tuple(notes),
    )


def _has_duplicates(keys: np.ndarray, n_cells: int) -> bool:
    """Whether any key repeats; counting is faster than hashing when the key space is small."""
    if n_cells <= 50_000_000:
        return bool(np.bincount(keys, minlength=n_cells).max(initial=0) > 1)
    return bool(len(np.unique(keys)) < len(keys))


def _source(table: Table, role: str, layout: str | None) -> SourceFile:
    if layout is not None and table.kind == "xlsx":
        layout = f"xlsx-{layout}"
    return SourceFile(
        path=table.path,
        role=role,
        sha256=table.sha256,
        size=table.size,
        rows=table.n_rows,
        encoding=table.encoding,
        delimiter=table.delimiter,
        layout=layout,
    )


def _wide_names(study: Study) -> dict[str, tuple[int, int]]:
    names: dict[str, tuple[int, int]] = {}
    for r, rater in enumerate(study.raters):
        for t in range(study.trials):
            names[f"{rater.id}/{t + 1}"] = (r, t)
        if study.trials == 1:
            names[rater.id] = (r, 0)
    return names


def _detect_layout(table: Table, study: Study, keyed: bool) -> str:
    low = [n.lower() for n in table.names()]
    if "rater" in low:
        return "long"
    wide = _wide_names(study)
    if any(n in wide for n in table.names()):
        return "wide"
    if "rating" in low:
        return "long"
    if not any(suggest(n, [*LONG_COLUMNS, "label"]) for n in table.names()):
        found = (table.delimiter or ",").join(table.names())
        raise InputError(
            [
                table.problem(
                    None,
                    None,
                    f"no header line: the first line must name the columns, found {found!r}",
                    "long layout: item,rater,trial,rating; wide layout: item,R1/1,R1/2,…; separated by commas, semicolons or tabs (see the README, Ratings files)",
                )
            ]
        )
    return "long"


def _long_records(
    table: Table, study: Study, problems: _Problems, notes: list[str], key: _Key | None
) -> tuple[_Records, int | None]:
    wanted = {"item": None, "rater": None, "trial": None, "rating": None, "reference": None}
    known = [*wanted, *(("label",) if key is not None else ())]
    cols: dict[str, int] = {}
    suggested: set[str] = set()
    for j, c in enumerate(table.columns):
        low = c.name.lower()
        if low == "label" and key is not None:
            low = "item"
        if low in wanted and low not in cols:
            cols[low] = j
            continue
        s = suggest(c.name, known)
        if s is not None and s.lower() != low:
            problems.add(
                "header problems",
                table.problem(None, j, f"unknown column {c.name!r}", f"did you mean {s!r}?"),
            )
            suggested.add(s)
        elif s is None:
            notes.append(f"{table.shown}: column {c.name!r} ignored")
    required = ["item", "rater", "rating"] + (["trial"] if study.trials > 1 and key is None else [])
    for name in required:
        if name not in cols and name not in suggested:
            hint = (
                "trial may be left out only when the study has trials: 1"
                if name == "trial"
                else "long layout header: item,rater,trial,rating"
            )
            problems.add("header problems", table.problem(None, None, f"no {name!r} column", hint))
    if any(n not in cols for n in required):
        problems.raise_if_any()
    n = table.n_rows
    row = np.arange(n, dtype=np.int64)
    rating_col = cols["rating"]

    # raters
    rids = list(study.rater_ids)
    rindex = {r: i for i, r in enumerate(rids)}

    def describe_rater(u: str) -> tuple[str, str | None]:
        s = suggest(u, rids)
        return f"undeclared rater {u!r}", (
            f"did you mean {s!r}? " if s else ""
        ) + f"declared raters: {', '.join(rids)}"

    rater = _map_column(
        table,
        cols["rater"],
        lambda u: rindex.get(u, -1),
        problems,
        describe=describe_rater,
        kind="undeclared raters",
        blank_message="blank rater cell",
    )
    # trials
    trial = _trial_column(table, cols.get("trial"), study, problems, n)
    # ratings
    lookup, describe = _code_lookup(study.category_codes, [c.label for c in study.categories])
    rating = _map_column(
        table,
        rating_col,
        lookup,
        problems,
        describe=describe,
        kind="unknown categories",
        blank_kind="blank rating cells",
        blank_message="blank rating cell",
        blank_hint="every rating is required (missing: refuse)"
        if study.missing == "refuse"
        else None,
        blank_ok=study.missing == "allow",
    )
    label = None
    if key is not None:
        item, trial, label, names = _decode_labels(
            table, cols["item"], trial, cols.get("trial"), key, problems
        )
    else:
        item, names = _items(table, cols["item"], problems)
    recs = _Records(
        item=item,
        rater=rater,
        trial=trial,
        rating=rating,
        row=row,
        col=np.full(n, rating_col, dtype=np.int64),
        item_names=names,
        label=label,
        label_col=cols["item"],
    )
    return recs, cols.get("reference")


def _trial_column(
    table: Table, col: int | None, study: Study, problems: _Problems, n: int
) -> np.ndarray:
    if col is None:
        return np.zeros(n, dtype=np.int64)
    T = study.trials

    def whole(u: str) -> str:
        # a spreadsheet may write the trial as 1.0; the value is still trial 1
        head, dot, tail = u.partition(".")
        return head if dot and head and tail and set(tail) == {"0"} else u

    def lookup(u: str) -> int:
        u = whole(u)
        if u.isascii() and u.isdigit() and 1 <= int(u) <= T:
            return int(u) - 1
        return -1

    def describe(u: str) -> tuple[str, str | None]:
        if whole(u).isascii() and whole(u).isdigit():
            return (
                f"trial {u} is out of range: the study has {T} trial(s)",
                f"trials are numbered 1 to {T}",
            )
        return f"trial must be a whole number from 1 to {T}, got {u!r}", None

    return _map_column(
        table,
        col,
        lookup,
        problems,
        describe=describe,
        kind="bad trial numbers",
        blank_message="blank trial cell",
    )


def _items(table: Table, col: int, problems: _Problems) -> tuple[np.ndarray, list[str]]:
    c = table.columns[col]
    codes = c.codes.copy()
    names = list(c.uniques)
    b = c.blank_code()
    if b is not None:
        blanks = np.flatnonzero(codes == b)
        for r in blanks[:PER_KIND]:
            problems.add("blank item cells", table.problem(int(r), col, "blank item cell"))
        problems.count("blank item cells", len(blanks) - PER_KIND)
        names.pop(b)
        codes = np.where(codes == b, -2, codes - (codes > b))
    return codes, names


def _wide_records(
    table: Table, study: Study, problems: _Problems, notes: list[str], key: _Key | None
) -> tuple[_Records, int | None]:
    if key is not None:
        raise InputError(
            [
                table.problem(
                    None,
                    None,
                    "coded labels need the long layout",
                    "header: item,rater,rating (the key gives each label's trial)",
                )
            ]
        )
    wide = _wide_names(study)
    if table.columns[0].name.lower() != "item":
        s = suggest(table.columns[0].name, ["item"])
        problems.add(
            "header problems",
            table.problem(
                None,
                0,
                f"the first column of a wide ratings file must be 'item', found {table.columns[0].name!r}",
                f"did you mean {s!r}?" if s else None,
            ),
        )
    ref_col = None
    rater_cols: list[tuple[int, int, int]] = []
    taken: dict[tuple[int, int], int] = {}
    for j, c in enumerate(table.columns[1:], start=1):
        if c.name.lower() == "reference" and ref_col is None:
            ref_col = j
            continue
        if c.name in wide:
            rt = wide[c.name]
            if rt in taken:
                problems.add(
                    "header problems",
                    table.problem(
                        None,
                        j,
                        f"column {c.name!r} repeats rater {study.raters[rt[0]].id} trial {rt[1] + 1} (column {taken[rt] + 1})",
                    ),
                )
                continue
            taken[rt] = j
            rater_cols.append((j, *rt))
            continue
        s = suggest(c.name, [*wide, "reference"])
        hint = f"did you mean {s!r}? " if s else ""
        problems.add(
            "header problems",
            table.problem(
                None,
                j,
                f"unknown column {c.name!r}",
                hint + "wide layout columns are <rater>/<trial>, e.g. " + ", ".join(list(wide)[:3]),
            ),
        )
    for r, rater in enumerate(study.raters):
        for t in range(study.trials):
            if (r, t) not in taken:
                msg = f"no column for rater {rater.id}, trial {t + 1} (expected {rater.id}/{t + 1})"
                if study.missing == "refuse":
                    problems.add(
                        "header problems",
                        table.problem(
                            None,
                            None,
                            msg,
                            "with missing: allow, absent columns count as absent ratings",
                        ),
                    )
                else:
                    notes.append(f"{table.shown}: {msg}")
    problems.raise_if_any()
    if not rater_cols:
        raise InputError(
            [table.problem(None, None, "no rater columns found", "wide layout: item,R1/1,R1/2,…")]
        )
    n = table.n_rows
    m = len(rater_cols)
    lookup, describe = _code_lookup(study.category_codes, [c.label for c in study.categories])
    mapped = [
        _map_column(
            table,
            j,
            lookup,
            problems,
            describe=describe,
            kind="unknown categories",
            blank_ok=True,
        )
        for j, _, _ in rater_cols
    ]
    rating = np.concatenate(mapped) if mapped else np.zeros(0, np.int64)
    trial_rec = np.repeat(np.asarray([t for _, _, t in rater_cols], dtype=np.int64), n)
    item_row, names = _items(table, 0, problems)
    repeated = _duplicate_rows(item_row)
    for r in repeated[:PER_KIND]:
        first = int(np.flatnonzero(item_row == item_row[r])[0])
        problems.add(
            "repeated items",
            table.problem(
                int(r),
                0,
                f"item {names[item_row[r]]!r} has a second row; first on line {int(table.lines[first])}",
                "a wide file has one row per item",
            ),
        )
    problems.count("repeated items", len(repeated) - PER_KIND)
    item_row[repeated] = -2  # reported once here, not again per rating cell
    item_rec = np.tile(item_row, m)
    recs = _Records(
        item=item_rec,
        rater=np.repeat(np.asarray([r for _, r, _ in rater_cols], dtype=np.int64), n),
        trial=trial_rec,
        rating=rating,
        row=np.tile(np.arange(n, dtype=np.int64), m),
        col=np.repeat(np.asarray([j for j, _, _ in rater_cols], dtype=np.int64), n),
        item_names=names,
    )
    if study.missing == "refuse":
        blank = recs.rating == -2
        for i in np.flatnonzero(blank)[:PER_KIND]:
            problems.add(
                "blank rating cells",
                table.problem(
                    int(recs.row[i]),
                    int(recs.col[i]),
                    "blank rating cell",
                    "every rating is required (missing: refuse)",
                ),
            )
        problems.count("blank rating cells", int(blank.sum()) - PER_KIND)
    return recs, ref_col


def _duplicate_rows(codes: np.ndarray) -> np.ndarray:
    return _later_repeats(codes, codes >= 0)


def _later_repeats(keys: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Rows (where ``mask``) whose key already appeared on an earlier masked row, in row order."""
    rows = np.flatnonzero(mask)
    order = np.argsort(keys[rows], kind="stable")
    sorted_keys = keys[rows][order]
    repeat = np.zeros(len(rows), dtype=bool)
    repeat[order[1:]] = sorted_keys[1:] == sorted_keys[:-1]
    return rows[repeat]


# --------------------------------------------------------------------------------------------
# Coded labels (plan key)
# --------------------------------------------------------------------------------------------


@dataclass
class _Key:
    table: Table
    index: dict[str, int]  # label -> key row
    item: np.ndarray  # key row -> item index (into names); -1 bad
    trial: np.ndarray  # key row -> trial index; -1 bad
    names: list[str]  # item ids in key order


def _load_key(study: Study, path: Path, problems: _Problems) -> _Key:
    table = read_table(path, what="key")
    cols = {n: table.find(n) for n in ("label", "item", "trial")}
    for name in ("label", "item") + (("trial",) if study.trials > 1 else ()):
        if cols[name] is None:
            s = next((c.name for c in table.columns if suggest(c.name, [name]) == name), None)
            problems.add(
                "key problems",
                table.problem(
                    None,
                    None,
                    f"no {name!r} column in the key",
                    f"did you mean {s!r}? " if s else "key header: label,item,trial",
                ),
            )
    problems.raise_if_any()
    label_col = table.columns[cols["label"]]  # type: ignore[index]
    item_codes, names = _items(table, cols["item"], problems)  # type: ignore[arg-type]
    trial = _trial_column(table, cols["trial"], study, problems, table.n_rows)
    labels = label_col.codes
    index: dict[str, int] = {}
    b = label_col.blank_code()
    for j, u in enumerate(label_col.uniques):
        if j == b:
            continue
        rows = np.flatnonzero(labels == j)
        index[u] = int(rows[0])
        if len(rows) > 1:
            problems.add(
                "key problems",
                table.problem(
                    int(rows[1]),
                    cols["label"],
                    f"label {u!r} appears twice in the key; first on line {int(table.lines[rows[0]])}",
                ),
            )
    if b is not None:
        for r in np.flatnonzero(labels == b)[:PER_KIND]:
            problems.add("key problems", table.problem(int(r), cols["label"], "blank label cell"))
    return _Key(table=table, index=index, item=item_codes, trial=trial, names=names)


def _decode_labels(
    table: Table,
    col: int,
    trial: np.ndarray,
    trial_col: int | None,
    key: _Key,
    problems: _Problems,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[str]]:
    c = table.columns[col]
    to_key = np.full(len(c.uniques), -1, dtype=np.int64)
    for j, u in enumerate(c.uniques):
        if u == "":
            to_key[j] = -2
            continue
        k = key.index.get(u)
        if k is None:
            rows = np.flatnonzero(c.codes == j)
            s = suggest(u, list(key.index)) if len(key.index) < 5000 else None
            more = f" ({len(rows)} rows; first here)" if len(rows) > 1 else ""
            problems.add(
                "labels not in the key",
                table.problem(
                    int(rows[0]),
                    col,
                    f"label {u!r} is not in the key {key.table.shown}{more}",
                    f"did you mean {s!r}?" if s else None,
                ),
            )
        else:
            to_key[j] = k
    krow = to_key[c.codes]
    ok = krow >= 0
    item = np.full(len(krow), -2, dtype=np.int64)
    out_trial = np.full(len(krow), -1, dtype=np.int64)
    item[ok] = key.item[krow[ok]]
    out_trial[ok] = key.trial[krow[ok]]
    for r in np.flatnonzero(krow == -2)[:PER_KIND]:
        problems.add("blank item cells", table.problem(int(r), col, "blank label cell"))
    if trial_col is not None:
        clash = ok & (trial >= 0) & (out_trial >= 0) & (trial != out_trial)
        for r in np.flatnonzero(clash)[:PER_KIND]:
            problems.add(
                "trials that do not match the key",
                table.problem(
                    int(r),
                    trial_col,
                    f"trial {trial[r] + 1} does not match the key: label {c.uniques[c.codes[r]]!r} is trial {out_trial[r] + 1}",
                ),
            )
    # items in key order, keeping only those rated
    present = np.zeros(len(key.names), dtype=bool)
    present[item[item >= 0]] = True
    new_index = np.cumsum(present) - 1
    names = [n for n, p in zip(key.names, present, strict=True) if p]
    item = np.where(item >= 0, new_index[np.maximum(item, 0)], item)
    return item, out_trial, np.where(ok, c.codes, -1), names


# --------------------------------------------------------------------------------------------
# Reference and missing ratings
# --------------------------------------------------------------------------------------------


def _reference_from_column(
    table: Table, col: int, recs: _Records, study: Study, problems: _Problems
) -> np.ndarray:
    lookup, describe = _code_lookup(study.category_codes, [c.label for c in study.categories])
    ref_rows = _map_column(
        table,
        col,
        lookup,
        problems,
        describe=describe,
        kind="unknown reference categories",
        blank_ok=True,
    )
    n = table.n_rows
    item_rows = np.full(n, -2, dtype=np.int64)
    item_rows[recs.row] = recs.item  # wide files repeat each row once per rater column
    k = len(study.categories)
    n_items = len(recs.item_names)
    given = (item_rows >= 0) & (ref_rows >= 0)
    reference = np.full(n_items, MISSING, dtype=np.int8)
    if given.any():
        pair = item_rows[given] * k + ref_rows[given]
        upair, first = np.unique(pair, return_index=True)
        rows_given = np.flatnonzero(given)
        items_of = upair // k
        reference[items_of] = (upair % k).astype(np.int8)
        uitems, counts = np.unique(items_of, return_counts=True)
        for it in uitems[counts > 1][: PER_KIND + 1]:
            idx = np.flatnonzero(items_of == it)
            ra, rb = int(rows_given[first[idx[0]]]), int(rows_given[first[idx[1]]])
            a, b = study.category_codes[upair[idx[0]] % k], study.category_codes[upair[idx[1]] % k]
            if ra > rb:
                ra, rb, a, b = rb, ra, b, a
            problems.add(
                "items with two references",
                table.problem(
                    rb,
                    col,
                    f"two references for item {recs.item_names[it]!r}: {b!r} here, {a!r} on line {int(table.lines[ra])}",
                    "an item has one reference category",
                ),
            )
    lacking = np.flatnonzero(reference == MISSING)
    _report_lacking(
        lacking,
        recs.item_names,
        Location(table.shown, None, None, table.columns[col].name),
        problems,
    )
    return reference


def _report_lacking(
    lacking: np.ndarray, names: list[str], loc: Location, problems: _Problems
) -> None:
    for it in lacking[:PER_KIND]:
        problems.add(
            "rated items without a reference",
            Problem(
                loc,
                f"no reference for rated item {names[it]!r}",
                "give every rated item its reference category",
            ),
        )
    problems.count("rated items without a reference", len(lacking) - PER_KIND)


def _reference_from_file(
    study: Study, path: Path, names: list[str], problems: _Problems
) -> tuple[np.ndarray | None, Table | None]:
    table = read_table(path, what="reference")
    item_col, ref_col = table.find("item"), table.find("reference")
    for name, col in (("item", item_col), ("reference", ref_col)):
        if col is None:
            s = next((c.name for c in table.columns if suggest(c.name, [name]) == name), None)
            problems.add(
                "header problems",
                table.problem(
                    None,
                    None,
                    f"no {name!r} column in the reference file",
                    f"did you mean {s!r}? " if s else "reference header: item,reference",
                ),
            )
    for j, c in enumerate(table.columns):
        if j in (item_col, ref_col):
            continue
        if c.name.lower() == "borderline" or suggest(c.name, ["item", "reference"]) is None:
            # the item list of `reportgen plan` (item,reference,borderline) serves as reference file
            table.notes.append(f"{table.shown}: column {c.name!r} ignored")
            continue
        problems.add(
            "header problems",
            table.problem(
                None,
                j,
                f"unknown column {c.name!r} in the reference file",
                "reference header: item,reference",
            ),
        )
    if item_col is None or ref_col is None:
        return None, table
    lookup, describe = _code_lookup(study.category_codes, [c.label for c in study.categories])
    ref = _map_column(
        table,
        ref_col,
        lookup,
        problems,
        describe=describe,
        kind="unknown reference categories",
        blank_kind="blank reference cells",
        blank_message="blank reference cell",
    )
    item_codes, ref_names = _items(table, item_col, problems)
    name_index = {n: i for i, n in enumerate(names)}
    to_rated = np.asarray([name_index.get(n, -1) for n in ref_names], dtype=np.int64)
    reference = np.full(len(names), MISSING, dtype=np.int8)
    seen_first: dict[int, int] = {}
    rows_ok = np.flatnonzero(item_codes >= 0)
    dup = _duplicate_rows(item_codes)
    for r in dup[:PER_KIND]:
        first = int(np.flatnonzero(item_codes == item_codes[r])[0])
        seen_first[int(item_codes[r])] = first
        problems.add(
            "items with two references",
            table.problem(
                int(r),
                item_col,
                f"two references for item {ref_names[item_codes[r]]!r}; first on line {int(table.lines[first])}",
                "an item has one reference row",
            ),
        )
    unrated = [j for j, t in enumerate(to_rated) if t < 0]
    # a spreadsheet that turned the ids into numbers drops leading zeros: '007' becomes '7'
    unpadded = {n.lstrip("0") or "0": n for n in names if n.isdigit()}
    for j in unrated[:PER_KIND]:
        row = int(np.flatnonzero(item_codes == j)[0])
        name = ref_names[j]
        twin = unpadded.get(name.lstrip("0") or "0") if name.isdigit() else None
        problems.add(
            "references for unrated items",
            table.problem(
                row,
                item_col,
                f"reference given for item {name!r}, which has no ratings",
                f"the ratings have item {twin!r}: were leading zeros lost in a spreadsheet? keep item ids as text"
                if twin is not None and twin != name
                else "check the item id, or delete the row",
            ),
        )
    problems.count("references for unrated items", len(unrated) - PER_KIND)
    sel = rows_ok[(to_rated[item_codes[rows_ok]] >= 0) & (ref[rows_ok] >= 0)]
    reference[to_rated[item_codes[sel]]] = ref[sel].astype(np.int8)
    # rated items with no reference row (blank reference cells were reported above)
    has_row = np.zeros(len(names), dtype=bool)
    has_row[to_rated[item_codes[rows_ok]][to_rated[item_codes[rows_ok]] >= 0]] = True
    lacking = np.flatnonzero(~has_row)
    _report_lacking(lacking, names, Location(table.shown, None, None, "item"), problems)
    return reference, table


def _report_missing(
    table: Table, study: Study, names: list[str], absent: np.ndarray, problems: _Problems
) -> None:
    loc = Location(table.shown, None, None, "rating")
    hint = "rate them, or set missing: allow in the study definition"
    total = int(absent.sum())
    if total <= PER_KIND:
        for i, r, t in zip(*np.nonzero(absent), strict=True):
            problems.add(
                "missing ratings",
                Problem(
                    loc,
                    f"no rating for item {names[i]!r} by rater {study.raters[r].id} in trial {t + 1}",
                    hint,
                ),
            )
        return
    for r in range(absent.shape[1]):
        for t in range(absent.shape[2]):
            items = np.flatnonzero(absent[:, r, t])
            if not len(items):
                continue
            shown = ", ".join(repr(names[i]) for i in items[:5]) + (", …" if len(items) > 5 else "")
            problems.add(
                "missing-rating groups",
                Problem(
                    loc,
                    f"rater {study.raters[r].id}, trial {t + 1}: {len(items)} item(s) without a rating ({shown})",
                    hint,
                ),
            )
    problems.add(
        "missing-rating totals",
        Problem(loc, f"{total} ratings missing in all (missing: refuse)", hint),
    )
