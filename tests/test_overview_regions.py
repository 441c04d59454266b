"""The overview by region of a collection on a regional grid, whose cells lie in some regions
and not in others (a run over Europe has no Antarctic cell).

The outside reference is analytic: the run is the reference plus 1 K in every cell, so its
bias is 1 K and its centred RMS difference 0 in every region that holds cells (common
practice: a uniform offset moves the mean and nothing else).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from cfdata import write_cf

from app.views.results import Results, overview_args
from evaluation.catalog import Collection

LAT, LON = np.arange(31.0, 70.0, 2.0), np.arange(-9.0, 30.0, 2.0)  # 30-70 N, 10 W-30 E


@pytest.fixture(autouse=True)
def _no_disk_cache(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("GRIDSCORE_CACHE", "off")


@pytest.fixture
def regional(tmp_path: Path) -> Results:
    for folder, offset in (("references/obs", 0.0), ("runs/eu", 1.0)):
        (tmp_path / folder).mkdir(parents=True)
        write_cf(tmp_path / folder / "tas.nc", lat=LAT, lon=LON, years=3, start_year=2001, offset=offset)
    results = Results(Collection.from_path(tmp_path))
    yield results
    results.close()


def _bias(table, region: str) -> float:
    rows = table[(table["region"] == region) & (table["metric"] == "bias") & (table["model"] == "eu")]
    return float(rows["value"].iloc[0]) if len(rows) else float("nan")


@pytest.mark.parametrize("global_first", [False, True])
def test_the_overview_by_region_holds_every_region_with_cells_whatever_was_asked_before(regional: Results, global_first: bool) -> None:
    args = overview_args("obs", "2001-2003", "global", "ANN", regional.target_grid, "region")
    if global_first:  # the score tab of the global region was opened before the overview
        scores = regional.scores("obs", "tas", "2001-2003", "global", "ANN", "", regional.target_grid)
        assert _bias(scores, "global") == pytest.approx(1.0, abs=1e-5)
    table = regional.overview(*args)
    # the regions that hold cells of 30-70 N: each with the bias of the uniform offset
    for region in ("global", "nh-extratropics", "land", "ocean"):
        assert _bias(table, region) == pytest.approx(1.0, abs=1e-5), (region, sorted(set(table["region"])))
    # the regions without a cell are left out, not filled
    assert not {"tropics", "sh-extratropics", "antarctic"} & set(table["region"])
