"""The demo generator and the committed sample collection.

The generator is checked on its ``tiny`` size (coarse grids, 8 years, about 2 s); the
committed ``sample_output/`` is checked for what its README documents: every file opens
with a CF time axis in the stated calendar, and every injected bias is in the data by the
documented amount.  All sums here are plain numpy with exact spherical cell areas,
independent of ``evaluation.grid``.
"""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

import cftime
import numpy as np
import pytest
import xarray as xr
from scipy import signal, stats

from evaluation.demo import (
    DEMO_MARKER,
    ECCENTRICITY,
    OBLIQUITY,
    SOLAR_CONSTANT,
    daily_insolation,
    write_demo,
)
from evaluation.errors import InputError

SAMPLE = Path(__file__).resolve().parents[1] / "sample_output"
SEED = 20261201


# --------------------------------------------------------------------------- helpers


def zone_weights(lat: np.ndarray, nlon: int) -> np.ndarray:
    """Relative cell areas of a regular grid from its centres.

    Archimedes' hat-box theorem: the area of a latitude zone is 2 pi R^2 (sin phi_n - sin phi_s)
    (common practice); edges lie midway between centres and at the poles.
    """
    order = np.argsort(lat)
    centres = lat[order]
    edges = np.concatenate([[-90.0], (centres[1:] + centres[:-1]) / 2, [90.0]])
    zone = np.diff(np.sin(np.deg2rad(edges)))
    weights = np.empty_like(zone)
    weights[order] = zone
    return np.repeat(weights[:, None], nlon, axis=1) / (zone.sum() * nlon)


def horizontal_names(ds: xr.Dataset) -> tuple[str, str]:
    lat = next(n for n in ds.coords if ds[n].attrs.get("standard_name") == "latitude")
    lon = next(n for n in ds.coords if ds[n].attrs.get("standard_name") == "longitude")
    return str(lat), str(lon)


def read(root: Path, source: str, variable: str) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """All months of one variable of one source: values (time, lat, lon), lat, lon, weights."""
    folder = next(p for p in (root / "references" / source, root / "runs" / source) if p.is_dir())
    files = sorted(folder.glob(f"{variable}_{source}*.nc"))
    assert files, f"no {variable} files for {source}"
    parts = []
    for path in files:
        with xr.open_dataset(path, decode_times=False) as ds:
            lat_name, lon_name = horizontal_names(ds)
            parts.append(ds[variable].transpose(..., lat_name, lon_name).values.astype(np.float64))
            lat, lon = ds[lat_name].values, ds[lon_name].values
    values = np.concatenate(parts) if parts[0].ndim == 3 else parts[0]
    return values, lat, lon, zone_weights(lat, lon.size)


def global_mean(values: np.ndarray, weights: np.ndarray) -> np.ndarray:
    return (values * weights).sum(axis=(-2, -1))


def annual_trend(values: np.ndarray, weights: np.ndarray) -> float:
    """OLS slope per decade of the annual means of the global mean (scipy.stats.linregress)."""
    annual = global_mean(values, weights).reshape(-1, 12).mean(axis=1)
    return float(stats.linregress(np.arange(annual.size), annual).slope * 10)


def box_mean(values, lat, lon, *, south, north, west, east, land=None) -> float:
    """Time-mean over a lat-lon box (degrees east, ``west`` < ``east`` within 0..360).

    Each cell counts with the exact area it shares with the box (spherical zone area times
    the longitude overlap), so grids of any spacing average over the same region; with
    ``land`` (a land fraction) the cells are further weighted by their land area.
    """
    order = np.argsort(lat)
    centres = lat[order]
    lat_edges = np.concatenate([[-90.0], (centres[1:] + centres[:-1]) / 2, [90.0]])
    south_edge = np.empty_like(lat, dtype=float)
    north_edge = np.empty_like(lat, dtype=float)
    south_edge[order], north_edge[order] = lat_edges[:-1], lat_edges[1:]
    zone = np.clip(
        np.sin(np.deg2rad(np.minimum(north_edge, north))) - np.sin(np.deg2rad(np.maximum(south_edge, south))),
        0.0,
        None,
    )
    step = 360.0 / lon.size  # regular longitudes
    lon_w = lon % 360 - step / 2
    width = np.zeros(lon.size)
    for shift in (-360.0, 0.0, 360.0):  # a cell may straddle 0/360
        width += np.clip(np.minimum(lon_w + step + shift, east) - np.maximum(lon_w + shift, west), 0.0, None)
    weights = zone[:, None] * width[None, :]
    if land is not None:
        weights = weights * land
    field = values.mean(axis=0) if values.ndim == 3 else values
    return float((field * weights).sum() / weights.sum())


