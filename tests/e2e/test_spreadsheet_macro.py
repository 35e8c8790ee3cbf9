"""The spreadsheet macro (client_examples/spreadsheet/LinferFit.bas), replayed for real.

No spreadsheet application runs here, so the macro itself is not run. Instead this
module builds, in Python, the exact request the macro builds from a given range, step
by step as the macro does (Value2 cell values -> text -> CSV fields -> records -> UTF-8
bytes; the URL from the typed answers, percent-encoded), posts it to a real
``linfer serve``, reads the answer as the macro does (its CSV parser and its rule for
turning fields into cells) and checks that the new sheet would hold the coefficient
table of the same fit made through the Python client (service/client.py).

The constants (URL path, query parameter names, header names and values, separators,
the number format) are read out of the .bas file, and the lines that use them are
checked to be there verbatim, so a change to the macro breaks this test until the
mirror below is changed with it.
"""

from __future__ import annotations

import csv
import io
import json
import math
import re
import urllib.error
import urllib.request
from dataclasses import dataclass
from typing import Any

import pytest

from service.client import Client, FitResult

from ._server import OPENER, REPO, Server

pytestmark = pytest.mark.e2e

MACRO = REPO / "client_examples" / "spreadsheet" / "LinferFit.bas"
DEMO_CSV = REPO / "client_examples" / "data" / "warehouse_energy.csv"
REL = 1e-9
TIMEOUT = 30

# --- the macro's constants, read out of the .bas file ---------------------------------------

_CONST = re.compile(r"^\s*(?:Public|Private)\s+Const\s+(\w+)\s+As\s+(String|Long)\s*=\s*(.+?)\s*$",
                    re.MULTILINE)
_VBA_INTRINSIC = {"vbCrLf": "\r\n", "vbCr": "\r", "vbLf": "\n", "vbTab": "\t"}


def _vba_value(kind: str, text: str) -> Any:
    if kind == "String":
        if text.startswith('"'):
            match = re.fullmatch(r'"((?:[^"]|"")*)"', text)
            assert match, f"not a VBA string literal: {text}"
            return match.group(1).replace('""', '"')
        assert text in _VBA_INTRINSIC, f"unknown VBA string constant {text}"
        return _VBA_INTRINSIC[text]
    return int(text) if text.isdigit() else text


def read_macro() -> tuple[str, dict[str, Any]]:
    source = MACRO.read_text(encoding="utf-8")
    constants = {name: _vba_value(kind, value) for name, kind, value in _CONST.findall(source)}
    return source, constants


SOURCE, CONST = read_macro()

# Lines of the macro that this mirror follows; each must be in the .bas verbatim.
MIRRORED_LINES = [
    # reading the range: Value2, the header row apart, fields joined into records
    "values = source.Value2",
    "fields(c) = CsvField(HeaderText(values(r, c), source, r, c))",
    "fields(c) = CsvField(CellText(values(r, c), source, r, c))",
    "CellAddress = source.Cells(r, c).Address(False, False)",
    "records(r) = Join(fields, FIELD_SEPARATOR)",
    "RangeToCsv = Join(records, RECORD_SEPARATOR) & RECORD_SEPARATOR",
    # cells
    'If v Then CellText = "TRUE" Else CellText = "FALSE"',
    "CellText = NumberText(CDbl(v))",
    "HeaderText = Trim$(Str$(v))",
    "If x = 0 Then x = 0",
    "s = Format$(x, NUMBER_FORMAT)",
    'If InStr(1, "0123456789+-E", Mid$(s, i, 1), vbBinaryCompare) = 0 Then',
    'Mid$(s, i, 1) = "."',
    'CsvField = """" & Replace(s, """", """""") & """"',
    # the URL
    'Do While Right$(url, 1) = "/"',
    'url = url & FIT_PATH & "?" & QP_RESPONSE & "=" & UrlEncode(Trim$(responseColumn))',
    'If Len(list) > 0 Then url = url & "&" & QP_PREDICTORS & "=" & UrlEncode(list)',
    'If Len(list) > 0 Then url = url & "&" & QP_LEVELS & "=" & UrlEncode(list)',
    'items = Split(text, ",")',
    "items(i) = Trim$(items(i))",
    'CommaList = Join(items, ",")',
    "If bytes(i) < 128 And InStr(1, URL_UNRESERVED, Chr$(bytes(i)), vbBinaryCompare) > 0 Then",
    'out = out & "%" & Right$("0" & Hex$(bytes(i)), 2)',
    # the request
    "Set http = CreateObject(HTTP_PROGID)",
    'http.Open "POST", url, False',
    "http.setRequestHeader HDR_CONTENT_TYPE, CSV_CONTENT_TYPE",
    "http.setRequestHeader HDR_ACCEPT, CSV_ACCEPT",
    "payload = Utf8Bytes(body)",
    "http.send payload",
    "answer = http.responseText",
    # the answer
    "If status = 200 Then",
    "ElseIf status >= 400 And status < 500 Then",
    "Set records = ParseCsv(text)",
    ".Value2 = Val(UCase$(field))",
    'ElseIf field = "true" Then',
    'ElseIf field = "false" Then',
    'msg = "linfer answered " & status & " " & problemTitle & "." & vbLf & vbLf & detail',
    'msg = msg & vbLf & "  at " & pointer & ": " & message',
    'If Len(pointer) = 0 Then pointer = "/"',
]


