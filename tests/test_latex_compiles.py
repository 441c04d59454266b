"""The LaTeX table export compiles in a standard document and fits its page.

The judge is a TeX engine (pdflatex from Debian's texlive-latex-base and
texlive-latex-recommended, which holds booktabs): the document must compile without an
error, and the log must report no line wider than the text (``Overfull \\hbox``) and no float
taller than the page.  Where no pdflatex is installed the compile tests skip, saying so (the
structure of the file is tested in test_export.py either way).
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from evaluation.export import TIDY_COLUMNS, write_table
from evaluation.metrics import METRICS

PDFLATEX = shutil.which("pdflatex")
needs_tex = pytest.mark.skipif(PDFLATEX is None, reason="no pdflatex (Debian: apt-get install texlive-latex-base texlive-latex-recommended)")

DOCUMENT = r"""\documentclass{article}
\usepackage[T1]{fontenc}
\usepackage{booktabs}
\begin{document}
\input{scores}
\end{document}
"""


def tidy_table(runs: list[str], references: list[str], *, seed: int = 3) -> pd.DataFrame:
    """Every metric of the registry for each run against each reference (values of a plausible size)."""
    rng = np.random.default_rng(seed)
    rows = []
    for reference in references:
        for run in runs:
            for metric, spec in METRICS.items():
                value = float(rng.normal(280.0, 5.0)) if metric in ("mean", "ref_mean") else float(rng.normal(0.0, 1.0))
                rows.append((run, reference, "tas", "", "global", "DJF", "1991-2020", metric, value, spec.units("K")))
    return pd.DataFrame(rows, columns=list(TIDY_COLUMNS))


def compile_table(tidy: pd.DataFrame, folder: Path) -> str:
    write_table(tidy, folder / "scores.tex", provenance={"variable": "tas", "notes": ["a % sign & an _ in a note"]})
    (folder / "doc.tex").write_text(DOCUMENT, encoding="utf-8")
    done = subprocess.run(
        [PDFLATEX, "-interaction=nonstopmode", "-halt-on-error", "doc.tex"], cwd=folder, capture_output=True, text=True, timeout=120
    )
    log = (folder / "doc.log").read_text(encoding="latin-1")
    assert done.returncode == 0, log[-3000:]
    assert (folder / "doc.pdf").stat().st_size > 0
    return log


@needs_tex
@pytest.mark.parametrize(
    ("runs", "references"),
    [
        (["larch-a", "larch-b"], ["obs-one"]),
        # names with LaTeX's special characters (Lamport, "LaTeX", 2nd ed., sec. 2.2.1), long names, two references
        (["run_1 & 50% #2", "a-rather-long-run-name-r1i1p1", "x$y^z~{w}\\v"], ["obs_one", "obs-two"]),
        # ten runs (the most the dashboard shows at once is not bounded; a report table of ten is common)
        ([f"run-{i:02d}" for i in range(10)], ["obs-one"]),
    ],
)
def test_the_latex_table_compiles_and_fits_the_page(tmp_path: Path, runs: list[str], references: list[str]) -> None:
    log = compile_table(tidy_table(runs, references), tmp_path)
    assert "Overfull \\hbox" not in log, [line for line in log.splitlines() if "Overfull" in line]
    assert "Float too large" not in log
    # a table too tall for one page goes out as several floats ("part 1 of 2"), a page at most each
    pages = int(re.search(r"Output written on doc\.pdf \((\d+) pages?", log).group(1))
    floats = (tmp_path / "scores.tex").read_text(encoding="utf-8").count("\\begin{table}")
    assert 1 <= pages <= floats


def test_the_blocks_hold_every_metric_once_in_order(tmp_path: Path) -> None:
    # structure, with or without a TeX engine: the metric columns of the blocks, read back in
    # order, are the registry's (the order the wide table shows them in)
    write_table(tidy_table(["a", "b"], ["obs"]), tmp_path / "scores.tex", provenance=None)
    lines = (tmp_path / "scores.tex").read_text(encoding="utf-8").splitlines()
    headers = [lines[i + 2] for i, line in enumerate(lines) if line.startswith("\\begin{tabular}")]
    metrics = [c.strip().replace("\\_", "_") for h in headers for c in h.removesuffix("\\\\").split("&")[1:]]
    assert metrics == list(METRICS)
    assert len(headers) > 1
