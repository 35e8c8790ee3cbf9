"""CSV for spreadsheets: a /v1/fit body from a CSV upload, and the coefficient table as CSV.

Pure functions; no Flask. :func:`table_body_from_csv` turns the bytes of a CSV file
with a header row, and the request's query parameters, into a /v1/fit body in the
``table`` layout, which then goes through the same validation as JSON.
:func:`coefficients_csv` writes the coefficient table of a /v1/fit document.

Reading rules (each decided, each tested):

- The body is UTF-8 (a leading byte order mark, as Excel writes it, is dropped);
  UTF-16 (a byte order mark ``FF FE`` or ``FE FF``, or a NUL byte in the header) is
  answered as such. Fields are separated by commas and may be quoted with ``"``
  (RFC 4180, strictly: a closing quote is followed by a comma or the end of the
  line, and a quote that is never closed is an error, not the rest of the file
  read as one field). The first non-blank record is the header; blank lines are
  skipped.
- Header names are stripped of surrounding spaces and tabs; each must be non-empty
  and unique.
- Every row has as many fields as the header.
- No type inference: every cell of a column that is sent is a decimal number
  (``-1.5``, ``2e-3``, spaces around it allowed) or empty (missing, sent as
  ``null``). ``true``, ``NA``, ``nan``, ``inf``, ``1,5`` or a date are not numbers
  and are answered with the row and column. Columns the fit does not use (when
  ``predictor_columns`` is given) are not sent and need not be numeric.
- Rows are counted from 0 after the header, as in the equivalent table layout
  (``/table/<column>/<row>``); messages also give the CSV line number (the header is
  line 1 in a file without blank or multi-line records).

Files whose data are plain numbers are read by pandas' C parser in one pass;
anything else (missing cells, quotes, text in unused columns, an error to point at)
is read record by record with :mod:`csv`, which knows the line of each record. Both
paths give the same answer for every input.

Without ``predictor_columns`` every column is a predictor: a header with more than
LINFER_MAX_COLUMNS of them is answered (as the fit would answer it) before the rows
are read. With ``predictor_columns``, pandas converts only the columns sent.

Status codes: 400 (``malformed_csv``) when the bytes cannot be read as a table
(empty, not UTF-8, broken quoting, rows of the wrong length); 422
(``invalid_request``) for the content (a query parameter, a header name, a cell).
"""

from __future__ import annotations

import csv
import io
import math
import re
from array import array
from typing import Any, Iterator, Mapping, Sequence

import numpy as np
import pandas as pd

from .arrays import MAX_POINTED, invalid
from .problems import ApiProblem, FieldError, pointer
from .query import NUMBER as _NUMBER
from .query import QUERY_PARAMETERS, check_table_width, options_from_query, used_columns

__all__ = ["table_body_from_csv", "coefficients_csv", "QUERY_PARAMETERS", "CSV_MEDIA_TYPE"]

CSV_MEDIA_TYPE = "text/csv"

# Bytes that cells of plain numbers are made of; data holding only these take the
# fast path (pandas would read "true" as 1.0 and "inf" as infinity: they hold others).
# The bytes of plain numbers and their separators, and the spaces, tabs and quotes that
# may sit between them (each of which asks for a further check).
_NUMERIC_BYTES = b"0123456789+-.eE,\r\n"
_SPACING_BYTES = b' \t"'
_BOM = b"\xef\xbb\xbf"
# pandas reads "0E 0" as a number; the careful path, rightly, does not. The same as
# [eE][ \t] | [ \t][eE] | [0-9.][ \t]+[0-9+\-.], written to start at a space or a tab
# (searched only when the data hold one).
_SPACED_EXPONENT = re.compile(
    rb"[ \t](?:(?<=[eE][ \t])|(?=[eE])|(?<=[0-9.][ \t])[ \t]*(?=[0-9+\-.]))")
# The data are checked for other bytes this many at a time (a copy of this size, not
# of the body).
_CHUNK = 1 << 20
# A quoted field of plain data: a quote at the start of a field (of the line, or after
# a comma), no quote, comma or line end inside, a quote at the end of the field. When
# every quote of the data belongs to one, pandas and csv read the same cells.
_QUOTED_FIELD = re.compile(rb'"(?<![^,\r\n]")[^",\r\n]*"(?![^,\r\n])')
_UTF16_BOMS = (b"\xff\xfe", b"\xfe\xff")
_MISSING_MARKERS = {"na", "n/a", "#n/a", "nan", "null", "none", "-", ".", "?"}
_QUOTED_MAX = 40


