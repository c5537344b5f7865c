"""Reading specimen table files into cells of text: encodings, delimiters, Excel sheets, and the
physical line of every record, so that each error can name the line a user sees in an editor.

The result, :class:`RawTable`, is text only; :mod:`flawmix.specimens` validates it.
"""
from __future__ import annotations

import csv
import hashlib
import io
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import FlawmixError

DELIMITERS = (",", ";", "\t")
_DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab"}


@dataclass
class RawTable:
    """A table as text cells.

    Attributes:
        header: the header cells as written (stripped).
        cells: one column of text per header cell (missing cells are NaN), in record order.
        source: file name (None for a DataFrame).
        row_word: ``line`` (text files), ``row`` (workbooks) or ``dataframe``.
        checksum: SHA-256 of the file's bytes.
        delimiter: the delimiter found (text files).
        blank: (R,) True for records with no content at all (blank lines).
    """

    header: list[str]
    cells: pd.DataFrame
    source: str | None
    row_word: str
    checksum: str | None = None
    delimiter: str | None = None
    blank: np.ndarray | None = None
    lines: np.ndarray | None = field(default=None, repr=False)   # (R,) physical line (or row) of each record
    sheets: dict | None = field(default=None, repr=False)         # every sheet of a workbook, for error messages
    header_line: int = 1

    def position(self, record: int) -> str:
        """Where record ``record`` (0-based, after the header) is: ``line 7``, ``row 7`` or
        ``row index 'x'``."""
        if self.row_word == "dataframe":
            return f"row index {self.cells.index[record]!r}"
        return f"{self.row_word} {int(self.lines[record])}"

    def at(self, record: int, column: str) -> str:
        """Location prefix ``bars.csv, line 7, column 'strength': ``."""
        return f"{self.source + ', ' if self.source else ''}{self.position(record)}, column '{column}': "


def read_table(path_or_frame, sheet=None) -> RawTable:
    """Read a .csv/.txt/.tsv file, an .xlsx workbook, a DataFrame or a 1-D sequence of strengths
    into a :class:`RawTable`."""
    if isinstance(path_or_frame, pd.DataFrame):
        # cells keep their dtypes: a numeric strength column needs no round trip through text
        frame = path_or_frame
        return RawTable([str(c).strip() for c in frame.columns], frame.set_axis(range(frame.shape[1]), axis=1),
                        None, "dataframe", blank=np.zeros(len(frame), dtype=bool))
    if isinstance(path_or_frame, pd.Series) or (not isinstance(path_or_frame, (str, bytes, os.PathLike))
                                                 and np.ndim(path_or_frame) >= 1):
        values = np.asarray(path_or_frame)
        if values.ndim != 1:
            raise FlawmixError(f"an array of shape {values.shape} was given; give the strengths as a "
                               "one-dimensional sequence, or a table (file or DataFrame) with a strength column")
        # strengths alone: every specimen a failure, of one population
        return read_table(pd.DataFrame({"strength": values}), sheet)
    if not isinstance(path_or_frame, (str, os.PathLike)):
        raise FlawmixError(f"cannot read specimens from a {type(path_or_frame).__name__}; give a table file "
                           "(.csv or .xlsx), a pandas DataFrame or a sequence of strengths")
    path = Path(path_or_frame)
    if path.is_dir():
        raise FlawmixError(f"{path}: is a folder; give the specimen table file (.csv or .xlsx)")
    if not path.exists():
        raise FlawmixError(f"{path}: no such file; check the path")
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise FlawmixError(f"{path}: cannot be read ({exc.strerror}); check its permissions") from None
    checksum = hashlib.sha256(data).hexdigest()
    if path.suffix.lower() in (".xlsx", ".xlsm"):
        return _read_workbook(path, data, sheet, checksum)
    if sheet is not None:
        raise FlawmixError(f"{path}: --sheet / 'sheet' applies to Excel workbooks only; drop it for a text table")
    return _read_text(path, data, checksum)


# ---- text files ------------------------------------------------------------------------

