"""Exported tables are safe where people open them: spreadsheets and Markdown/LaTeX/HTML
viewers.

CSV: text cells beginning with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return get
a leading single quote (OWASP, "CSV Injection"); numbers stay numbers.  XLSX: no cell is
stored as a formula (openpyxl reads the cell type back).  Markdown: HTML in names is
escaped (CommonMark passes raw HTML through).  LaTeX: names are escaped and no line break
escapes a comment.
"""

from __future__ import annotations

import io

import numpy as np
import openpyxl
import pandas as pd
import pytest
from markdown_it import MarkdownIt

from evaluation.export import TIDY_COLUMNS, csv_bytes, table_bytes

from .hostile import FOLDER_IMG, FORMULA, MANIFEST_SCRIPT

NAMES = [FORMULA, "+SUM(A1:A9)", "-2+3", "@SUM(1)", "\tTAB", "\rCR", "=1+1", MANIFEST_SCRIPT, FOLDER_IMG, "plain"]


def _tidy(names: list[str]) -> pd.DataFrame:
    rows = []
    for i, name in enumerate(names):
        for metric, value in (("bias", -1.5 - i), ("rmse", 2.25 + i)):
            rows.append({"model": name, "reference": "=ref", "variable": "tas", "level": "", "region": "global",
                         "season": "ANN", "period": "2001-2002", "metric": metric, "value": value, "units": "K"})
    return pd.DataFrame(rows, columns=list(TIDY_COLUMNS))


def test_csv_cells_are_not_formulas_and_numbers_stay_numbers() -> None:
    tidy = _tidy(NAMES)
    back = pd.read_csv(io.BytesIO(table_bytes(tidy, "csv", provenance=None)), keep_default_na=False)
    for text in back.select_dtypes(exclude="number").to_numpy().ravel():
        assert not str(text).startswith(("=", "+", "-", "@", "\t", "\r")), text
    assert back["value"].dtype == np.float64
    np.testing.assert_array_equal(back["value"].to_numpy(), tidy["value"].to_numpy())  # -1.5 stays -1.5
    # a leading CR is written as a line feed (quoted by the CSV writer), which no
    # spreadsheet reads as a formula; the other formula signs get the quote
    expected = {("'" + n if n[0] in "=+-@\t" else n) for n in NAMES if n != "\rCR"} | {"\nCR"}
    assert set(back["model"]) == expected
    assert set(back["reference"]) == {"'=ref"}


def test_csv_of_any_frame_keeps_numbers() -> None:
    frame = pd.DataFrame({"model": ["-x", "y"], "value": [-1.5, float("nan")], "count": [-3, 4]})
    text = csv_bytes(frame).decode()
    assert text.splitlines() == ["model,value,count", "'-x,-1.5,-3", "y,,4"]


def test_xlsx_has_no_formula_cells() -> None:
    book = openpyxl.load_workbook(io.BytesIO(table_bytes(_tidy(NAMES), "xlsx", provenance={"note": "=1+1"})))
    for sheet in book.worksheets:
        for row in sheet.iter_rows():
            for cell in row:
                assert cell.data_type != "f", (sheet.title, cell.coordinate, cell.value)


def test_markdown_escapes_html_in_names() -> None:
    text = table_bytes(_tidy(NAMES), "md", provenance={"variable": "<b>tas</b>", "period": "2001-2002"}).decode()
    rendered = MarkdownIt("commonmark").enable("table").render(text)
    assert "<script" not in rendered and "<img" not in rendered and "<b>" not in rendered
    assert "&lt;script&gt;alert(78)&lt;/script&gt;" in rendered


@pytest.mark.parametrize("name", ["a\n\\end{tabular}\\input{/etc/passwd}", "50% & $x$ _y_ #1 {z} ~ ^"])
def test_latex_names_are_escaped(name: str) -> None:
    text = table_bytes(_tidy([name]), "tex", provenance={"variable": name}).decode()
    for line in text.splitlines():
        # every line is a comment or part of the tabular; no bare command from a name
        assert "\\input" not in line or line.startswith("%"), line
    # the table ends the document (inside a table float, when there is one): nothing a name
    # brought in follows it
    assert text.rstrip().endswith(("\\end{tabular}", "\\end{tabular}\n\\end{table}"))
    assert text.count("\\end{tabular}") == 1 + sum(1 for line in text.splitlines() if line.startswith("%") and "\\end{tabular}" in line)


def test_html_escapes_names() -> None:
    text = table_bytes(_tidy(NAMES), "html", provenance={"variable": MANIFEST_SCRIPT}).decode()
    assert "<script>alert" not in text and "<img src=x" not in text


# Names pdflatex cannot set (Greek, CJK, emoji) and an ensemble's rows with hostile names: the
# judge is pdflatex itself (tests/test_latex_compiles.py: a standard document, no error).
# Latin Extended-A: pdflatex sets Ł ó ź but not Ħ ĸ Ŀ ŉ ŧ ſ (the judge is pdflatex)
UNICODE_NAMES = ["\u03a9-run", "\u6a21\u578b-A", "run \U0001f600", "\u0126al-\u0141\u00f3d\u017a-\u0138\u013f\u0149\u0167\u017f",
                 f"{FOLDER_IMG} (ensemble mean)", "e {x} (members' min)",
                 "\\input{/etc/hostname} #1 ~ ^ % & $ _", "=cmd (members' std)", "x" * 120]


def test_latex_with_names_pdflatex_cannot_set_compiles(tmp_path) -> None:
    from test_latex_compiles import PDFLATEX, compile_table, tidy_table

    table = tidy_table(UNICODE_NAMES, ["ref {r}"])
    text = table_bytes(table, "tex", provenance=None).decode()
    assert "\\gsglyph{03A9}{\u03a9}" in text and "\\gsglyph{1F600}{\U0001f600}" in text
    if PDFLATEX is None:
        pytest.skip("no pdflatex (Debian: apt-get install texlive-latex-base texlive-latex-recommended)")
    compile_table(table, tmp_path)  # asserts pdflatex ends without an error and writes the PDF
