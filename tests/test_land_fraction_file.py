"""A land fraction in a file of its own beside the reference's time series shapes the land
and ocean regions, also when the file stamps it with one time step of another date and
calendar (as regional models write their fixed fields).  It was opened as a time series,
left out, and the bundled land fraction used instead, while `gridscore check` told the user
to put such a file beside the time series."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from app.cli import main

LAT = np.arange(-80.0, 81.0, 20.0)
LON = np.arange(-170.0, 171.0, 20.0)
GRID = {"lat": ("lat", LAT, {"units": "degrees_north", "standard_name": "latitude"}),
        "lon": ("lon", LON, {"units": "degrees_east", "standard_name": "longitude"})}


def _files(folder):
    folder.mkdir()
    rng = np.random.default_rng(7)
    land = rng.uniform(0.0, 1.0, (LAT.size, LON.size)).round(2)
    land[land < 0.3] = 0.0
    tas = 280.0 + 10.0 * land[None] + rng.normal(0.0, 1.0, (12, LAT.size, LON.size))
    xr.Dataset(
        {"tas": (("time", "lat", "lon"), tas, {"units": "K", "standard_name": "air_temperature"})},
        coords={"time": ("time", np.arange(12) * 30.0 + 15.0, {"units": "days since 2001-01-01", "calendar": "360_day"}), **GRID},
    ).to_netcdf(folder / "tas.nc")
    xr.Dataset(
        {"sftlf": (("time", "lat", "lon"), land[None], {"units": "1", "standard_name": "land_area_fraction"})},
        coords={"time": ("time", [0.0], {"units": "days since 1949-12-01", "calendar": "proleptic_gregorian"}), **GRID},
    ).to_netcdf(folder / "sftlf.nc")
    return land, tas


def test_a_land_fraction_file_with_one_time_step_shapes_the_land_region(tmp_path):
    land, tas = _files(tmp_path / "ref")
    out = tmp_path / "s.csv"
    code = main(["score", "--reference", f"obs={tmp_path / 'ref' / '*.nc'}", "--model", f"run={tmp_path / 'ref' / 'tas.nc'}",
                 "--variable", "tas", "--region", "land", "--region", "ocean", "--season", "ANN", "--output", str(out)])
    assert code == 0
    table = pd.read_csv(out)
    means = table[table["metric"] == "mean"].set_index("region")["value"]
    # exact cell areas of a regular grid: R² Δλ Δsin φ, bounds half-way between centres (textbook)
    edges = np.deg2rad(np.clip(np.concatenate([LAT - 10.0, [LAT[-1] + 10.0]]), -90.0, 90.0))
    area = np.diff(np.sin(edges))[:, None] * np.ones(LON.size)
    clim = tas.mean(axis=0)  # equal 30-day months of the 360_day calendar
    # a cell counts towards land by its land fraction and towards ocean by the rest (common practice)
    assert means["land"] == pytest.approx(float((area * land * clim).sum() / (area * land).sum()), rel=1e-9)
    assert means["ocean"] == pytest.approx(float((area * (1 - land) * clim).sum() / (area * (1 - land)).sum()), rel=1e-9)
    provenance = json.loads((tmp_path / "s.provenance.json").read_text())
    assert "primary reference" in json.dumps(provenance.get("land_fraction", provenance.get("provenance", {}).get("land_fraction")))