def decode(path: Path, data: bytes) -> bytes:
    """The file as UTF-8 bytes: UTF-8 with or without byte-order mark, or UTF-16 with one."""
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    elif data.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            return data.decode("utf-16").encode("utf-8")
        except UnicodeDecodeError as exc:
            raise FlawmixError(f"{path}: byte offset {exc.start}: broken UTF-16 text; re-save the file as UTF-8") from None
    if b"\x00" in data:      # before the UTF-8 check: UTF-16 without a byte-order mark is the likely cause
        offset = data.index(b"\x00")
        raise FlawmixError(f"{path}: byte offset {offset}: a NUL byte (UTF-16 without a byte-order mark, or not a "
                           "text file); re-save the file as UTF-8")
    try:
        data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise FlawmixError(f"{path}: byte offset {exc.start} (line {line}): byte 0x{data[exc.start]:02x} is not "
                           "UTF-8 text; re-save the file as UTF-8 (e.g. 'CSV UTF-8' in a spreadsheet program)") from None
    return data


def sniff_delimiter(header_line: bytes) -> str:
    """The delimiter of a table from its header line: the most frequent of comma, semicolon and
    tab outside quotes (a header of one column has none: comma)."""
    counts = dict.fromkeys(DELIMITERS, 0)
    quoted = False
    for ch in header_line.decode("utf-8"):
        if ch == '"':
            quoted = not quoted
        elif not quoted and ch in counts:
            counts[ch] += 1
    best = max(DELIMITERS, key=lambda d: counts[d])
    return best if counts[best] else ","


def _read_text(path: Path, data: bytes, checksum: str) -> RawTable:
    data = decode(path, data)
    start, leading_lines = _skip_leading_blank_lines(data)
    if start >= len(data):
        raise FlawmixError(f"{path}: the file is empty; it needs a header line with at least 'strength'")
    end = data.find(b"\n", start)
    first = data[start:end if end >= 0 else len(data)]
    declared = _declared_delimiter(first)
    if declared is not None:          # a spreadsheet's 'sep=;' line: it names the delimiter, and is not the header
        if end < 0 or not data[end + 1:].strip():
            raise FlawmixError(f"{path}: the file is empty after its 'sep=' line; it needs a header line with at "
                               "least 'strength'")
        skip, more = _skip_leading_blank_lines(data[end + 1:])
        start, leading_lines = end + 1 + skip, leading_lines + 1 + more
        end = data.find(b"\n", start)
        first = data[start:end if end >= 0 else len(data)]
    delimiter = declared or sniff_delimiter(first)
    body = data[start:]
    below = _header_further_down(body[:1 << 16].decode("utf-8", errors="ignore").split("\n")[:HEADER_SEARCH])
    if below is not None:
        raise FlawmixError(f"{path}, line {leading_lines + below + 1}: this line looks like the header (it names the "
                           f"strength) but line {leading_lines + 1} comes first; delete the {below} line(s) above the "
                           "header (titles, notes) or move them below the table")
    try:
        cells = pd.read_csv(io.BytesIO(body), sep=delimiter, header=None, dtype=str, keep_default_na=False,
                            na_values=["\x00"], skip_blank_lines=False, index_col=False, quotechar='"',
                            encoding="utf-8", engine="c", low_memory=False)
    except pd.errors.ParserError:
        fields, lines = _layout(body, delimiter, leading_lines)
        _raise_field_count(path, fields, lines, delimiter)
        raise FlawmixError(f"{path}: not a readable table; check the quotes (a cell opened with \" must close "
                           "with \") and save it as UTF-8 CSV") from None
    header = [("" if pd.isna(c) else str(c)).strip() for c in cells.iloc[0]]
    cells = cells.iloc[1:].reset_index(drop=True)
    cells.columns = range(len(header))
    blank = _blank_records(cells, len(header))
    fields, lines = _layout(body, delimiter, leading_lines, records=len(cells) + 1)
    if np.any((fields[1:] != len(header)) & ~blank):
        _raise_field_count(path, fields, lines, delimiter, blank=np.concatenate([[False], blank]))
    return RawTable(header, cells, str(path), "line", checksum, delimiter, blank, lines=lines[1:],
                    header_line=int(lines[0]))


def _blank_records(cells: pd.DataFrame, columns: int) -> np.ndarray:
    """(R,) True for records whose cells are all missing or white space (',,,' and ' , , ' too).
    Column by column, only the records still blank are looked at: one pass over a million rows
    whose first cell is filled."""
    blank = np.ones(len(cells), dtype=bool)
    for j in range(columns):
        rows = np.flatnonzero(blank)
        if not rows.size:
            break
        values = cells[j].to_numpy(dtype=object)[rows]
        filled = np.fromiter((isinstance(v, str) and bool(v.strip()) for v in values), dtype=bool, count=rows.size)
        blank[rows[filled]] = False
    return blank


