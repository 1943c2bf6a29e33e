"""Messy response files and codebooks as scale developers bring them, through upload and analysis.

Every file here is invented. Each either gives a dataset whose warnings say plainly what was done, or a 4xx
naming file, column, row and value; never a 500, and never a silently different number: the analysis of a
messy file must equal the analysis of the same answers written cleanly.
"""
from __future__ import annotations

import datetime
import io

import numpy as np
import openpyxl
import pytest

N = 40
ITEMS = [f"Q{i}" for i in range(1, 7)]


def _answers(seed: int = 7, lo: int = 1, hi: int = 5) -> np.ndarray:
    rng = np.random.default_rng(seed)
    f = rng.normal(size=N)
    mid = (lo + hi) / 2
    return np.clip(np.round(mid + f[:, None] + rng.normal(size=(N, len(ITEMS))) * 0.8), lo, hi).astype(int)


X = _answers()


def _csv(rows, sep=",", nl="\n") -> bytes:
    return nl.join(sep.join(str(x) for x in r) for r in rows).encode() + nl.encode()


CLEAN = _csv([["id", *ITEMS]] + [[i + 1, *X[i]] for i in range(N)])


def _xlsx(build) -> bytes:
    wb = openpyxl.Workbook()
    build(wb)
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


def _upload(client, raw, filename="pool.csv", codebook=None, **fields):
    files = {"file": (filename, raw, "application/octet-stream")}
    if codebook is not None:
        files["codebook"] = codebook
    return client.post("/api/datasets", files=files, data={k: str(v) for k, v in fields.items()})


def _ok(r) -> dict:
    assert r.status_code == 201, r.text
    return r.json()


def _error(r, code):
    assert 400 <= r.status_code < 500, r.text
    err = r.json()["error"]
    assert err["code"] == code, err
    return err


def _analysis(client, dataset_id, correlation):
    r = client.post(f"/api/datasets/{dataset_id}/analysis",
                    json={"correlation": correlation, "pa_iterations": 20, "seed": 1})
    assert r.status_code == 200, r.text
    return r.json()


@pytest.fixture
def clean(client):
    """The analysis of the same answers written as a plain CSV, per correlation type."""
    d = _ok(_upload(client, CLEAN, "clean.csv"))
    return {corr: _analysis(client, d["id"], corr) for corr in ("pearson", "polychoric")}


def _same_numbers(client, body, clean):
    """The messy file's analysis equals the clean file's (alpha and the correlation matrix)."""
    assert [it["name"] for it in body["items"]] == ITEMS and body["n_rows"] == N
    for corr in ("pearson", "polychoric"):
        got = _analysis(client, body["id"], corr)
        assert got["reliability"]["alpha"] == pytest.approx(clean[corr]["reliability"]["alpha"], abs=1e-12)
        assert np.allclose(got["correlations"]["matrix"], clean[corr]["correlations"]["matrix"], atol=1e-10)


def _qualtrics(nl="\n") -> bytes:
    def q(t: str) -> str:
        return '"' + t.replace('"', '""') + '"'

    rows = [["ResponseId", *ITEMS],
            [q("Response ID"), *(q(f"How much do you agree? - I feel part of group {j}") for j in range(6))],
            [q('{"ImportId":"_recordId"}'), *(q(f'{{"ImportId":"QID{j}"}}') for j in range(6))]]
    rows += [[f"R_{i:04d}", *X[i]] for i in range(N)]
    return _csv(rows, nl=nl)


@pytest.mark.parametrize("nl", ["\n", "\r\n", "\r"])
def test_survey_export_with_question_text_and_import_id_rows(client, clean, nl):
    body = _ok(_upload(client, _qualtrics(nl), "survey_export.csv"))
    assert body["id_column"] == "ResponseId"
    note = next(w for w in body["warnings"] if "extra header rows" in w)
    assert "Rows 2 and 3" in note and "'Q1'" in note
    assert body["items"][0]["text"] == "How much do you agree? - I feel part of group 0"
    _same_numbers(client, body, clean)