# --------------------------------------------------------------------------- generator


@pytest.fixture(scope="module")
def tiny(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return write_demo(tmp_path_factory.mktemp("tiny") / "demo", size="tiny", seed=SEED)


def test_same_seed_gives_same_values(tiny: Path, tmp_path: Path) -> None:
    again = write_demo(tmp_path / "again", size="tiny", seed=SEED)
    first = sorted(p.relative_to(tiny.parent) for p in tiny.parent.rglob("*.nc"))
    second = sorted(p.relative_to(again.parent) for p in again.parent.rglob("*.nc"))
    assert first == second and len(first) > 20
    for rel in first:
        with (
            xr.open_dataset(tiny.parent / rel, decode_times=False) as a,
            xr.open_dataset(again.parent / rel, decode_times=False) as b,
        ):
            xr.testing.assert_identical(a.load(), b.load())
    assert tiny.read_text() == again.read_text()


def test_other_seed_gives_other_values(tiny: Path, tmp_path: Path) -> None:
    other = write_demo(tmp_path / "other", size="tiny", seed=SEED + 1)
    rel = Path("runs/larkspur-2")
    name = next((tiny.parent / rel).glob("tas_*.nc")).name
    with xr.open_dataset(tiny.parent / rel / name) as a, xr.open_dataset(other.parent / rel / name) as b:
        assert a["tas"].shape == b["tas"].shape
        assert not np.array_equal(a["tas"].values, b["tas"].values)


def test_manifest_is_toml_with_marker_and_sources(tiny: Path) -> None:
    text = tiny.read_text(encoding="utf-8")
    assert text.startswith(DEMO_MARKER)
    table = tomllib.loads(text)
    roles = {s["name"]: s["role"] for s in table["source"]}
    assert list(roles.values()).count("reference") == 2
    assert list(roles.values()).count("model") == 4
    for source in table["source"]:
        assert source["paths"] and source["description"]
        assert re.fullmatch(r"#[0-9a-f]{6}", source["colour"])
    assert (tiny.parent / "README.md").is_file()


def test_rerun_replaces_an_earlier_demo(tmp_path: Path) -> None:
    target = tmp_path / "demo"
    write_demo(target, size="tiny", years=6)
    write_demo(target, size="tiny", years=4)
    tas = sorted(p.name for p in (target / "runs" / "larkspur-2").glob("tas_*.nc"))
    assert tas == ["tas_larkspur-2_201701-202012.nc"]  # the 6-year file is gone
    assert [p.name for p in tmp_path.iterdir()] == ["demo"]  # no staging folder left behind


def test_refuses_a_folder_with_other_content(tmp_path: Path) -> None:
    (tmp_path / "notes.txt").write_text("mine")
    with pytest.raises(InputError, match="not empty") as info:
        write_demo(tmp_path, size="tiny")
    assert "\n" not in str(info.value) and info.value.remedy
    assert [p.name for p in tmp_path.iterdir()] == ["notes.txt"]


def test_refuses_a_file_and_an_unknown_size(tmp_path: Path) -> None:
    path = tmp_path / "file.nc"
    path.write_bytes(b"")
    with pytest.raises(InputError, match="not a folder"):
        write_demo(path)
    with pytest.raises(InputError, match="unknown demo size 'huge'.*tiny, small, large"):
        write_demo(tmp_path / "x", size="huge")
    with pytest.raises(InputError, match="at least 2 years"):
        write_demo(tmp_path / "x", size="tiny", years=1)


def test_more_runs_than_named_ones(tmp_path: Path) -> None:
    manifest = write_demo(tmp_path / "demo", size="tiny", years=3, runs=5)
    names = [s["name"] for s in tomllib.loads(manifest.read_text())["source"] if s["role"] == "model"]
    assert len(names) == 5 and len(set(names)) == 5


def test_daily_insolation_handbook_values() -> None:
    # Hartmann (2016), Global Physical Climatology, section 2.5: at an equinox the equator
    # gets S0/pi (a/d)^2, the poles nothing; at the June solstice the North Pole gets
    # S0 (a/d)^2 sin(obliquity), more than the equator.  Earth-Sun distance about 0.9961 au
    # at the March equinox and 1.0163 au at the June solstice (value from memory).
    lat = np.array([-90.0, 0.0, 90.0])
    march, june = (79.5 / 365.0,), (171.5 / 365.0,)
    q_march = daily_insolation(lat, np.array(march))[0]
    assert q_march[1] == pytest.approx(SOLAR_CONSTANT / np.pi / 0.9961**2, rel=0.01)
    assert q_march[0] < 15 and q_march[2] < 15
    q_june = daily_insolation(lat, np.array(june))[0]
    assert q_june[2] == pytest.approx(SOLAR_CONSTANT * np.sin(np.deg2rad(OBLIQUITY)) / 1.0163**2, rel=0.01)
    assert q_june[0] == 0.0 and q_june[2] > q_june[1]


# --------------------------------------------------------------------------- bundled land fraction

LAND_FRACTION_DIR = Path(__file__).resolve().parents[1] / "evaluation" / "data"


@pytest.mark.parametrize(
    ("name", "step"), [("land_fraction_1deg.nc", 1.0), ("land_fraction_0p25deg.nc", 0.25)]
)
def test_bundled_land_fraction(name: str, step: float) -> None:
    path = LAND_FRACTION_DIR / name
    assert path.stat().st_size < 1_000_000
    with xr.open_dataset(path) as ds:
        sftlf = ds["sftlf"]
        assert sftlf.attrs["standard_name"] == "land_area_fraction" and sftlf.attrs["units"] == "1"
        assert ds["lat"].attrs["standard_name"] == "latitude" and ds["lon"].attrs["units"] == "degrees_east"
        lat, lon = ds["lat"].values, ds["lon"].values
        np.testing.assert_allclose(lat, np.arange(-90 + step / 2, 90, step))
        np.testing.assert_allclose(lon, np.arange(-180 + step / 2, 180, step))
        np.testing.assert_allclose(ds[ds["lat"].attrs["bounds"]].values[:, 0], lat - step / 2)
        values = sftlf.values
        assert np.isfinite(values).all() and values.min() == 0.0 and values.max() == 1.0
        # common practice: about 29 % of the Earth's surface is land
        assert global_mean(values, zone_weights(lat, lon.size)) == pytest.approx(0.29, abs=0.005)
        # places everyone knows (common practice): central Sahara, East Antarctica and
        # Siberia are land; the middle of the Pacific and of the Atlantic are ocean
        at = sftlf.sel
        for la, lo, land in [
            (23, 10, 1),
            (-80, 60, 1),
            (62, 100, 1),
            (0, -150, 0),
            (-30, -20, 0),
            (30, -40, 0),
        ]:
            assert float(at(lat=la, lon=lo, method="nearest")) == land


# --------------------------------------------------------------------------- the committed sample


def sample_sources() -> list[dict]:
    return tomllib.loads((SAMPLE / "manifest.toml").read_text(encoding="utf-8"))["source"]


def test_sample_manifest_is_a_demo_of_1981_2020() -> None:
    text = (SAMPLE / "manifest.toml").read_text(encoding="utf-8")
    assert text.startswith(DEMO_MARKER) and f"seed={SEED}" in text.splitlines()[0]
    assert [s["name"] for s in sample_sources()] == [
        "tessera-obs",
        "halyard-rean",
        "larkspur-2",
        "pumice-ctl",
        "tidewell-3",
        "cobble-b",
        "fennel-r1",
        "fennel-r2",
        "fennel-r3",
    ]
    # the three members of the invented ensemble carry the manifest field, no other source does
    assert {s["name"]: s.get("ensemble") for s in sample_sources() if "ensemble" in s} == {f"fennel-r{i}": "fennel" for i in (1, 2, 3)}


def test_sample_years_as_stated() -> None:
    spans = {
        s["name"]: re.search(r"monthly (\d{4})-(\d{4})", s["description"]).groups() for s in sample_sources()
    }
    assert spans.pop("pumice-ctl") == ("1985", "2020")  # the one late start
    assert set(spans.values()) == {("1981", "2020")}


@pytest.mark.slow
def test_sample_is_what_the_generator_writes(tmp_path: Path) -> None:
    # The committed files must not drift from the code: same seed, same values, exactly (the
    # generator's sums do not depend on the BLAS kernel; see test_sample_is_the_same_with_another_blas_kernel).
    fresh = write_demo(tmp_path / "sample_output", seed=SEED).parent
    committed = sorted(p.relative_to(SAMPLE) for p in SAMPLE.rglob("*.nc"))
    assert committed == sorted(p.relative_to(fresh) for p in fresh.rglob("*.nc"))
    for rel in committed:
        with (
            xr.open_dataset(SAMPLE / rel, decode_times=False) as a,
            xr.open_dataset(fresh / rel, decode_times=False) as b,
        ):
            assert a.attrs == b.attrs and list(a.variables) == list(b.variables)
            for name in a.variables:
                old, new = a[name].values, b[name].values
                np.testing.assert_array_equal(new, old, err_msg=f"{rel}:{name}")  # NaN (below the surface) equal NaN
    for name in ("manifest.toml", "README.md"):
        assert (SAMPLE / name).read_text(encoding="utf-8") == (fresh / name).read_text(encoding="utf-8")


def test_sample_is_small() -> None:
    total = sum(p.stat().st_size for p in SAMPLE.rglob("*") if p.is_file())
    assert total < 31e6  # the committed sample stays near 30 MB (the ensemble's three members add 3.6 MB)


# CF Conventions 1.10, section 4.4.1 (calendar definitions): month lengths of a non-leap
# and a leap year; 360_day has 30-day months; noleap/365_day never have 29 February.
MONTH_DAYS = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])


