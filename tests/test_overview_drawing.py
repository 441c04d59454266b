"""The overview's Bokeh models (what the page draws), read without a browser: every dot sits
at the run's relative error, its hover columns name the run, and names from files are drawn
as written."""

from __future__ import annotations

import numpy as np
import pandas as pd
from bokeh.models import PlainText, Scatter, Text

from app.views.overview import bokeh_overview, overview_table
from evaluation.export import TIDY_COLUMNS

RUNS = ["alder-1", "<b>bramble</b>", "cove $$x^2$$"]
#: one variable named with TeX delimiters (a name from a file), as Bokeh would typeset it
VARIABLES = ["tas", "pr", "odd $$\\int$$"]


def _tidy() -> pd.DataFrame:
    rng = np.random.default_rng(3)
    rows = [(run, "obs-a", variable, "", "global", "ANN", "1991-2020", "rmse", float(rng.uniform(0.5, 2.0)), "K")
            for variable in VARIABLES for run in RUNS]
    return pd.DataFrame(rows, columns=list(TIDY_COLUMNS))


def test_each_dot_is_the_runs_rmse_relative_to_the_median_and_names_are_drawn_as_written() -> None:
    tidy = _tidy()
    table = overview_table(tidy, None, "variable")
    plots = list(bokeh_overview(table, "variable").children)
    assert len(plots) == 1 + len(VARIABLES)  # the run names' panel, then one panel per variable
    names = [t for r in plots[0].renderers if isinstance(r.glyph, Text) for t in r.data_source.data["text"]]
    # the ranked names hold every run's name as written (broken over two lines where long)
    assert sorted(" ".join(n.split(". ", 1)[1].split("\n")) for n in names) == sorted(RUNS)
    for plot in plots[1:]:
        title = plot.title.text
        label = title.text if isinstance(title, PlainText) else title
        assert label in VARIABLES
        # a name holding TeX delimiters is plain text for Bokeh (it typesets a string holding them)
        assert isinstance(title, PlainText) == ("$$" in label)
        values = tidy[(tidy["variable"] == label)].set_index("model")["value"]
        median = float(np.median(values.to_numpy()))  # Gleckler et al. 2008: relative to the median RMSE of the runs
        dots = [r.data_source.data for r in plot.renderers if isinstance(r.glyph, Scatter)]
        drawn = {m: x for d in dots for m, x in zip(d["model"], d["shown"], strict=True)}
        assert set(drawn) == set(RUNS)
        cap = plot.x_range.end / 1.12  # the axis reaches 1.12 times the cap; values beyond the cap are drawn at it
        for run, x in drawn.items():
            expected = (values[run] - median) / median
            assert abs(x - np.clip(expected, -cap, cap)) < 1e-12
        texts = {m: t for d in dots for m, t in zip(d["model"], d["rel_text"], strict=True)}
        assert all(float(texts[run]) == round((values[run] - median) / median, 2) for run in RUNS)