def test_the_macro_still_reads_as_mirrored() -> None:
    missing = [line for line in MIRRORED_LINES if line not in SOURCE]
    assert not missing, ("LinferFit.bas changed: update the mirror in this test, then these "
                         f"lines: {missing}")
    assert SOURCE.startswith('Attribute VB_Name = "LinferFit"')
    assert "Option Explicit" in SOURCE
    # What the request is made of, as the issue asks for it.
    assert CONST["FIT_PATH"] == "/v1/fit"
    assert CONST["QP_RESPONSE"] == "response_column"
    assert CONST["HDR_ACCEPT"] == "Accept" and CONST["CSV_ACCEPT"] == "text/csv"
    assert CONST["HDR_CONTENT_TYPE"] == "Content-Type"
    assert CONST["CSV_CONTENT_TYPE"].split(";")[0] == "text/csv"
    assert CONST["HTTP_PROGID"].startswith(("MSXML2.ServerXMLHTTP", "WinHttp.WinHttpRequest"))
    assert CONST["RECORD_SEPARATOR"] == "\r\n" and CONST["FIELD_SEPARATOR"] == ","
    # Only Value2 is read from cells: never .Value (dates, currency) nor .Text (the format).
    code = SOURCE.split("Option Explicit", 1)[1].replace(".Value2", "")
    assert not re.search(r"\.(?:Value|Text)\b", code), "the macro reads more than Value2"
    # No locale-dependent conversion of numbers anywhere: CStr, CDbl of text, Format$ of
    # a number other than through NumberText.
    assert "CStr(" not in SOURCE
    assert SOURCE.count("Format$(x, NUMBER_FORMAT)") == 1


# --- the mirror of the macro, function by function ------------------------------------------

class CellError:
    """A cell holding an error value (#N/A, ...): Value2 gives a Variant of type vbError."""


def number_text(x: float) -> str:
    """NumberText: Format$(x, "0.00000000000000E+00"), then every character that is not
    a digit, a sign or E (the locale's decimal separator) replaced by "."."""
    match = re.fullmatch(r"0\.(0+)E\+00", CONST["NUMBER_FORMAT"])
    assert match, f"NUMBER_FORMAT {CONST['NUMBER_FORMAT']!r} is not mirrored"
    if x == 0:
        x = 0.0
    # Format$ with "E+00": the exponent signed, at least two digits (as Python's "E" does).
    text = f"{x:.{len(match.group(1))}E}"
    return "".join(ch if ch in "0123456789+-E" else "." for ch in text)


def header_text(value: Any, address: str) -> str:
    """HeaderText."""
    if isinstance(value, str):
        return value
    if value is None:
        raise ValueError(f"Header cell {address} is empty")
    if isinstance(value, CellError):
        raise ValueError(f"Header cell {address} holds an error value")
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    # Trim$(Str$(v)): mirrored for whole numbers only (what a header number is, a year).
    assert float(value).is_integer() and abs(value) < 1e15, "Str$ of this is not mirrored"
    return str(int(value))