def test_one_row_of_labels_under_the_item_codes_and_codebook_text_wins(client, clean):
    raw = _csv([["id", *ITEMS], ["Respondent", *(f"Statement {j}" for j in range(6))]]
               + [[i + 1, *X[i]] for i in range(N)])
    cb = ("cb.csv", b"item,text,construct,reverse\nQ1,From the codebook,A,0\n", "text/csv")
    body = _ok(_upload(client, raw, codebook=cb))
    assert any("Row 2 of 'pool.csv'" in w and "extra header row" in w for w in body["warnings"])
    assert body["items"][0]["text"] == "From the codebook" and body["items"][1]["text"] == "Statement 1"


def test_a_single_text_answer_in_the_first_row_is_still_a_bad_cell(client):
    rows = [["id", *ITEMS]] + [[i + 1, *X[i]] for i in range(N)]
    rows[1][2] = "refused"
    err = _error(_upload(client, _csv(rows)), "non_numeric")
    assert (err["details"]["column"], err["details"]["row"], err["details"]["value"]) == ("Q2", 2, "refused")


def test_trailing_empty_columns_and_rows(client, clean):
    raw = _csv([["id", *ITEMS, "", ""]] + [[i + 1, *X[i], "", ""] for i in range(N)] + [[""] * 9] * 3)
    body = _ok(_upload(client, raw))
    assert any("'column 8' (empty); 'column 9' (empty)" in w for w in body["warnings"])
    assert any("3 rows with no item answers were dropped (file rows 42, 43, 44)" in w for w in body["warnings"])
    _same_numbers(client, body, clean)


def test_missing_written_as_na_na_dot_and_blank(client):
    cells = X.astype(object)
    marks = {(0, 0): "NA", (1, 1): "N/A", (2, 2): ".", (3, 3): "", (4, 4): "n/a"}
    for (i, j), v in marks.items():
        cells[i, j] = v
    body = _ok(_upload(client, _csv([["id", *ITEMS]] + [[i + 1, *cells[i]] for i in range(N)])))
    assert [it["n_missing"] for it in body["items"]] == [1, 1, 1, 1, 1, 0]
    for corr in ("pearson", "polychoric"):
        _analysis(client, body["id"], corr)


def test_a_dash_is_not_silently_missing(client):
    cells = X.astype(object)
    cells[5, 5] = "-"
    err = _error(_upload(client, _csv([["id", *ITEMS]] + [[i + 1, *cells[i]] for i in range(N)])), "non_numeric")
    assert (err["details"]["column"], err["details"]["row"], err["details"]["value"]) == ("Q6", 7, "-")


def test_answers_exported_as_labels_get_a_message_that_says_so(client):
    labels = {1: "Strongly disagree", 2: "Disagree", 3: "Neutral", 4: "Agree", 5: "Strongly agree"}
    raw = _csv([["id", *ITEMS]] + [[i + 1, *(labels[v] for v in X[i])] for i in range(N)])
    err = _error(_upload(client, raw, "labels.csv"), "too_few_items")
    assert "hold answer labels, not numbers" in err["message"] and "'Q1'" in err["message"]
    assert "'labels.csv'" in err["message"]


def test_answers_written_as_4_0(client, clean):
    raw = _csv([["id", *ITEMS]] + [[i + 1, *(f"{v}.0" for v in X[i])] for i in range(N)])
    _same_numbers(client, _ok(_upload(client, raw)), clean)


def test_semicolon_with_decimal_comma_and_crlf(client):
    rows = [["id", *ITEMS]] + [[i + 1, *(f"{v},5" if (j == 0 and v < 5) else v for j, v in enumerate(X[i]))]
                               for i in range(N)]
    body = _ok(_upload(client, _csv(rows, sep=";", nl="\r\n"), scale_min=1, scale_max=6))
    r = client.post(f"/api/datasets/{body['id']}/analysis", json={"pa_iterations": 20})
    assert r.status_code == 200
    means = {row["name"]: row["mean"] for row in r.json()["items"]}
    expected = np.where(X[:, 0] < 5, X[:, 0] + 0.5, X[:, 0]).mean()  # numpy on the same answers
    assert means["Q1"] == pytest.approx(expected, abs=1e-12) and means["Q2"] == pytest.approx(X[:, 1].mean())


