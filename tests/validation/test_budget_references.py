"""TOA energy budget checked against textbook values, the Stefan-Boltzmann law and hand
computations with exact spherical cell areas, on real CF NetCDF files."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from scipy import stats

from evaluation.budget import (
    BUDGET_METRICS,
    STEFAN_BOLTZMANN,
    budget_numbers,
    budget_series,
    budget_table,
    effective_emissivity,
    equilibrium_temperature,
    planetary_albedo,
)
from evaluation.scoring import Source

# noleap month lengths (CF calendar definition) for the hand-made annual means.
NOLEAP_DAYS = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=float)
LAT = np.arange(-85.0, 90.0, 10.0)
LON = np.arange(-175.0, 180.0, 20.0)
YEARS = np.arange(2001, 2007)


def test_stefan_boltzmann_constant():
    # Source: CODATA 2018 recommended value (exact since the 2019 SI), W m-2 K-4.
    assert STEFAN_BOLTZMANN == 5.670374419e-8


@pytest.mark.parametrize(
    ("emissivity", "expected", "tol"),
    [
        (0.612, 288.0, 0.5),  # standard textbook zero-dimensional energy balance (common practice)
        (0.64, 285.0, 0.5),  # same model with a slightly larger emissivity (common practice)
        (1.0, 255.0, 0.5),  # black body: the textbook "255 K" effective temperature (value from memory)
    ],
)
def test_equilibrium_temperature_textbook_values(emissivity, expected, tol):
    # S = 1367 W m-2, A = 0.3: the classic zero-dimensional model (Stefan-Boltzmann).
    assert equilibrium_temperature(1367.0, 0.3, emissivity) == pytest.approx(expected, abs=tol)


def test_equilibrium_temperature_balances_the_stefan_boltzmann_law():
    # Source: Stefan-Boltzmann law, eps sigma T^4 = (1 - A) S / 4 at equilibrium.
    s, a, e = np.array([1361.0, 1367.0]), np.array([0.29, 0.31]), np.array([0.6, 0.62])
    t = equilibrium_temperature(s, a, e)
    np.testing.assert_allclose(e * 5.670374419e-8 * t**4, (1 - a) * s / 4, rtol=1e-12)


def test_degenerate_inputs_give_nan():
    # Common practice: no equilibrium without absorbed flux or emission; no albedo without sunlight.
    assert np.isnan(equilibrium_temperature(1367.0, 1.0, 0.6))
    assert np.isnan(equilibrium_temperature(1367.0, 0.3, 0.0))
    assert np.isnan(planetary_albedo(0.0, 0.0))
    assert np.isnan(effective_emissivity(240.0, 0.0))


# ---------------------------------------------------------------------------- analytic fields
def _hand_weights() -> np.ndarray:
    """Exact cell areas on the unit sphere, (sin(north) - sin(south)) * dlon (spherical geometry)."""
    edges = np.deg2rad(np.concatenate([[-90.0], LAT[:-1] + 5.0, [90.0]]))
    dlon = np.deg2rad(20.0)
    band = (np.sin(edges[1:]) - np.sin(edges[:-1])) * dlon
    return np.repeat(band[:, None], LON.size, axis=1)


def _analytic_monthly():
    """Monthly fields (time, lat, lon): rsdt ~ cos(lat) with a seasonal wiggle, albedo 0.3,
    tas(lat) with a small warming, rlut = 0.61 sigma tas^4 minus a drift."""
    nt = YEARS.size * 12
    coslat = np.cos(np.deg2rad(LAT))[None, :, None] * np.ones((1, 1, LON.size))
    month = np.tile(np.arange(12), YEARS.size)
    year_index = np.repeat(np.arange(YEARS.size), 12)
    rsdt = 433.0 * coslat * (1.0 + 0.03 * np.cos(2 * np.pi * month / 12))[:, None, None]
    rsut = 0.3 * rsdt
    tas = (
        (288.0 + 15.0 * np.cos(np.deg2rad(LAT)) ** 2 - 10.0)[None, :, None]
        + 0.02 * year_index[:, None, None]
        + np.zeros((nt, 1, LON.size))
    )
    rlut = 0.61 * STEFAN_BOLTZMANN * tas**4 - 0.05 * year_index[:, None, None]
    return {"rsdt": rsdt, "rsut": rsut, "rlut": rlut, "tas": tas}


def _write(path, name, standard_name, units, data):
    """A small CF-1.10 file with a noleap monthly time axis starting in January 2001."""
    ends = np.cumsum(np.tile(NOLEAP_DAYS, data.shape[0] // 12))
    mid = ends - np.tile(NOLEAP_DAYS, data.shape[0] // 12) / 2.0
    ds = xr.Dataset(
        {
            name: (
                ("time", "lat", "lon"),
                data.astype("float32"),
                {"standard_name": standard_name, "units": units},
            )
        },
        coords={
            "time": (
                "time",
                mid,
                {"standard_name": "time", "units": "days since 2001-01-01", "calendar": "noleap"},
            ),
            "lat": ("lat", LAT, {"standard_name": "latitude", "units": "degrees_north"}),
            "lon": ("lon", LON, {"standard_name": "longitude", "units": "degrees_east"}),
        },
        attrs={"Conventions": "CF-1.10"},
    )
    ds.to_netcdf(path)


FIELD_META = {
    "rsdt": ("toa_incoming_shortwave_flux", "W m-2"),
    "rsut": ("toa_outgoing_shortwave_flux", "W m-2"),
    "rlut": ("toa_outgoing_longwave_flux", "W m-2"),
    "tas": ("air_temperature", "K"),
}


def _hand_annual_global(data: np.ndarray) -> np.ndarray:
    """Area-weighted global means per month, then month-length weighted annual means (numpy)."""
    w = _hand_weights()
    monthly = (data * w).sum(axis=(1, 2)) / w.sum()
    return (monthly.reshape(-1, 12) * NOLEAP_DAYS).sum(axis=1) / NOLEAP_DAYS.sum()


@pytest.fixture
def analytic_source(tmp_path):
    fields = _analytic_monthly()
    for name, data in fields.items():
        std, units = FIELD_META[name]
        _write(tmp_path / f"{name}_run-b.nc", name, std, units, data)
    # The files store float32: the hand computation starts from the same stored values.
    stored = {k: v.astype("float32").astype("float64") for k, v in fields.items()}
    return Source(name="run-b", role="model", paths=[str(tmp_path / "*.nc")]), stored


def test_budget_numbers_on_analytic_fields_match_hand_computation():
    # Source: hand computation with exact spherical cell areas (numpy); albedo and
    # emissivity as defined by the zero-dimensional model (ratio of global means).
    fields = _analytic_monthly()
    w = _hand_weights()
    coords = {"lat": LAT, "lon": LON}
    da = {k: xr.DataArray(v[0], dims=("lat", "lon"), coords=coords) for k, v in fields.items()}
    weights = xr.DataArray(w * 6.371e6**2, dims=("lat", "lon"), coords=coords)  # a constant factor cancels
    got = budget_numbers(da["rsdt"], da["rsut"], da["rlut"], da["tas"], weights)

    mean = {k: float((v[0] * w).sum() / w.sum()) for k, v in fields.items()}
    np.testing.assert_allclose(got["toa_net"], mean["rsdt"] - mean["rsut"] - mean["rlut"], rtol=1e-12)
    np.testing.assert_allclose(got["albedo"], 0.3, rtol=1e-12)  # constant cell albedo 0.3
    np.testing.assert_allclose(
        got["emissivity"], mean["rlut"] / (5.670374419e-8 * mean["tas"] ** 4), rtol=1e-12
    )
    np.testing.assert_allclose(got["solar_constant"], 4 * mean["rsdt"], rtol=1e-12)
    np.testing.assert_allclose(got["t_surface"], mean["tas"], rtol=1e-12)
    # Algebra of the zero-dimensional model: T_e = T_s ((rsdt - rsut) / rlut)^(1/4).
    t_e = mean["tas"] * ((mean["rsdt"] - mean["rsut"]) / mean["rlut"]) ** 0.25
    np.testing.assert_allclose(got["t_equilibrium"], t_e, rtol=1e-12)
    np.testing.assert_allclose(got["t_difference"], t_e - mean["tas"], rtol=1e-9)
    assert np.isnan(got["toa_net_drift"])  # no year dimension, no drift
    # Sanity against the continuous integral: the area mean of cos(lat) is pi/4 (calculus).
    np.testing.assert_allclose(mean["rsdt"] / (433.0 * 1.03), np.pi / 4, rtol=2e-3)


def test_nan_cells_get_zero_weight():
    # Source: hand computation (numpy) over the valid cells only.
    fields = _analytic_monthly()
    w = _hand_weights()
    coords = {"lat": LAT, "lon": LON}
    rsdt = fields["rsdt"][0].copy()
    rsdt[2:5, 3:6] = np.nan
    da = {k: xr.DataArray(v[0], dims=("lat", "lon"), coords=coords) for k, v in fields.items()}
    da["rsdt"] = xr.DataArray(rsdt, dims=("lat", "lon"), coords=coords)
    got = budget_numbers(
        da["rsdt"], da["rsut"], da["rlut"], da["tas"], xr.DataArray(w, dims=("lat", "lon"), coords=coords)
    )
    ok = np.isfinite(rsdt)
    np.testing.assert_allclose(got["rsdt"], (rsdt[ok] * w[ok]).sum() / w[ok].sum(), rtol=1e-12)


def test_budget_table_from_files_matches_hand_computation(analytic_source):
    # Source: hand computation (numpy) with exact cell areas and noleap month lengths;
    # drift = scipy.stats.linregress slope of the annual means of net flux, x 100 per century.
    source, stored = analytic_source
    table = budget_table(source)
    assert list(table.columns) == ["model", "period", "metric", "value", "units"]
    assert list(table["metric"]) == list(BUDGET_METRICS)
    assert set(table["model"]) == {"run-b"} and set(table["period"]) == {"2001-2006"}
    value = dict(zip(table["metric"], table["value"], strict=True))
    units = dict(zip(table["metric"], table["units"], strict=True))

    annual = {k: _hand_annual_global(v) for k, v in stored.items()}
    net = annual["rsdt"] - annual["rsut"] - annual["rlut"]
    mean = {k: v.mean() for k, v in annual.items()}
    np.testing.assert_allclose(value["toa_net"], net.mean(), rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(value["toa_net_drift"], stats.linregress(YEARS, net).slope * 100, rtol=1e-8)
    np.testing.assert_allclose(value["albedo"], mean["rsut"] / mean["rsdt"], rtol=1e-9)
    np.testing.assert_allclose(
        value["emissivity"], mean["rlut"] / (5.670374419e-8 * mean["tas"] ** 4), rtol=1e-9
    )
    np.testing.assert_allclose(value["solar_constant"], 4 * mean["rsdt"], rtol=1e-9)
    np.testing.assert_allclose(value["t_surface"], mean["tas"], rtol=1e-9)
    t_e = (
        mean["tas"] * ((mean["rsdt"] - mean["rsut"]) / mean["rlut"]) ** 0.25
    )  # zero-dimensional model algebra
    np.testing.assert_allclose(value["t_equilibrium"], t_e, rtol=1e-9)
    np.testing.assert_allclose(value["t_difference"], t_e - mean["tas"], rtol=1e-6, atol=1e-6)
    # Calculus: d(net)/dt = -d(rlut)/dt = 0.05 - <4 x 0.61 sigma T^3> x 0.02 W m-2 per year
    # (rlut = 0.61 sigma T^4 - 0.05 t, T warming 0.02 K a year): about -1.6 W m-2 per century.
    w = _hand_weights()
    t0 = _analytic_monthly()["tas"][0]
    linear = 0.05 - (4 * 0.61 * 5.670374419e-8 * t0**3 * 0.02 * w).sum() / w.sum()
    np.testing.assert_allclose(value["toa_net_drift"], 100 * linear, rtol=0.02)
    assert units["toa_net_drift"] == "W m-2/century" and units["albedo"] == "1" and units["t_surface"] == "K"


def test_budget_table_period_selects_years(analytic_source):
    # Source: hand computation (numpy) on the years 2002-2004 only.
    source, stored = analytic_source
    table = budget_table(source, period="2002-2004")
    value = dict(zip(table["metric"], table["value"], strict=True))
    annual = {k: _hand_annual_global(v)[1:4] for k, v in stored.items()}
    net = annual["rsdt"] - annual["rsut"] - annual["rlut"]
    assert set(table["period"]) == {"2002-2004"}
    np.testing.assert_allclose(value["toa_net"], net.mean(), rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(
        value["toa_net_drift"], stats.linregress(YEARS[1:4], net).slope * 100, rtol=1e-8
    )


def test_budget_series_matches_hand_annual_means(analytic_source):
    # Source: hand computation (numpy) of the annual global-mean net flux.
    source, stored = analytic_source
    series = budget_series(source)
    annual = {k: _hand_annual_global(v) for k, v in stored.items()}
    assert series.dims == ("year",) and list(series["year"].values) == list(YEARS)
    assert series.attrs["units"] == "W m-2"
    np.testing.assert_allclose(
        series.values, annual["rsdt"] - annual["rsut"] - annual["rlut"], rtol=1e-9, atol=1e-9
    )


def test_fields_found_by_standard_name_and_converted_units(tmp_path):
    # Source: pint-free hand conversion, degC = K - 273.15 (SI definition of the Celsius scale).
    fields = _analytic_monthly()
    odd = {"rsdt": "sw_down", "rsut": "sw_up", "rlut": "lw_up", "tas": "t2m"}
    for name, data in fields.items():
        std, units = FIELD_META[name]
        if name == "tas":
            data, units = data - 273.15, "degC"
        _write(tmp_path / f"{odd[name]}.nc", odd[name], std, units, data)
    table = budget_table(Source(name="run-c", role="model", paths=[str(tmp_path / "*.nc")]))
    value = dict(zip(table["metric"], table["value"], strict=True))
    annual_tas = _hand_annual_global((fields["tas"] - 273.15).astype("float32").astype("float64")) + 273.15
    np.testing.assert_allclose(value["t_surface"], annual_tas.mean(), rtol=1e-7)
    np.testing.assert_allclose(value["albedo"], 0.3, rtol=1e-6)  # float32 storage of 0.3 x rsdt
