"""service.api.csv_io: CSV uploads to /v1/fit bodies, and the coefficient table as CSV.

The reference for the numbers is Python's own ``float()`` (correctly rounded, as
orjson is for JSON): a CSV and the JSON body holding the same text give the same
doubles, and so the same fit.
"""

from __future__ import annotations

import csv
import io
import json
import math
from pathlib import Path

import orjson
import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from werkzeug.datastructures import MultiDict

from service.api import csv_io
from service.api.csv_io import coefficients_csv
from service.api.csv_io import table_body_from_csv as read_csv_body
from service.api.problems import ApiProblem

REPO = Path(__file__).resolve().parents[2]
DATA = REPO / "client_examples" / "data"
DEMO_CSV = (DATA / "warehouse_energy.csv").read_bytes()
DEMO_TABLE = json.loads((DATA / "warehouse_energy_table.json").read_text())
PREDICTORS = "temp_c,door_openings,pallets_received"


def problem_of(raw: bytes, query) -> ApiProblem:
    with pytest.raises(ApiProblem) as info:
        table_body_from_csv(raw, query)
    return info.value


def pointers(p: ApiProblem) -> list[str]:
    return [e.pointer for e in p.errors]


def table_body_from_csv(raw, query):
    """The body with its columns as JSON would carry them (NaN as None), for comparison."""
    body = read_csv_body(raw, query)
    body["table"] = {name: [None if v != v else v for v in column.tolist()]
                     for name, column in body["table"].items()}
    return body


def test_columns_come_as_float_arrays_with_nan_for_missing():
    # The table goes to the decoder as arrays, never through Python lists.
    body = read_csv_body(b"x,y\n1,2\n,3\n4,5\n", {"response_column": "y"})
    assert all(isinstance(c, np.ndarray) and c.dtype == np.float64
               for c in body["table"].values())
    assert np.isnan(body["table"]["x"][1])


# --- the demo file ----------------------------------------------------------------------

def test_demo_csv_gives_the_demo_table_body_exactly():
    body = table_body_from_csv(DEMO_CSV, {"response_column": "kwh",
                                          "predictor_columns": PREDICTORS})
    assert list(body["table"]) == ["temp_c", "door_openings", "pallets_received", "kwh"]
    for name, values in DEMO_TABLE["table"].items():
        assert body["table"][name] == [float(v) for v in values], name
    assert body["response_column"] == "kwh"
    assert body["predictor_columns"] == PREDICTORS.split(",")


def test_without_predictor_columns_every_column_is_sent_in_header_order():
    body = table_body_from_csv(DEMO_CSV, {"response_column": "kwh"})
    assert list(body["table"]) == ["day", "temp_c", "door_openings", "pallets_received", "kwh"]
    assert body["table"]["day"] == [float(d) for d in range(1, 41)]
    assert set(body) == {"table", "response_column"}


def test_csv_fit_equals_json_fit(client):
    """The CSV-derived body, posted as JSON, gives the very document of the JSON demo."""
    body = table_body_from_csv(DEMO_CSV, {"response_column": "kwh",
                                          "predictor_columns": PREDICTORS})
    from_csv = client.post("/v1/fit", data=orjson.dumps(body), content_type="application/json")
    from_json = client.post("/v1/fit", data=json.dumps(DEMO_TABLE),
                            content_type="application/json")
    assert from_csv.status_code == from_json.status_code == 200, from_csv.get_data(as_text=True)
    assert from_csv.get_json() == from_json.get_json()


def test_bad_cell_is_rejected_by_the_service_pointers(client):
    """The pointers of a CSV problem are those the service gives for the equivalent body."""
    raw = b"x,y\n1,2\n2,3\n3,5\n4,4\n5,\n"
    body = table_body_from_csv(raw, {"response_column": "y"})
    assert body["table"]["y"][4] is None
    answer = client.post("/v1/fit", data=orjson.dumps(body), content_type="application/json")
    assert answer.status_code == 422
    assert [e["pointer"] for e in answer.get_json()["errors"]] == ["/table/y/4"]