def _malformed(detail: str) -> ApiProblem:
    return ApiProblem(400, "Malformed CSV", detail, "malformed_csv")


def _quote(text: str) -> str:
    return repr(text if len(text) <= _QUOTED_MAX else text[:_QUOTED_MAX] + "...")


# --- reading the table -------------------------------------------------------------------

def _decode(raw: bytes) -> str:
    """The text of the body without a byte order mark; 400 when not UTF-8 or empty."""
    if raw.startswith(_UTF16_BOMS):
        raise _malformed(f"the body is UTF-16 text (it starts with the byte order mark "
                         f"0x{raw[0]:02x} 0x{raw[1]:02x}), not UTF-8; save the file as CSV "
                         "UTF-8")
    skipped = len(_BOM) if raw.startswith(_BOM) else 0
    body = raw[skipped:]
    try:
        text = body.decode("utf-8")
    except UnicodeDecodeError as err:
        line = body.count(b"\n", 0, err.start) + 1
        raise _malformed(f"the body is not UTF-8 text: byte 0x{body[err.start]:02x} at offset "
                         f"{err.start + skipped} (line {line}) cannot be decoded; save the "
                         "file as CSV UTF-8") from None
    if not text.strip():
        raise _malformed("the CSV body is empty: send a header row naming the columns, then "
                         "one row per observation")
    return text


def _blank(record: list[str]) -> bool:
    """An empty line, or one of spaces and tabs only: skipped (as pandas skips it)."""
    return not record or (len(record) == 1 and not record[0].strip(" \t"))


def _records(text: str) -> Iterator[tuple[int, list[str]]]:
    """(first line, fields) of every non-blank record; 400 on broken quoting."""
    # strict: a quote never closed is an error (not the rest of the file as one
    # field), and so is text after a closing quote ('"1"2' is not 12).
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    line = 0
    while True:
        start = line + 1
        try:
            record = next(reader)
        except StopIteration:
            return
        except csv.Error as err:
            if "unexpected end of data" in str(err):
                raise _malformed(f"the CSV cannot be read: a quote opened in the record that "
                                 f"starts at line {start} is never closed") from None
            if "expected after" in str(err):
                raise _malformed(f"the CSV cannot be read at line {reader.line_num}: a "
                                 "closing quote must be followed by a comma or the end of "
                                 "the line (write a quote inside a quoted field as \"\")") \
                    from None
            raise _malformed(f"the CSV cannot be read at line {reader.line_num}: {err}") from None
        line = reader.line_num
        if not _blank(record):
            yield start, record


def _header(text: str) -> tuple[list[str], int]:
    """The header names (stripped) and the header's line number; 422 on bad names."""
    first = next(_records(text), None)
    if first is None:  # pragma: no cover - _decode has refused blank bodies
        raise _malformed("the CSV has no header row")
    line, names = first
    names = [n.strip(" \t") for n in names]
    if any("\x00" in n for n in names):
        raise _malformed(f"the header (CSV line {line}) holds a NUL byte: the file is "
                         "perhaps UTF-16 text; save it as CSV UTF-8")
    errors = []
    seen: dict[str, int] = {}
    for j, name in enumerate(names):
        if not name:
            errors.append(FieldError("/table", f"column {j + 1} of the header (CSV line "
                                     f"{line}) has no name; name every column (a comma at "
                                     "the end of the header makes an unnamed column)"))
        elif name in seen:
            errors.append(FieldError(pointer("table", name), f"columns {seen[name] + 1} and "
                                     f"{j + 1} of the header (CSV line {line}) are both "
                                     f"named {name!r}"))
        else:
            seen[name] = j
    if errors:
        raise invalid(errors, errors[0].message if len(errors) == 1 else
                      f"{len(errors)} problems with the CSV header; the first: "
                      + errors[0].message)
    return names, line


