"""Ensembles: the ensemble-mean field, the members' spread, the manifest field and the CLI.

The analytic case: N members are one signal plus independent Gaussian noise of standard
deviation sigma in every cell and month.  On a 360-day calendar every month weighs the
same, so a member's climatology over Y years carries noise of std s = sigma / sqrt(12 Y)
per cell, and the mean of N members s / sqrt(N) (the variance of a mean of independent
variables, common practice).  Expected values are computed with numpy from the same
numbers, and the analytic ones with a tolerance from the sampling distribution.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from cfdata import exact_area, write_cf

from app.cli import main
from evaluation.bootstrap import INTERVAL_METRICS
from evaluation.catalog import Collection
from evaluation.ensembles import Ensemble, mean_name, spread_name
from evaluation.errors import InputError
from evaluation.scoring import Comparison, Source

SIGMA = 2.0
YEARS = 4
DLAT = 10.0


def signal(lat, lon, year, month):
    """A smooth field with a seasonal cycle (physical degrees)."""
    return 280.0 + 20.0 * np.cos(np.deg2rad(lat)) + 5.0 * np.sin(np.deg2rad(lon)) + 3.0 * np.cos(2 * np.pi * month / 12.0) + 0.0 * year


def member_field(seed: int):
    rng = np.random.default_rng(seed)

    def field(lat, lon, year, month):
        base = signal(lat, lon, year, month)
        return base + SIGMA * rng.standard_normal(np.broadcast_shapes(np.shape(base), np.shape(lat), np.shape(year)))

    return field


def write_members(folder: Path, count: int, *, start_year: int = 2001, calendar: str = "360_day") -> tuple[Path, list[Path]]:
    ref = write_cf(folder / "ref.nc", field=signal, dlat=DLAT, calendar=calendar, start_year=2001, years=YEARS, dtype="float64")
    members = [
        write_cf(folder / f"m{i}.nc", field=member_field(100 + i), dlat=DLAT, calendar=calendar, start_year=start_year, years=YEARS,
                 dtype="float64")
        for i in range(count)
    ]
    return ref, members


def comparison(ref: Path, members: list[Path], **kwargs) -> Comparison:
    runs = [Source(name=f"m{i}", role="model", paths=(str(p),)) for i, p in enumerate(members)]
    ensemble = Ensemble("ens", tuple(r.name for r in runs))
    return Comparison(reference=Source(name="ref", role="reference", paths=(str(ref),)), models=runs, variable="tas", cache=False,
                      ensembles=[ensemble], **kwargs)


def numpy_rmse_of_mean(ref: Path, members: list[Path]) -> tuple[float, list[float]]:
    """RMSE of the members' mean climatology and of each member's, by hand with numpy."""
    with xr.open_dataset(ref, decode_times=False) as ds:
        r = ds["tas"].values.mean(axis=0)
        area = exact_area(ds["lat_bnds"].values, ds["lon_bnds"].values)
    clims = []
    for path in members:
        with xr.open_dataset(path, decode_times=False) as ds:
            clims.append(ds["tas"].values.mean(axis=0))  # 360-day months weigh the same

    def rmse(c: np.ndarray) -> float:
        return float(np.sqrt(np.sum(area * (c - r) ** 2) / np.sum(area)))

    return rmse(np.mean(clims, axis=0)), [rmse(c) for c in clims]


def value(table: pd.DataFrame, model: str, metric: str) -> float:
    row = table[(table["model"] == model) & (table["metric"] == metric)]
    assert len(row) == 1, (model, metric, len(row))
    return float(row["value"].iloc[0])


@pytest.mark.parametrize("count", [2, 8])
def test_ensemble_mean_error_shrinks_like_one_over_sqrt_n(tmp_path: Path, count: int) -> None:
    ref, members = write_members(tmp_path, count)
    cmp = comparison(ref, members)
    table = cmp.scores()
    expected_mean, expected_members = numpy_rmse_of_mean(ref, members)
    # the same numbers by hand (numpy): the mean is taken before scoring, not of the RMSEs
    assert value(table, mean_name("ens"), "rmse") == pytest.approx(expected_mean, rel=1e-6)
    for i, want in enumerate(expected_members):
        assert value(table, f"m{i}", "rmse") == pytest.approx(want, rel=1e-6)
    # analytic: E[RMSE^2] = s^2 / N with s = sigma / sqrt(12 Y).  RMSE^2 is a weighted mean of
    # n_eff independent squared Gaussians, so its relative std is sqrt(2 / n_eff) (chi-square
    # variance 2k, common practice); four of those bound RMSE (half as much relatively).
    s = SIGMA / math.sqrt(12 * YEARS)
    with xr.open_dataset(ref, decode_times=False) as ds:
        area = exact_area(ds["lat_bnds"].values, ds["lon_bnds"].values).ravel()
    n_eff = area.sum() ** 2 / (area**2).sum()
    tolerance = 4 * 0.5 * math.sqrt(2 / n_eff)
    assert value(table, mean_name("ens"), "rmse") == pytest.approx(s / math.sqrt(count), rel=tolerance)
    # the member spread matches the noise: every member's RMSE is s (same tolerance)
    assert value(table, spread_name("ens", "min"), "rmse") == pytest.approx(s, rel=tolerance)
    assert value(table, spread_name("ens", "max"), "rmse") == pytest.approx(s, rel=tolerance)


def test_spread_rows_are_min_max_and_sample_std_of_the_members(tmp_path: Path) -> None:
    ref, members = write_members(tmp_path, 3)
    table = comparison(ref, members).scores(regions=["global", "tropics"], seasons=["ANN", "JJA"])
    members_rows = table[table["model"].isin(["m0", "m1", "m2"])]
    spread_models = [spread_name("ens", stat) for stat in ("min", "max", "std")]
    # the bootstrap intervals have no spread rows (the members' min of an interval's end is no interval)
    intervals = table[table["metric"].isin(INTERVAL_METRICS)]
    assert not intervals.empty and not intervals["model"].isin(spread_models).any()
    for (region, season, metric), part in members_rows.groupby(["region", "season", "metric"]):
        if metric in INTERVAL_METRICS:
            continue
        got = table[(table["region"] == region) & (table["season"] == season) & (table["metric"] == metric)]
        finite = part["value"].dropna().to_numpy()
        for stat, expect in (("min", np.min), ("max", np.max), ("std", lambda v: np.std(v, ddof=1))):
            row = got[got["model"] == spread_name("ens", stat)]
            assert len(row) == 1
            # numpy as the reference: min, max and the sample standard deviation (ddof=1)
            if finite.size >= (2 if stat == "std" else 1):
                assert float(row["value"].iloc[0]) == pytest.approx(float(expect(finite)), rel=1e-12, abs=1e-15)
            assert row["units"].iloc[0] == part["units"].iloc[0]


def test_an_ensemble_mean_competes_with_means_only_never_with_single_runs(tmp_path: Path) -> None:
    """A mean of 8 members has half the noise of a member's (sigma/sqrt(8), common practice):
    it beats every single run without being a better model, so it must not be marked best
    against them, and adding it must not change the members' intervals among themselves."""
    from evaluation.bootstrap import confirmed_best

    ref, members = write_members(tmp_path, 8)
    with_mean = comparison(ref, members).scores(regions=["global"], seasons=["ANN"])
    runs = [Source(name=f"m{i}", role="model", paths=(str(p),)) for i, p in enumerate(members)]
    alone = Comparison(reference=Source(name="ref", role="reference", paths=(str(ref),)), models=runs, variable="tas",
                       cache=False).scores(regions=["global"], seasons=["ANN"])
    # the premise: the mean's RMSE lies far below every member's (numpy by hand above)
    member_rmse = [value(with_mean, f"m{i}", "rmse") for i in range(8)]
    assert value(with_mean, mean_name("ens"), "rmse") < 0.6 * min(member_rmse)
    # alone of its kind: no interval, so no mark
    for metric in INTERVAL_METRICS:
        assert np.isnan(value(with_mean, mean_name("ens"), metric))
    assert mean_name("ens") not in set(confirmed_best(with_mean)["model"])
    # single runs are compared among themselves, exactly as without the ensemble
    for i in range(8):
        for metric in INTERVAL_METRICS:
            assert value(with_mean, f"m{i}", metric) == value(alone, f"m{i}", metric)


