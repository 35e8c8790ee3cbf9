"""Apache Arrow IPC streams for large tables: a /v1/fit body straight into float arrays.

``POST /v1/fit`` with ``Content-Type: application/vnd.apache.arrow.stream`` takes the
table as an Arrow IPC stream (the open columnar format that JavaScript, Java and Go
callers can write) and the options as query parameters, as for CSV. Numeric columns
(integers or floats) become float64 arrays without passing through Python numbers;
nulls are missing values. Problems point into the equivalent table layout
(``/table/<column>``). pyarrow is an optional dependency (``pip install linfer[arrow]``);
without it the service answers 415.

Reading rules (each decided, each tested):

- One stream: bytes after its end-of-stream marker (a second stream, say) are a 400,
  not ignored. The Arrow *file* format (``ARROW1`` magic) is a 400 that says so.
- The stream's messages are looked at before any buffer is decoded: a compressed
  stream (LZ4 or ZSTD buffers) whose buffers would decompress to more than
  LINFER_MAX_BODY_BYTES is a 413, as the same stream sent uncompressed would be;
  more rows than LINFER_MAX_ROWS, or (without ``predictor_columns``) more columns
  than LINFER_MAX_COLUMNS, are the fit's 422 before any decoding.
- The columns named in the query must be in the schema, and every column that is
  sent to the fit must be an integer or floating-point column; columns left out by
  ``predictor_columns`` are not decoded and may be of any type.
- Integers become the nearest double, as the same integers sent as JSON do (beyond
  2^53 not every integer is a double).
"""

from __future__ import annotations

import struct
from typing import Any, Mapping

import numpy as np

from .arrays import invalid
from .limits import check_shape
from .problems import ApiProblem, FieldError, pointer
from .query import check_table_width, current_settings, options_from_query, used_columns

__all__ = ["ARROW_MEDIA_TYPE", "table_body_from_arrow"]

ARROW_MEDIA_TYPE = "application/vnd.apache.arrow.stream"
_FILE_MAGIC = b"ARROW1"
# The Message flatbuffer's header kinds that carry buffers (Message.fbs).
_DICTIONARY_BATCH, _RECORD_BATCH = 2, 3


def _pyarrow():
    try:
        import pyarrow
        import pyarrow.ipc  # noqa: F401
    except ImportError:
        raise ApiProblem(415, "Unsupported Media Type", "this server cannot read Arrow "
                         "streams (pyarrow is not installed: pip install linfer[arrow]); "
                         "send JSON or CSV", "unsupported_media_type") from None
    return pyarrow


def _malformed(detail: str) -> ApiProblem:
    return ApiProblem(400, "Malformed Arrow stream", detail, "malformed_arrow")


# --- the messages' metadata, read before pyarrow decodes a buffer ----------------------

def _field(buf: memoryview, table: int, index: int) -> int | None:
    """Where field ``index`` of the flatbuffer table at ``table`` is, or None if absent."""
    vtable = table - struct.unpack_from("<i", buf, table)[0]
    size = struct.unpack_from("<H", buf, vtable)[0]
    if 4 + 2 * index + 2 > size:
        return None
    offset = struct.unpack_from("<H", buf, vtable + 4 + 2 * index)[0]
    return table + offset if offset else None


def _follow(buf: memoryview, at: int) -> int:
    return at + struct.unpack_from("<I", buf, at)[0]


def _batch_layout(metadata: bytes) -> tuple[int, int, list[tuple[int, int]], bool] | None:
    """(kind, rows, buffers as (offset, length), compressed) of a batch message, else None.

    Reads the Message flatbuffer of the Arrow format (Message.fbs): Message.header
    (field 2; its kind in field 1) is a RecordBatch, or a DictionaryBatch whose
    field 1 holds one; RecordBatch.length (field 0), .buffers (field 2: structs of
    two int64) and .compression (field 3).
    """
    buf = memoryview(metadata)
    root = _follow(buf, 0)
    kind_at = _field(buf, root, 1)
    kind = buf[kind_at] if kind_at is not None else 0
    if kind not in (_RECORD_BATCH, _DICTIONARY_BATCH):
        return None
    header_at = _field(buf, root, 2)
    if header_at is None:
        raise ValueError("a batch message without its header")
    batch = _follow(buf, header_at)
    if kind == _DICTIONARY_BATCH:
        data_at = _field(buf, batch, 1)
        if data_at is None:
            raise ValueError("a dictionary batch without its data")
        batch = _follow(buf, data_at)
    length_at = _field(buf, batch, 0)
    rows = struct.unpack_from("<q", buf, length_at)[0] if length_at is not None else 0
    buffers = []
    vector_at = _field(buf, batch, 2)
    if vector_at is not None:
        vector = _follow(buf, vector_at)
        count = struct.unpack_from("<I", buf, vector)[0]
        buffers = [struct.unpack_from("<qq", buf, vector + 4 + 16 * i) for i in range(count)]
    return kind, rows, buffers, _field(buf, batch, 3) is not None