# --- cells ------------------------------------------------------------------------------

def test_bad_cell_names_row_line_and_column():
    raw = b"day,temp_c,kwh\n" + b"".join(b"%d,%d.5,%d\n" % (i, i, 100 + i) for i in range(7)) \
        + b"8,abc,200\n9,1.0,201\n"
    p = problem_of(raw, {"response_column": "kwh"})
    assert p.status == 422 and p.kind == "invalid_request"
    assert pointers(p) == ["/table/temp_c/7"]
    assert p.errors[0].message == "row 7 (CSV line 9), column temp_c: 'abc' is not a number"
    assert p.detail == p.errors[0].message


def test_bad_cells_are_all_counted_and_the_first_ten_pointed_at_in_row_order():
    rows = [f"{i},{'x' if i % 2 else i},{'y' if i % 3 == 0 else i}" for i in range(30)]
    raw = ("a,b,c\n" + "\n".join(rows) + "\n").encode()
    p = problem_of(raw, {"response_column": "c"})
    expected = sorted([(i, 1) for i in range(30) if i % 2] + [(i, 2) for i in range(30)
                                                             if i % 3 == 0])
    assert len(p.errors) == 10
    assert pointers(p) == [f"/table/{'abc'[j]}/{i}" for i, j in expected[:10]]
    assert p.detail.startswith(f"{len(expected)} cells of the CSV cannot be read as numbers; "
                               "the first: row 0 (CSV line 2), column c: 'y'")


@pytest.mark.parametrize("cell, hint", [
    ("NA", "leave the cell empty for a missing value"),
    ("nan", "leave the cell empty for a missing value"),
    ("#N/A", "leave the cell empty for a missing value"),
    ("true", None), ("TRUE", None), ("False", None),  # pandas would read these as 1 and 0
    ("inf", None), ("-Infinity", None),
    ("1_000", None), ("0x1A", None), ("2024-01-03", None), ("1.2.3", None), ("12 kg", None),
    ("١٢", None), ("１２", None),  # digits of other scripts: float() takes them, CSV doesn't
])
def test_cells_that_are_not_plain_decimal_numbers_are_refused(cell, hint):
    raw = f"x,y\n1,2\n{cell},3\n".encode()
    p = problem_of(raw, {"response_column": "y"})
    assert pointers(p) == ["/table/x/1"]
    message = p.errors[0].message
    assert message.startswith(f"row 1 (CSV line 3), column x: {cell!r} is not a number")
    if hint:
        assert hint in message


def test_decimal_comma_gets_a_hint():
    p = problem_of(b'x,y\n1,2\n"3,5",3\n', {"response_column": "y"})
    assert "'3,5' is not a number; write the decimal point as '.'" in p.errors[0].message


def test_a_number_too_large_for_a_double_is_refused():
    p = problem_of(b"x,y\n1,2\n1e999,3\n", {"response_column": "y"})
    assert pointers(p) == ["/table/x/1"]
    assert "'1e999' is too large for a double-precision number" in p.errors[0].message


@pytest.mark.parametrize("cell, value", [
    ("1", 1.0), ("-1.5", -1.5), ("+2", 2.0), (".5", 0.5), ("5.", 5.0), ("1e3", 1000.0),
    ("1E-3", 0.001), (" 7 ", 7.0), ("\t8", 8.0), ('"9"', 9.0), ("1e-400", 0.0),
    ("0.1000000000000000055511151231257827", 0.1), ("2.2250738585072011e-308",
                                                    2.2250738585072011e-308),
])
def test_decimal_numbers_are_read_as_python_float_reads_them(cell, value):
    for extra in ("", "\n3,"):  # the fast path, and the careful one (a missing cell)
        body = table_body_from_csv(f"x,y\n{cell},1{extra}\n".encode(), {"response_column": "y"})
        assert body["table"]["x"][0] == value
        assert math.copysign(1, body["table"]["x"][0]) == math.copysign(1, value)