def _plain_header(raw: bytes) -> tuple[str, int] | None:
    """The header line's text and where the data start, when the fast path may be taken.

    Taken only when the header is the first line (after a byte order mark), not
    blank, without quotes or a carriage return before its end, and the data after
    it hold nothing but the bytes of plain numbers (so the body is UTF-8 and not
    empty, and its first record is this line: the careful path would raise nothing
    before the header's own checks, and would read the same header); else None.
    """
    start = len(_BOM) if raw.startswith(_BOM) else 0
    end = raw.find(b"\n", start)
    if end < 0:
        return None
    line = raw[start:end - 1] if raw[end - 1:end] == b"\r" and end > start else \
        raw[start:end]
    if b'"' in line or b"\r" in line:
        return None
    try:
        head = line.decode("utf-8")
    except UnicodeDecodeError:
        return None
    if not head.strip():
        return None
    spaced = quoted = False
    for i in range(end + 1, len(raw), _CHUNK):
        rest = raw[i:i + _CHUNK].translate(None, _NUMERIC_BYTES)
        if rest:
            if rest.translate(None, _SPACING_BYTES):
                return None
            spaced = spaced or b" " in rest or b"\t" in rest
            quoted = quoted or b'"' in rest
    if spaced and _SPACED_EXPONENT.search(raw, end + 1):
        return None
    if quoted and not _plain_quotes(raw, end + 1):
        return None
    return head, end + 1


def _plain_quotes(raw: bytes, start: int) -> bool:
    """Whether every quote from ``start`` on opens or closes a whole quoted field.

    Such a field holds no line end, so the data are looked at a piece of about
    _CHUNK bytes ending at a line end at a time (a copy of that size, not of the body).
    """
    pos, size = start, len(raw)
    while pos < size:
        end = raw.find(b"\n", pos + _CHUNK)
        end = size if end < 0 else end + 1
        quotes = raw.count(b'"', pos, end)
        if quotes:
            if quotes % 2:
                return False
            _, fields = _QUOTED_FIELD.subn(b"", raw[pos:end])
            if 2 * fields != quotes:
                return False
        pos = end
    return True


def _fast(raw: bytes, start: int, k: int, used: Sequence[int]) -> list[np.ndarray] | None:
    """The used columns as floats by pandas' C parser, or None when the careful path must decide.

    Called only when :func:`_plain_header` has found the header line and the data
    plain: then pandas accepts exactly what the careful path accepts (the tests
    check this), and NaN only marks an empty cell or a short row, which a
    structural pass tells apart. The columns are pandas' own arrays, not copied.
    pandas reads from ``start``, the first byte after the header line (``skiprows=1``
    would cost it a test of every row: about a fifth of the parse). When fewer than
    k columns are used, pandas converts only those (``usecols``; a header of many
    columns costs it no per-column work) and no longer sees rows of the wrong
    length: the caller then checks the structure itself.
    """
    stream = io.BytesIO(raw)
    stream.seek(start)
    subset = len(used) < k
    try:
        frame = pd.read_csv(stream, header=None, engine="c",
                            dtype=float, keep_default_na=False, na_values=[""],
                            skip_blank_lines=True, usecols=list(used) if subset else None)
    except (ValueError, pd.errors.ParserError, pd.errors.EmptyDataError):
        return None
    if frame.shape[1] != len(used):
        return None
    columns = []
    for j in range(len(used)):
        column = frame.iloc[:, j].to_numpy(dtype=np.float64)
        if np.isinf(column).any():
            return None
        # A view that pandas marks read-only; the frame is dropped here, so the
        # caller may own it.
        column.flags.writeable = True
        columns.append(column)
    return columns


def _structure_agrees(text: str, k: int, n: int) -> bool:
    """Whether every data record has k fields and there are n of them (csv's count)."""
    records = _records(text)
    next(records)
    count = 0
    for _, record in records:
        if len(record) != k:
            return False
        count += 1
    return count == n