def expected_month_days(calendar: str, years: np.ndarray, months: np.ndarray) -> np.ndarray:
    if calendar == "360_day":
        return np.full(years.shape, 30)
    days = MONTH_DAYS[months - 1].copy()
    if calendar in ("standard", "gregorian", "proleptic_gregorian"):
        leap = (years % 4 == 0) & (
            (years % 100 != 0) | (years % 400 == 0)
        )  # Gregorian rule, all years > 1582
        days[(months == 2) & leap] = 29
    return days


@pytest.mark.parametrize("source", [s["name"] for s in sample_sources()] if SAMPLE.is_dir() else [])
def test_sample_files_have_cf_time_in_the_stated_calendar(source: str) -> None:
    entry = next(s for s in sample_sources() if s["name"] == source)
    stated = re.search(r"(\w+) calendar", entry["description"]).group(1)
    files = sorted(p for pattern in entry["paths"] for p in SAMPLE.glob(pattern))
    timed = [p for p in files if not p.name.startswith("sftlf_")]
    assert timed and len(files) == len(timed) + 1
    for path in timed:
        with xr.open_dataset(path, decode_times=False) as raw:
            time = raw["time"]
            assert time.attrs["calendar"] == stated
            assert time.attrs["units"] == "days since 1850-01-01"
            assert time.attrs["standard_name"] == "time" and time.attrs["axis"] == "T"
            bounds = raw[time.attrs["bounds"]].values
            dates = cftime.num2date(bounds[:, 0], time.attrs["units"], calendar=stated)
            years = np.array([d.year for d in dates])
            months = np.array([d.month for d in dates])
            assert all(d.day == 1 and d.hour == 0 for d in dates)
            np.testing.assert_array_equal(bounds[1:, 0], bounds[:-1, 1])  # contiguous months
            np.testing.assert_array_equal(
                bounds[:, 1] - bounds[:, 0], expected_month_days(stated, years, months)
            )
            assert np.all((time.values > bounds[:, 0]) & (time.values < bounds[:, 1]))
            for name in ("lat", "lon", "latitude", "longitude"):
                if name in raw.coords:
                    assert raw[name].attrs["standard_name"] in ("latitude", "longitude")
                    assert raw[name].attrs["units"] in ("degrees_north", "degrees_east")
        with xr.open_dataset(path, decode_times=xr.coders.CFDatetimeCoder(use_cftime=True)) as decoded:
            assert decoded["time"].values[0].calendar in (stated, {"365_day": "noleap"}.get(stated, stated))


