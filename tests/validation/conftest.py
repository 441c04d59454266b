"""Shared fixtures of the validation suite: tiny CF-NetCDF files on disk and the command line.

The files are real NetCDF files written with xarray/netCDF4 into ``tmp_path``; the tool
reads them exactly as it reads a user's files.  The only expected values built here are
the hand-made season means (``by_hand``): month lengths by cftime date arithmetic,
December of the previous year for DJF, written without the tool's code.  Every other
reference lives in the test modules (numpy, cftime, pint, scipy, statsmodels,
xskillscore).
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from collections.abc import Callable, Sequence
from pathlib import Path

import cftime
import numpy as np
import pandas as pd
import pytest
import xarray as xr


def _regular_axis(step: float, *, start: float, stop: float) -> tuple[np.ndarray, np.ndarray]:
    """Centres and ``(n, 2)`` bounds of cells of width ``step`` tiling ``[start, stop]``."""
    edges = np.linspace(start, stop, int(round((stop - start) / step)) + 1)
    return 0.5 * (edges[:-1] + edges[1:]), np.stack([edges[:-1], edges[1:]], axis=1)


def regular_grid(dlat: float, dlon: float, *, lon0: float = -180.0) -> dict[str, np.ndarray]:
    """A global regular grid: ``lat``, ``lon`` (from ``lon0`` eastwards) and their bounds."""
    lat, lat_b = _regular_axis(dlat, start=-90.0, stop=90.0)
    lon, lon_b = _regular_axis(dlon, start=lon0, stop=lon0 + 360.0)
    return {"lat": lat, "lon": lon, "lat_bnds": lat_b, "lon_bnds": lon_b}


def monthly_times(first_year: int, last_year: int, calendar: str) -> list[cftime.datetime]:
    """Mid-month (day 15) dates of every month of ``first_year`` … ``last_year``."""
    return [cftime.datetime(y, m, 15, calendar=calendar) for y in range(first_year, last_year + 1) for m in range(1, 13)]


def write_cf(
    path: Path,
    variables: dict[str, tuple[np.ndarray, dict[str, str]]],
    *,
    grid: dict[str, np.ndarray],
    times: Sequence[cftime.datetime] | None = None,
    calendar: str = "standard",
    bounds: bool = True,
) -> Path:
    """Write a CF-1.10 file holding ``variables`` (name -> (data, attributes)).

    Data with three dimensions are ``(time, lat, lon)``, with two ``(lat, lon)``.
    Coordinates are identified by CF attributes; bounds are written when ``bounds``.
    """
    coords: dict[str, tuple] = {
        "lat": ("lat", grid["lat"], {"standard_name": "latitude", "units": "degrees_north", "axis": "Y"}),
        "lon": ("lon", grid["lon"], {"standard_name": "longitude", "units": "degrees_east", "axis": "X"}),
    }
    data_vars: dict[str, tuple] = {}
    if bounds:
        coords["lat"][2]["bounds"] = "lat_bnds"
        coords["lon"][2]["bounds"] = "lon_bnds"
        data_vars["lat_bnds"] = (("lat", "nv"), grid["lat_bnds"])
        data_vars["lon_bnds"] = (("lon", "nv"), grid["lon_bnds"])
    if times is not None:
        coords["time"] = ("time", np.asarray(times, dtype=object), {"standard_name": "time", "axis": "T"})
    for name, (data, attrs) in variables.items():
        dims = ("time", "lat", "lon") if np.ndim(data) == 3 else ("lat", "lon")
        data_vars[name] = (dims, np.asarray(data), dict(attrs))
    ds = xr.Dataset(data_vars, coords=coords, attrs={"Conventions": "CF-1.10", "title": "analytic test field"})
    encoding = {"time": {"units": "days since 1850-01-01 00:00:00", "calendar": calendar, "dtype": "float64"}} if times is not None else {}
    for name in variables:
        encoding[name] = {"_FillValue": np.float32(1e20) if ds[name].dtype == np.float32 else 1e20}
    ds.to_netcdf(path, encoding=encoding, engine="netcdf4")
    return path


SEASON_MONTHS = {"ANN": tuple(range(1, 13)), "DJF": (12, 1, 2), "MAM": (3, 4, 5), "JJA": (6, 7, 8), "SON": (9, 10, 11),
                 **{name: (i + 1,) for i, name in enumerate(("JAN", "FEB", "MAR", "APR", "MAY", "JUN", "JUL", "AUG", "SEP", "OCT", "NOV", "DEC"))}}


def month_lengths(times: Sequence[cftime.datetime]) -> np.ndarray:
    """Days in the month of each date, as cftime counts them: first of next month minus first of this."""
    out = []
    for t in times:
        first = cftime.datetime(t.year, t.month, 1, calendar=t.calendar)
        following = cftime.datetime(t.year + (t.month == 12), t.month % 12 + 1, 1, calendar=t.calendar)
        out.append((following - first).days)
    return np.array(out, dtype="float64")


def hand_season_means(data: np.ndarray, times: Sequence[cftime.datetime], season: str, years: Sequence[int]) -> dict[int, np.ndarray]:
    """Season means built by hand: label year Y of DJF is Dec Y-1 + Jan Y + Feb Y.

    Each month is weighted by its length from :func:`month_lengths`; a year enters only
    when every month of the season is in ``times``.  Returns ``{year: mean over time}``.
    """
    months = SEASON_MONTHS[season]
    crosses = months[0] > months[-1]
    where = {(t.year, t.month): i for i, t in enumerate(times)}
    lengths = month_lengths(times)
    out = {}
    for y in years:
        wanted = [((y - 1) if (crosses and m >= months[0]) else y, m) for m in months]
        if all(k in where for k in wanted):
            idx = [where[k] for k in wanted]
            w = lengths[idx]
            out[int(y)] = np.tensordot(w, np.asarray(data, dtype="float64")[idx], axes=(0, 0)) / w.sum()
    return out


@pytest.fixture(scope="session")
def by_hand():
    """The hand-built calendar references: ``month_lengths`` and ``season_means`` (cftime only)."""

    class _ByHand:
        months = SEASON_MONTHS
        month_lengths = staticmethod(month_lengths)
        season_means = staticmethod(hand_season_means)

    return _ByHand


@pytest.fixture
def nc_file(tmp_path: Path) -> Callable[..., Path]:
    """Factory: ``nc_file("name.nc", {"tas": (data, attrs)}, grid=..., times=..., calendar=...)``."""

    def make(name: str, variables: dict[str, tuple[np.ndarray, dict[str, str]]], **kwargs) -> Path:
        return write_cf(tmp_path / name, variables, **kwargs)

    return make


@pytest.fixture(scope="session")
def nc_writer() -> Callable[..., Path]:
    """:func:`write_cf` itself, for module-scoped fixtures that choose their own folder."""
    return write_cf


@pytest.fixture(scope="session")
def grid_factory() -> Callable[..., dict[str, np.ndarray]]:
    """Factory for global regular grids (see :func:`regular_grid`)."""
    return regular_grid


@pytest.fixture(scope="session")
def times_factory() -> Callable[..., list[cftime.datetime]]:
    """Factory for mid-month cftime dates (see :func:`monthly_times`)."""
    return monthly_times


def run_score(args: Sequence[str], out: Path) -> pd.DataFrame:
    """``gridscore score ARGS --output OUT`` through ``app.cli.main``; the CSV read back."""
    from app.cli import main

    code = main(["score", *args, "--output", str(out)])
    assert code == 0, f"gridscore score exited with {code}"
    return pd.read_csv(out)


@pytest.fixture(scope="session")
def score_main() -> Callable[[Sequence[str], Path], pd.DataFrame]:
    """:func:`run_score`, for module-scoped fixtures."""
    return run_score


@pytest.fixture
def score_cli(tmp_path: Path) -> Callable[[Sequence[str]], pd.DataFrame]:
    """Run ``gridscore score ... --output x.csv`` in-process (``app.cli.main``) and read the table."""
    counter = {"n": 0}

    def run(args: Sequence[str]) -> pd.DataFrame:
        counter["n"] += 1
        return run_score(args, tmp_path / f"scores-{counter['n']}.csv")

    return run


@pytest.fixture(scope="session")
def gridscore_exe() -> str:
    """The venv's ``gridscore`` console script (the one a user runs)."""
    exe = str(Path(sys.executable).with_name("gridscore"))
    if not os.path.exists(exe):
        exe = shutil.which("gridscore") or exe
    if not os.path.exists(exe):
        pytest.fail("the gridscore console script is not installed in this environment (pip install -e .)")
    return exe


@pytest.fixture(scope="session")
def score_subprocess(gridscore_exe: str) -> Callable[[Sequence[str], Path], pd.DataFrame]:
    """Run the installed ``gridscore score ARGS --output OUT`` as a separate process."""

    def run(args: Sequence[str], out: Path) -> pd.DataFrame:
        proc = subprocess.run([gridscore_exe, "score", *args, "--output", str(out)], capture_output=True, text=True, timeout=300)
        assert proc.returncode == 0, proc.stderr
        return pd.read_csv(out)

    return run