@pytest.mark.parametrize("cells", ["", " ", '""', "\t"])
def test_empty_cells_are_missing(cells):
    body = table_body_from_csv(f"x,y\n1,2\n{cells},3\n4,{cells}\n".encode(),
                               {"response_column": "y"})
    assert body["table"] == {"x": [1.0, None, 4.0], "y": [2.0, 3.0, None]}


def test_unused_columns_need_not_be_numbers():
    raw = b"date,site,x,y\n2024-01-01,north,1,2\n2024-01-02,south,2,3.5\n"
    body = table_body_from_csv(raw, {"response_column": "y", "predictor_columns": "x"})
    assert body["table"] == {"x": [1.0, 2.0], "y": [2.0, 3.5]}
    p = problem_of(raw, {"response_column": "y"})  # without predictor_columns they are sent
    assert pointers(p)[:2] == ["/table/date/0", "/table/site/0"]


def test_weights_column_is_kept_with_predictor_columns():
    raw = b"x,w,z,y\n1,1,9,2\n2,2,9,3\n"
    body = table_body_from_csv(raw, {"response_column": "y", "predictor_columns": "x",
                                     "weights": "w"})
    assert list(body["table"]) == ["x", "w", "y"]
    assert body["weights"] == "w"


# --- structure --------------------------------------------------------------------------

def test_byte_order_mark_and_crlf_line_ends_are_read():
    body = table_body_from_csv(b"\xef\xbb\xbfx,y\r\n1,2\r\n3,4\r\n", {"response_column": "y"})
    assert body["table"] == {"x": [1.0, 3.0], "y": [2.0, 4.0]}


def test_blank_lines_are_skipped_and_line_numbers_count_them():
    raw = b"\nx,y\n1,2\n\n   \n3,oops\n\n"
    p = problem_of(raw, {"response_column": "y"})
    assert pointers(p) == ["/table/y/1"]
    assert p.errors[0].message.startswith("row 1 (CSV line 6), column y: 'oops'")
    assert table_body_from_csv(b"x,y\n1,2\n\n3,4\n\n", {"response_column": "y"})["table"] == \
        {"x": [1.0, 3.0], "y": [2.0, 4.0]}


def test_a_quoted_header_with_a_line_break_counts_lines():
    raw = b'"x\nnew",y\n1,2\n3,z\n'
    p = problem_of(raw, {"response_column": "y"})
    assert p.errors[0].message.startswith("row 1 (CSV line 4), column y: 'z'")


def test_header_names_are_stripped():
    body = table_body_from_csv(b" x , y\n1,2\n", {"response_column": "y"})
    assert list(body["table"]) == ["x", "y"]


@pytest.mark.parametrize("raw, fragment", [
    (b"x,y\n1,2,3\n", "row 0 (CSV line 2) has 3 fields; the header has 2"),
    (b"x,y\n1,2\n3\n", "row 1 (CSV line 3) has 1 fields; the header has 2"),
    (b"x,y\n1,2\n3\n4,5,6\n7,8\n",
     "2 rows have a different number of fields from the header; the first: row 1 (CSV line 3)"),
    (b"x,y,z\n1,2\n3,4\n", "row 0 (CSV line 2) has 2 fields; the header has 3"),
])
def test_ragged_rows_are_a_400(raw, fragment):
    p = problem_of(raw, {"response_column": "y"})
    assert (p.status, p.kind, p.title) == (400, "malformed_csv", "Malformed CSV")
    assert fragment in p.detail


@pytest.mark.parametrize("raw", [b"", b"   ", b"\n\n", b"\xef\xbb\xbf", b"\r\n"])
def test_empty_body_is_a_400(raw):
    p = problem_of(raw, {"response_column": "y"})
    assert p.status == 400
    assert p.detail.startswith("the CSV body is empty")