def test_sample_land_fraction_matches_the_earth() -> None:
    # common practice: about 29 % of the Earth's surface is land.
    for source in ("tessera-obs", "larkspur-2", "pumice-ctl"):
        sftlf, _, _, w = read(SAMPLE, source, "sftlf")
        assert global_mean(sftlf, w) == pytest.approx(29.0, abs=1.0)


def test_sample_reference_is_earth_like() -> None:
    tas, _, _, w = read(SAMPLE, "tessera-obs", "tas")
    # common practice: global mean near-surface air temperature about 14-15 degC
    assert global_mean(tas, w).mean() == pytest.approx(288.0, abs=1.5)
    pr, _, _, w = read(SAMPLE, "tessera-obs", "pr")
    # value from memory: observed global precipitation about 2.7 mm/day
    assert global_mean(pr, w).mean() * 86400 == pytest.approx(2.7, abs=0.3)
    psl, _, _, w = read(SAMPLE, "tessera-obs", "psl")
    # value from memory: global mean sea-level pressure about 1011 hPa
    assert global_mean(psl, w).mean() / 100 == pytest.approx(1011, abs=3)
    rsdt, _, _, w = read(SAMPLE, "tessera-obs", "rsdt")
    rsut, _, _, _ = read(SAMPLE, "tessera-obs", "rsut")
    rlut, _, _, _ = read(SAMPLE, "tessera-obs", "rlut")
    # Mean annual insolation S0/4 / sqrt(1 - e^2) (Berger 1978; time average of (a/d)^2)
    assert global_mean(rsdt, w).mean() == pytest.approx(
        SOLAR_CONSTANT / 4 / np.sqrt(1 - ECCENTRICITY**2), rel=5e-4
    )
    # Trenberth, Fasullo & Kiehl (2009): OLR about 239 W m-2, planetary albedo about 0.30
    assert global_mean(rlut, w).mean() == pytest.approx(239.0, abs=4.0)
    assert rsut.mean(axis=0).ravel() @ w.ravel() / (rsdt.mean(axis=0).ravel() @ w.ravel()) == pytest.approx(
        0.30, abs=0.02
    )
    # the seasonal cycle is hemispherically opposite (common practice): July minus January
    tas, lat, lon, w = read(SAMPLE, "tessera-obs", "tas")
    july_minus_january = tas[6::12].mean(axis=0) - tas[0::12].mean(axis=0)
    assert box_mean(july_minus_january, lat, lon, south=30, north=90, west=0, east=360) > 5
    assert box_mean(july_minus_january, lat, lon, south=-90, north=-30, west=0, east=360) < -2