def _plain_structure_agrees(raw: bytes, start: int, k: int, n: int) -> bool:
    """:func:`_structure_agrees` for plain data from ``start`` on without quotes.

    Without quotes every line is a record (``\\r\\n`` makes an empty one between
    its two bytes, which is blank and skipped, as a record of spaces and tabs
    only is), and its fields are its commas plus one: counted with numpy, a piece
    of about _CHUNK bytes ending at a line end at a time.
    """
    count, pos, size = 0, start, len(raw)
    while pos < size:
        end = raw.find(b"\n", pos + _CHUNK)
        end = size if end < 0 else end + 1
        piece = np.frombuffer(raw, np.uint8, end - pos, pos)
        stops = np.flatnonzero((piece == 10) | (piece == 13))
        if not stops.size or stops[-1] != piece.size - 1:
            stops = np.append(stops, piece.size)  # the last record has no line end
        starts = np.concatenate(([0], stops[:-1] + 1))
        commas = np.concatenate(([0], np.cumsum(piece == 44, dtype=np.int64)))
        other = np.concatenate(([0], np.cumsum((piece != 32) & (piece != 9) & (piece != 10)
                                               & (piece != 13), dtype=np.int64)))
        fields = commas[stops] - commas[starts] + 1
        blank = other[stops] == other[starts]
        if (fields[~blank] != k).any():
            return False
        count += int(np.count_nonzero(~blank))
        pos = end
    return count == n


def _careful(text: str, header: list[str], used: Sequence[int]) -> tuple[int, list[np.ndarray]]:
    """The used columns, read record by record: 400 on ragged rows, 422 on bad cells."""
    k = len(header)
    records = _records(text)
    next(records)
    lines = array("q")
    cells: list[list[str]] = [[] for _ in used]
    ragged: list[tuple[int, int, int]] = []
    row = 0
    for line, record in records:
        if len(record) != k:
            ragged.append((row, line, len(record)))
        else:
            for column, j in zip(cells, used):
                column.append(record[j])
        lines.append(line)
        row += 1
    if ragged:
        r, line, width = ragged[0]
        first = f"row {r} (CSV line {line}) has {width} fields; the header has {k}"
        raise _malformed(first if len(ragged) == 1 else
                         f"{len(ragged)} rows have a different number of fields from the "
                         f"header; the first: {first}")
    columns = []
    bad: list[tuple[int, int, str, str]] = []  # row, position in used, cell, why
    for position, strings in enumerate(cells):
        values = np.empty(len(strings))
        for i, cell in enumerate(strings):
            stripped = cell.strip(" \t")
            if not stripped:
                values[i] = math.nan
            elif _NUMBER.fullmatch(stripped):
                values[i] = float(stripped)
                if math.isinf(values[i]):
                    bad.append((i, position, cell, "is too large for a double-precision "
                                "number"))
            else:
                why = "is not a number"
                if stripped.lower() in _MISSING_MARKERS:
                    why += "; leave the cell empty for a missing value"
                elif re.fullmatch(r"[ \t]*[+-]?[0-9]+,[0-9]+[ \t]*", cell):
                    why += "; write the decimal point as '.'"
                bad.append((i, position, cell, why))
        columns.append(values)
    if bad:
        bad.sort()
        errors = [FieldError(pointer("table", header[used[p]], i),
                             f"row {i} (CSV line {lines[i]}), column {header[used[p]]}: "
                             f"{_quote(cell)} {why}") for i, p, cell, why in bad[:MAX_POINTED]]
        raise invalid(errors, errors[0].message if len(bad) == 1 else
                      f"{len(bad)} cells of the CSV cannot be read as numbers; the first: "
                      + errors[0].message)
    return row, columns


def _used_columns(header: list[str], options: dict[str, Any]) -> list[int]:
    """Positions of the columns to send; 422 for names the header lacks, or for a header
    wider than the column limit allows (answered before any row is parsed)."""
    hint = ""
    if len(header) == 1 and any(sep in header[0] for sep in ";\t|"):
        sep = next(s for s in ";\t|" if s in header[0])
        hint = (f"; the header has one column, {_quote(header[0])}: linfer reads "
                f"comma-separated values, and this file seems to separate them by {sep!r}")
    used = used_columns(header, options, "the CSV header", hint)
    check_table_width(header, options)
    return used


