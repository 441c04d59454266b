"""Several references at once and the observational-uncertainty rule.

Real NetCDF files on disk (tests/cfdata.py), real dask.  The expectations come from
outside the multi-reference code: the same request made with one reference at a time, the
linearity of the area-weighted mean, the triangle (Minkowski) inequality of the weighted
L2 norm, numpy's median for the Gleckler et al. (2008) relative error, and hand-made cases
of the rule worked out on paper.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from cfdata import write_cf

from evaluation.metrics import METRICS
from evaluation.scoring import Comparison, Source
from evaluation.uncertainty import (
    RULE,
    reference_range,
    run_pairs,
    tied_with,
    within_observational_uncertainty,
)

PERIOD = "1996-2003"
REGIONS = ["global", "tropics"]
SEASONS = ["ANN", "JJA"]
KEY = ["model", "reference", "variable", "level", "region", "season", "period", "metric"]


def field(seed: float, *, polar: float = 0.0):
    """Temperature-like field with year-to-year noise; ``polar`` K added poleward of 60°."""

    def f(lat, lon, year, month):
        phi, lam = np.deg2rad(lat), np.deg2rad(lon)
        return (
            255.0
            + 30.0 * np.cos(phi) ** 2
            + 2.0 * np.sin(2 * lam + seed) * np.cos(phi)
            - 10.0 * np.sin(phi) * np.cos(2 * np.pi * (month - 1) / 12.0)
            + (0.02 + 0.01 * seed) * (year - 2000)
            + 0.4 * np.sin(12.9898 * year + seed)
            + polar * (np.abs(lat) > 60.0)
        )

    return f


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, str]:
    tmp = tmp_path_factory.mktemp("uncertainty")
    common = dict(dlat=10.0, start_year=1995, years=10, dtype="float64")
    paths = {
        "obs-p": write_cf(tmp / "p.nc", field=field(0.0), **common),
        "obs-b": write_cf(tmp / "b.nc", field=field(0.3, polar=1.0), offset=0.2, **common),
        "run-a": write_cf(tmp / "a.nc", field=field(1.0), offset=0.8, **common),
        "run-c": write_cf(tmp / "c.nc", field=field(2.0), offset=-0.3, scale=1.01, **common),
        "run-d": write_cf(tmp / "d.nc", field=field(3.0), offset=1.5, **common),
    }
    noise = tmp / "noise.nc"
    noise.write_bytes(np.random.default_rng(3).bytes(4096))
    paths["noise"] = noise
    return {k: str(v) for k, v in paths.items()}


def ref(files, name) -> Source:
    return Source(name=name, role="reference", paths=[files[name]])


def run(files, name) -> Source:
    return Source(name=name, role="model", paths=[files[name]])


RUNS = ["run-a", "run-c", "run-d"]


@pytest.fixture(scope="module")
def both(files) -> tuple[pd.DataFrame, dict]:
    cmp = Comparison(reference=ref(files, "obs-p"), alternatives=[ref(files, "obs-b")], models=[run(files, n) for n in RUNS],
                     variable="tas", period=PERIOD, cache=False)
    return cmp.scores(regions=REGIONS, seasons=SEASONS), cmp.provenance(regions=REGIONS, seasons=SEASONS)


def indexed(table: pd.DataFrame) -> pd.Series:
    return table.set_index(KEY)["value"].sort_index()


def test_row_count_and_reference_column(both) -> None:
    table, _ = both
    # runs x references, plus the alternative reference against the primary; x regions x seasons x metrics
    assert len(table) == (len(RUNS) * 2 + 1) * len(REGIONS) * len(SEASONS) * len(METRICS)
    assert set(table.loc[table["reference"] == "obs-b", "model"]) == set(RUNS)
    assert set(table.loc[table["reference"] == "obs-p", "model"]) == {*RUNS, "obs-b"}
    assert not table.duplicated(KEY).any()


def test_runs_against_the_alternative_equal_a_request_with_it_alone(files, both) -> None:
    """Consistency: a run scored against reference B in a several-reference request has the
    same numbers (every metric, rel_error included) as with B as the only reference on the
    same grid and period."""
    table, _ = both
    alone = Comparison(reference=ref(files, "obs-b"), models=[run(files, n) for n in RUNS], variable="tas", period=PERIOD,
                       target_grid="obs-b", cache=False).scores(regions=REGIONS, seasons=SEASONS)
    got = indexed(table[table["reference"] == "obs-b"])
    want = indexed(alone)
    assert list(got.index) == list(want.index)
    np.testing.assert_allclose(got.to_numpy(), want.to_numpy(), rtol=1e-12, atol=1e-12, equal_nan=True)


def test_runs_against_the_primary_are_unchanged_by_an_alternative(files, both) -> None:
    table, _ = both
    alone = Comparison(reference=ref(files, "obs-p"), models=[run(files, n) for n in RUNS], variable="tas", period=PERIOD,
                       cache=False).scores(regions=REGIONS, seasons=SEASONS)
    got = indexed(table[(table["reference"] == "obs-p") & table["model"].isin(RUNS)])
    np.testing.assert_allclose(got.to_numpy(), indexed(alone).to_numpy(), rtol=1e-12, atol=1e-12, equal_nan=True)


def test_alternative_rows_equal_scoring_that_file_as_a_run(files, both) -> None:
    table, _ = both
    as_run = Comparison(reference=ref(files, "obs-p"), models=[run(files, "obs-b"), *(run(files, n) for n in RUNS)], variable="tas",
                        period=PERIOD, cache=False).scores(regions=REGIONS, seasons=SEASONS)
    mine = table[(table["model"] == "obs-b")]
    theirs = as_run[as_run["model"] == "obs-b"]
    # rel_error: the run's median includes it there; the bootstrap intervals compare runs only
    # (NaN for a reference's rows), and there it is one of the runs compared
    keep = lambda t: t[~t["metric"].isin(["rel_error", "rmse_diff_lo", "rmse_diff_hi", "abs_bias_diff_lo", "abs_bias_diff_hi"])]  # noqa: E731
    np.testing.assert_allclose(indexed(keep(mine)).to_numpy(), indexed(keep(theirs)).to_numpy(), rtol=1e-12, atol=1e-12, equal_nan=True)
    # Gleckler et al. (2008) relative error against the median RMSE of the runs only (numpy's median)
    for region in REGIONS:
        for season in SEASONS:
            sel = table[(table.region == region) & (table.season == season) & (table.reference == "obs-p") & (table.metric == "rmse")]
            med = np.median(sel[sel.model.isin(RUNS)].value.to_numpy())
            rmse_b = float(sel[sel.model == "obs-b"].value.iloc[0])
            rel = table[(table.region == region) & (table.season == season) & (table.model == "obs-b") & (table.metric == "rel_error")]
            assert float(rel.value.iloc[0]) == pytest.approx((rmse_b - med) / med, rel=1e-12)


def test_bias_shift_and_rmse_triangle_inequality(both) -> None:
    """Changing the reference from P to B moves every run's bias by exactly bias(B vs P)
    (the area-weighted mean is linear; both use one mask), and its RMSE by no more than
    RMSE(B vs P) (Minkowski's inequality for the weighted L2 norm)."""
    table, _ = both
    v = table.set_index(KEY)["value"]
    for region in REGIONS:
        for season in SEASONS:
            def get(model, reference, metric, region=region, season=season):
                return float(v[(model, reference, "tas", "", region, season, PERIOD, metric)])

            shift = get("obs-b", "obs-p", "bias")
            distance = get("obs-b", "obs-p", "rmse")
            assert abs(shift) > 0.1 and distance > 0.1  # the two references really differ
            for name in RUNS:
                assert get(name, "obs-p", "bias") - get(name, "obs-b", "bias") == pytest.approx(shift, abs=1e-9)
                assert abs(get(name, "obs-p", "rmse") - get(name, "obs-b", "rmse")) <= distance + 1e-12


def test_provenance_lists_every_reference_and_the_rule(both) -> None:
    _, record = both
    assert record["references"] == ["obs-p", "obs-b"]
    assert record["observational_uncertainty"] == RULE
    assert record["reference"] == "obs-p"  # the primary
    assert {(i["source"], i["role"]) for i in record["inputs"]} >= {("obs-p", "reference"), ("obs-b", "reference")}


def test_an_unreadable_alternative_is_left_out(files) -> None:
    cmp = Comparison(reference=ref(files, "obs-p"), alternatives=[ref(files, "noise")], models=[run(files, "run-a")], variable="tas",
                     period=PERIOD, cache=False)
    table = cmp.scores()
    assert set(table["reference"]) == {"obs-p"} and set(table["model"]) == {"run-a"}
    assert [o["source"] for o in cmp.omissions] == ["noise"]
    assert cmp.provenance()["references"] == ["obs-p"]


def test_a_shorter_alternative_does_not_shorten_the_default_period(files, tmp_path) -> None:
    short = write_cf(tmp_path / "short.nc", field=field(0.3), dlat=10.0, start_year=1998, years=4, dtype="float64")
    cmp = Comparison(reference=ref(files, "obs-p"), alternatives=[Source(name="short", role="reference", paths=[str(short)])],
                     models=[run(files, "run-a")], variable="tas", cache=False)
    # the primary and the run cover 1995-2004 (no WMO normal): that overlap is the period, and the
    # alternative covering 1998-2001 only is left out with the reason
    assert str(cmp.period) == "1995-2004" and str(cmp.span) == "1995-2004"
    assert cmp.alternatives == [] and [(o["source"], o["season"]) for o in cmp.omissions] == [("short", "all")]
    assert "does not cover the period 1995-2004" in cmp.omissions[0]["reason"]


# ---------------------------------------------------------------- the rule, by hand
@pytest.mark.parametrize(
    ("a", "b", "metric", "expected"),
    [
        # RMSE 1.0/1.2 against 1.5/1.6: order kept, |1.0-1.5| = 0.5 > ranges 0.2, 0.1
        ([1.0, 1.2], [1.5, 1.6], "rmse", False),
        # order reversed against the second reference
        ([1.0, 1.5], [1.2, 1.3], "rmse", True),
        # order kept, but 0.25 <= range 0.3 of the first run
        ([1.0, 1.3], [1.25, 1.5], "rmse", True),
        # exactly on the boundary: 0.2 == range 0.2 counts as within ("no larger than")
        ([1.0, 1.2], [1.2, 1.3], "rmse", True),
        # bias is judged by its distance from 0: |0.2|,|-0.2| against |-0.3|,|-0.7|:
        # order kept, 0.1 <= range 0.4 of the second run
        ([0.2, -0.2], [-0.3, -0.7], "bias", True),
        # correlation nearer 1 is better: 0.90/0.91 against 0.80/0.82: 0.1 > ranges 0.01, 0.02
        ([0.90, 0.91], [0.80, 0.82], "corr", False),
        # ratios are judged by the distance from 1: 1.05 and 0.95 tie against the first reference
        ([1.05, 1.06], [0.95, 0.90], "std_ratio", True),
        # three references: order kept everywhere, 0.5 > ranges 0.3 and 0.2
        ([1.0, 1.3, 1.1], [1.5, 1.7, 1.6], "rmse", False),
    ],
)
def test_rule_on_hand_made_cases(a, b, metric, expected) -> None:
    assert within_observational_uncertainty(a, b, metric) is expected


def test_rule_is_undecided_without_a_second_reference_or_with_nan() -> None:
    assert within_observational_uncertainty([1.0], [2.0], "rmse") is None
    assert within_observational_uncertainty([1.0, np.nan], [2.0, 2.1], "rmse") is None


def test_bias_by_raw_values_would_decide_otherwise() -> None:
    # the same numbers as raw values: difference 0.5 against the primary, ranges 0.4 and 0.4, order kept
    assert within_observational_uncertainty([0.2, -0.2], [-0.3, -0.7], None) is False


def test_run_pairs_match_the_rule_worked_by_hand(both) -> None:
    table, _ = both
    pairs = run_pairs(table, primary="obs-p")
    assert set(zip(pairs.model_a, pairs.model_b, strict=True)) == {("run-a", "run-c"), ("run-a", "run-d"), ("run-c", "run-d")}
    v = table.set_index(KEY)["value"]
    for _, p in pairs[pairs.metric == "rmse"].iterrows():
        a = np.array([v[(p.model_a, r, "tas", "", p.region, p.season, PERIOD, "rmse")] for r in ("obs-p", "obs-b")])
        b = np.array([v[(p.model_b, r, "tas", "", p.region, p.season, PERIOD, "rmse")] for r in ("obs-p", "obs-b")])
        flips = np.sign(a[0] - b[0]) != np.sign(a[1] - b[1])
        expected = bool(flips or abs(a[0] - b[0]) <= max(abs(a[0] - a[1]), abs(b[0] - b[1])))
        assert p.within is expected
        assert p.difference == pytest.approx(a[0] - b[0], abs=1e-12)
    ranges = reference_range(table[table.model.isin(RUNS)])
    assert (ranges["references"] == 2).all()


def test_tied_with_the_best_by_hand() -> None:
    # pairs of one metric: a~b within, a~c not, b~d within, c~d undecided
    pairs = pd.DataFrame(
        {"model_a": ["a", "a", "b", "c"], "model_b": ["b", "c", "d", "d"], "within": [True, False, True, None]}
    )
    assert tied_with(pairs, {"a"}) == {"b"}
    assert tied_with(pairs, {"d"}) == {"b"}  # the undecided pair ties nothing
    assert tied_with(pairs, {"a", "b"}) == {"d"}  # best runs themselves are not listed
    assert tied_with(pairs.iloc[0:0], {"a"}) == set()
