"""Reading a study file into a raw table of strings, with the file line of every row.

The first step of the data flow: bytes -> header + rows of text cells. It knows
file formats (CSV dialects, XLSX workbooks, and the files people rename or
encrypt by mistake) and nothing about calls, parts or appraisers; validation is
:mod:`bayes_rr.study.data`'s job. CSV is parsed with the standard ``csv`` module so
that a row with more or fewer fields than the header is refused (pandas would
silently shift such a row's columns) and a quoted field holding a line break
does not put every later line number off.
"""

from __future__ import annotations

import csv
import io
import zipfile
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from bayes_rr.core.errors import DataError
from bayes_rr.study.types import MAX_CALLS

MAX_FILE_BYTES = 256 * 1024 * 1024
DELIMITERS = ",;\t|"

# Leading bytes of files that are not tables, and what to tell the user.
MAGIC = (
    (b"%PDF", "a PDF document"),
    (b"\x1f\x8b", "a gzip-compressed file"),
    (b"\xd0\xcf\x11\xe0", "an encrypted (password-protected) or old-format (.xls) Office file"),
    (b"\x89PNG", "a PNG image"),
    (b"\xff\xd8\xff", "a JPEG image"),
    (b"{\\rtf", "an RTF document"),
    (b"7z\xbc\xaf", "a 7-Zip archive"),
    (b"Rar!", "a RAR archive"),
)


@dataclass(frozen=True)
class RawTable:
    """A table as read: text cells, and where each row stands in the file.

    Attributes
    ----------
    frame
        Every cell as a string (empty string = empty cell); column names as
        written in the header.
    lines
        For each row of ``frame``, the line of the file (CSV) or the row of
        the sheet (XLSX) it starts on, counting from 1.
    sheet
        The sheet read, for a workbook; None for a CSV file.
    sheets
        Every sheet of a workbook (empty for a CSV file).
    """

    frame: pd.DataFrame
    lines: tuple[int, ...]
    sheet: str | None = None
    sheets: tuple[str, ...] = ()


MAX_ROWS = 1_000_000 + 10_000
"""Rows a study file may have: a study has at most MAX_CALLS calls, one a row in the
tidy layout (fewer rows in the wide one), with room for comment lines. Counted before
parsing, so a file far too long is refused at once."""


def _check_rows(rows: int, source: str) -> None:
    if rows > MAX_ROWS:
        raise DataError(
            f"{source}: {rows:,} lines, more than a study of {MAX_CALLS:,} calls can have "
            "(one call a line); split the study, or check that this is a study file"
        )


def read_table(path: Path, sheet: str | None = None) -> RawTable:
    """Read a CSV or XLSX file into a :class:`RawTable` (or raise a one-line DataError)."""
    if not path.exists():
        raise DataError(f"{path}: file not found; check the path")
    if path.is_dir():
        raise DataError(f"{path}: is a folder, expected a CSV or XLSX file")
    size = path.stat().st_size
    if size == 0:
        raise DataError(f"{path}: file is empty; expected a CSV or XLSX table of calls")
    if size > MAX_FILE_BYTES:
        raise DataError(
            f"{path}: file is {size / 2**20:.0f} MiB, more than the "
            f"{MAX_FILE_BYTES // 2**20} MiB a study can have; split the study or check the file"
        )
    try:
        with path.open("rb") as fh:
            head = fh.read(65536)
    except OSError as exc:
        raise DataError(f"{path}: cannot be read ({exc.strerror}); check its permissions") from None
    for magic, what in MAGIC:
        if head.startswith(magic):
            raise DataError(
                f"{path}: is {what}, not a table; save the study as an unencrypted .xlsx "
                "workbook or as 'CSV UTF-8'"
            )
    if head.startswith(b"PK\x03\x04") or path.suffix.lower() in (".xlsx", ".xlsm"):
        return _read_xlsx(path, sheet)
    if sheet is not None:
        raise DataError(f"{path}: --sheet {sheet!r} given but the file is not an XLSX workbook")
    if b"\x00" in head:
        raise DataError(
            f"{path}: not a text file (binary content); expected a CSV file saved as UTF-8"
        )
    data = path.read_bytes()
    _check_rows(data.count(b"\n"), str(path))
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise DataError(
            f"{path}: not UTF-8 text (byte {exc.start}: {exc.object[exc.start : exc.start + 1]!r});"
            " save the table as 'CSV UTF-8' and try again"
        ) from None
    return parse_csv_text(text, str(path))


def parse_csv_text(text: str, source: str) -> RawTable:
    """Parse CSV text (comment lines starting with ``#`` above the header are skipped)."""
    if not text.strip():
        raise DataError(f"{source}: file holds only white space; expected a table of calls")
    # Leading lines starting with '#' describe the file (the demo data say there
    # that they are invented); they are not part of the table.
    lines = text.splitlines(keepends=True)
    comments = 0
    while comments < len(lines) and lines[comments].lstrip().startswith("#"):
        comments += 1
    body = "".join(lines[comments:])
    if not body.strip():
        raise DataError(f"{source}: file holds only comment lines; expected a table of calls")
    sample = "".join(lines[comments : comments + 50])
    try:
        delimiter = csv.Sniffer().sniff(sample, delimiters=DELIMITERS).delimiter
    except csv.Error:
        delimiter = ","
    reader = csv.reader(io.StringIO(body, newline=""), delimiter=delimiter, skipinitialspace=True)
    records: list[list[str]] = []
    starts: list[int] = []
    previous_end = 0
    try:
        for record in reader:
            # reader.line_num is the physical line the record ends on; it starts on
            # the line after the previous record ended.
            starts.append(comments + previous_end + 1)
            previous_end = reader.line_num
            records.append(record)
    except csv.Error as exc:
        raise DataError(
            f"{source}: not a readable table at line {comments + reader.line_num} ({exc}); "
            "check the quotes on that line"
        ) from None
    return _records_to_table(records, starts, source)


