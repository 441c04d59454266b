"""The same field scores the same on every grid kind.

One model field, a function of the true position (tests/cfdata.default_field plus a
known change), is written on a regular grid and on a rotated-pole, a curvilinear and an
unstructured grid; each is scored against one regular reference.  The scores must agree
with those of the regular copy within the accuracy of the remapping (stated beside each
check, measured).  True positions of the rotated and curvilinear grids come from pyproj
(outside reference), the mesh from a golden-angle spiral (common practice).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from cfdata import default_field, write_cf  # noqa: E402
from gridfiles import fibonacci_sphere, true_positions, write_curvilinear, write_mesh, write_rotated  # noqa: E402

from evaluation.scoring import Comparison, Source  # noqa: E402


def model_field(lat, lon, year, month):
    """The reference's field, 1.5 K warmer and with a stronger wave (a known bias and pattern change)."""
    return default_field(lat, lon, year, month) + 1.5 + 0.8 * np.sin(np.deg2rad(lat)) * np.cos(np.deg2rad(lon))


def _score(ref: Path, model: Path, regions=("global", "tropics", "nh-extratropics"), **kw) -> pd.DataFrame:
    cmp = Comparison(
        reference=Source(name="ref", role="reference", paths=[str(ref)]),
        models=[Source(name="run", role="model", paths=[str(model)])],
        variable="tas",
        cache=False,
        **kw,
    )
    table = cmp.scores(regions=list(regions), seasons=["ANN", "JJA"])
    return table.set_index(["region", "season", "metric"])["value"]


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("kinds")
    years = {"start_year": 1990, "years": 2}
    ref = write_cf(tmp / "ref.nc", dlat=2.0, **years)
    regular = write_cf(tmp / "regular.nc", dlat=2.0, field=model_field, **years)
    rlat, rlon = np.arange(-88.0, 90.0, 2.0), np.arange(-179.0, 180.0, 2.0)
    rotated = write_rotated(tmp / "rotated.nc", rlat=rlat, rlon=rlon, pole_lat=33.3, pole_lon=-160.0, field=model_field, **years)
    # the same rotated cells written as a curvilinear grid: 2-D centres and CF vertices, no grid mapping
    edges_lat, edges_lon = np.arange(-89.0, 90.0, 2.0), np.arange(-180.0, 180.1, 2.0)
    clat, clon = 0.5 * (edges_lat[1:] + edges_lat[:-1]), 0.5 * (edges_lon[1:] + edges_lon[:-1])
    lon2, lat2 = true_positions(*np.meshgrid(clon, clat), 33.3, -160.0)
    vlat = np.stack([edges_lat[:-1], edges_lat[:-1], edges_lat[1:], edges_lat[1:]], -1)[:, None, :].repeat(clon.size, 1)
    vlon = np.stack([edges_lon[:-1], edges_lon[1:], edges_lon[1:], edges_lon[:-1]], -1)[None, :, :].repeat(clat.size, 0)
    lon_v, lat_v = true_positions(vlon, vlat, 33.3, -160.0)
    # the rotated rows stop at ±89°: the two polar caps of rotated latitude are missing, as in some models
    curvilinear = write_curvilinear(tmp / "curvilinear.nc", lat=lat2, lon=lon2, lat_vertices=lat_v, lon_vertices=lon_v, field=model_field, **years)
    mlon, mlat = fibonacci_sphere(16000)
    mesh = write_mesh(tmp / "mesh.nc", lat=mlat, lon=mlon, field=model_field, **years)
    return {"ref": ref, "regular": regular, "rotated": rotated, "curvilinear": curvilinear, "mesh": mesh}


@pytest.fixture(scope="module")
def regular_scores(files):
    return _score(files["ref"], files["regular"])


# kind -> (target grid, bias/mean, rmse/crmse, corr) tolerances, about 2-3x the measured
# differences to the regular copy (curvilinear: rmse 0.0075 K, corr 2.5e-5; mesh: bias
# 0.0065 K, rmse 0.0063 K, corr 1e-5).  Every kind is remapped by exact overlaps of its
# cells (the mesh's are its Voronoi cells), so only centre values vs cell means differ
# (O(h²) at 2°, the mesh about 1.8°).
TOLERANCES = {
    "rotated": ("reference", 0.01, 0.02, 1e-4),
    "curvilinear": ("reference", 0.01, 0.02, 1e-4),
    "mesh": ("reference", 0.02, 0.02, 1e-4),
}


@pytest.mark.parametrize("kind", ["rotated", "curvilinear", "mesh"])
def test_every_grid_kind_scores_like_the_regular_copy(files, regular_scores, kind):
    target, t_bias, t_spread, t_corr = TOLERANCES[kind]
    scores = _score(files["ref"], files[kind], target_grid=target)
    want_scores = regular_scores if target == "reference" else _score(files["ref"], files["regular"], target_grid=target)
    for region in ("global", "tropics", "nh-extratropics"):
        for season in ("ANN", "JJA"):
            for metric, tol in (("bias", t_bias), ("mean", t_bias), ("rmse", t_spread), ("crmse", t_spread), ("corr", t_corr)):
                got, want = scores[(region, season, metric)], want_scores[(region, season, metric)]
                assert got == pytest.approx(want, abs=tol), (kind, region, season, metric, got, want)


def test_the_regular_copy_has_the_bias_put_in(regular_scores):
    # the global mean of 0.8 sinφ cosλ is 0 (odd in latitude): the global bias is the 1.5 K put in
    assert regular_scores[("global", "ANN", "bias")] == pytest.approx(1.5, abs=1e-6)


def test_a_regional_rotated_run_is_placed_where_it_is(tmp_path):
    # a European domain on a rotated grid (pole 39.25N 162W): read as geographic it would land
    # in the tropics, where the reference is about 20 K warmer
    ref = write_cf(tmp_path / "ref.nc", dlat=1.0, start_year=1990, years=1)
    run = write_rotated(
        tmp_path / "eur.nc", rlat=np.arange(-10.0, 10.01, 0.44), rlon=np.arange(-15.0, 12.01, 0.44),
        pole_lat=39.25, pole_lon=-162.0, field=lambda la, lo, y, m: default_field(la, lo, y, m) - 2.0, start_year=1990, years=1,
    )
    scores = _score(ref, run, regions=["global"])
    # the model is the reference minus 2 K wherever it exists: conservative remapping of a
    # smooth field onto 1° cells keeps the bias to a few hundredths of a kelvin (partly covered edge cells)
    assert scores[("global", "ANN", "bias")] == pytest.approx(-2.0, abs=0.05)
    assert scores[("global", "ANN", "corr")] > 0.99


def test_a_spacing_target_grid_gives_the_same_global_bias(files):
    scores = _score(files["ref"], files["rotated"], target_grid="5x5")
    assert scores[("global", "ANN", "bias")] == pytest.approx(1.5, abs=0.02)
