"""Bad input to the budget, and the derived-variable registry."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from evaluation import io
from evaluation.budget import budget_series, budget_table
from evaluation.derived import DERIVED, derive
from evaluation.errors import InputError
from evaluation.scoring import Source

LAT = np.array([-60.0, -20.0, 20.0, 60.0])
LON = np.array([-135.0, -45.0, 45.0, 135.0])
META = {
    "rsdt": ("toa_incoming_shortwave_flux", "W m-2", 340.0),
    "rsut": ("toa_outgoing_shortwave_flux", "W m-2", 100.0),
    "rlut": ("toa_outgoing_longwave_flux", "W m-2", 239.0),
    "tas": ("air_temperature", "K", 288.0),
}


def _write(path, names, *, years=2, lat=LAT, first_year=2001):
    """One CF file holding the named variables as constant monthly fields (noleap)."""
    days = np.tile([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], years).astype(float)
    start = 365.0 * (first_year - 2001)
    mid = start + np.cumsum(days) - days / 2
    shape = (mid.size, lat.size, LON.size)
    data_vars = {
        n: (
            ("time", "lat", "lon"),
            np.full(shape, META[n][2], dtype="float32"),
            {"standard_name": META[n][0], "units": META[n][1]},
        )
        for n in names
    }
    ds = xr.Dataset(
        data_vars,
        coords={
            "time": (
                "time",
                mid,
                {"standard_name": "time", "units": "days since 2001-01-01", "calendar": "noleap"},
            ),
            "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north"}),
            "lon": ("lon", LON, {"standard_name": "longitude", "units": "degrees_east"}),
        },
        attrs={"Conventions": "CF-1.10"},
    )
    ds.to_netcdf(path)
    return str(path)


def test_missing_field_names_the_field_the_source_and_the_file(tmp_path):
    path = _write(tmp_path / "run-x.nc", ["rsdt", "rsut", "tas"])
    with pytest.raises(InputError) as err:
        budget_table(Source(name="run-x", role="model", paths=[path]))
    message = str(err.value)
    assert message.startswith("run-x: no toa_outgoing_longwave_flux (rlut)")
    assert "run-x.nc" in message and "add the variable to the source's files" in message
    assert "\n" not in message


def test_several_missing_fields_are_all_named(tmp_path):
    path = _write(tmp_path / "only-sw.nc", ["rsdt", "rsut"])
    with pytest.raises(InputError, match=r"toa_outgoing_longwave_flux \(rlut\), air_temperature \(tas\)"):
        budget_series(Source(name="run-y", role="model", paths=[path]))


def test_period_outside_the_data_is_input_error(tmp_path):
    path = _write(tmp_path / "run.nc", list(META))
    with pytest.raises(InputError, match=r"does not cover the period 1991-2020"):
        budget_table(Source(name="run-z", role="model", paths=[path]), period="1991-2020")


def test_fields_on_different_grids_are_input_error(tmp_path):
    _write(tmp_path / "a.nc", ["rsdt", "rsut", "rlut"])
    _write(tmp_path / "b.nc", ["tas"], lat=np.array([-45.0, 0.0, 45.0]))
    with pytest.raises(InputError, match="one latitude-longitude grid"):
        budget_table(Source(name="run-g", role="model", paths=[str(tmp_path / "*.nc")]))


def test_default_period_is_the_overlap_of_all_fields_and_runs(tmp_path):
    # The default rule (WMO normal, else the overlap) applied across fields and runs.
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    _write(tmp_path / "a" / "sw.nc", ["rsdt", "rsut"], years=5)
    _write(tmp_path / "a" / "lw.nc", ["rlut", "tas"], years=4)
    _write(tmp_path / "b" / "all.nc", list(META), years=3, first_year=2002)
    runs = [
        Source(name="run-a", role="model", paths=[str(tmp_path / "a" / "*.nc")]),
        Source(name="run-b", role="model", paths=[str(tmp_path / "b" / "*.nc")]),
    ]
    table = budget_table(runs)
    assert set(table["period"]) == {"2002-2004"}
    assert list(table["model"].unique()) == ["run-a", "run-b"]
    # Constant fields: net = 340 - 100 - 239 = 1 W m-2, no drift (arithmetic).
    net = table[table["metric"] == "toa_net"]["value"].to_numpy()
    np.testing.assert_allclose(net, [1.0, 1.0], rtol=1e-6)
    drift = table[table["metric"] == "toa_net_drift"]["value"].to_numpy()
    assert np.all(np.abs(drift) < 1e-6)
    # Two years are too few for a drift: NaN, not an error.
    short = budget_table(runs, period="2002-2003")
    assert short[short["metric"] == "toa_net_drift"]["value"].isna().all()


def test_repeated_run_names_are_input_error(tmp_path):
    path = _write(tmp_path / "run.nc", list(META))
    src = Source(name="run-a", role="model", paths=[path])
    with pytest.raises(InputError, match="unique"):
        budget_table([src, src])


# ---------------------------------------------------------------------------- derived
def _dataset(**fields) -> xr.Dataset:
    coords = {"lat": LAT, "lon": LON}
    return xr.Dataset(
        {
            name: (("lat", "lon"), np.asarray(values, dtype=float) * np.ones((LAT.size, LON.size)), attrs)
            for name, (values, attrs) in fields.items()
        },
        coords=coords,
    )


def _flux(name, value, units="W m-2"):
    return value, {"standard_name": META[name][0], "units": units}


def test_derive_net_toa_flux():
    # Arithmetic: 340 - 100 - 239 = 1 W m-2.
    ds = _dataset(rsdt=_flux("rsdt", 340.0), rsut=_flux("rsut", 100.0), rlut=_flux("rlut", 239.0))
    out = derive(ds, "toa_net")
    assert out.name == "toa_net" and out.attrs["units"] == "W m-2" and "long_name" in out.attrs
    np.testing.assert_allclose(out.values, 1.0)


def test_derive_finds_inputs_by_standard_name_and_converts_units():
    # mW m-2 -> W m-2 is a factor 1000 (SI prefix).
    ds = _dataset(
        incoming=_flux("rsdt", 340_000.0, "mW m-2"),
        up_sw=_flux("rsut", 100.0),
        up_lw=_flux("rlut", 239.0),
    )
    np.testing.assert_allclose(derive(ds, "toa_net").values, 1.0, rtol=1e-12)


def test_derive_albedo_is_nan_without_sunlight():
    rsdt = np.array([[0.0, 100.0, 200.0, 400.0]] * LAT.size)
    ds = _dataset(rsdt=(rsdt, {"units": "W m-2"}), rsut=(0.25 * rsdt, {"units": "W m-2"}))
    out = derive(ds, "albedo")
    assert out.attrs["units"] == "1"
    assert np.all(np.isnan(out.values[:, 0]))
    np.testing.assert_allclose(out.values[:, 1:], 0.25)


def test_derive_missing_inputs_are_named():
    ds = _dataset(rsdt=_flux("rsdt", 340.0))
    with pytest.raises(InputError) as err:
        derive(ds, "toa_net", source="run-q")
    message = str(err.value)
    assert message.startswith("run-q: ")
    assert "toa_outgoing_shortwave_flux (rsut)" in message and "toa_outgoing_longwave_flux (rlut)" in message


def test_derive_returns_none_for_stored_or_unknown_names():
    ds = _dataset(rsdt=_flux("rsdt", 340.0))
    assert derive(ds, "tas") is None
    assert derive(ds, "rsdt") is None


def test_registry_entries_are_consistent():
    for name, spec in DERIVED.items():
        assert spec.name == name and spec.inputs and spec.units


def test_get_variable_falls_back_to_derived(tmp_path):
    # A real file opened by evaluation.io: asking for toa_net computes it lazily.
    path = _write(tmp_path / "run.nc", ["rsdt", "rsut", "rlut"])
    ds = io.open_source([path], source="run-d")
    out = io.get_variable(ds, "toa_net", source="run-d")
    assert out.chunks is not None  # still a dask array
    np.testing.assert_allclose(out.values, 1.0, rtol=1e-6)
