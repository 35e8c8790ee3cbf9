Attribute VB_Name = "LinferFit"
' linfer for spreadsheets: fit the selected range and write the coefficient table into a
' new sheet.
'
' Select a block of cells whose first row names the columns and whose other rows are the
' observations, then run LinferFitSelection (Developer > Macros, or a button). It asks
' for the service's address, the response column, the predictor columns (empty: every
' other column) and the confidence levels, posts the block as CSV to
'
'     POST <address>/v1/fit?response_column=...&predictor_columns=...&levels=...
'     Content-Type: text/csv; charset=utf-8
'     Accept: text/csv
'
' and writes the answer (one row per coefficient: name, estimable, estimate,
' standard_error, t_statistic, p_value, lower_L and upper_L per level, vif) into a new
' sheet after the selection's sheet. A refusal (4xx) is shown with the service's problem
' detail and the cells it points at (/table/<column>/<row>, rows counted from 0 after
' the header).
'
' How cells become CSV (each rule mirrored by tests/e2e/test_spreadsheet_macro.py):
' - Values are read with Range.Value2: numbers, dates and currency as plain doubles,
'   never the displayed text, so neither the cell's number format nor the locale
'   changes what is sent.
' - A number is written with 15 significant digits (what the spreadsheet keeps of a
'   typed number) in scientific notation, with "." as the decimal point whatever the
'   locale: 8.2 becomes 8.20000000000000E+00.
' - An empty cell is an empty field (a missing value); TRUE and FALSE are sent as the
'   words TRUE and FALSE (which the service refuses in a used column); a cell holding
'   an error value (#N/A, #DIV/0!, ...) stops the macro with the cell's address.
' - A field holding a double quote, a comma, a carriage return or a line feed is
'   quoted, its double quotes doubled (RFC 4180). Records end with CRLF. The body is
'   sent as UTF-8 bytes, so names such as "temp " & ChrW(176) & "C" arrive intact.
' - Query values are percent-encoded from UTF-8; only A-Z a-z 0-9 - _ . ~ stay as they
'   are. The lists (predictors, levels) are split at commas, each item trimmed.
'
' Needs: Windows (MSXML2.ServerXMLHTTP ships with it); no references to add. On a Mac,
' replace PostCsv with a call through AppleScript or a QueryTable: the rest is plain VBA.
'
' The address defaults to a workbook name linfer_url (Formulas > Name Manager) when one
' exists, else to LINFER_DEFAULT_URL.

Option Explicit

' --- the request, in one place (tests/e2e/test_spreadsheet_macro.py reads these) -------
Public Const LINFER_DEFAULT_URL As String = "http://127.0.0.1:8000"
Private Const URL_NAME As String = "linfer_url"
Private Const FIT_PATH As String = "/v1/fit"
Private Const QP_RESPONSE As String = "response_column"
Private Const QP_PREDICTORS As String = "predictor_columns"
Private Const QP_LEVELS As String = "levels"
Private Const HDR_CONTENT_TYPE As String = "Content-Type"
Private Const HDR_ACCEPT As String = "Accept"
Private Const CSV_CONTENT_TYPE As String = "text/csv; charset=utf-8"
Private Const CSV_ACCEPT As String = "text/csv"
Private Const HTTP_PROGID As String = "MSXML2.ServerXMLHTTP.6.0"
Private Const FIELD_SEPARATOR As String = ","
Private Const RECORD_SEPARATOR As String = vbCrLf
Private Const NUMBER_FORMAT As String = "0.00000000000000E+00"
Private Const URL_UNRESERVED As String = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789-_.~"
Private Const DEFAULT_LEVELS As String = "0.95"
Private Const TIMEOUT_MS As Long = 30000
Private Const MAX_POINTED As Long = 10
Private Const TITLE As String = "linfer"

Private Const ERR_INPUT As Long = vbObjectError + 513


' === the macro ==========================================================================

Public Sub LinferFitSelection()
    Dim source As Range
    Dim baseUrl As String, responseColumn As String, predictors As String, levels As String
    Dim url As String, body As String
    Dim status As Long, answer As String

    If TypeName(Selection) <> "Range" Then
        MsgBox "Select the table to fit first: a header row naming the columns, then one " & _
               "row per observation.", vbExclamation, TITLE
        Exit Sub
    End If
    Set source = Selection
    If source.Areas.Count > 1 Then
        MsgBox "Select one block of cells (the selection has " & source.Areas.Count & _
               " separate areas).", vbExclamation, TITLE
        Exit Sub
    End If
    If source.Rows.Count < 2 Or source.Columns.Count < 2 Then
        MsgBox "Select a header row and at least one row of data, with at least two " & _
               "columns (a response and a predictor).", vbExclamation, TITLE
        Exit Sub
    End If

    If Not Ask("Address of the linfer service:", DefaultBaseUrl(), baseUrl) Then Exit Sub
    If Not Ask("Response column (a name from the header row):", _
               LastHeader(source), responseColumn) Then Exit Sub
    If Not Ask("Predictor columns, separated by commas (leave empty for every other " & _
               "column):", "", predictors) Then Exit Sub
    If Not Ask("Confidence levels, separated by commas, with a decimal point (e.g. " & _
               "0.9,0.95):", DEFAULT_LEVELS, levels) Then Exit Sub

    On Error GoTo Failed
    body = RangeToCsv(source)
    url = BuildFitUrl(baseUrl, responseColumn, predictors, levels)
    PostCsv url, body, status, answer
    If status = 200 Then
        WriteCsvToNewSheet answer, source, url
    ElseIf status >= 400 And status < 500 Then
        MsgBox ProblemMessage(status, answer), vbExclamation, TITLE & ": the request was refused"
    Else
        MsgBox "linfer answered " & status & ":" & vbLf & Left$(answer, 1000), vbCritical, TITLE
    End If
    Exit Sub

Failed:
    MsgBox Err.Description, vbCritical, TITLE
End Sub


' === the request ========================================================================

' The selected block as CSV text: the first row the header, then the data rows.
Public Function RangeToCsv(ByVal source As Range) As String
    Dim values As Variant
    Dim records() As String, fields() As String
    Dim r As Long, c As Long

    values = source.Value2   ' a 1-based 2-D array: the block has at least 2 x 2 cells
    ReDim records(1 To UBound(values, 1))
    ReDim fields(1 To UBound(values, 2))
    For r = 1 To UBound(values, 1)
        For c = 1 To UBound(values, 2)
            If r = 1 Then
                fields(c) = CsvField(HeaderText(values(r, c), source, r, c))
            Else
                fields(c) = CsvField(CellText(values(r, c), source, r, c))
            End If
        Next c
        records(r) = Join(fields, FIELD_SEPARATOR)
    Next r
    RangeToCsv = Join(records, RECORD_SEPARATOR) & RECORD_SEPARATOR
End Function

' A header cell's text: a column name.
Private Function HeaderText(ByVal v As Variant, ByVal source As Range, ByVal r As Long, _
                            ByVal c As Long) As String
    Select Case VarType(v)
        Case vbString
            HeaderText = v
        Case vbEmpty
            Err.Raise ERR_INPUT, TITLE, "Header cell " & CellAddress(source, r, c) & _
                      " is empty: name every column of the selection."
        Case vbError
            Err.Raise ERR_INPUT, TITLE, "Header cell " & CellAddress(source, r, c) & _
                      " holds an error value."
        Case vbBoolean
            If v Then HeaderText = "TRUE" Else HeaderText = "FALSE"
        Case Else
            HeaderText = Trim$(Str$(v))   ' a number as a name, e.g. a year: 2024
    End Select
End Function

' A data cell's text, from its Value2.
Private Function CellText(ByVal v As Variant, ByVal source As Range, ByVal r As Long, _
                          ByVal c As Long) As String
    Select Case VarType(v)
        Case vbEmpty
            CellText = ""
        Case vbString
            CellText = v
        Case vbBoolean
            If v Then CellText = "TRUE" Else CellText = "FALSE"
        Case vbError
            Err.Raise ERR_INPUT, TITLE, "Cell " & CellAddress(source, r, c) & " holds an " & _
                      "error value; fix it, or clear the cell to send a missing value."
        Case vbDouble, vbSingle, vbCurrency, vbDate, vbInteger, vbLong, vbDecimal, vbByte
            CellText = NumberText(CDbl(v))
        Case Else
            Err.Raise ERR_INPUT, TITLE, "Cell " & CellAddress(source, r, c) & " holds a " & _
                      "value of an unexpected kind (VarType " & VarType(v) & ")."
    End Select
End Function

' The address of a cell of the selection (looked up only for a message: it is a call
' into the spreadsheet, slow when made for every cell).
Private Function CellAddress(ByVal source As Range, ByVal r As Long, ByVal c As Long) As String
    CellAddress = source.Cells(r, c).Address(False, False)
End Function

' 15 significant digits in scientific notation, with "." as the decimal point: Format$
' writes the locale's separator, which is the only character of its output that is not
' a digit, a sign or the E, so it is put back to ".".
Public Function NumberText(ByVal x As Double) As String
    Dim s As String, i As Long
    If x = 0 Then x = 0   ' no negative zero
    s = Format$(x, NUMBER_FORMAT)
    For i = 1 To Len(s)
        If InStr(1, "0123456789+-E", Mid$(s, i, 1), vbBinaryCompare) = 0 Then
            Mid$(s, i, 1) = "."
        End If
    Next i
    NumberText = s
End Function

' A CSV field (RFC 4180): quoted when it holds a quote, a comma, CR or LF.
Public Function CsvField(ByVal s As String) As String
    If InStr(1, s, """", vbBinaryCompare) > 0 Or InStr(1, s, FIELD_SEPARATOR, vbBinaryCompare) > 0 _
       Or InStr(1, s, vbCr, vbBinaryCompare) > 0 Or InStr(1, s, vbLf, vbBinaryCompare) > 0 Then
        CsvField = """" & Replace(s, """", """""") & """"
    Else
        CsvField = s
    End If
End Function

' <address>/v1/fit?response_column=...[&predictor_columns=...][&levels=...]
Public Function BuildFitUrl(ByVal baseUrl As String, ByVal responseColumn As String, _
                            ByVal predictors As String, ByVal levels As String) As String
    Dim url As String, list As String
    url = Trim$(baseUrl)
    Do While Right$(url, 1) = "/"
        url = Left$(url, Len(url) - 1)
    Loop
    url = url & FIT_PATH & "?" & QP_RESPONSE & "=" & UrlEncode(Trim$(responseColumn))
    list = CommaList(predictors)
    If Len(list) > 0 Then url = url & "&" & QP_PREDICTORS & "=" & UrlEncode(list)
    list = CommaList(levels)
    If Len(list) > 0 Then url = url & "&" & QP_LEVELS & "=" & UrlEncode(list)
    BuildFitUrl = url
End Function

' "a, b ,c" -> "a,b,c"; blank -> "".
Private Function CommaList(ByVal text As String) As String
    Dim items() As String, i As Long
    If Len(Trim$(text)) = 0 Then
        CommaList = ""
        Exit Function
    End If
    items = Split(text, ",")
    For i = LBound(items) To UBound(items)
        items(i) = Trim$(items(i))
    Next i
    CommaList = Join(items, ",")
End Function

' Percent-encoding of the UTF-8 bytes; the unreserved characters stay.
Public Function UrlEncode(ByVal s As String) As String
    Dim bytes() As Byte, i As Long, out As String
    If Len(s) = 0 Then
        UrlEncode = ""
        Exit Function
    End If
    bytes = Utf8Bytes(s)
    For i = LBound(bytes) To UBound(bytes)
        If bytes(i) < 128 And InStr(1, URL_UNRESERVED, Chr$(bytes(i)), vbBinaryCompare) > 0 Then
            out = out & Chr$(bytes(i))
        Else
            out = out & "%" & Right$("0" & Hex$(bytes(i)), 2)
        End If
    Next i
    UrlEncode = out
End Function

' The UTF-8 bytes of a (UTF-16) string; surrogate pairs become one 4-byte sequence.
Public Function Utf8Bytes(ByVal s As String) As Byte()
    Dim out() As Byte, n As Long, i As Long, cp As Long, low As Long
    ReDim out(0 To 4 * Len(s) + 3)
    i = 1
    Do While i <= Len(s)
        cp = AscW(Mid$(s, i, 1)) And &HFFFF&
        If cp >= &HD800& And cp <= &HDBFF& And i < Len(s) Then
            low = AscW(Mid$(s, i + 1, 1)) And &HFFFF&
            If low >= &HDC00& And low <= &HDFFF& Then
                cp = &H10000 + (cp - &HD800&) * &H400& + (low - &HDC00&)
                i = i + 1
            End If
        End If
        If cp < &H80& Then
            out(n) = cp
            n = n + 1
        ElseIf cp < &H800& Then
            out(n) = &HC0& Or (cp \ &H40&)
            out(n + 1) = &H80& Or (cp And &H3F&)
            n = n + 2
        ElseIf cp < &H10000 Then
            out(n) = &HE0& Or (cp \ &H1000&)
            out(n + 1) = &H80& Or ((cp \ &H40&) And &H3F&)
            out(n + 2) = &H80& Or (cp And &H3F&)
            n = n + 3
        Else
            out(n) = &HF0& Or (cp \ &H40000)
            out(n + 1) = &H80& Or ((cp \ &H1000&) And &H3F&)
            out(n + 2) = &H80& Or ((cp \ &H40&) And &H3F&)
            out(n + 3) = &H80& Or (cp And &H3F&)
            n = n + 4
        End If
        i = i + 1
    Loop
    If n = 0 Then n = 1   ' never reached for a body; keeps the array non-empty
    ReDim Preserve out(0 To n - 1)
    Utf8Bytes = out
End Function

' One synchronous POST of the CSV; the status and the answer's text come back.
Private Sub PostCsv(ByVal url As String, ByVal body As String, ByRef status As Long, _
                    ByRef answer As String)
    Dim http As Object, payload As Variant
    Set http = CreateObject(HTTP_PROGID)
    http.setTimeouts TIMEOUT_MS, TIMEOUT_MS, TIMEOUT_MS, TIMEOUT_MS
    http.Open "POST", url, False
    http.setRequestHeader HDR_CONTENT_TYPE, CSV_CONTENT_TYPE
    http.setRequestHeader HDR_ACCEPT, CSV_ACCEPT
    payload = Utf8Bytes(body)
    http.send payload
    status = http.Status
    answer = http.responseText
End Sub


' === the answer =========================================================================

' The CSV answer into a new sheet after the selection's sheet, with the request below it.
Private Sub WriteCsvToNewSheet(ByVal text As String, ByVal source As Range, ByVal url As String)
    Dim records As Collection, record As Variant, sheet As Worksheet
    Dim r As Long, c As Long, field As String

    Set records = ParseCsv(text)
    Set sheet = source.Worksheet.Parent.Worksheets.Add(After:=source.Worksheet)
    sheet.Name = FreeSheetName(source.Worksheet.Parent, "linfer fit")
    r = 0
    For Each record In records
        r = r + 1
        For c = LBound(record) To UBound(record)
            field = record(c)
            With sheet.Cells(r, c - LBound(record) + 1)
                If Len(field) = 0 Then
                    ' an empty cell: the service's null (e.g. the intercept's vif)
                ElseIf IsPlainNumber(field) Then
                    .Value2 = Val(UCase$(field))   ' Val always reads "." as the decimal point
                ElseIf field = "true" Then
                    .Value2 = True
                ElseIf field = "false" Then
                    .Value2 = False
                Else
                    .NumberFormat = "@"            ' text stays text (no date or number guess)
                    .Value2 = field
                End If
            End With
        Next c
    Next record
    sheet.Rows(1).Font.Bold = True
    With sheet.Cells(r + 2, 1)
        .NumberFormat = "@"
        .Value2 = "POST " & url & " (" & source.Address(False, False, , True) & ")"
    End With
    sheet.UsedRange.Columns.AutoFit
End Sub

Private Function FreeSheetName(ByVal book As Workbook, ByVal stem As String) As String
    Dim i As Long, sheet As Object, taken As Boolean, candidate As String
    For i = 1 To 999
        candidate = stem & " " & i
        taken = False
        For Each sheet In book.Sheets
            If StrComp(sheet.Name, candidate, vbTextCompare) = 0 Then taken = True
        Next sheet
        If Not taken Then
            FreeSheetName = candidate
            Exit Function
        End If
    Next i
    FreeSheetName = stem & " " & Format$(Now, "hhnnss")
End Function

' A plain decimal number as the service writes one: [-]digits[.digits][e[+-]digits].
Private Function IsPlainNumber(ByVal s As String) As Boolean
    Dim i As Long, ch As String, digits As Long, seenDot As Boolean, seenE As Boolean
    Dim expDigits As Long
    For i = 1 To Len(s)
        ch = Mid$(s, i, 1)
        If ch Like "[0-9]" Then
            If seenE Then expDigits = expDigits + 1 Else digits = digits + 1
        ElseIf ch = "-" Or ch = "+" Then
            ' a sign first, or right after the E (VBA does not short-circuit: no Mid$ at 0)
            If i > 1 Then
                If Not seenE Then Exit Function
                If UCase$(Mid$(s, i - 1, 1)) <> "E" Then Exit Function
            End If
        ElseIf ch = "." Then
            If seenDot Or seenE Then Exit Function
            seenDot = True
        ElseIf ch = "e" Or ch = "E" Then
            If seenE Or digits = 0 Then Exit Function
            seenE = True
        Else
            Exit Function
        End If
    Next i
    IsPlainNumber = digits > 0 And (Not seenE Or expDigits > 0)
End Function

' RFC 4180 records: a Collection of 1-based String arrays. Quoted fields may hold commas,
' doubled quotes and line breaks; records end with CRLF or LF.
Public Function ParseCsv(ByVal text As String) As Collection
    Dim records As New Collection, fields As Collection
    Dim i As Long, n As Long, ch As String, field As String, quoted As Boolean
    Dim started As Boolean

    Set fields = New Collection
    n = Len(text)
    i = 1
    Do While i <= n
        ch = Mid$(text, i, 1)
        If quoted Then
            If ch = """" Then
                If i < n And Mid$(text, i + 1, 1) = """" Then
                    field = field & """"
                    i = i + 1
                Else
                    quoted = False
                End If
            Else
                field = field & ch
            End If
        ElseIf ch = """" Then
            quoted = True
            started = True
        ElseIf ch = FIELD_SEPARATOR Then
            fields.Add field
            field = ""
            started = True
        ElseIf ch = vbCr Or ch = vbLf Then
            If ch = vbCr And i < n Then
                If Mid$(text, i + 1, 1) = vbLf Then i = i + 1
            End If
            fields.Add field
            records.Add ToArray(fields)
            Set fields = New Collection
            field = ""
            started = False
        Else
            field = field & ch
            started = True
        End If
        i = i + 1
    Loop
    If started Or Len(field) > 0 Or fields.Count > 0 Then
        fields.Add field
        records.Add ToArray(fields)
    End If
    Set ParseCsv = records
End Function

Private Function ToArray(ByVal items As Collection) As Variant
    Dim out() As String, i As Long
    ReDim out(1 To items.Count)
    For i = 1 To items.Count
        out(i) = items(i)
    Next i
    ToArray = out
End Function

' The message for a 4xx: title, detail and up to MAX_POINTED of the errors' pointers and
' messages, read from the problem document (application/problem+json).
Public Function ProblemMessage(ByVal status As Long, ByVal text As String) As String
    Dim problemTitle As String, detail As String, msg As String
    Dim pos As Long, objectStart As Long, afterPointer As Long, afterMessage As Long
    Dim pointer As String, message As String, shown As Long, found As Boolean

    problemTitle = JsonStringAfter(text, "title", 1, pos, found)
    detail = JsonStringAfter(text, "detail", 1, pos, found)
    If Len(problemTitle) = 0 And Len(detail) = 0 Then
        ProblemMessage = "linfer answered " & status & ":" & vbLf & Left$(text, 1000)
        Exit Function
    End If
    msg = "linfer answered " & status & " " & problemTitle & "." & vbLf & vbLf & detail
    ' Each entry of "errors" is an object {"pointer": ..., "message": ...}, keys in any
    ' order: both are looked for from the object's opening brace.
    pos = InStr(1, text, """errors""", vbBinaryCompare)
    Do While pos > 0 And shown < MAX_POINTED
        objectStart = InStr(pos, text, "{", vbBinaryCompare)
        If objectStart = 0 Then Exit Do
        pointer = JsonStringAfter(text, "pointer", objectStart, afterPointer, found)
        If Not found Then Exit Do
        message = JsonStringAfter(text, "message", objectStart, afterMessage, found)
        If Not found Then Exit Do
        If Len(pointer) = 0 Then pointer = "/"
        msg = msg & vbLf & "  at " & pointer & ": " & message
        shown = shown + 1
        If afterPointer > afterMessage Then pos = afterPointer Else pos = afterMessage
    Loop
    ProblemMessage = msg
End Function

' The JSON string value of the first "key" at or after position start; after is set to
' the position just past it, found to whether there was one. Escapes are decoded.
Private Function JsonStringAfter(ByVal text As String, ByVal key As String, _
                                 ByVal start As Long, ByRef after As Long, _
                                 ByRef found As Boolean) As String
    Dim i As Long, ch As String, out As String
    found = False
    i = InStr(start, text, """" & key & """", vbBinaryCompare)
    If i = 0 Then Exit Function
    i = i + Len(key) + 2
    Do While i <= Len(text) And (Mid$(text, i, 1) = " " Or Mid$(text, i, 1) = ":" _
                                 Or Mid$(text, i, 1) = vbTab Or Mid$(text, i, 1) = vbCr _
                                 Or Mid$(text, i, 1) = vbLf)
        i = i + 1
    Loop
    If Mid$(text, i, 1) <> """" Then       ' null or not a string: an empty value
        after = i
        found = True
        Exit Function
    End If
    i = i + 1
    Do While i <= Len(text)
        ch = Mid$(text, i, 1)
        If ch = """" Then Exit Do
        If ch = "\" Then
            i = i + 1
            ch = Mid$(text, i, 1)
            Select Case ch
                Case "n": out = out & vbLf
                Case "r": out = out & vbCr
                Case "t": out = out & vbTab
                Case "b": out = out & Chr$(8)
                Case "f": out = out & Chr$(12)
                Case "u"
                    out = out & ChrW$(CLng("&H" & Mid$(text, i + 1, 4)))
                    i = i + 4
                Case Else: out = out & ch   ' \" \\ \/
            End Select
        Else
            out = out & ch
        End If
        i = i + 1
    Loop
    after = i + 1
    found = True
    JsonStringAfter = out
End Function


' === small helpers ======================================================================

' InputBox that tells Cancel (False) from an empty answer.
Private Function Ask(ByVal prompt As String, ByVal suggestion As String, _
                     ByRef answer As String) As Boolean
    Dim reply As String
    reply = InputBox(prompt, TITLE, suggestion)
    If StrPtr(reply) = 0 Then
        Ask = False
    Else
        answer = reply
        Ask = True
    End If
End Function

Private Function DefaultBaseUrl() As String
    Dim value As Variant
    DefaultBaseUrl = LINFER_DEFAULT_URL
    On Error Resume Next
    value = ActiveWorkbook.Names(URL_NAME).RefersToRange.Value2
    If Err.Number = 0 And VarType(value) = vbString Then
        If Len(Trim$(value)) > 0 Then DefaultBaseUrl = Trim$(value)
    End If
    On Error GoTo 0
End Function

Private Function LastHeader(ByVal source As Range) As String
    Dim value As Variant
    value = source.Cells(1, source.Columns.Count).Value2
    If VarType(value) = vbString Then LastHeader = value
End Function
