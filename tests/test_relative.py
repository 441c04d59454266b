"""Relative errors across the runs shown, against the formula of Gleckler et al. (2008).

Gleckler, Taylor and Doutriaux (2008), J. Geophys. Res. 113, D06104: the
relative error of model m is (E_m − Ē)/Ē with Ē the median of the models' errors E.
Every expected value below is that formula evaluated by hand with numpy.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from evaluation.relative import relative_error_table, run_order, with_relative_errors

COLUMNS = ["model", "reference", "variable", "level", "region", "season", "period", "metric", "value", "units"]


def _tidy(rmse: dict[tuple[str, str], float], *, season: str = "ANN") -> pd.DataFrame:
    """rmse and rel_error rows (rel_error deliberately wrong, 99) for (run, variable) -> RMSE."""
    rows = []
    for (run, variable), value in rmse.items():
        for metric, v in (("rmse", value), ("rel_error", 99.0)):
            rows.append((run, "obs-x", variable, "", "global", season, "1991-2020", metric, v, "K" if metric == "rmse" else "1"))
    return pd.DataFrame(rows, columns=COLUMNS)


RMSE = {("r1", "tas"): 1.0, ("r2", "tas"): 2.0, ("r3", "tas"): 4.0, ("r4", "tas"): 3.0, ("r1", "pr"): 0.5, ("r2", "pr"): 0.25, ("r3", "pr"): np.nan}


def test_values_follow_gleckler_2008() -> None:
    table = relative_error_table(_tidy(RMSE)).set_index(["variable", "model"])
    e = np.array([1.0, 2.0, 4.0, 3.0])
    median = np.median(e)  # Gleckler et al. 2008: the median over the models
    for run, value in zip(["r1", "r2", "r3", "r4"], e, strict=True):
        assert table.loc[("tas", run), "rel_error"] == pytest.approx((value - median) / median, rel=1e-12)
        assert table.loc[("tas", run), "median_rmse"] == pytest.approx(2.5, rel=1e-12)  # median of 1,2,3,4 by hand
        assert table.loc[("tas", run), "runs"] == 4
    # a missing RMSE is left out of the median and of the count, and stays missing
    assert table.loc[("pr", "r1"), "rel_error"] == pytest.approx((0.5 - 0.375) / 0.375, rel=1e-12)
    assert table.loc[("pr", "r1"), "runs"] == 2
    assert np.isnan(table.loc[("pr", "r3"), "rel_error"]) and np.isnan(table.loc[("pr", "r3"), "rank"])
    # rank 1 is the smallest error (common practice)
    assert list(table.loc["tas"].sort_values("rank").index) == ["r1", "r2", "r4", "r3"]


def test_median_is_over_the_runs_shown_only() -> None:
    shown = ["r1", "r2", "r3"]
    table = relative_error_table(_tidy(RMSE), shown).set_index(["variable", "model"])
    median = np.median([1.0, 2.0, 4.0])  # r4 is not shown: not in the median (Gleckler et al. 2008, over these runs)
    assert set(table.loc["tas"].index) == set(shown)
    assert table.loc[("tas", "r3"), "rel_error"] == pytest.approx((4.0 - median) / median, rel=1e-12)
    assert table.loc[("tas", "r3"), "runs"] == 3


def test_tidy_rel_error_rows_rewritten_for_the_runs_shown() -> None:
    tidy = _tidy(RMSE)
    # an alternative reference scored as if it were a run: relative to the runs' median, not in it
    tidy = pd.concat([tidy, pd.DataFrame([("obs-y", "obs-x", "tas", "", "global", "ANN", "1991-2020", "rmse", 0.5, "K"),
                                          ("obs-y", "obs-x", "tas", "", "global", "ANN", "1991-2020", "rel_error", 99.0, "1")],
                                         columns=COLUMNS)], ignore_index=True)
    out = with_relative_errors(tidy, ["r1", "r2"])
    rel = out[out["metric"] == "rel_error"].set_index(["variable", "model"])["value"]
    median = np.median([1.0, 2.0])
    assert rel[("tas", "r1")] == pytest.approx((1.0 - median) / median, rel=1e-12)
    assert rel[("tas", "r2")] == pytest.approx((2.0 - median) / median, rel=1e-12)
    assert rel[("tas", "obs-y")] == pytest.approx((0.5 - median) / median, rel=1e-12)
    assert rel[("pr", "r2")] == pytest.approx((0.25 - 0.375) / 0.375, rel=1e-12)
    assert np.isnan(rel[("pr", "r3")])
    # other metrics are untouched
    assert (out[out["metric"] == "rmse"]["value"].fillna(-1).to_numpy() == tidy[tidy["metric"] == "rmse"]["value"].fillna(-1).to_numpy()).all()


def test_relative_errors_agree_with_the_score_table() -> None:
    """The core's own rel_error rows (all runs of a request) equal the table computed here."""
    from evaluation.metrics import relative_errors

    values = {"a": 1.5, "b": 0.7, "c": 2.2}
    core = relative_errors(values)
    table = relative_error_table(_tidy({(k, "tas"): v for k, v in values.items()})).set_index("model")
    median = np.median(list(values.values()))  # Gleckler et al. 2008
    for k, v in values.items():
        assert core[k] == pytest.approx((v - median) / median, rel=1e-12)
        assert table.loc[k, "rel_error"] == pytest.approx(core[k], rel=1e-12)