def _decoded_size(body, buffers: list[tuple[int, int]], compressed: bool) -> int:
    """The bytes the buffers of one batch take once decoded.

    A compressed buffer starts with its uncompressed length (int64, -1 for a buffer
    stored as is); pyarrow allocates that much and decompresses into it.
    """
    view = memoryview(body)
    if not compressed:
        return len(view)  # the buffers are slices of the body
    total = 0
    for offset, length in buffers:
        if length < 8 or offset < 0 or offset + 8 > len(view):
            continue  # empty, or beyond the body: pyarrow refuses it
        declared = struct.unpack_from("<q", view, offset)[0]
        total += length - 8 if declared == -1 else max(declared, 0)
    return total


def _scan(pa, raw: bytes) -> int:
    """Check the stream's framing and sizes before decoding it; the rows it declares.

    400 for bytes that are no stream, the file format, or bytes after the stream's
    end; 413 for buffers that decompress beyond the body limit.
    """
    if raw.startswith(_FILE_MAGIC):
        raise _malformed("the body is an Arrow file (it starts with the magic ARROW1), not "
                         "an Arrow IPC stream: write it with the stream writer "
                         "(pyarrow.ipc.new_stream, RecordBatchStreamWriter in Java and "
                         "JavaScript)")
    source = pa.BufferReader(pa.py_buffer(raw))
    rows = decoded = 0
    try:
        reader = pa.ipc.MessageReader.open_stream(source)
        for message in reader:
            layout = _batch_layout(message.metadata.to_pybytes())
            if layout is None:
                continue
            kind, length, buffers, compressed = layout
            if kind == _RECORD_BATCH:
                rows += max(length, 0)
            if message.body is not None:
                decoded += _decoded_size(message.body, buffers, compressed)
    except (pa.ArrowInvalid, pa.ArrowException, OSError) as err:
        raise _malformed(f"the body is not an Arrow IPC stream: {err}") from None
    except (struct.error, IndexError, ValueError) as err:
        raise _malformed(f"the metadata of a batch of the Arrow stream cannot be read: "
                         f"{err}") from None
    end = source.tell()
    if end < len(raw):
        second = " (another stream: write every batch into one stream)" \
            if raw[end:end + 4] == b"\xff\xff\xff\xff" and len(raw) - end > 8 else ""
        raise _malformed(f"{len(raw) - end} bytes follow the end of the Arrow stream at byte "
                         f"{end}{second}; send one stream and nothing after it")
    limit = current_settings().max_body_bytes
    if decoded > limit:
        raise ApiProblem(413, "Content Too Large", f"the compressed Arrow stream decompresses "
                         f"to {decoded} bytes, more than the limit of {limit} bytes "
                         "(LINFER_MAX_BODY_BYTES)", "content_too_large",
                         [FieldError("/table", f"decompresses to {decoded} bytes, more than "
                                     f"the limit of {limit} bytes (LINFER_MAX_BODY_BYTES)")])
    return rows


def table_body_from_arrow(raw: bytes, query: Mapping[str, Any]) -> dict[str, Any]:
    """A /v1/fit body in the ``table`` layout from an Arrow IPC stream and the query.

    Raises
    ------
    ApiProblem
        400 for bytes that are not one Arrow IPC stream (reading rules in the module
        docstring); 413 for compressed buffers beyond the body limit; 422 for a
        repeated column name, a name in the query that the schema lacks, a column
        of a type other than integer or floating point, or a bad query parameter;
        415 without pyarrow.
    """
    pa = _pyarrow()
    options = options_from_query(query)
    rows = _scan(pa, raw)
    try:
        schema = pa.ipc.open_stream(pa.py_buffer(raw)).schema
    except (pa.ArrowInvalid, pa.ArrowException, OSError) as err:
        raise _malformed(f"the body is not an Arrow IPC stream: {err}") from None
    names = schema.names
    seen: set[str] = set()
    for name in names:
        if name in seen:
            raise invalid([FieldError(pointer("table", name), f"the stream has two columns "
                                      f"named {name!r}")])
        seen.add(name)
    used = [names[j] for j in used_columns(names, options, "the Arrow stream")]
    check_table_width(names, options)
    check_shape("/table", current_settings(), rows=rows)
    for name in used:
        kind = schema.field(name).type
        if not (pa.types.is_integer(kind) or pa.types.is_floating(kind)):
            raise invalid([FieldError(pointer("table", name), f"column {name!r} has Arrow "
                                      f"type {kind}; send numbers (integer or floating "
                                      "point)")])
    included = [schema.get_field_index(name) for name in used]
    try:
        table = pa.ipc.open_stream(pa.py_buffer(raw), options=pa.ipc.IpcReadOptions(
            included_fields=included)).read_all()
    except (pa.ArrowInvalid, pa.ArrowException, OSError) as err:
        raise _malformed(f"the body is not an Arrow IPC stream: {err}") from None
    columns: dict[str, np.ndarray] = {}
    for name in used:
        # safe=False: an integer beyond 2^53 becomes the nearest double (as numpy and
        # JSON have it) instead of a cast error.
        as_float = table.column(name).cast(pa.float64(), safe=False)
        values = as_float.to_numpy(zero_copy_only=False)
        if as_float.null_count:
            values = np.where(np.asarray(as_float.is_null()), np.nan, values)
        columns[name] = np.ascontiguousarray(values, dtype=np.float64)
    return {"table": columns, **options}