def test_non_utf8_body_is_a_400_naming_the_byte_and_line():
    raw = "x,temp\n1,2\n3,4\n".encode() + "5,caf\u00e9\n".encode("latin-1")
    p = problem_of(raw, {"response_column": "temp"})
    assert p.status == 400
    assert p.detail == ("the body is not UTF-8 text: byte 0xe9 at offset 20 (line 4) cannot "
                        "be decoded; save the file as CSV UTF-8")
    p = problem_of(b"\xef\xbb\xbf" + raw, {"response_column": "temp"})
    assert "byte 0xe9 at offset 23 (line 4)" in p.detail  # offsets count the mark's 3 bytes


def test_unterminated_quote_is_refused():
    p = problem_of(b'x,y\n1,"2\n3,4\n', {"response_column": "y"})
    assert p.status in (400, 422)
    assert p.errors == [] or pointers(p) == ["/table/y/0"]


def test_header_only_is_a_422():
    p = problem_of(b"x,y\n", {"response_column": "y"})
    assert (p.status, pointers(p)) == (422, ["/table"])
    assert p.detail == "the CSV has a header row (line 1) but no data rows"


def test_empty_and_repeated_header_names_are_a_422():
    p = problem_of(b"x,,y,x,\n1,2,3,4,5\n", {"response_column": "y"})
    assert p.status == 422
    assert pointers(p) == ["/table", "/table/x", "/table"]
    assert p.errors[0].message.startswith("column 2 of the header (CSV line 1) has no name")
    assert p.errors[1].message == "columns 1 and 4 of the header (CSV line 1) are both named 'x'"
    assert p.detail.startswith("3 problems with the CSV header; the first: column 2")


# --- query parameters -------------------------------------------------------------------

def test_every_option_is_carried_into_the_body():
    query = {"response_column": "y", "predictor_columns": "a, b", "weights": "w",
             "levels": "0.9,0.95", "intercept": "False", "missing": "drop_rows",
             "rank_deficiency": "drop_aliased", "covariance": "hc3",
             "simultaneous": "bonferroni", "include": "residuals,influence",
             "return_model": "true"}
    body = table_body_from_csv(b"a,b,w,y\n1,2,1,3\n", query)
    assert {k: v for k, v in body.items() if k != "table"} == {
        "response_column": "y", "predictor_columns": ["a", "b"], "weights": "w",
        "levels": [0.9, 0.95], "intercept": False, "missing": "drop_rows",
        "rank_deficiency": "drop_aliased", "covariance": "hc3", "simultaneous": "bonferroni",
        "include": ["residuals", "influence"], "return_model": True}


def test_repeated_list_parameters_are_joined_from_a_multidict():
    query = MultiDict([("response_column", "y"), ("levels", "0.8"), ("levels", "0.9,0.99"),
                       ("include", "residuals")])
    body = table_body_from_csv(b"x,y\n1,2\n", query)
    assert body["levels"] == [0.8, 0.9, 0.99]
    assert body["include"] == ["residuals"]


@pytest.mark.parametrize("value", ["none", "null", ""])
def test_simultaneous_none_is_null(value):
    assert table_body_from_csv(b"x,y\n1,2\n", {"response_column": "y",
                                               "simultaneous": value})["simultaneous"] is None


@pytest.mark.parametrize("query, pointer, message", [
    ({}, "", "query parameter response_column is required"),
    ({"response_column": "y", "respons": "y"}, "", "unknown query parameter 'respons'"),
    ({"response_column": "y", "intercept": "yes"}, "/intercept",
     "query parameter intercept must be true or false, not 'yes'"),
    ({"response_column": "y", "return_model": "1"}, "/return_model",
     "query parameter return_model must be true or false, not '1'"),
    ({"response_column": "y", "levels": "0.9,high"}, "/levels/1",
     "query parameter levels: 'high' is not a number"),
    ({"response_column": "y", "levels": "0.9,,0.95"}, "/levels/1",
     "query parameter levels has an empty item at position 1"),
    ({"response_column": ["y", "x"]}, "/response_column",
     "query parameter response_column is given 2 times; give it once"),
    ({"response_column": "y", "missing": ""}, "/missing", "query parameter missing is empty"),
])
def test_bad_query_parameters_are_a_422(query, pointer, message):
    p = problem_of(b"x,y\n1,2\n", query)
    assert p.status == 422
    assert any(e.pointer == pointer and e.message.startswith(message) for e in p.errors), \
        p.errors