def planetary_albedo(source: str) -> float:
    rsdt, _, _, w = read(SAMPLE, source, "rsdt")
    rsut, _, _, _ = read(SAMPLE, source, "rsut")
    return float(global_mean(rsut, w).sum() / global_mean(rsdt, w).sum())


def net_toa(source: str) -> tuple[np.ndarray, np.ndarray]:
    rsdt, _, _, w = read(SAMPLE, source, "rsdt")
    rsut, _, _, _ = read(SAMPLE, source, "rsut")
    rlut, _, _, _ = read(SAMPLE, source, "rlut")
    return rsdt - rsut - rlut, w


def test_sample_bright_run_reflects_too_much() -> None:
    # README: pumice-ctl has planetary albedo 0.320 against the reference's 0.294
    # (about +9 W m-2 reflected), compensated by less outgoing longwave.
    assert planetary_albedo("tessera-obs") == pytest.approx(0.294, abs=0.002)
    assert planetary_albedo("pumice-ctl") - planetary_albedo("tessera-obs") == pytest.approx(0.026, abs=0.002)
    for run in ("larkspur-2", "cobble-b"):
        assert abs(planetary_albedo(run) - planetary_albedo("tessera-obs")) < 0.01
    rsut_run, _, _, w_run = read(SAMPLE, "pumice-ctl", "rsut")
    rsut_ref, _, _, w_ref = read(SAMPLE, "tessera-obs", "rsut")
    assert global_mean(rsut_run, w_run).mean() - global_mean(rsut_ref, w_ref).mean() == pytest.approx(
        9.0, abs=1.0
    )
    net, w = net_toa("pumice-ctl")
    assert global_mean(net, w).mean() == pytest.approx(0.6, abs=0.1)