def cell_text(value: Any, address: str) -> str:
    """CellText, from a Value2: None is Empty, float a Double, bool a Boolean."""
    if value is None:
        return ""
    if isinstance(value, str):
        return value
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, CellError):
        raise ValueError(f"Cell {address} holds an error value")
    return number_text(float(value))


def csv_field(text: str) -> str:
    """CsvField."""
    if any(ch in text for ch in ('"', CONST["FIELD_SEPARATOR"], "\r", "\n")):
        return '"' + text.replace('"', '""') + '"'
    return text


def address(row: int, column: int) -> str:
    """A1-style address of a cell of a selection starting at A1 (1-based row, column)."""
    letters = ""
    while column:
        column, rest = divmod(column - 1, 26)
        letters = chr(ord("A") + rest) + letters
    return f"{letters}{row}"


def range_to_csv(values: list[list[Any]]) -> str:
    """RangeToCsv over the Value2 array of the selection."""
    records = []
    for r, row in enumerate(values, start=1):
        fields = []
        for c, value in enumerate(row, start=1):
            where = address(r, c)
            fields.append(csv_field(header_text(value, where) if r == 1 else
                                    cell_text(value, where)))
        records.append(CONST["FIELD_SEPARATOR"].join(fields))
    return CONST["RECORD_SEPARATOR"].join(records) + CONST["RECORD_SEPARATOR"]