def table_body_from_csv(raw: bytes, query: Mapping[str, Any]) -> dict[str, Any]:
    """A /v1/fit body in the ``table`` layout from a CSV upload and its query parameters.

    Parameters
    ----------
    raw : bytes
        The request body: UTF-8 CSV with a header row (reading rules in the module
        docstring).
    query : mapping of str to str or list of str
        The query parameters, e.g. ``request.args`` (a MultiDict: every value of a
        repeated parameter is seen) or ``{"response_column": "kwh", "levels": "0.9,0.95"}``.
        ``response_column`` is required. Options: ``predictor_columns``, ``levels``,
        ``include`` (comma-separated, or the parameter repeated), ``weights`` (a column
        name), ``intercept`` and ``return_model`` (``true`` or ``false``),
        ``missing``, ``rank_deficiency``, ``covariance``, ``simultaneous`` (a word;
        ``none`` for null). Their values are checked by the /v1/fit schema as usual.

    Returns
    -------
    dict
        ``{"table": {column: float array (NaN where missing)}, "response_column": ...,
        <options>}``,
        the columns in the header's order. When ``predictor_columns`` is given, only
        the response, the predictors and the weights column are in ``table``.

    Raises
    ------
    ApiProblem
        400 ``malformed_csv``: empty body, not UTF-8, broken quoting, a row with more
        or fewer fields than the header. 422 ``invalid_request``: an unknown or
        ill-formed query parameter (pointer ``""`` for an unknown one, else the
        field's pointer, e.g. ``/levels/1``), a header name that is empty or repeated,
        a name in the query that the header lacks, a cell that is not a number
        (pointer ``/table/<column>/<row>``; the message names the row, the CSV line
        and the column). Up to 10 cells are pointed at; ``detail`` counts them all.
    """
    options = options_from_query(query)
    plain = _plain_header(raw)
    values = None
    if plain is not None:
        # The careful path's checks of the body before the header would all pass.
        header, header_line = _header(plain[0])
        used = _used_columns(header, options)
        values = _fast(raw, plain[1], len(header), used)
        if values is not None and (len(used) < len(header)
                                   or any(np.isnan(c).any() for c in values)):
            k, n, start = len(header), values[0].shape[0], plain[1]
            if not (_plain_structure_agrees(raw, start, k, n) if raw.find(b'"', start) < 0
                    else _structure_agrees(_decode(raw), k, n)):
                values = None
    if values is not None:
        n, columns = values[0].shape[0], values
    else:
        text = _decode(raw)
        header, header_line = _header(text)
        used = _used_columns(header, options)
        n, columns = _careful(text, header, used)
    if n == 0:
        raise invalid([FieldError("/table", f"the CSV has a header row (line {header_line}) "
                                  "but no data rows")])
    return {"table": {header[j]: np.ascontiguousarray(c, dtype=np.float64)
                      for j, c in zip(used, columns)}, **options}


# --- writing the coefficient table ---------------------------------------------------------

def _cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else ""
    return str(value)


def coefficients_csv(document: Mapping[str, Any]) -> str:
    """The coefficient table of a /v1/fit JSON document as CSV text.

    One row per coefficient, in the document's order, under the header
    ``name,estimable,estimate,standard_error,t_statistic,p_value``, then
    ``lower_L,upper_L`` per confidence level L in the order of the intervals (e.g.
    ``lower_0.95,upper_0.95``), then ``vif``. ``null`` is an empty cell; numbers are
    written with ``repr`` (the shortest text that reads back to the same double, at
    most 17 significant digits); ``estimable`` is ``true`` or ``false``. Lines end
    with CRLF (RFC 4180); names holding commas or quotes are quoted.
    """
    coefficients = document["coefficients"]
    levels: list[float] = []
    for c in coefficients:
        for iv in c.get("intervals") or []:
            if iv["level"] not in levels:
                levels.append(iv["level"])
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\r\n")
    writer.writerow(["name", "estimable", "estimate", "standard_error", "t_statistic",
                     "p_value", *[f"{side}_{_cell(float(lv))}" for lv in levels
                                  for side in ("lower", "upper")], "vif"])
    for c in coefficients:
        by_level = {iv["level"]: iv for iv in c.get("intervals") or []}
        bounds = []
        for lv in levels:
            iv = by_level.get(lv, {})
            bounds += [_cell(iv.get("lower")), _cell(iv.get("upper"))]
        writer.writerow([c["name"], _cell(c.get("estimable")), _cell(c.get("estimate")),
                         _cell(c.get("standard_error")), _cell(c.get("t_statistic")),
                         _cell(c.get("p_value")), *bounds, _cell(c.get("vif"))])
    return out.getvalue()