def test_runs_ordered_by_their_median_relative_error() -> None:
    table = relative_error_table(_tidy(RMSE))
    # by hand: r1 tas -0.6, pr +1/3 -> median -0.1333; r2 tas -0.2, pr -1/3 -> -0.2667;
    # r3 tas +0.6 (pr missing) -> 0.6; r4 tas +0.2 -> 0.2
    assert run_order(table) == ["r2", "r1", "r4", "r3"]


def test_runs_shown_from_a_larger_comparison_equal_a_request_of_those_runs(tmp_path) -> None:
    """The dashboard scores every run of the collection at once and then takes the median over
    the runs ticked; the command line scores only the runs it is given.  Both give the same
    relative errors, and those follow the formula by hand (Gleckler et al. 2008)."""
    from cfdata import write_cf

    from evaluation.scoring import Comparison, Source

    def field(seed):
        return lambda lat, lon, year, month: 280.0 + 20.0 * np.cos(np.deg2rad(lat)) + seed * np.sin(np.deg2rad(lon)) + 0.1 * month

    common = dict(dlat=10.0, start_year=2000, years=3, dtype="float64")
    ref = write_cf(tmp_path / "ref.nc", field=field(0.0), **common)
    runs = {name: write_cf(tmp_path / f"{name}.nc", field=field(seed), offset=offset, **common)
            for name, seed, offset in (("a", 1.0, 0.5), ("b", 2.0, -0.2), ("c", 3.0, 1.5), ("d", 0.5, 0.9))}

    def scores(names):
        cmp = Comparison(reference=Source(name="ref", role="reference", paths=[str(ref)]),
                         models=[Source(name=n, role="model", paths=[str(runs[n])]) for n in names], variable="tas")
        return cmp.scores(regions=["global"], seasons=["ANN"])

    every = scores(["a", "b", "c", "d"])
    shown = ["a", "c", "d"]
    dashboard = with_relative_errors(every, shown)
    request = scores(shown)
    pick = lambda t: t[(t["metric"] == "rel_error") & t["model"].isin(shown)].set_index("model")["value"].sort_index()  # noqa: E731
    np.testing.assert_allclose(pick(dashboard).to_numpy(), pick(request).to_numpy(), rtol=1e-12)
    rmse = request[request["metric"] == "rmse"].set_index("model")["value"].sort_index()
    median = np.median(rmse.to_numpy())  # Gleckler et al. 2008: the median over the runs compared
    np.testing.assert_allclose(pick(request).to_numpy(), (rmse.to_numpy() - median) / median, rtol=1e-12)
