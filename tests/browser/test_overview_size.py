"""The overview stays readable at 10 runs × 10 variables × 5 seasons (and × 8 regions).

The served collection is the sample, but the overview's scores come from a double of
:class:`app.views.results.Results` that returns invented RMSEs for ten invented runs and
ten variables, for whatever regions and seasons the page asks for: the page draws them
through the same code as real scores.  Labels are painted on canvases; their screen boxes
come from Bokeh's glyph views and the browser's ``measureText`` (see ``overview_page``).
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from evaluation.export import TIDY_COLUMNS

from .conftest import open_dashboard, serving, wait_for_view
from .overview_page import overlaps, overview_plots, showing

pytestmark = pytest.mark.browser

RUNS = ["aster-1", "birch-lo", "cinder-x", "dune-2", "ember-hr", "fjord-3", "gale-ctl", "heath-4", "islet-a", "juniper (ensemble mean)"]
VARIABLES = ["tas", "pr", "psl", "rlut", "rsut", "clt", "hurs", "uas", "vas", "ts"]


def invented_scores(regions: tuple[str, ...], seasons: tuple[str, ...]) -> pd.DataFrame:
    """RMSE rows for RUNS × VARIABLES × regions × seasons; one run lacks two variables."""
    rng = np.random.default_rng(12)
    rows = []
    for variable in VARIABLES:
        for run_index, run in enumerate(RUNS):
            if run == "dune-2" and variable in ("hurs", "clt"):
                continue
            for region in regions:
                for season in seasons:
                    value = (1.0 + 0.1 * run_index) * rng.uniform(0.7, 1.3) * (3.0 if run == "heath-4" else 1.0)
                    rows.append((run, "obs-a", variable, "", region, season, "1991-2020", "rmse", value, "K"))
    return pd.DataFrame(rows, columns=list(TIDY_COLUMNS))


@pytest.fixture(scope="module")
def served_ten(sample_manifest: Path) -> Iterator[str]:
    from app.views.results import Results
    from evaluation.catalog import Collection

    class TenRuns(Results):
        def overview(self, reference, period, regions, seasons, target_grid=""):
            return invented_scores(tuple(regions), tuple(seasons))

        def overview_ties(self, reference, period, regions, seasons, target_grid=""):
            return pd.DataFrame(columns=["model", "variable", "level", "region", "season"])

    results = TenRuns(Collection.from_path(sample_manifest))
    with serving(results) as url:
        yield url
    results.close()


@pytest.mark.parametrize("by, parts", [("season", 5), ("region", 8)])
def test_no_label_overlaps_another_at_ten_by_ten(browser, served_ten, by: str, parts: int) -> None:
    session = open_dashboard(browser, f"{served_ten}/?tab=overview&overview_by={by}")
    page = session.page
    try:
        wait_for_view(page, "overview")
        plots = overview_plots(page)
        variables = [p for p in plots if p["title"] in VARIABLES]
        assert sorted(p["title"] for p in variables) == sorted(VARIABLES)
        texts = [(p["title"], t) for p in plots for t in p["texts"]]
        names = [t["text"] for _, t in texts if t["text"][:1].isdigit()]
        assert len(names) == len(RUNS)  # every run ranked once
        assert sum(1 for _, t in texts if not t["text"][:1].isdigit() and t["text"] not in ("n/a",)) >= len(RUNS) * parts
        # no two labels of the page cover the same pixels
        boxes = [t["box"] for _, t in texts]
        clashes = [(a["text"], b["text"]) for i, (_, a) in enumerate(texts) for _, b in texts[i + 1:] if overlaps(a["box"], b["box"])]
        assert clashes == [], clashes[:5]
        # every label lies inside its own plot's canvas (nothing cut off)
        for plot in plots:
            for t in plot["texts"]:
                assert plot["canvas"][0] - 0.5 <= t["box"][0] and t["box"][2] <= plot["canvas"][2] + 0.5, (plot["title"], t)
        # the panels do not overlap one another and all fit in the window's width
        frames = [p["frame"] for p in plots]
        assert not any(overlaps(a, b) for i, a in enumerate(frames) for b in frames[i + 1:])
        assert max(f[2] for f in frames) <= page.viewport_size["width"]
        assert len(boxes) > 0 and session.errors() == []
        text = showing(page)
        assert f"{len(RUNS)} runs × {len(VARIABLES)} variables" in text
        assert f"median over the {len(RUNS)} runs shown" in text and "hurs 9" in text
    finally:
        session.close()