def _records_to_table(
    records: list[list[str]], starts: list[int], source: str, *, grid: bool = False
) -> RawTable:
    """Header + rows. ``grid``: the records come from a sheet, where every row has the
    sheet's width (a field count cannot be wrong, an empty header cell is a column)."""
    # Skip blank records before the header (csv gives [] for an empty line).
    while records and not any(cell.strip() for cell in records[0]):
        records.pop(0)
        starts.pop(0)
    if not records:
        raise DataError(f"{source}: no header row; expected a table of calls")
    header = [cell.strip() for cell in records[0]]
    # A header that ends in empty names (a trailing delimiter) is padding.
    while not grid and header and header[-1] == "" and len(header) > 1:
        header.pop()
    width = len(header)
    rows, lines, bad = [], [], []
    for record, line in zip(records[1:], starts[1:], strict=True):
        if not any(cell.strip() for cell in record):
            continue  # a blank line between rows
        if len(record) > width and not any(cell.strip() for cell in record[width:]):
            record = record[:width]  # trailing empty fields (a trailing delimiter)
        if len(record) != width:
            bad.append((line, len(record)))
            continue
        rows.append(record)
        lines.append(line)
    if bad:
        shown = ", ".join(f"line {line} has {count}" for line, count in bad[:6])
        more = f" and {len(bad) - 6} more lines" if len(bad) > 6 else ""
        raise DataError(
            f"{source}: the header has {width} fields but {shown}{more}; every row needs "
            "exactly one value per column (check for a separator inside a value: quote it)"
        )
    frame = pd.DataFrame(rows, columns=range(width), dtype=str)
    frame.columns = header
    return RawTable(frame, tuple(lines))


def _formula_cells(path: Path, sheet: str) -> list[str]:
    """Cells of ``sheet`` holding a formula but no saved value (openpyxl gives None)."""
    import openpyxl

    formulas = openpyxl.load_workbook(path, read_only=True, data_only=False)
    values = openpyxl.load_workbook(path, read_only=True, data_only=True)
    try:
        found = []
        rows_f = formulas[sheet].iter_rows()
        rows_v = values[sheet].iter_rows()
        for row_f, row_v in zip(rows_f, rows_v, strict=False):
            for cell_f, cell_v in zip(row_f, row_v, strict=False):
                text = cell_f.value
                if isinstance(text, str) and text.startswith("=") and cell_v.value is None:
                    found.append(f"{cell_f.coordinate} {text!r}")
                    if len(found) >= 3:
                        return found
        return found
    finally:
        formulas.close()
        values.close()


def _read_xlsx(path: Path, sheet: str | None) -> RawTable:
    import openpyxl

    try:
        zipfile.ZipFile(path).close()
    except (zipfile.BadZipFile, OSError):
        raise DataError(
            f"{path}: named like a workbook but not an XLSX file; save it from the spreadsheet "
            "program as .xlsx, or as 'CSV UTF-8'"
        ) from None
    try:
        book = openpyxl.load_workbook(path, read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises many types for broken or foreign zips
        raise DataError(
            f"{path}: a zip file but not a readable XLSX workbook ({type(exc).__name__}); "
            "save the study as .xlsx or as 'CSV UTF-8'"
        ) from None
    try:
        names = tuple(book.sheetnames)
        if sheet is not None and sheet not in names:
            raise DataError(f"{path}: no sheet {sheet!r}; the workbook has sheets {list(names)}")
        chosen = sheet if sheet is not None else names[0]
        _check_rows(book[chosen].max_row or 0, f"{path} (sheet {chosen!r})")
        cells = [list(row) for row in book[chosen].iter_rows(values_only=True)]
    finally:
        book.close()
    where = f"{path} (sheet {chosen!r})"
    formulas = _formula_cells(path, chosen)
    if formulas:
        raise DataError(
            f"{where}: cell(s) {', '.join(formulas)} hold formulas without saved values "
            "(the file was written by a program that does not calculate); open and save it "
            "in a spreadsheet program, or export the sheet as 'CSV UTF-8'"
        )
    records = [["" if v is None else _cell_text(v) for v in row] for row in cells]
    # Trailing empty columns of a sheet are formatting, not data.
    width = max((max((i + 1 for i, v in enumerate(r) if v.strip()), default=0) for r in records),
                default=0)  # fmt: skip
    records = [r[:width] + [""] * (width - len(r)) for r in records]
    if not records or width == 0:
        others = [n for n in names if n != chosen]
        hint = f"; the workbook also has sheets {others}: choose one with --sheet" if others else ""
        raise DataError(f"{where}: the sheet is empty{hint}")
    table = _records_to_table(records, list(range(1, len(records) + 1)), where, grid=True)
    return RawTable(table.frame, table.lines, chosen, names)


def _cell_text(value: object) -> str:
    # Excel stores every number as a float: the trial 1 arrives as 1.0.
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)