def test_sample_drifting_run_gains_energy() -> None:
    # README: cobble-b's net TOA flux drifts by +0.5 W m-2 per decade; the others are steady.
    net, w = net_toa("cobble-b")
    assert annual_trend(net, w) == pytest.approx(0.5, abs=0.05)
    for source in ("tessera-obs", "larkspur-2", "pumice-ctl"):
        net, w = net_toa(source)
        assert abs(annual_trend(net, w)) < 0.1


def test_sample_trends_as_documented() -> None:
    # README: global tas trends 0.19 (tessera-obs), 0.16 (halyard-rean), 0.36 (tidewell-3).
    documented = {"tessera-obs": 0.19, "halyard-rean": 0.16, "tidewell-3": 0.36, "larkspur-2": 0.22}
    for source, trend in documented.items():
        tas, _, _, w = read(SAMPLE, source, "tas")
        assert annual_trend(tas, w) == pytest.approx(trend, abs=0.01), source


def test_sample_cold_bias_over_northern_land() -> None:
    # README: larkspur-2 is 3 K too cold times the land fraction between 35N and 70N.
    def land_mean(source: str) -> float:
        tas, lat, lon, _ = read(SAMPLE, source, "tas")
        sftlf, _, _, _ = read(SAMPLE, source, "sftlf")
        return box_mean(tas, lat, lon, south=40, north=65, west=0, east=360, land=sftlf / 100)

    reference = land_mean("tessera-obs")
    # a land-area-weighted mean of -3 K times the land fraction: between -3 and about -2.5
    assert land_mean("larkspur-2") - reference == pytest.approx(-2.8, abs=0.6)
    for run in ("pumice-ctl", "tidewell-3", "cobble-b"):
        assert abs(land_mean(run) - reference) < 1.0, run


def test_sample_double_itcz() -> None:
    # README: tidewell-3 rains +5 mm/day over the open Pacific (160E-100W) between 12S and 5S.
    def pacific_band(source: str) -> float:
        pr, lat, lon, _ = read(SAMPLE, source, "pr")
        sftlf, _, _, _ = read(SAMPLE, source, "sftlf")
        return 86400 * box_mean(pr, lat, lon, south=-11, north=-6, west=175, east=245, land=1 - sftlf / 100)

    reference = pacific_band("tessera-obs")
    assert pacific_band("tidewell-3") - reference == pytest.approx(5.0, abs=1.5)
    for run in ("larkspur-2", "pumice-ctl"):
        assert abs(pacific_band(run) - reference) < 1.5, run


def test_sample_second_reference_is_warmer_at_high_latitudes() -> None:
    # README: halyard-rean is 1 K warmer than tessera-obs poleward of 60 degrees (tapered
    # over 57.5-62.5, so a little less over 60-90), and the same elsewhere.
    def band(source: str, south: float, north: float) -> float:
        tas, lat, lon, _ = read(SAMPLE, source, "tas")
        return box_mean(tas, lat, lon, south=south, north=north, west=0, east=360)

    assert band("halyard-rean", 60, 90) - band("tessera-obs", 60, 90) == pytest.approx(0.95, abs=0.25)
    assert band("halyard-rean", -90, -60) - band("tessera-obs", -90, -60) == pytest.approx(0.95, abs=0.25)
    assert abs(band("halyard-rean", -30, 30) - band("tessera-obs", -30, 30)) < 0.25