def test_ensemble_mean_fields_are_the_members_mean(tmp_path: Path) -> None:
    ref, members = write_members(tmp_path, 3)
    cmp = comparison(ref, members)
    # series and cycle of the mean equal numpy's mean of the members' (all on one grid here)
    series = [cmp.regional_series(f"m{i}", "global", "ANN").values for i in range(3)]
    np.testing.assert_allclose(cmp.regional_series(mean_name("ens"), "global", "ANN").values, np.mean(series, axis=0), rtol=1e-12)
    cycles = [cmp.seasonal_cycle(f"m{i}", "global").values for i in range(3)]
    np.testing.assert_allclose(cmp.seasonal_cycle(mean_name("ens"), "global").values, np.mean(cycles, axis=0), rtol=1e-12)
    assert cmp.provenance()["ensembles"] == {"ens": ["m0", "m1", "m2"]}


def test_members_on_other_grids_and_calendars_are_averaged_on_the_target_grid(tmp_path: Path) -> None:
    ref = write_cf(tmp_path / "ref.nc", field=signal, dlat=DLAT, calendar="360_day", start_year=2001, years=YEARS, dtype="float64")
    a = write_cf(tmp_path / "a.nc", field=signal, dlat=5.0, calendar="noleap", start_year=2001, years=YEARS, dtype="float64", offset=1.0)
    b = write_cf(tmp_path / "b.nc", field=signal, dlat=DLAT, lon_0_360=True, calendar="standard", start_year=2001, years=YEARS,
                 dtype="float64", offset=3.0)
    cmp = comparison(ref, [a, b])
    table = cmp.scores()
    # the mean of +1 K and +3 K offsets is +2 K everywhere (a linear remap keeps a constant offset)
    assert value(table, mean_name("ens"), "bias") == pytest.approx(2.0, abs=0.02)
    assert value(table, "m0", "bias") == pytest.approx(1.0, abs=0.02)