def test_query_problems_are_reported_together_before_the_body_is_read():
    p = problem_of(b"\xff\xfe", {"foo": "1", "bar": "2", "levels": "x"})
    assert p.status == 422
    assert pointers(p) == ["", "", "", "/levels/0"]
    assert p.detail.startswith("4 query parameter problem(s): query parameter response_column")


@pytest.mark.parametrize("query, pointer", [
    ({"response_column": "kw"}, "/response_column"),
    ({"response_column": "y", "predictor_columns": "x,z"}, "/predictor_columns/1"),
    ({"response_column": "y", "weights": "w"}, "/weights"),
])
def test_names_the_header_lacks_are_a_422(query, pointer):
    p = problem_of(b"x,y\n1,2\n", query)
    assert pointers(p) == [pointer]
    assert "names no column of the CSV header (columns: x, y)" in p.errors[0].message


def test_a_semicolon_separated_file_gets_a_hint():
    p = problem_of(b"x;y\n1;2\n", {"response_column": "y"})
    assert "this file seems to separate them by ';'" in p.errors[0].message


@pytest.mark.parametrize("query, pointer", [
    ({"response_column": "y", "levels": "1.5"}, "/levels/0"),
    ({"response_column": "y", "covariance": "hc9"}, "/covariance"),
    ({"response_column": "y", "include": "everything"}, "/include/0"),
])
def test_option_values_are_checked_by_the_fit_schema(client, query, pointer):
    body = table_body_from_csv(b"x,y\n1,2\n2,3\n3,5\n", query)
    answer = client.post("/v1/fit", data=orjson.dumps(body), content_type="application/json")
    assert answer.status_code == 422
    assert pointer in [e["pointer"] for e in answer.get_json()["errors"]]


# --- quoting, encodings and wide headers (found by an adversarial sweep) ------------------

def test_a_quote_never_closed_is_a_400_not_the_rest_of_the_file_as_one_field():
    # Was: the open quote in the unused last column swallowed rows 1-3, and the fit
    # ran on the one row left (silently fewer rows; a 200 with more rows around).
    raw = b'x,y,note\n1,2,"late\n3,4.5,ok\n5,6,ok\n7,8.2,ok\n'
    p = problem_of(raw, {"response_column": "y", "predictor_columns": "x"})
    assert (p.status, p.kind) == (400, "malformed_csv")
    assert p.detail == ("the CSV cannot be read: a quote opened in the record that starts "
                        "at line 2 is never closed")


@pytest.mark.parametrize("cell", [b'"1"2', b'"1" ', b'"1"x'])
def test_text_after_a_closing_quote_is_a_400(cell):
    # Was: '"1"2' read as 12 (pandas and csv both join the pieces), '"1" ' as 1.
    p = problem_of(b"x,y\n" + cell + b",3\n4,5\n6,7.5\n", {"response_column": "y"})
    assert (p.status, p.kind) == (400, "malformed_csv")
    assert p.detail.startswith("the CSV cannot be read at line 2: a closing quote must be "
                               "followed by a comma or the end of the line")


def test_well_formed_quoted_numbers_still_take_the_fast_path():
    raw = b'x,y\n"1","2.5"\n"",3\n4,""\n"6",7\n'
    assert csv_io._plain_header(raw) is not None
    body = table_body_from_csv(raw, {"response_column": "y"})
    assert body["table"] == {"x": [1.0, None, 4.0, 6.0], "y": [2.5, 3.0, None, 7.0]}