def test_sample_ensemble_shares_its_biases_but_not_its_weather() -> None:
    # README: the fennel members are +2 K over the ocean between 65S and 45S and rain 20 % more
    # over the tropical oceans; they share these and their model errors, not their weather.
    def ocean_box(source: str, variable: str, south: float, north: float) -> float:
        values, lat, lon, _ = read(SAMPLE, source, variable)
        sftlf, _, _, _ = read(SAMPLE, source, "sftlf")
        return box_mean(values, lat, lon, south=south, north=north, west=0, east=360, land=1 - sftlf / 100)

    members = [f"fennel-r{i}" for i in (1, 2, 3)]
    warm = [ocean_box(m, "tas", -62, -48) - ocean_box("tessera-obs", "tas", -62, -48) for m in members]
    wet = [ocean_box(m, "pr", -15, 15) / ocean_box("tessera-obs", "pr", -15, 15) for m in members]
    # the smooth model errors (about 0.6 K, 15 % in pr) blur the injected amounts a little
    assert np.mean(warm) == pytest.approx(2.0, abs=0.7)
    assert np.mean(wet) == pytest.approx(1.2, abs=0.12)
    # shared errors: the members' box means agree far more closely than the biases are large
    # (their 30-year means differ by weather only: ENSO-like rain swings of a few %)
    assert np.ptp(warm) < 0.3 and np.ptp(wet) < 0.1
    # independent weather: monthly global-mean anomalies of two members are uncorrelated
    # (scipy.stats.pearsonr), while the two references, which share their weather, are not
    def anomalies(source: str) -> np.ndarray:
        tas, _, _, w = read(SAMPLE, source, "tas")
        series = global_mean(tas, w)
        monthly = series.reshape(-1, 12)
        # the shared warming trend would correlate any two runs: removed (scipy.signal.detrend)
        return signal.detrend((monthly - monthly.mean(axis=0)).ravel())

    r_members = stats.pearsonr(anomalies("fennel-r1"), anomalies("fennel-r2")).statistic
    r_references = stats.pearsonr(anomalies("tessera-obs"), anomalies("halyard-rean")).statistic
    assert abs(r_members) < 0.35 and r_references > 0.8, (r_members, r_references)


@pytest.mark.slow
def test_sample_is_the_same_with_another_blas_kernel(tmp_path: Path) -> None:
    """Issue: a regenerated sample differed in 5 values of 4 files (one BitRound step, e.g.
    0.125 W m-2 of rsut) because OpenBLAS picks its kernel for the CPU and kernels sum matrix
    products in other orders.  The generator's sums no longer depend on the kernel: the
    sources whose files differed are regenerated here with OpenBLAS forced onto its oldest
    x86-64 kernel (OPENBLAS_CORETYPE, documented by OpenBLAS; elsewhere the variable is
    ignored and this compares a plain regeneration) and compared value for value.
    """
    import subprocess
    import sys

    sources = ("cobble-b", "larkspur-2", "tidewell-3")
    code = (
        "import dataclasses, sys; from pathlib import Path; from evaluation import demo\n"
        "spec = demo.SIZES['small']; build = demo._build_plan(spec, spec.runs, spec.years)\n"
        "build = dataclasses.replace(build, plans=tuple(p for p in build.plans if p.name in sys.argv[2:]))\n"
        f"list(demo._generate(build, Path(sys.argv[1]), spec, 'small', {SEED}))\n"
    )
    env = {**__import__("os").environ, "OPENBLAS_CORETYPE": "Prescott"}
    subprocess.run([sys.executable, "-c", code, str(tmp_path), *sources], check=True, env=env, timeout=600)
    fresh = sorted(tmp_path.rglob("*.nc"))
    assert len(fresh) == 5 + 8 + 4
    for path in fresh:
        rel = path.relative_to(tmp_path)
        with xr.open_dataset(SAMPLE / rel, decode_times=False) as a, xr.open_dataset(path, decode_times=False) as b:
            for name in a.variables:
                np.testing.assert_array_equal(b[name].values, a[name].values, err_msg=f"{rel}:{name}")


def test_matrix_products_do_not_depend_on_the_order_of_additions() -> None:
    # The cause of the one-step differences between machines: a BLAS kernel adds the terms of
    # a dot product in its own order.  The generator's product gives the same bits for any
    # order of the terms (here: the modes permuted, which reorders every sum), and agrees with
    # numpy's matmul to rounding.
    from evaluation.demo import _product

    rng = np.random.default_rng(5)
    a = rng.standard_normal((48, 169)) * np.linspace(1.0, 0.01, 169)
    b = rng.standard_normal((169, 300)) * 2.0
    order = rng.permutation(169)
    first, second = _product(a, b), _product(a[:, order], b[order])
    assert np.array_equal(first, second)
    np.testing.assert_allclose(first, a @ b, rtol=1e-12, atol=1e-12)
    # plain float64 sums in another order differ in the last bits somewhere (why the split is needed)
    assert not np.array_equal(np.cumsum(a * b[:, 0], axis=1)[:, -1], np.cumsum((a * b[:, 0])[:, order], axis=1)[:, -1])