def test_duplicated_respondent_ids_are_named(client):
    body = _ok(_upload(client, _csv([["id", *ITEMS]] + [[(i % 37) + 1, *X[i]] for i in range(N)])))
    note = next(w for w in body["warnings"] if "repeated value" in w)
    assert "3 repeated values: '1' (2 times), '2' (2 times), '3' (2 times)" in note
    assert body["n_rows"] == N


def test_a_total_score_column_is_not_taken_as_an_item(client, clean):
    raw = _csv([["id", *ITEMS, "Total"]] + [[i + 1, *X[i], int(X[i].sum())] for i in range(N)])
    body = _ok(_upload(client, raw))
    assert any("'Total' (named like a total or mean score" in w for w in body["warnings"])
    _same_numbers(client, body, clean)


def test_csv_with_a_title_line_above_the_header(client, clean):
    raw = b'"Belonging pilot, spring 2026 (invented)",,,,,,\n,,,,,,\n' + CLEAN
    body = _ok(_upload(client, raw))
    assert any("The first row of 'pool.csv' held a single cell (row 1: 'Belonging pilot, spring 2026 "
               "(invented)')" in w for w in body["warnings"])
    _same_numbers(client, body, clean)
    raw = _csv([["id", *ITEMS]] + [[i + 1, *X[i]] for i in range(N)])
    cells = raw.split(b"\n")
    bad = b"Survey export\n" + b"\n".join(cells[:5]) + b"\n4,1,2\n" + b"\n".join(cells[5:])
    err = _error(_upload(client, bad), "ragged_row")
    assert err["details"]["row"] == 7  # file rows still count the title line


def test_excel_with_title_row_dates_formulas_numeric_ids_and_two_sheets(client, clean):
    def build(wb):
        ws = wb.active
        ws.title = "Responses"
        ws.append(["Belonging pilot, spring 2026 (invented)"])
        ws.append([])
        ws.append(["ID", "Date", *ITEMS, "Total"])
        for i in range(N):
            r = 4 + i
            ws.append([1001 + i, datetime.date(2026, 3, 1) + datetime.timedelta(days=i),
                       *(int(v) for v in X[i]), f"=SUM(C{r}:H{r})"])
        ws.cell(row=N + 6, column=3).value = "   "  # a stray space typed below the data
        wb.create_sheet("Notes").append(["item", "text"])

    body = _ok(_upload(client, _xlsx(build), "pilot.xlsx"))
    w = " | ".join(body["warnings"])
    assert "only 'Responses' was read" in w
    assert "The first row of sheet 'Responses' held a single cell" in w
    assert "'Date' (dates)" in w and body["id_column"] == "ID"
    # openpyxl saves formulas without their results, as any script-written workbook does
    assert "'Total' (formulas whose results were never saved" in w
    _same_numbers(client, body, clean)


def test_excel_whose_first_sheet_is_a_read_me(client, clean):
    def build(wb):
        wb.active.title = "Read me"
        wb.active.append(["This workbook holds the pilot data."])
        ws = wb.create_sheet("Data")
        ws.append(["id", *ITEMS])
        for i in range(N):
            ws.append([i + 1, *(float(v) for v in X[i])])

    body = _ok(_upload(client, _xlsx(build), "pilot.xlsx"))
    assert any("only 'Data' was read (the sheet before it, 'Read me', holds no table)" in w
               for w in body["warnings"])
    _same_numbers(client, body, clean)


def test_excel_with_a_row_of_question_text(client, clean):
    def build(wb):
        ws = wb.active
        ws.append(["id", *ITEMS])
        ws.append(["Respondent", *(f"Statement {j}" for j in range(6))])
        for i in range(N):
            ws.append([i + 1, *(int(v) for v in X[i])])

    body = _ok(_upload(client, _xlsx(build), "pilot.xlsx"))
    assert body["items"][2]["text"] == "Statement 2"
    _same_numbers(client, body, clean)