def test_utf16_is_named():
    text = "x,y\n1,2\n3,4.5\n"
    p = problem_of(text.encode("utf-16"), {"response_column": "y"})  # with its BOM
    assert (p.status, p.kind) == (400, "malformed_csv")
    assert "the body is UTF-16 text (it starts with the byte order mark 0xff 0xfe)" in p.detail
    # Was a 422 'y' names no column (columns: \x00x\x00, ...): the NULs of the names.
    p = problem_of(text.encode("utf-16-be"), {"response_column": "y"})
    assert (p.status, p.kind) == (400, "malformed_csv")
    assert "holds a NUL byte: the file is perhaps UTF-16 text" in p.detail


def test_a_nul_byte_in_the_header_is_a_400():
    # Was a 200 with a predictor named 'x\x00'.
    p = problem_of(b"x\x00,y\n1,2\n3,4\n5,6.5\n", {"response_column": "y"})
    assert p.detail == ("the header (CSV line 1) holds a NUL byte: the file is perhaps "
                        "UTF-16 text; save it as CSV UTF-8")


def test_a_header_wider_than_the_column_limit_is_answered_before_the_rows_are_read():
    # Was: every row parsed first (3.8 s for a header of 100,000 names). The broken
    # quote on line 3 shows that the rows are not read at all now.
    header = ",".join(f"c{j}" for j in range(300)) + ",y\n"
    row = ",".join(["1"] * 301) + "\n"
    p = problem_of((header + row + '"1"2' + row[1:]).encode(), {"response_column": "y"})
    assert p.status == 422
    # 300 predictors and the intercept; the default LINFER_MAX_COLUMNS is 200.
    assert [(e.pointer, e.message) for e in p.errors] == [
        ("/table", "has 301 design columns, more than the limit of 200 (LINFER_MAX_COLUMNS)")]
    p = problem_of((header + row + row).encode(), {"response_column": "y",
                                                    "intercept": "false", "weights": "c0"})
    assert p.errors[0].message.startswith("has 299 design columns")


def test_rows_of_the_wrong_length_are_found_when_pandas_reads_only_some_columns():
    # With predictor_columns pandas converts only the columns used (usecols) and
    # accepts a longer row; the structure check answers it.
    raw = b"x,t,y\n1,a,2\n3,b,4,9\n5,c,6.5\n"
    p = problem_of(raw.replace(b"a", b"1").replace(b"b", b"2").replace(b"c", b"3"),
                   {"response_column": "y", "predictor_columns": "x"})
    assert (p.status, p.detail) == (400, "row 1 (CSV line 3) has 4 fields; the header has 3")
    p = problem_of(raw, {"response_column": "y", "predictor_columns": "x"})
    assert (p.status, p.detail) == (400, "row 1 (CSV line 3) has 4 fields; the header has 3")


def test_a_long_header_is_listed_in_part():
    header = ",".join(f"c{j}" for j in range(30)) + "\n"
    p = problem_of((header + ",".join(["1"] * 30) + "\n").encode(), {"response_column": "y"})
    listed = ", ".join(f"c{j}" for j in range(20))
    assert p.errors[0].message == ("'y' names no column of the CSV header (columns: "
                                   f"{listed}, ... (30 columns))")


# --- the fast path and the careful path agree -------------------------------------------

CELL = st.text(alphabet="0123456789.eE+- \t\"a,", max_size=6)


def outcome(raw: bytes, fast: bool, query=None):
    saved = csv_io._fast
    if not fast:
        csv_io._fast = lambda *args: None
    try:
        return ("body", table_body_from_csv(raw, query or {"response_column": "y"}))
    except ApiProblem as p:
        return ("problem", p.status, p.detail, [(e.pointer, e.message) for e in p.errors])
    finally:
        csv_io._fast = saved


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(rows=st.lists(st.lists(CELL, min_size=1, max_size=3), min_size=1, max_size=5),
       newline=st.sampled_from(["\n", "\r\n"]))
