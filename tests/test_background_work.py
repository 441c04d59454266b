"""The server's background work (Results.warm) and the scores it shares between views.

The reference for every check is the computation without any sharing: a fresh comparison's
own ``scores`` for exactly the region and season asked (common practice: a cache answers
what the uncached call answers, bit for bit), and the relative error of Gleckler et al.
(2008), ``(E - median E) / median E``, recomputed with numpy from the RMSE rows.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from app.opening import open_collection
from app.views.results import OVERVIEW_FORMS, Results, overview_args
from evaluation.catalog import Collection


@pytest.fixture(scope="module")
def tiny(tmp_path_factory: pytest.TempPathFactory) -> Path:
    from evaluation.demo import write_demo

    return Path(write_demo(tmp_path_factory.mktemp("tiny") / "collection", size="tiny"))


@pytest.fixture(autouse=True)
def _no_disk_cache(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("GRIDSCORE_CACHE", "off")


def _fresh_scores(manifest: Path, variable: str, region: str, season: str, period: str | None = None) -> pd.DataFrame:
    other = Results(Collection.from_path(manifest))
    try:
        cmp = other.comparison(other.references(variable)[0], variable, period)
        return cmp.scores(regions=[region], seasons=[season])
    finally:
        other.close()


def test_a_region_scored_with_others_equals_it_scored_alone(tiny: Path) -> None:
    results = Results(Collection.from_path(tiny))
    try:
        variable = results.variables()[0]
        reference = results.references(variable)[0]
        cmp = results.comparison(reference, variable)
        together = results._scores_of(cmp, ["global", "land", "tropics"], ["ANN", "DJF"])
        assert set(together["region"]) == {"global", "land", "tropics"} and set(together["season"]) == {"ANN", "DJF"}
        for region, season in [("land", "DJF"), ("global", "ANN")]:
            shared = results.scores(reference, variable, str(cmp.period), region, season)
            pd.testing.assert_frame_equal(shared, _fresh_scores(tiny, variable, region, season).reset_index(drop=True))
    finally:
        results.close()


def test_background_scores_every_form_of_the_first_overview(tiny: Path) -> None:
    results = open_collection(tiny).result(timeout=300)
    try:
        results.warm(overview=True).result(timeout=600)
        assert results.background == ""  # said while it runs, empty once done
        from app.state import Selection

        selection = Selection(results)
        span, default = results.period_info(*selection.span_key)
        selection.settle(span, default)
        request = selection.request
        for by in OVERVIEW_FORMS:
            args = overview_args(request.reference, request.period, request.region, request.season, request.target_grid, by)
            assert ("overview",) + args in results.products and ("overview_ties",) + args in results.products
        # the first form: every variable's relative errors, against a fresh computation
        args = overview_args(request.reference, request.period, request.region, request.season, request.target_grid, "variable")
        table = results.products.get(("overview",) + args)
        for variable in results.variables():
            mine = table[(table["variable"] == variable) & (table["metric"] == "rmse")]
            if mine.empty:
                continue
            fresh = _fresh_scores(tiny, variable, request.region, request.season, str(mine["period"].iloc[0]))
            fresh = fresh[(fresh["metric"] == "rmse") & (fresh["reference"] == mine["reference"].iloc[0]) & fresh["model"].isin(mine["model"])]
            pd.testing.assert_frame_equal(mine.reset_index(drop=True), fresh.reset_index(drop=True))
            rel = table[(table["variable"] == variable) & (table["metric"] == "rel_error")].set_index("model")["value"]
            rmse = mine.set_index("model")["value"]
            runs = [m for m in rmse.index if m in {s.name for s in results.collection.models}]
            median = np.median(rmse[runs].to_numpy())
            np.testing.assert_allclose(rel[runs].to_numpy(), (rmse[runs].to_numpy() - median) / median, rtol=1e-12)
    finally:
        results.close()


def test_a_second_warm_returns_the_running_one(tiny: Path) -> None:
    results = Results(Collection.from_path(tiny))
    try:
        first = results.warm()
        assert results.warm() is first
        first.result(timeout=300)
    finally:
        results.close()


def test_the_error_of_a_stopped_thread_pool_is_told_from_a_failure() -> None:
    # The standard library's own error (Python docs, concurrent.futures: submit after
    # shutdown raises RuntimeError), as a background step meets it when the server stops.
    from concurrent.futures import ThreadPoolExecutor

    from app.views.results import stopping

    pool = ThreadPoolExecutor(max_workers=1)
    pool.shutdown()
    with pytest.raises(RuntimeError) as raised:
        pool.submit(print)
    assert stopping(raised.value)
    assert not stopping(RuntimeError("dictionary changed size during iteration"))
    assert not stopping(ValueError("cannot schedule new futures after shutdown"))