def test_messy_codebook_names_keying_and_ranges(client):
    x = _answers(11)
    x[:, 0] -= 1  # Q1 answered 0-4
    x[:, 1] -= 1  # Q2 answered 0-4
    raw = _csv([["id", *ITEMS]] + [[i + 1, *x[i]] for i in range(N)])
    cb = ("\ufeffItem ,Text,Construct,Reverse,Min,Max\n"
          "Q1,a,A,0,0,4\n"
          "Q2 ,b,A,R,0,4\n"
          "q3,c,A,yes,1,7\n"
          " Q4,d,B,1,,\n"
          "\u200bQ5,e,B,no,1,7\n"
          "Q6,f,B,,1,7\n").encode("utf-8")
    body = _ok(_upload(client, raw, codebook=("codebook.csv", cb, "text/csv")))
    got = {it["name"]: (it["reverse"], it["min"], it["max"], it["range_source"]) for it in body["items"]}
    assert got == {"Q1": (False, 0, 4, "codebook"), "Q2": (True, 0, 4, "codebook"),
                   "Q3": (True, 1, 7, "codebook"), "Q4": (True, x[:, 3].min(), x[:, 3].max(), "observed"),
                   "Q5": (False, 1, 7, "codebook"), "Q6": (False, 1, 7, "codebook")}
    assert not any("not in the codebook" in w or "not in the file" in w for w in body["warnings"])
    assert any("No response range was given for 1 item" in w for w in body["warnings"])
    for corr in ("pearson", "polychoric"):
        _analysis(client, body["id"], corr)


def test_codebook_with_an_unknown_reverse_value_names_it(client):
    cb = ("cb.csv", b"item,text,construct,reverse\nQ1,a,A,maybe\n", "text/csv")
    err = _error(_upload(client, CLEAN, codebook=cb), "bad_codebook")
    assert err["details"] == {"file": "cb.csv", "column": "reverse", "row": 2, "value": "maybe"}


def test_binary_item_pool(client):
    rng = np.random.default_rng(3)
    b = (rng.normal(size=(N, 1)) + rng.normal(size=(N, 6)) > 0).astype(int)
    body = _ok(_upload(client, _csv([["id", *ITEMS]] + [[i + 1, *b[i]] for i in range(N)])))
    assert all((it["min"], it["max"]) == (0, 1) for it in body["items"])
    pear = _analysis(client, body["id"], "pearson")
    # Pearson on 0/1 items is the phi coefficient: numpy's corrcoef on the same answers.
    assert np.allclose(pear["correlations"]["matrix"], np.corrcoef(b, rowvar=False), atol=1e-10)
    _analysis(client, body["id"], "polychoric")


def test_an_upload_over_the_default_100_mb_is_413(client):
    """At the default limit, counted while reading (no Content-Length), without keeping it in memory."""
    boundary = "messyboundary"
    head = (f"--{boundary}\r\nContent-Disposition: form-data; name=\"file\"; filename=\"big.csv\"\r\n"
            "Content-Type: text/csv\r\n\r\n").encode()
    chunk = b"1,2,3,4,5,6\n" * 87382  # about 1 MB

    def body():
        yield head
        for _ in range(102):
            yield chunk
        yield f"\r\n--{boundary}--\r\n".encode()

    r = client.post("/api/datasets", content=body(),
                    headers={"content-type": f"multipart/form-data; boundary={boundary}"})
    err = _error(r, "too_large")
    assert r.status_code == 413 and "100 MB" in err["message"]


def test_file_coded_from_0_against_a_codebook_saying_1_to_5_is_called_out(client):
    raw = _csv([["id", *ITEMS]] + [[i + 1, *(X[i] - 1)] for i in range(N)])
    cb = ("cb.csv", b"item,text,construct,reverse,min,max\n"
          + b"".join(f"{it},t,A,0,1,5\n".encode() for it in ITEMS), "text/csv")
    body = _ok(_upload(client, raw, codebook=cb))
    note = next(w for w in body["warnings"] if "only after a shift" in w)
    assert "'Q1' (0-4 against 1-5)" in note and "from 0 instead of 1" in note
    zeros = int((X - 1 == 0).sum())
    assert any(f"{zeros} values outside the item's range were set to missing" in w for w in body["warnings"])