HEADER_SEARCH = 20      # lines (or rows) searched for a header below titles and notes


def _names_strength(text: str) -> bool:
    lowered = text.lower()
    return "strength" in lowered or "σ" in lowered


def _header_further_down(lines: list[str]) -> int | None:
    """Index of the first line naming the strength when the first line does not (a title or
    notes above the header), else None."""
    if not lines or _names_strength(lines[0]):
        return None
    return next((i for i, line in enumerate(lines[1:], 1) if _names_strength(line)), None)


def _declared_delimiter(line: bytes) -> str | None:
    """The delimiter a first line 'sep=;' (written by spreadsheet programs) declares, else None."""
    text = line.decode("utf-8", errors="replace").strip()
    if text.lower().startswith("sep=") and len(text) in (4, 5):
        mark = text[4:] or "\t"           # 'sep=' followed by a tab, stripped above
        return mark if mark in DELIMITERS else None
    return None


def _skip_leading_blank_lines(data: bytes) -> tuple[int, int]:
    start, lines = 0, 0
    while True:
        end = data.find(b"\n", start)
        line = data[start:end if end >= 0 else len(data)]
        if line.strip() or end < 0:
            return (start if line.strip() else len(data)), lines
        start, lines = end + 1, lines + 1


def _layout(body: bytes, delimiter: str, leading_lines: int, records: int | None = None
            ) -> tuple[np.ndarray, np.ndarray]:
    """(cells per record, physical line where each record starts), header record first.

    Without quotes a record is a line, counted with numpy over the bytes (fast on a million
    rows); with quotes, cells may hold delimiters and newlines, so the csv module reads it
    (also when the line count disagrees with the parser's, e.g. old Mac line ends)."""
    if b'"' not in body:
        raw = np.frombuffer(body, dtype=np.uint8)
        newline = np.flatnonzero(raw == 10)
        n_lines = newline.size + (1 if body and not body.endswith(b"\n") else 0)
        if records is None or n_lines == records:
            delims = np.flatnonzero(raw == ord(delimiter))
            fields = np.bincount(np.searchsorted(newline, delims), minlength=n_lines)[:n_lines] + 1
            return fields, np.arange(1, n_lines + 1) + leading_lines
    fields, lines = [], []
    reader = csv.reader(io.StringIO(body.decode("utf-8"), newline=""), delimiter=delimiter)
    previous = 0
    for record in reader:
        fields.append(len(record) if record else 1)
        lines.append(previous + 1 + leading_lines)
        previous = reader.line_num
    return np.asarray(fields), np.asarray(lines)


def _raise_field_count(path, fields, lines, delimiter, blank=None) -> None:
    expected = int(fields[0])
    wrong = fields != expected
    if blank is not None:
        wrong &= ~blank
    bad = np.flatnonzero(wrong)
    if not bad.size:
        return
    i = int(bad[0])
    got = int(fields[i])
    name = _DELIMITER_NAMES[delimiter]
    others = int(wrong.sum()) - 1
    more = f" (and {others} more line{'s' if others != 1 else ''})" if others else ""
    if got > expected:
        hint = (f"a {name} at the end of the line, or a {name} inside a cell? remove the extra {name}, quote cells "
                f"that contain one, or give the extra column a name in the header")
    else:
        hint = f"add the missing cells ({name}s with nothing between them are fine for empty cells)"
    raise FlawmixError(f"{path}, line {int(lines[i])}: {got} cells but the header (line {int(lines[0])}) has "
                       f"{expected}{more}; {hint}")


# ---- workbooks -------------------------------------------------------------------------

