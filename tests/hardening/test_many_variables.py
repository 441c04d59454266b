"""A file holding thousands of variables is checked in about the time of its few axes.

Finding the axes looked at every variable as an xarray DataArray, and building one gathers
the dataset's coordinates from every variable: a file of 3000 small variables took 328 s in
`gridscore check` (now 20 s, load 1.9).  The test counts the DataArrays built while the axes
are found (no timing: the count does not depend on the machine).
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from cfdata import cf_dataset

from evaluation import io
from evaluation.grids import regular, rotated


@pytest.fixture
def crowded() -> xr.Dataset:
    ds = cf_dataset(dlat=15.0, years=1, start_year=2001)
    extra = {f"v{i}": (("lat",), np.zeros(ds.sizes["lat"]), {"units": "K"}) for i in range(400)}
    return ds.assign(extra)


@pytest.fixture
def built(monkeypatch) -> list:
    """The keys of every DataArray built from a Dataset (``ds[name]``) while a test runs."""
    keys: list = []
    original = xr.Dataset.__getitem__

    def counting(self, key):
        keys.append(key)
        return original(self, key)

    monkeypatch.setattr(xr.Dataset, "__getitem__", counting)
    return keys


def test_finding_the_axes_builds_no_data_array_per_variable(crowded: xr.Dataset, built: list) -> None:
    assert io.find_axis(crowded, "time") is not None
    assert regular.find_axis(crowded, "lat") is not None and regular.find_axis(crowded, "lon") is not None
    rotated._rotated_axis(crowded, "y")
    assert len(built) < 20, len(built)  # not one per variable (400 here)


def test_checking_a_file_builds_no_data_array_per_variable(tmp_path, request) -> None:
    # the whole of `gridscore check` (listing, opening, normalising, the per-variable report):
    # a file of 3000 small variables took 45-57 s of CPU here, 6 s without a DataArray per variable
    from evaluation.checking import check_file

    ds = cf_dataset(dlat=15.0, years=1, start_year=2001)
    extra = {f"v{i}": (ds["tas"].dims, np.zeros(ds["tas"].shape, "float32"), {"units": "K"}) for i in range(400)}
    ds.assign(extra).to_netcdf(tmp_path / "crowded.nc")
    built = request.getfixturevalue("built")  # counting starts now, not while the file is written
    report = check_file(str(tmp_path / "crowded.nc"))
    assert report.can_score and len(report.variables) == 401
    assert len(built) < 100, len(built)  # not one per variable (401 here)