def test_fast_and_careful_paths_give_the_same_answer(rows, newline):
    raw = (newline.join(["x,y"] + [",".join(r) for r in rows]) + newline).encode()
    assert outcome(raw, fast=True) == outcome(raw, fast=False), raw


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(rows=st.lists(st.lists(CELL, min_size=1, max_size=4), min_size=1, max_size=5),
       newline=st.sampled_from(["\n", "\r\n", "\r"]))
def test_fast_and_careful_paths_agree_when_some_columns_are_left_out(rows, newline):
    # pandas converts only the used columns then (usecols) and no longer sees rows of
    # the wrong length; the structure check must.
    raw = (newline.join(["x,t,y"] + [",".join(r) for r in rows]) + newline).encode()
    query = {"response_column": "y", "predictor_columns": "x"}
    assert outcome(raw, True, query) == outcome(raw, False, query), raw


@settings(max_examples=200, deadline=None)
@given(values=st.lists(st.floats(allow_nan=False, allow_infinity=False), min_size=1,
                       max_size=20),
       fmt=st.sampled_from(["{!r}", "{:.17g}", "{:.3e}", "{:.25f}"]))
def test_numbers_read_back_exactly(values, fmt):
    assume(all(math.isfinite(float(fmt.format(v))) for v in values))  # 1.7975e308 rounds up
    text = "x,y\n" + "".join(f"{fmt.format(v)},1\n" for v in values)
    body = table_body_from_csv(text.encode(), {"response_column": "y"})
    assert body["table"]["x"] == [float(fmt.format(v)) for v in values]


# --- coefficients_csv -------------------------------------------------------------------

def test_coefficients_csv_of_the_demo_fit(client):
    doc = client.post("/v1/fit", data=json.dumps({**DEMO_TABLE, "levels": [0.9, 0.95]}),
                      content_type="application/json").get_json()
    text = coefficients_csv(doc)
    assert text.endswith("\r\n")
    rows = list(csv.reader(io.StringIO(text)))
    assert rows[0] == ["name", "estimable", "estimate", "standard_error", "t_statistic",
                       "p_value", "lower_0.9", "upper_0.9", "lower_0.95", "upper_0.95", "vif"]
    assert [r[0] for r in rows[1:]] == [c["name"] for c in doc["coefficients"]]
    for row, c in zip(rows[1:], doc["coefficients"]):
        assert row[1] == "true"
        assert [float(v) for v in row[2:6]] == [c["estimate"], c["standard_error"],
                                                c["t_statistic"], c["p_value"]]
        assert float(row[8]) == c["intervals"][1]["lower"]
        assert row[2] == repr(c["estimate"])
    assert rows[1][-1] == ""  # the intercept's vif is null
    assert float(rows[2][-1]) == doc["coefficients"][1]["vif"]


def test_coefficients_csv_writes_nulls_as_empty_cells_and_quotes_names():
    doc = {"coefficients": [
        {"name": "intercept", "estimable": True, "estimate": 1.0, "standard_error": None,
         "t_statistic": None, "p_value": None,
         "intervals": [{"level": 0.95, "lower": None, "upper": None}], "vif": None},
        {"name": 'a,"b"', "estimable": False, "estimate": None, "standard_error": None,
         "t_statistic": None, "p_value": None,
         "intervals": [{"level": 0.95, "lower": None, "upper": None}], "vif": None}]}
    assert coefficients_csv(doc) == (
        "name,estimable,estimate,standard_error,t_statistic,p_value,lower_0.95,upper_0.95,vif\r\n"
        "intercept,true,1.0,,,,,,\r\n"
        '"a,""b""",false,,,,,,,\r\n')


def test_coefficients_csv_writes_17_significant_digits_when_needed():
    doc = {"coefficients": [{"name": "x", "estimable": True, "estimate": 0.1 + 0.2,
                             "standard_error": 2.1040761950488537e-29, "t_statistic": 1e300,
                             "p_value": 5e-324, "intervals": [], "vif": 1.0}]}
    row = coefficients_csv(doc).splitlines()[1]
    assert row == "x,true,0.30000000000000004,2.1040761950488537e-29,1e+300,5e-324,1.0"