@pytest.mark.parametrize("keys, expected", [
    (["1", "1", "-1", "1", "1", "1"], [False, False, True, False, False, False]),  # +1/-1 keys
    (["+1", "+1", "-1", "+1", "+1", "+1"], [False, False, True, False, False, False]),
    (["0.0", "0.0", "1.0", "0.0", "0.0", "0.0"], [False, False, True, False, False, False]),  # Excel decimals
    (["", "", "R", "", "", ""], [False, False, True, False, False, False]),
    (["No", "no", "YES", "n", "False", "0"], [False, False, True, False, False, False]),
])
def test_codebook_keying_spellings(client, keys, expected):
    header = "item,text,construct,key" if "-1" in keys else "item,text,construct,reverse"
    cb = (header + "\n" + "".join(f"{it},t,A,{k}\n" for it, k in zip(ITEMS, keys))).encode()
    body = _ok(_upload(client, CLEAN, codebook=("cb.csv", cb, "text/csv")))
    assert [it["reverse"] for it in body["items"]] == expected


def test_a_numeric_code_column_is_not_an_item(client):
    raw = _csv([[*ITEMS, "Code"]] + [[*X[i], 5000 + 7 * i] for i in range(N)])
    body = _ok(_upload(client, raw))
    assert body["id_column"] == "Code" and any("'Code' was used as the respondent ID" in w for w in body["warnings"])
    assert [it["name"] for it in body["items"]] == ITEMS


def test_utf16_tab_separated_text_as_excel_saves_it(client, clean):
    raw = _csv([["id", *ITEMS]] + [[i + 1, *X[i]] for i in range(N)], sep="\t", nl="\r\n").decode()
    body = _ok(_upload(client, raw.encode("utf-16"), "pilot.txt"))
    _same_numbers(client, body, clean)


def test_codebook_with_spreadsheet_style_headers_semicolons_and_a_range_column(client):
    cb = ("Variable Name;Item wording;Subscale;Reverse scored (Y/N);Min value;Max value\n"
          + "".join(f"{it};Text of {it};{'A' if j < 3 else 'B'};{'Y' if it == 'Q2' else 'N'};1;{5 if j else 7}\n"
                    for j, it in enumerate(ITEMS))).encode()
    body = _ok(_upload(client, CLEAN, codebook=("codebook.csv", cb, "text/csv")))
    got = [(it["text"], it["construct"], it["reverse"], it["min"], it["max"]) for it in body["items"][:2]]
    assert got == [("Text of Q1", "A", False, 1, 7), ("Text of Q2", "A", True, 1, 5)]
    assert any("'Reverse scored (Y/N)' as reverse" in w for w in body["warnings"])
    cb = b"item,text,construct,reverse,range\n" + b"".join(
        f"{it},t,A,0,{'0 to 4' if it == 'Q1' else '1-5'}\n".encode() for it in ITEMS)
    body = _ok(_upload(client, CLEAN, codebook=("cb.csv", cb, "text/csv")))
    assert [(it["min"], it["max"], it["range_source"]) for it in body["items"][:2]] == [
        (0, 4, "codebook"), (1, 5, "codebook")]
    err = _error(_upload(client, CLEAN, codebook=("cb.csv", b"item,range\nQ1,five\n", "text/csv")), "bad_codebook")
    assert err["details"] == {"file": "cb.csv", "column": "range", "row": 2, "value": "five"}


def test_an_empty_codebook_file_is_refused_not_ignored(client):
    err = _error(_upload(client, CLEAN, codebook=("codebook.csv", b"", "text/csv")), "empty_file")
    assert err["details"] == {"file": "codebook.csv"} and "codebook 'codebook.csv' is empty" in err["message"]


def test_score_columns_by_suffix_and_mostly_missing_items(client):
    cells = X.astype(object)
    cells[: N - 5, 5] = ""  # Q6 answered by 5 respondents only
    raw = _csv([["id", *ITEMS, "BEL_mean", "scale total"]]
               + [[i + 1, *cells[i], round(X[i].mean(), 2), int(X[i].sum())] for i in range(N)])
    body = _ok(_upload(client, raw))
    assert [it["name"] for it in body["items"]] == ITEMS
    w = " | ".join(body["warnings"])
    assert "'BEL_mean' (named like a total or mean score" in w and "'scale total' (named like" in w
    assert f"missing for more than half of the respondents: 'Q6' ({N - 5} of {N})" in w
    for corr in ("pearson", "polychoric"):
        _analysis(client, body["id"], corr)