def utf8_bytes(text: str) -> bytes:
    """Utf8Bytes, transcribed over the string's UTF-16 code units (as VBA strings are)."""
    data = text.encode("utf-16-le", "surrogatepass")
    units = [int.from_bytes(data[i:i + 2], "little") for i in range(0, len(data), 2)]
    out = bytearray()
    i = 0
    while i < len(units):
        cp = units[i]
        if 0xD800 <= cp <= 0xDBFF and i < len(units) - 1:
            low = units[i + 1]
            if 0xDC00 <= low <= 0xDFFF:
                cp = 0x10000 + (cp - 0xD800) * 0x400 + (low - 0xDC00)
                i += 1
        if cp < 0x80:
            out.append(cp)
        elif cp < 0x800:
            out += bytes([0xC0 | (cp // 0x40), 0x80 | (cp & 0x3F)])
        elif cp < 0x10000:
            out += bytes([0xE0 | (cp // 0x1000), 0x80 | ((cp // 0x40) & 0x3F), 0x80 | (cp & 0x3F)])
        else:
            out += bytes([0xF0 | (cp // 0x40000), 0x80 | ((cp // 0x1000) & 0x3F),
                          0x80 | ((cp // 0x40) & 0x3F), 0x80 | (cp & 0x3F)])
        i += 1
    return bytes(out)


def url_encode(text: str) -> str:
    """UrlEncode."""
    if not text:
        return ""
    out = []
    for b in utf8_bytes(text):
        if b < 128 and chr(b) in CONST["URL_UNRESERVED"]:
            out.append(chr(b))
        else:
            out.append("%" + f"{b:02X}")
    return "".join(out)


def vba_trim(text: str) -> str:
    """Trim$: spaces only (not tabs)."""
    return text.strip(" ")


def comma_list(text: str) -> str:
    """CommaList."""
    if not vba_trim(text):
        return ""
    return ",".join(vba_trim(item) for item in text.split(","))


def build_fit_url(base_url: str, response_column: str, predictors: str, levels: str) -> str:
    """BuildFitUrl."""
    url = vba_trim(base_url)
    while url.endswith("/"):
        url = url[:-1]
    url = url + CONST["FIT_PATH"] + "?" + CONST["QP_RESPONSE"] + "=" + \
        url_encode(vba_trim(response_column))
    items = comma_list(predictors)
    if items:
        url = url + "&" + CONST["QP_PREDICTORS"] + "=" + url_encode(items)
    items = comma_list(levels)
    if items:
        url = url + "&" + CONST["QP_LEVELS"] + "=" + url_encode(items)
    return url


@dataclass
class Answer:
    status: int
    content_type: str
    text: str


def post_csv(url: str, body: str) -> Answer:
    """PostCsv: POST the UTF-8 bytes with the macro's two headers; status and text back."""
    request = urllib.request.Request(
        url, data=utf8_bytes(body), method="POST",
        headers={CONST["HDR_CONTENT_TYPE"]: CONST["CSV_CONTENT_TYPE"],
                 CONST["HDR_ACCEPT"]: CONST["CSV_ACCEPT"]})
    try:
        with OPENER.open(request, timeout=TIMEOUT) as response:
            return Answer(response.status, response.headers.get("Content-Type", ""),
                          response.read().decode("utf-8"))
    except urllib.error.HTTPError as err:
        with err:
            return Answer(err.code, err.headers.get("Content-Type", ""),
                          err.read().decode("utf-8"))


def parse_csv(text: str) -> list[list[str]]:
    """ParseCsv."""
    records: list[list[str]] = []
    fields: list[str] = []
    field = ""
    quoted = started = False
    i, n = 0, len(text)
    while i < n:
        ch = text[i]
        if quoted:
            if ch == '"':
                if i < n - 1 and text[i + 1] == '"':
                    field += '"'
                    i += 1
                else:
                    quoted = False
            else:
                field += ch
        elif ch == '"':
            quoted = started = True
        elif ch == CONST["FIELD_SEPARATOR"]:
            fields.append(field)
            field = ""
            started = True
        elif ch in "\r\n":
            if ch == "\r" and i < n - 1 and text[i + 1] == "\n":
                i += 1
            fields.append(field)
            records.append(fields)
            fields, field, started = [], "", False
        else:
            field += ch
            started = True
        i += 1
    if started or field or fields:
        fields.append(field)
        records.append(fields)
    return records


def is_plain_number(text: str) -> bool:
    """IsPlainNumber."""
    digits = exp_digits = 0
    seen_dot = seen_e = False
    for i, ch in enumerate(text):
        if ch.isascii() and ch.isdigit():
            if seen_e:
                exp_digits += 1
            else:
                digits += 1
        elif ch in "+-":
            if not (i == 0 or (seen_e and text[i - 1] in "eE")):
                return False
        elif ch == ".":
            if seen_dot or seen_e:
                return False
            seen_dot = True
        elif ch in "eE":
            if seen_e or digits == 0:
                return False
            seen_e = True
        else:
            return False
    return digits > 0 and (not seen_e or exp_digits > 0)


def sheet_cells(text: str) -> list[list[Any]]:
    """What WriteCsvToNewSheet puts in the cells: None empty, float, bool or text."""
    cells = []
    for record in parse_csv(text):
        row: list[Any] = []
        for field in record:
            if not field:
                row.append(None)
            elif is_plain_number(field):
                row.append(float(field.upper()))  # Val reads "." as the decimal point
            elif field == "true":
                row.append(True)
            elif field == "false":
                row.append(False)
            else:
                row.append(field)
        cells.append(row)
    return cells


def json_string_after(text: str, key: str, start: int) -> tuple[str, int | None, bool]:
    """JsonStringAfter, with the macro's 1-based positions: (value, after, found)."""
    found_at = text.find('"' + key + '"', start - 1)
    if found_at < 0:
        return "", None, False
    i = found_at + 1 + len(key) + 2
    while i <= len(text) and text[i - 1] in " :\t\r\n":
        i += 1
    if i > len(text) or text[i - 1] != '"':
        return "", i, True
    i += 1
    units: list[str] = []
    while i <= len(text):
        ch = text[i - 1]
        if ch == '"':
            break
        if ch == "\\":
            i += 1
            ch = text[i - 1]
            if ch == "u":
                units.append(chr(int(text[i:i + 4], 16)))
                i += 4
            else:
                units.append({"n": "\n", "r": "\r", "t": "\t", "b": "\b", "f": "\f"}.get(ch, ch))
        else:
            units.append(ch)
        i += 1
    value = "".join(units).encode("utf-16", "surrogatepass").decode("utf-16")
    return value, i + 1, True


def problem_message(status: int, text: str) -> str:
    """ProblemMessage."""
    title, _, _ = json_string_after(text, "title", 1)
    detail, _, _ = json_string_after(text, "detail", 1)
    if not title and not detail:
        return f"linfer answered {status}:\n{text[:1000]}"
    message = f"linfer answered {status} {title}.\n\n{detail}"
    pos = text.find('"errors"') + 1
    shown = 0
    while pos > 0 and shown < CONST["MAX_POINTED"]:
        start = text.find("{", pos - 1) + 1
        if start == 0:
            break
        pointer, after_pointer, found = json_string_after(text, "pointer", start)
        if not found:
            break
        what, after_message, found = json_string_after(text, "message", start)
        if not found:
            break
        message += f"\n  at {pointer or '/'}: {what}"
        shown += 1
        pos = max(after_pointer or 0, after_message or 0)
    return message


# --- the range the tests select ---------------------------------------------------------------

TEMP = "temp \u00b0C"              # a name outside ASCII: UTF-8 in the body and the URL
RESPONSE = "kWh (day)"             # spaces and parentheses: percent-encoded in the URL
NOTE = 'note, "free text"'         # a header that must be quoted
NOTES = ['door stuck, "again"', "", "two\r\nlines", True, "plain", 'say "hi"']


def demo_range() -> list[list[Any]]:
    """The Value2 array of a selection: the demo CSV's columns, renamed, plus a text column.

    Numbers are doubles (Value2 gives every number, date and currency as a Double), the
    empty cell is None (Empty), TRUE is a Boolean.
    """
    rows = list(csv.reader(io.StringIO(DEMO_CSV.read_text(encoding="utf-8"))))
    assert rows[0] == ["day", "temp_c", "door_openings", "pallets_received", "kwh"]
    header = ["day", TEMP, "door_openings", "pallets_received", RESPONSE, NOTE]
    data = [[float(v) for v in row] + [NOTES[i % len(NOTES)]] for i, row in enumerate(rows[1:])]
    return [header] + data


def table_of(values: list[list[Any]], columns: list[str]) -> dict[str, list[Any]]:
    header = values[0]
    return {name: [row[header.index(name)] for row in values[1:]] for name in columns}


PREDICTORS = [TEMP, "door_openings", "pallets_received"]
TYPED_PREDICTORS = f" {TEMP} , door_openings,pallets_received "   # as a person types them
TYPED_LEVELS = "0.9, 0.95"
LEVELS = [0.9, 0.95]


@pytest.fixture(scope="module")
def linfer(base_url: str) -> Client:
    return Client(base_url, timeout=TIMEOUT, trust_env=False)


# --- tests ------------------------------------------------------------------------------------

def test_the_mirror_escapes_and_encodes_as_rfc_4180_and_utf_8() -> None:
    values = demo_range()
    body = range_to_csv(values)
    assert body.endswith("\r\n")
    assert body.startswith(f'day,{TEMP},door_openings,pallets_received,{RESPONSE},'
                           '"note, ""free text"""\r\n')
    assert body.split("\r\n")[1] == \
        '1.00000000000000E+00,8.20000000000000E+00,1.61000000000000E+02,' \
        '1.10000000000000E+02,2.39940000000000E+03,"door stuck, ""again"""'
    # Python's csv reader reads back exactly the texts of the cells.
    back = list(csv.reader(io.StringIO(body, newline="")))
    assert back[0] == values[0]
    for got, row in zip(back[1:], values[1:]):
        assert [float(v) for v in got[:5]] == row[:5]
        assert got[5] == cell_text(row[5], "F")
    assert {r[5] for r in back[1:]} >= {'door stuck, "again"', "", "two\r\nlines", "TRUE"}
    # The transcribed UTF-8 encoder agrees with Python's, astral characters included.
    for text in (body, "\u00b0", "\u20ac", "\U0001F600 ok", "a\u0301"):
        assert utf8_bytes(text) == text.encode("utf-8")
    assert number_text(-0.0) == "0.00000000000000E+00"
    assert number_text(1 / 3) == "3.33333333333333E-01"
    assert number_text(-1.5e-300) == "-1.50000000000000E-300"
    assert url_encode("kWh (day)") == "kWh%20%28day%29"
    assert url_encode(TEMP) == "temp%20%C2%B0C"
    assert build_fit_url("http://h:1//", RESPONSE, TYPED_PREDICTORS, TYPED_LEVELS) == (
        "http://h:1/v1/fit?response_column=kWh%20%28day%29"
        "&predictor_columns=temp%20%C2%B0C%2Cdoor_openings%2Cpallets_received"
        "&levels=0.9%2C0.95")
    assert build_fit_url("http://h:1", "y", "  ", "") == "http://h:1/v1/fit?response_column=y"
    with pytest.raises(ValueError, match="Cell C3 holds an error value"):
        range_to_csv([["a", "b", "c"], [1.0, 2.0, 3.0], [1.0, 2.0, CellError()]])


def test_macro_request_replayed_gives_the_coefficient_table(served: Server,
                                                            linfer: Client) -> None:
    values = demo_range()
    body = range_to_csv(values)
    url = build_fit_url(" " + served.base_url + "/", RESPONSE, TYPED_PREDICTORS, TYPED_LEVELS)
    answer = post_csv(url, body)
    assert answer.status == 200, answer.text[:2000]
    assert answer.content_type.split(";")[0].strip() == "text/csv"

    reference: FitResult = linfer.fit(table=table_of(values, PREDICTORS + [RESPONSE]),
                                      response_column=RESPONSE, predictor_columns=PREDICTORS,
                                      levels=LEVELS)
    cells = sheet_cells(answer.text)
    header = ["name", "estimable", "estimate", "standard_error", "t_statistic", "p_value",
              "lower_0.9", "upper_0.9", "lower_0.95", "upper_0.95", "vif"]
    assert cells[0] == header
    assert [row[0] for row in cells[1:]] == reference.names == ["intercept"] + PREDICTORS
    for row in cells[1:]:
        assert len(row) == len(header)
        got = dict(zip(header, row))
        want = reference.coefficient(got["name"])
        assert got["estimable"] is True and want.estimable
        expected = {"estimate": want.estimate, "standard_error": want.standard_error,
                    "t_statistic": want.t_statistic, "p_value": want.p_value,
                    "lower_0.9": want.interval(0.9).lower, "upper_0.9": want.interval(0.9).upper,
                    "lower_0.95": want.interval(0.95).lower,
                    "upper_0.95": want.interval(0.95).upper, "vif": want.vif}
        for key, value in expected.items():
            if value is None:
                assert got[key] is None, f"{got['name']} {key}: {got[key]!r}, expected empty"
            else:
                assert isinstance(got[key], float), f"{got['name']} {key}: {got[key]!r}"
                assert math.isclose(got[key], value, rel_tol=REL, abs_tol=0.0), \
                    f"{got['name']} {key}: {got[key]!r} != {value!r}"
    assert dict(zip(header, cells[1]))["vif"] is None          # the intercept's vif is null
    # The fit is the demo fit: same numbers as the README's (temp_c there).
    assert math.isclose(reference.coefficient(TEMP).estimate, 36.92670309875715, rel_tol=1e-12)


def test_macro_shows_the_problem_of_a_refusal(served: Server) -> None:
    """A 4xx: the message box the macro shows holds the title, detail and pointers."""
    values = demo_range()
    values[4][1] = "n/a"                    # row 3 of the data, column temp °C
    url = build_fit_url(served.base_url, RESPONSE, TYPED_PREDICTORS, TYPED_LEVELS)
    answer = post_csv(url, range_to_csv(values))
    assert answer.status == 422
    assert answer.content_type.split(";")[0].strip() == "application/problem+json"
    problem = json.loads(answer.text)
    shown = problem_message(answer.status, answer.text)
    expected = f"linfer answered 422 {problem['title']}.\n\n{problem['detail']}" + "".join(
        f"\n  at {e['pointer'] or '/'}: {e['message']}" for e in problem["errors"][:10])
    assert shown == expected
    # CSV line 6, not 5: the note of row 2 is a quoted field holding a line break.
    assert f"\n  at /table/{TEMP}/3: row 3 (CSV line 6), column {TEMP}: 'n/a' is not a number" \
        in shown, shown

    wrong = post_csv(build_fit_url(served.base_url, "kWh", "", ""), range_to_csv(demo_range()))
    assert wrong.status == 422
    shown = problem_message(wrong.status, wrong.text)
    assert "\n  at /response_column: 'kWh' names no column" in shown, shown