def test_members_covering_other_years_are_refused(tmp_path: Path) -> None:
    ref, members = write_members(tmp_path, 2)
    late = write_cf(tmp_path / "late.nc", field=member_field(7), dlat=DLAT, calendar="360_day", start_year=2002, years=YEARS - 1, dtype="float64")
    with pytest.raises(InputError, match="cover different years"):
        comparison(ref, [*members, late], period="2002-2004")


@pytest.mark.parametrize(
    "ensembles, message",
    [
        ([Ensemble("ens", ("m0",))], "1 member"),
        ([Ensemble("ens", ("m0", "nope"))], "not a run"),
        ([Ensemble("m0", ("m0", "m1"))], "already the name"),
        ([Ensemble("a", ("m0", "m1")), Ensemble("b", ("m1", "m2"))], "two ensembles"),
    ],
)
def test_ensembles_that_cannot_be_read_exactly_are_refused(tmp_path: Path, ensembles, message) -> None:
    ref, members = write_members(tmp_path, 3)
    runs = [Source(name=f"m{i}", role="model", paths=(str(p),)) for i, p in enumerate(members)]
    with pytest.raises(InputError, match=message):
        Comparison(reference=Source(name="ref", role="reference", paths=(str(ref),)), models=runs, variable="tas", cache=False,
                   ensembles=ensembles)


def test_manifest_ensemble_field(tmp_path: Path) -> None:
    ref, members = write_members(tmp_path, 3)
    lines = ['[[source]]\nname = "ref"\nrole = "reference"\npaths = ["ref.nc"]\n']
    lines += [f'[[source]]\nname = "m{i}"\nrole = "model"\npaths = ["m{i}.nc"]\nensemble = "ens"\n' for i in range(2)]
    lines += ['[[source]]\nname = "m2"\nrole = "model"\npaths = ["m2.nc"]\n']
    (tmp_path / "manifest.toml").write_text("\n".join(lines))
    collection = Collection.from_path(tmp_path)
    assert collection.ensembles == (("ens", ("m0", "m1")),)
    assert collection.ensembles_of() == (Ensemble("ens", ("m0", "m1")),)
    assert collection.ensembles_of(["m0", "m2"]) == ()  # one member left: a plain run
    assert collection.ensemble_of("m1") == "ens" and collection.ensemble_of("m2") is None
    (tmp_path / "manifest.toml").write_text("\n".join(lines[:2]))
    with pytest.raises(InputError, match="1 member"):
        Collection.from_path(tmp_path)
    (tmp_path / "manifest.toml").write_text(lines[0].replace('"ref.nc"]', '"ref.nc"]\nensemble = "x"') + "\n" + "\n".join(lines[1:]))
    with pytest.raises(InputError, match="reference but has ensemble"):
        Collection.from_path(tmp_path)


def test_cli_ensemble(tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("GRIDSCORE_CACHE", str(tmp_path / "cache"))
    ref, members = write_members(tmp_path, 3)
    out = tmp_path / "scores.csv"
    argv = ["score", "--reference", f"ref={ref}", *[a for i, p in enumerate(members) for a in ("--model", f"m{i}={p}")], "--variable", "tas"]
    assert main([*argv, "--ensemble", "ens=m0,m1,m2", "--output", str(out)]) == 0
    table = pd.read_csv(out, comment="#")
    assert {mean_name("ens"), *(spread_name("ens", s) for s in ("min", "max", "std"))} <= set(table["model"])
    expected_mean, _ = numpy_rmse_of_mean(ref, members)
    assert value(table, mean_name("ens"), "rmse") == pytest.approx(expected_mean, rel=1e-6)
    # a wrong member is one line and exit 2
    capsys.readouterr()
    assert main([*argv, "--ensemble", "ens=m0,zz"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "'zz'" in err[0]


def test_run_list_expands_a_ticked_ensemble() -> None:
    from app.views.runlist import run_options

    names = ["a", mean_name("ens"), "m0", "m1"]
    members = {mean_name("ens"): ("m0", "m1")}.get
    closed = run_options(names, ["a"], lambda n: members(n, ()))
    assert closed == {"a": "a", "ens (ensemble mean of 2)": mean_name("ens")}
    opened = run_options(names, [mean_name("ens")], lambda n: members(n, ()))
    assert list(opened.values()) == names and list(opened)[2:] == ["↳ m0", "↳ m1"]
    # a member ticked alone stays visible (a ticked box never disappears)
    assert "↳ m1" in run_options(names, ["m1"], lambda n: members(n, ()))