def _read_workbook(path: Path, data: bytes, sheet, checksum: str) -> RawTable:
    try:
        import openpyxl  # noqa: F401
    except ImportError:
        raise FlawmixError(f"{path}: reading Excel workbooks needs openpyxl; run: pip install 'flawmix[excel]'") from None
    _check_workbook_bytes(path, data)
    try:
        sheets = pd.read_excel(io.BytesIO(data), sheet_name=None, header=None, dtype=str, keep_default_na=False,
                               na_values=["\x00"])
    except Exception as exc:  # openpyxl raises many types for damaged files
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise FlawmixError(f"{path}: cannot read the workbook ({first}); open it in a spreadsheet program and "
                           "save it again as .xlsx, or export the sheet as CSV (UTF-8)") from None
    names = list(sheets)
    if not names:
        raise FlawmixError(f"{path}: the workbook has no sheets; add one with the specimen table")
    chosen = _choose_sheet(path, names, sheet)
    frame = sheets[chosen]
    while len(frame) and _blank_cells(frame.iloc[0]):      # blank rows above the header
        frame = frame.iloc[1:]
    first_row = frame.index[0] + 1 if len(frame) else 1
    if not len(frame):
        raise FlawmixError(f"{path}: sheet '{chosen}' is empty; choose the sheet with the specimens "
                           f"(--sheet NAME; sheets: {_sheet_listing(sheets)})")
    rows = [" ".join("" if pd.isna(c) else str(c) for c in frame.iloc[i]) for i in range(min(len(frame), HEADER_SEARCH))]
    below = _header_further_down(rows)
    if below is not None:
        raise FlawmixError(f"{path} [sheet '{chosen}'], row {first_row + below}: this row looks like the header (it "
                           f"names the strength) but row {first_row} comes first; delete the {below} row(s) above the "
                           "header (titles, notes) or move them below the table")
    header = [("" if pd.isna(c) else str(c)).strip() for c in frame.iloc[0]]
    cells = frame.iloc[1:].reset_index(drop=True)
    cells.columns = range(len(header))
    blank = cells.fillna("").apply(lambda col: col.str.strip() == "").all(axis=1).to_numpy() \
        if len(cells) else np.zeros(0, dtype=bool)
    return RawTable(header, cells, f"{path} [sheet '{chosen}']", "row", checksum, None, blank,
                    lines=np.arange(len(cells)) + first_row + 1, sheets=sheets, header_line=int(first_row))


def _blank_cells(cells: pd.Series) -> bool:
    """True when every cell is missing or white space (empty cells read as '')."""
    return bool(cells.fillna("").astype(str).str.strip().eq("").all())


def _check_workbook_bytes(path: Path, data: bytes) -> None:
    """An .xlsx is a zip archive holding xl/workbook.xml: say which it is not, before the
    spreadsheet library answers with its own internals."""
    import zipfile

    if not data.startswith(b"PK\x03\x04"):
        kind = "an old .xls workbook" if data.startswith(b"\xd0\xcf\x11\xe0") else "text or another format"
        raise FlawmixError(f"{path}: not an .xlsx workbook (its bytes look like {kind}); save it from the spreadsheet "
                           "program as .xlsx, or export the sheet as CSV (UTF-8) and give that file")
    try:
        with zipfile.ZipFile(io.BytesIO(data)) as archive:
            names = set(archive.namelist())
    except (zipfile.BadZipFile, OSError, EOFError):
        raise FlawmixError(f"{path}: the workbook is damaged (an incomplete or broken zip archive); open it in a "
                           "spreadsheet program and save it again as .xlsx, or export the sheet as CSV (UTF-8)") from None
    if "xl/workbook.xml" not in names:
        raise FlawmixError(f"{path}: a zip archive but not an .xlsx workbook (no xl/workbook.xml); give the "
                           "specimen table as .xlsx or CSV (UTF-8)")


def _choose_sheet(path: Path, names: list[str], sheet) -> str:
    if sheet is None:
        return names[0]
    text = str(sheet).strip()
    if text in names:
        return text
    if text.lstrip("-").isdigit():
        index = int(text)
        if 0 <= index < len(names):
            return names[index]
        raise FlawmixError(f"{path}: no sheet number {index}; the workbook has {len(names)} sheet(s), numbered "
                           f"from 0: {', '.join(repr(n) for n in names)}")
    raise FlawmixError(f"{path}: no sheet '{text}'; sheets: {', '.join(repr(n) for n in names)}; "
                       "give --sheet NAME or its number (0 = first)")


def _sheet_listing(sheets: dict) -> str:
    out = []
    for name, frame in sheets.items():
        rows = frame[~frame.fillna("").astype(str).apply(lambda col: col.str.strip() == "").all(axis=1)]
        head = [str(c).strip() for c in rows.iloc[0] if not pd.isna(c) and str(c).strip()] if len(rows) else []
        out.append(f"'{name}' ({', '.join(head) if head else 'empty'})")
    return "; ".join(out)
