"""Vertical levels: axes found by CF attributes, kept, squeezed or refused; --level.

Every file is a real NetCDF file on disk (tests/leveldata.py); expected numbers come from
the analytic field written into it.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from leveldata import write_levels

from evaluation import io, levels
from evaluation.errors import InputError
from evaluation.scoring import Comparison, Source, score_table


def log_linear(level, lat, lon, month):
    """T(p) = a + b ln p with a latitude shape: exact under interpolation linear in ln p."""
    return 250.0 + 40.0 * np.cos(np.radians(lat)) + 30.0 * np.log(level / 1000.0) + 0.0 * lon + 0.0 * month


def opened(path: Path, name: str = "ta") -> xr.DataArray:
    return io.get_variable(io.open_source([str(path)], source="src"), name, source="src")


# ---------------------------------------------------------------------------- finding axes
# What CF attributes say about an axis (cf-conventions 4.3) -> the kind gridscore reads,
# or the words of the refusal.  Names of the axes are arbitrary on purpose.
AXES = [
    ({"standard_name": "air_pressure", "units": "Pa"}, (100000.0, 50000.0), "pressure"),
    ({"units": "millibar"}, (1000.0, 500.0), "pressure"),  # pressure units alone suffice
    ({"axis": "Z", "units": "hPa"}, (1000.0, 500.0), "pressure"),
    ({"positive": "up", "units": "m"}, (2.0, 10.0, 100.0), "height"),
    ({"standard_name": "altitude", "units": "km", "positive": "up"}, (1.0, 5.0), "height"),
    ({"positive": "down", "units": "m"}, (5.0, 50.0, 500.0), "depth"),
    ({"standard_name": "depth", "units": "m", "positive": "down"}, (5.0, 50.0), "depth"),
    ({"axis": "Z", "units": "m"}, (2.0, 10.0), "without a 'positive' attribute"),
    ({"standard_name": "atmosphere_sigma_coordinate", "positive": "down"}, (0.2, 0.5, 0.9), "sigma model levels"),
    ({"standard_name": "atmosphere_hybrid_sigma_pressure_coordinate", "positive": "down"}, (0.2, 0.9), "hybrid sigma-pressure"),
    ({"standard_name": "model_level_number", "axis": "Z"}, (1.0, 2.0, 3.0), "model level numbers"),
    ({"units": "m"}, (0.0, 1000.0), "neither time, latitude, longitude nor a vertical axis"),  # e.g. a projection x
    ({"long_name": "member"}, (1.0, 2.0), "neither time, latitude, longitude nor a vertical axis"),
]


@pytest.mark.parametrize(("attrs", "values", "expected"), AXES)
def test_vertical_axes_are_found_by_cf_attributes(tmp_path: Path, attrs, values, expected) -> None:
    path = write_levels(tmp_path / "f.nc", levels=values, axis_attrs=attrs, axis_name="zz", years=1)
    listing = io._listing(str(path))["ta"]
    if expected in levels.KINDS:
        da = opened(path)
        assert da.dims == ("time", "level", "lat", "lon")
        assert da["level"].attrs["level_kind"] == expected
        assert da["level"].attrs["positive"] == levels.KINDS[expected].positive
        assert da["level"].attrs["units"] == attrs["units"]
        np.testing.assert_array_equal(da["level"].values, values)
        assert listing["levels"] and not listing["level_problem"]
    else:
        # refused with the reason, never silently dropped
        with pytest.raises(InputError, match=expected):
            opened(path)
        assert expected in listing["level_problem"]


def test_single_level_is_squeezed_and_remembered(tmp_path: Path) -> None:
    path = write_levels(tmp_path / "f.nc", levels=(2.0,), axis_attrs={"units": "m", "positive": "up"}, variable="tas", years=1)
    da = opened(path, "tas")
    assert da.dims == ("time", "lat", "lon")
    assert da.attrs["gridscore_single_level"] == "2 m"
    assert levels.select_level(da, None, source="s") is da
    assert levels.select_level(da, "200cm", source="s").attrs["level"] == "2 m"  # 200 cm = 2 m (SI)
    with pytest.raises(InputError, match="single level 2 m"):
        levels.select_level(da, "10m", source="s")


def test_axes_of_one_file_each_stay_with_their_variables(tmp_path: Path) -> None:
    a = xr.open_dataset(write_levels(tmp_path / "a.nc", levels=(1000.0, 500.0), variable="ta", axis_name="lev", years=1))
    b = xr.open_dataset(write_levels(tmp_path / "b.nc", levels=(850.0, 700.0, 300.0), variable="hur", units="%", standard_name=None, axis_name="lev2", years=1))
    both = tmp_path / "both.nc"
    xr.merge([a, b]).to_netcdf(both)
    ds = io.open_source([str(both)], source="s")
    ta, hur = io.get_variable(ds, "ta"), io.get_variable(ds, "hur")
    assert levels.level_labels(ta) == ["1000 hPa", "500 hPa"]
    assert levels.level_labels(hur) == ["850 hPa", "700 hPa", "300 hPa"]


# ---------------------------------------------------------------------------- level requests
@pytest.mark.parametrize(
    ("text", "label", "pascal"),
    [("850hPa", "850 hPa", 85000.0), ("85000Pa", "850 hPa", 85000.0), ("850 mbar", "850 hPa", 85000.0), ("0.85 bar", "850 hPa", 85000.0)],
)
def test_levels_are_read_with_units(text: str, label: str, pascal: float) -> None:
    import pint

    request = levels.parse_level(text)
    assert request.label() == label
    # pint's own default registry as the outside reference (1 hPa = 100 Pa, 1 bar = 1e5 Pa)
    assert request.value_in("Pa") == pytest.approx(pint.UnitRegistry().Quantity(request.value, request.units).to("Pa").magnitude, rel=1e-12)
    assert request.value_in("Pa") == pytest.approx(pascal, rel=1e-12)


@pytest.mark.parametrize("text", ["", "hPa", "850", "850 K", "-5hPa", "850 furlongs per fortnight"])
def test_bad_levels_are_refused(text: str) -> None:
    with pytest.raises(InputError):
        levels.parse_level(text)


# ---------------------------------------------------------------------------- selection
def test_a_file_level_is_taken_as_it_is(tmp_path: Path) -> None:
    path = write_levels(tmp_path / "f.nc", field=log_linear, years=1)
    da = opened(path)
    chosen = levels.select_level(da, "85000Pa", source="s")
    assert chosen.attrs["level"] == "850 hPa"
    raw = xr.open_dataset(path)["ta"].sel(plev=850.0)
    np.testing.assert_array_equal(chosen.values, raw.values)


def test_interpolation_is_lazy_and_reads_no_data(tmp_path: Path, raise_if_computed) -> None:
    path = write_levels(tmp_path / "f.nc", field=log_linear, years=1)
    da = opened(path)
    with raise_if_computed(max_computes=0, touching=("ta",)):
        out = levels.select_level(da, "700hPa", source="s")
    assert out.chunks is not None


def test_several_levels_without_a_choice_are_refused_with_the_levels(tmp_path: Path) -> None:
    da = opened(write_levels(tmp_path / "f.nc", years=1))
    with pytest.raises(InputError, match=r"4 levels \(1000, 850, 500, 200 hPa\).*--level"):
        levels.select_level(da, None, source="s")


@pytest.mark.parametrize(("level", "words"), [("100hPa", "outside the levels"), ("1050hPa", "outside the levels"), ("2m", "is a length")])
def test_levels_outside_or_of_another_kind_are_refused(tmp_path: Path, level: str, words: str) -> None:
    da = opened(write_levels(tmp_path / "f.nc", years=1))
    with pytest.raises(InputError, match=words):
        levels.select_level(da, level, source="s")


def test_below_the_surface_stays_missing(tmp_path: Path) -> None:
    # 1000 hPa lies below the surface in the tropics; half its rows hold missing_value,
    # the other half _FillValue (a file may use both, CF 2.5.1)
    below = lambda lev, lat, lon: (lev > 900) & (np.abs(lat) < 30)  # noqa: E731
    path = write_levels(tmp_path / "f.nc", missing=below, missing_value=-999.0, years=1)
    # xarray masks both values and says so (CF allows a _FillValue and a missing_value)
    with pytest.warns(xr.SerializationWarning, match="multiple fill values"):
        da = opened(path)
    bottom = levels.select_level(da, "1000hPa", source="s").isel(time=0)
    lat = bottom["lat"].values
    assert np.isnan(bottom.values[np.abs(lat) < 30]).all()
    assert np.isfinite(bottom.values[np.abs(lat) > 30]).all()
    between = levels.select_level(da, "925hPa", source="s").isel(time=0)
    assert np.isnan(between.values[np.abs(lat) < 30]).all()  # one neighbour missing: missing, not zero or a fill value
    assert float(np.nanmax(between.values)) < 1000.0


# ---------------------------------------------------------------------------- comparisons
@pytest.fixture(scope="module")
def pair(tmp_path_factory) -> dict[str, Path]:
    tmp = tmp_path_factory.mktemp("levels")
    return {
        "ref": write_levels(tmp / "ref.nc", field=log_linear, levels=(1000.0, 850.0, 700.0, 500.0, 300.0, 200.0)),
        # another level set (same grid, so that only the vertical is tested), 1 K warmer everywhere
        "run": write_levels(tmp / "run.nc", field=lambda *a: log_linear(*a) + 1.0, levels=(1000.0, 925.0, 600.0, 400.0, 250.0)),
    }


def test_comparison_on_a_level_interpolates_each_source(pair) -> None:
    cmp = Comparison(reference=Source("ref", "reference", [str(pair["ref"])]), models=[Source("run", "model", [str(pair["run"])])],
                     variable="ta", level="850hPa", cache=False)
    table = cmp.scores()
    assert set(table["level"]) == {"850 hPa"}
    bias = table.loc[table["metric"] == "bias", "value"].item()
    # 850 hPa lies between the run's 925 and 600 hPa: linear in ln p is exact for a + b ln p
    assert bias == pytest.approx(1.0, abs=1e-9)
    assert cmp.provenance()["level"] == "850 hPa"


def test_score_table_cache_keeps_levels_apart(pair, tmp_path: Path) -> None:
    from evaluation.cache import Cache

    # a folder of its own: a cache refuses a folder holding anything it did not make,
    # such as another cache inside the session's cache folder
    store = Cache(tmp_path / "levels-cache")
    ref, run = Source("ref", "reference", [str(pair["ref"])]), Source("run", "model", [str(pair["run"])])
    low, _ = score_table(reference=ref, models=[run], variable="ta", level="850hPa", cache=store)
    high, _ = score_table(reference=ref, models=[run], variable="ta", level="500hPa", cache=store)
    again, _ = score_table(reference=ref, models=[run], variable="ta", level="50000Pa", cache=store)
    mean = lambda t: t.loc[t["metric"] == "ref_mean", "value"].item()  # noqa: E731
    assert set(low["level"]) == {"850 hPa"} and set(high["level"]) == {"500 hPa"}
    assert mean(low) - mean(high) == pytest.approx(30.0 * np.log(850.0 / 500.0), rel=1e-9)
    pd.testing.assert_frame_equal(again, high)


def test_sources_on_different_kinds_of_axis_are_refused(tmp_path: Path, pair) -> None:
    depth = write_levels(tmp_path / "d.nc", levels=(5.0, 50.0, 500.0), axis_attrs={"units": "m", "positive": "down"}, variable="ta")
    height = write_levels(tmp_path / "h.nc", levels=(5.0, 50.0, 500.0), axis_attrs={"units": "m", "positive": "up"}, variable="ta")
    with pytest.raises(InputError, match="depth levels"):
        Comparison(reference=Source("ref", "reference", [str(depth)]), models=[Source("run", "model", [str(height)])],
                   variable="ta", level="50m", cache=False)


# ---------------------------------------------------------------------------- model levels
SIGMA = (0.1, 0.3, 0.5, 0.7, 0.85, 0.95, 0.995)


def surface_pressure(lat, lon):
    """Pa; a plateau near 30N where the lowest model level lies above 850 hPa."""
    return 101000.0 - 20000.0 * np.exp(-(((lat - 30.0) / 10.0) ** 2)) + 0.0 * lon


def sigma_file(path: Path, *, with_pressure: bool) -> Path:
    """T = a + b ln p on sigma levels, p = sigma * ps (atmosphere_sigma_coordinate with ptop = 0, CF appendix D)."""
    field = lambda s, lat, lon, m: 250.0 + 30.0 * np.log(s * surface_pressure(lat, lon) / 1.0e5)  # noqa: E731
    axis = {"standard_name": "atmosphere_sigma_coordinate", "positive": "down"}
    written = write_levels(path, levels=SIGMA, axis_attrs=axis, axis_name="lev", field=field, years=2)
    if not with_pressure:
        return written
    ds = xr.load_dataset(written)
    ps = xr.DataArray(surface_pressure(ds["lat"].values[:, None], ds["lon"].values[None, :]), dims=("lat", "lon"))
    pressure = (ds["lev"] * ps).broadcast_like(ds["ta"]).transpose(*ds["ta"].dims)
    ds["pfull"] = (ds["ta"].dims, pressure.values, {"standard_name": "air_pressure", "units": "Pa"})
    full = path.with_name("with-pressure.nc")
    ds.to_netcdf(full)
    return full


def test_model_levels_without_pressure_are_refused_with_the_reason(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="sigma model levels.*not offered unless the file holds the pressure"):
        opened(sigma_file(tmp_path / "s.nc", with_pressure=False))


def test_model_levels_with_pressure_are_read_at_a_pressure_in_each_column(tmp_path: Path) -> None:
    da = opened(sigma_file(tmp_path / "s.nc", with_pressure=True))
    assert da["level"].attrs["level_kind"] == "model" and "level_pressure" in da.coords
    with pytest.raises(InputError, match="model levels and no level was chosen"):
        levels.select_level(da, None, source="s")
    with pytest.raises(InputError, match="outside the pressures of the model levels"):
        levels.select_level(da, "5hPa", source="s")  # above the top level (0.1 ps) everywhere
    mid = levels.select_level(da, "500hPa", source="s")
    # a + b ln p is exact under interpolation linear in ln p, whatever the column's pressures
    np.testing.assert_allclose(mid.values, 250.0 + 30.0 * np.log(0.5), atol=1e-9)
    low = levels.select_level(da, "1000hPa", source="s").isel(time=0)
    lowest = 0.995 * surface_pressure(low["lat"].values, 0.0)
    below = lowest < 1.0e5  # 1000 hPa lies under the lowest model level: below the surface
    assert np.isnan(low.values[below]).all() and np.isfinite(low.values[~below]).all()


def test_a_run_on_model_levels_scores_against_pressure_levels(tmp_path: Path) -> None:
    run = sigma_file(tmp_path / "s.nc", with_pressure=True)
    ref = write_levels(tmp_path / "r.nc", levels=(1000.0, 850.0, 500.0, 250.0), years=2,
                       field=lambda p, lat, lon, m: 250.0 + 30.0 * np.log(p / 1000.0) + 0.0 * lat)
    cmp = Comparison(reference=Source("r", "reference", [str(ref)]), models=[Source("m", "model", [str(run)])],
                     variable="ta", level="500hPa", cache=False)
    table = cmp.scores()
    assert abs(table.loc[table["metric"] == "bias", "value"].item()) < 1e-9
    with pytest.raises(InputError, match="model levels; a vertical section needs"):
        cmp.zonal_section("m", "ANN")


# ---------------------------------------------------------------------------- command line
def gridscore() -> str:
    exe = Path(sys.executable).with_name("gridscore")
    return str(exe) if exe.exists() else (shutil.which("gridscore") or "gridscore")


def run(*args: str) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if k != "GRIDSCORE_DEBUG"}
    return subprocess.run([gridscore(), *map(str, args)], capture_output=True, text=True, timeout=300, env=env)


def test_cli_scores_a_variable_on_levels(pair, tmp_path: Path) -> None:
    for level, label in (("850hPa", "850 hPa"), ("500hPa", "500 hPa")):
        out = tmp_path / f"{level}.csv"
        done = run("score", "--reference", pair["ref"], "--model", f"run={pair['run']}", "--variable", "ta", "--level", level, "--output", out)
        assert done.returncode == 0, done.stderr
        table = pd.read_csv(out)
        assert list(table.columns)[:4] == ["model", "reference", "variable", "level"]
        assert set(table["level"]) == {label}
        assert table.loc[table["metric"] == "bias", "value"].item() == pytest.approx(1.0, abs=1e-6)


def test_cli_refuses_levels_without_a_choice(pair) -> None:
    done = run("score", "--reference", pair["ref"], "--model", f"run={pair['run']}", "--variable", "ta")
    assert done.returncode == 2
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "1000, 850, 700, 500, 300, 200 hPa" in lines[0] and "--level" in lines[0]
    assert "Traceback" not in done.stderr


def test_cli_refuses_a_level_outside_a_source(pair) -> None:
    done = run("score", "--reference", pair["ref"], "--model", f"run={pair['run']}", "--variable", "ta", "--level", "225hPa")
    assert done.returncode == 2  # the reference reaches 200 hPa, the run only 250 hPa
    assert "outside the levels of 'run'" in done.stderr and "extrapolate" in done.stderr


# ---------------------------------------------------------------------------- sections
def test_zonal_section_of_the_reference_itself_is_zero(pair) -> None:
    cmp = Comparison(reference=Source("ref", "reference", [str(pair["ref"])]), models=[Source("run", "model", [str(pair["run"])])],
                     variable="ta", level="500hPa", cache=False)
    assert cmp.has_levels
    own = cmp.zonal_section("ref", "ANN")
    assert own.attrs["bias"] == 0.0 and own.attrs["rmse"] == 0.0
    section = cmp.zonal_section("run", "JJA")
    assert section["run"].dims == ("level", "lat")
    np.testing.assert_array_equal(section["level"].values, [1000.0, 850.0, 700.0, 500.0, 300.0, 200.0])
    # the run's levels reach 1000-250 hPa: the reference's 200 hPa is outside them
    assert np.isnan(section["difference"].sel(level=200.0).values).all()
    assert np.isfinite(section["difference"].sel(level=850.0).values).all()


def _one_field(path: Path, name: str, value: float, attrs: dict, extra_coords: dict | None = None) -> Path:
    """A constant monthly field of one year on a 30° grid."""
    xr.Dataset(
        {name: (("time", "lat", "lon"), np.full((12, 6, 12), value), attrs)},
        coords={
            "time": ("time", np.arange(12) * 30.0 + 15.0, {"units": "days since 2001-01-01", "calendar": "360_day"}),
            "lat": ("lat", np.arange(-75.0, 90.0, 30.0), {"units": "degrees_north"}),
            "lon": ("lon", np.arange(15.0, 360.0, 30.0), {"units": "degrees_east"}),
            **(extra_coords or {}),
        },
    ).to_netcdf(path)
    return path


@pytest.mark.parametrize(
    ("coord", "attrs", "level", "label"),
    [
        ("height", {"standard_name": "height", "units": "m", "positive": "up", "axis": "Z"}, 2.0, "2 m"),
        ("plev", {"standard_name": "air_pressure", "units": "Pa"}, 50000.0, "500 hPa"),
    ],
)
def test_a_scalar_vertical_coordinate_names_the_one_level(tmp_path: Path, coord, attrs, level, label) -> None:
    # CF conventions 5.7: a scalar coordinate variable (no dimension, named in the variable's
    # `coordinates`) gives the single level of a field, e.g. near-surface temperature at
    # height = 2 m; --level naming it is accepted and written as that level, another refused
    from app.cli import main

    path = _one_field(tmp_path / "one-level.nc", "ta", 280.0, {"units": "K", "standard_name": "air_temperature"}, {coord: ((), level, attrs)})
    out = tmp_path / "s.csv"
    asked = label.replace(" ", "")
    assert main(["score", "--reference", f"ref={path}", "--model", f"run={path}", "--variable", "ta", "--level", asked, "--season", "JAN", "--output", str(out)]) == 0
    assert set(pd.read_csv(out, keep_default_na=False)["level"]) == {label}
    with pytest.raises(InputError, match=f"single level {label}"):
        levels.select_level(opened(path), "850hPa" if "hPa" not in asked else "10m", source="run")


def test_a_variable_without_levels_names_the_scalar_coordinate_remedy(tmp_path: Path) -> None:
    # a level written only in a free attribute (lev = "500.0") is not a CF vertical coordinate
    _one_field(tmp_path / "attr-level.nc", "zg", 5500.0, {"units": "m", "lev": "500.0"})
    with pytest.raises(InputError, match="no vertical levels") as err:
        levels.select_level(opened(tmp_path / "attr-level.nc", "zg"), "500hPa", source="run")
    assert "scalar coordinate" in str(err.value) and "coordinates attribute" in str(err.value)