def test_spss_and_excel_missing_marks_and_numbers_stored_as_text(client):
    def build(wb):
        ws = wb.active
        ws.append(["id", *ITEMS])
        for i in range(N):
            row = [i + 1, *(int(v) for v in X[i])]
            if i == 0:
                row[1] = "."  # SAS/SPSS system-missing
            if i == 1:
                row[2] = "#NULL!"  # SPSS system-missing saved to Excel
            if i == 2:
                row[3] = f" {X[i][2]} "  # a number stored as text
            if i == 3:
                row[5] = "#N/A"
            ws.append(row)

    body = _ok(_upload(client, _xlsx(build), "spss.xlsx"))
    assert [it["n_missing"] for it in body["items"]] == [1, 1, 0, 0, 1, 0]
    cells = X.astype(object)
    cells[1, 1] = "#NULL!"
    body = _ok(_upload(client, _csv([["id", *ITEMS]] + [[i + 1, *cells[i]] for i in range(N)])))
    assert [it["n_missing"] for it in body["items"]] == [0, 1, 0, 0, 0, 0]


def test_text_answers_inside_numeric_items_are_named_with_advice_that_works(client):
    cells = X.astype(object)
    cells[4, 2] = "Don't know"
    err = _error(_upload(client, _csv([["id", *ITEMS]] + [[i + 1, *cells[i]] for i in range(N)])), "non_numeric")
    assert "column 'Q3', row 6: 'Don't know'" in err["message"] and "recode these as numbers" in err["message"]
    assert err["details"]["counts"] == {"Q3": 1}


def test_qualtrics_system_fields_are_not_items(client, clean):
    head = ["StartDate", "Status", "Progress", "Duration (in seconds)", "Finished", "ResponseId",
            "Q_RecaptchaScore", "Q_RelevantIDFraudScore"]
    rows = [[*head, *ITEMS]] + [["2026-03-01 10:00:00", 0, 100, 300 + i, 1, f"R_{i}", 0.9, i % 3, *X[i]]
                                for i in range(N)]
    body = _ok(_upload(client, _csv(rows)))
    assert body["id_column"] == "ResponseId"
    _same_numbers(client, body, clean)


def test_surveymonkey_style_merged_question_header(client, clean):
    statements = [f"I feel part of group {j}" for j in range(6)]
    rows = [["Respondent ID", "Collector ID", "Start Date", '"How much do you agree with each statement?"',
             "", "", "", "", ""], ["", "", "", *statements]]
    rows += [[11400000 + 13 * i, 4000, "03/01/2026 10:00:00", *X[i]] for i in range(N)]
    body = _ok(_upload(client, _csv(rows), "monkey.csv"))
    assert [it["name"] for it in body["items"]] == statements and body["id_column"] == "Respondent ID"
    note = next(w for w in body["warnings"] if "merged" in w)
    assert note.startswith("6 columns under a shared (merged) question header took their names from row 2: "
                           "'How much do you agree with each statement?' -> 'I feel part of group 0'; "
                           "'column 5' -> 'I feel part of group 1'")
    for corr in ("pearson", "polychoric"):
        got = _analysis(client, body["id"], corr)
        assert got["reliability"]["alpha"] == pytest.approx(clean[corr]["reliability"]["alpha"], abs=1e-12)


def test_a_single_named_header_cell_above_answers_is_the_header_not_a_title(client):
    """'id' alone on row 1 with unnamed item columns: row 2 holds answers, so row 1 stays the header."""
    raw = _csv([["id", "", "", "", "", "", ""]] + [[i + 1, *X[i]] for i in range(N)])
    body = _ok(_upload(client, raw))
    assert body["n_rows"] == N and [it["name"] for it in body["items"]] == [f"column {j}" for j in range(2, 8)]
    assert not any("title" in w for w in body["warnings"])

    def build(wb):
        wb.active.append(["id"])
        for i in range(N):
            wb.active.append([i + 1, *(int(v) for v in X[i])])

    body = _ok(_upload(client, _xlsx(build), "unnamed.xlsx"))
    assert body["n_rows"] == N and len(body["items"]) == 6
