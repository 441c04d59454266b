"""The provenance of a score table lists exactly the files read for the request.

Sources here are folders like a real collection: one file per variable, a land-fraction
file and a cell-area file beside them.  The expected file lists are read from the disk
(``os.listdir`` / ``os.stat``), never from gridscore, and the land-region numbers are
recomputed with numpy from the files' own values.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from cfdata import cf_dataset, write_cf

from evaluation.export import provenance_for, write_table
from evaluation.scoring import Source, score_table

DLAT = 10.0


def reference_land(lat, lon):
    """Land where the longitude is east of 0° (an artificial continent, unlike the bundled one)."""
    return (lon > 0).astype(float)


def run_land(lat, lon):
    """The run's own land fraction, deliberately different: it must be neither read nor used."""
    return (lat > 0).astype(float)


def warm_north(lat, lon, year, month):
    """The run's offset from the reference: 2 K north of the equator, 0 K south of it."""
    return 280.0 + 30.0 * np.cos(np.deg2rad(lat)) + 2.0 * (lat > 0)


def plain(lat, lon, year, month):
    return 280.0 + 30.0 * np.cos(np.deg2rad(lat)) + 0.0 * lon


def _write(ds: xr.Dataset, path: Path) -> Path:
    encoding = {name: {"_FillValue": None} for name in [*ds.coords, *[v for v in ds.data_vars if "nv" in ds[v].dims]]}
    ds.to_netcdf(path, encoding=encoding, format="NETCDF4")
    return path


@pytest.fixture(scope="module")
def collection(tmp_path_factory) -> dict[str, Path]:
    root = tmp_path_factory.mktemp("collection")
    ref, run = root / "ref", root / "run"
    ref.mkdir()
    run.mkdir()
    # the reference: tas pointing at a cell-area file of its own, pr and psl beside it, a land fraction
    tas = cf_dataset(field=plain, dlat=DLAT, years=2, cell_area="exact")
    _write(tas.drop_vars("areacella"), ref / "tas_ref.nc")
    _write(tas[["areacella"]], ref / "areacella_ref.nc")
    write_cf(ref / "pr_ref.nc", variable="pr", units="mm day-1", standard_name="precipitation_flux", dlat=DLAT, years=2)
    write_cf(ref / "psl_ref.nc", variable="psl", units="Pa", standard_name="air_pressure_at_mean_sea_level", dlat=DLAT, years=2)
    land = cf_dataset(dlat=DLAT, with_time=False, land_fraction=reference_land, land_units="%")
    _write(land[["sftlf"]], ref / "sftlf_ref.nc")
    # the run: tas (2 K warmer in the north), pr, and a land fraction of its own
    write_cf(run / "tas_run.nc", field=warm_north, dlat=DLAT, years=2)
    write_cf(run / "pr_run.nc", variable="pr", units="mm day-1", standard_name="precipitation_flux", dlat=DLAT, years=2)
    run_frac = cf_dataset(dlat=DLAT, with_time=False, land_fraction=run_land, land_units="%")
    _write(run_frac[["sftlf"]], run / "sftlf_run.nc")
    return {"ref": ref, "run": run}


def _request(collection, regions):
    return score_table(
        reference=Source(name="ref", role="reference", paths=[str(collection["ref"] / "*.nc")]),
        models=[Source(name="run", role="model", paths=[str(collection["run"] / "*.nc")])],
        variable="tas",
        regions=regions,
        seasons=["ANN"],
        cache=False,
    )


def _listed(record: dict) -> dict[str, set[str]]:
    out: dict[str, set[str]] = {}
    for entry in record["inputs"]:
        out.setdefault(entry["source"], set()).add(entry["path"])
    return out


def test_a_global_request_lists_the_variables_files_and_the_area_file_only(collection) -> None:
    _, record = _request(collection, ["global"])
    ref, run = collection["ref"], collection["run"]
    # expected from the folders on disk: the files whose names start with the variable, plus the area file
    expected_ref = {str(ref / f) for f in os.listdir(ref) if f.startswith(("tas_", "areacella_"))}
    expected_run = {str(run / f) for f in os.listdir(run) if f.startswith("tas_")}
    assert _listed(record) == {"ref": expected_ref, "run": expected_run}
    assert len(os.listdir(ref)) == 5 and len(os.listdir(run)) == 3  # the other files exist and are left out
    assert "land_fraction" not in record
    # each entry identifies the file as the operating system does (size, modification time)
    for entry in record["inputs"]:
        stat = os.stat(entry["path"])
        assert entry["size"] == stat.st_size
        assert entry["modified"].startswith(np.datetime_as_string(np.datetime64(int(stat.st_mtime), "s"), unit="s"))


def test_a_land_request_adds_the_primary_references_land_file_and_uses_it(collection) -> None:
    table, record = _request(collection, ["global", "land"])
    ref, run = collection["ref"], collection["run"]
    listed = _listed(record)
    assert listed["ref"] == {str(ref / "tas_ref.nc"), str(ref / "areacella_ref.nc"), str(ref / "sftlf_ref.nc")}
    assert listed["run"] == {str(run / "tas_run.nc")}  # the run's own land fraction is not read
    assert "ref" in record["land_fraction"]
    # the land bias recomputed from the files: area-weighted mean (common practice) of run - ref
    # over cells weighted by area x the reference's land fraction
    with xr.open_dataset(ref / "tas_ref.nc") as r, xr.open_dataset(run / "tas_run.nc") as m, \
            xr.open_dataset(ref / "areacella_ref.nc") as a, xr.open_dataset(ref / "sftlf_ref.nc") as lf:
        diff = (m["tas"].values - r["tas"].values).mean(axis=0)
        weights = a["areacella"].values * lf["sftlf"].values / 100.0
        expected_land = float(np.sum(weights * diff) / np.sum(weights))
        expected_global = float(np.sum(a["areacella"].values * diff) / np.sum(a["areacella"].values))
    bias = table[(table.metric == "bias") & (table.model == "run")].set_index("region")["value"]
    # the artificial continent (east of 0°) spans both hemispheres evenly: about 1 K, not the
    # run's land (north only, 2 K) nor the bundled continents'
    assert bias["land"] == pytest.approx(expected_land, rel=1e-5)
    assert bias["global"] == pytest.approx(expected_global, rel=1e-5)
    assert expected_land == pytest.approx(1.0, abs=0.05)


def test_area_weights_are_the_exact_spherical_areas_the_file_gives(collection) -> None:
    # outside check of the fixture itself: the area file holds the zone areas of a sphere,
    # 2 pi R^2 (sin phi2 - sin phi1) dlambda / 2 pi (handbook formula), summing to 4 pi R^2
    with xr.open_dataset(collection["ref"] / "areacella_ref.nc") as a:
        area = a["areacella"].values
        lat = a["lat"].values
    assert float(area.sum()) == pytest.approx(4.0 * np.pi * 6371000.0**2, rel=1e-9)  # value from memory: mean Earth radius 6371 km
    band = 2.0 * np.pi * 6371000.0**2 * (np.sin(np.deg2rad(lat + DLAT / 2)) - np.sin(np.deg2rad(lat - DLAT / 2)))
    assert np.allclose(area.sum(axis=1), band, rtol=1e-9)


def test_the_csv_sidecar_carries_the_same_file_list(collection, tmp_path) -> None:
    table, record = _request(collection, ["land"])
    target = tmp_path / "scores.csv"
    write_table(table, target, provenance=record)
    written = json.loads((tmp_path / "scores.provenance.json").read_text(encoding="utf-8"))
    assert sorted(i["path"] for i in written["inputs"]) == sorted(
        [str(collection["ref"] / "tas_ref.nc"), str(collection["ref"] / "areacella_ref.nc"),
         str(collection["ref"] / "sftlf_ref.nc"), str(collection["run"] / "tas_run.nc")]
    )


def test_a_table_of_some_runs_keeps_only_their_entries() -> None:
    record = {
        "inputs": [
            {"source": "obs", "role": "reference", "path": "/d/obs/tas.nc"},
            {"source": "alt", "role": "reference", "path": "/d/alt/tas.nc"},
            {"source": "a", "role": "model", "path": "/d/a/tas.nc"},
            {"source": "b", "role": "model", "path": "/d/b/tas.nc"},
        ],
        "remapping": {"obs": "none", "alt": "x", "a": "y", "b": "z"},
        "variable_names": {"b": "tas read from TS"},
        "omitted": [{"source": "b", "season": "DJF", "reason": "r"}, {"source": "a", "season": "JJA", "reason": "s"}],
        "references": ["obs", "alt"],
        "variable": "tas",
        "notes": ["kept"],
    }
    out = provenance_for(record, ["obs", "a"])
    assert [i["path"] for i in out["inputs"]] == ["/d/obs/tas.nc", "/d/a/tas.nc"]
    assert out["remapping"] == {"obs": "none", "a": "y"}
    assert out["variable_names"] == {}
    assert out["omitted"] == [{"source": "a", "season": "JJA", "reason": "s"}]
    assert out["references"] == ["obs"]
    assert out["variable"] == "tas" and out["notes"] == ["kept"]
    assert len(record["inputs"]) == 4  # the record given is not changed


def test_the_budget_provenance_lists_the_files_of_its_four_fields(tmp_path) -> None:
    # the sample's runs hold pr, psl, ta and a land fraction beside the budget's rsdt, rsut, rlut and tas
    import subprocess
    import sys

    sample = Path(__file__).resolve().parents[1] / "sample_output" / "runs"
    runs = ["larkspur-2", "cobble-b"]
    exe = Path(sys.executable).with_name("gridscore")
    args = [str(exe), "budget", *(a for r in runs for a in ("--model", f"{r}={sample / r}/*.nc")), "--output", str(tmp_path / "b.csv")]
    done = subprocess.run(args, capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    record = json.loads((tmp_path / "b.provenance.json").read_text(encoding="utf-8"))
    expected = {str(sample / r / f) for r in runs for f in os.listdir(sample / r) if f.split("_")[0] in ("rsdt", "rsut", "rlut", "tas")}
    assert {i["path"] for i in record["inputs"]} == expected
    assert len(expected) == 8 and len([f for r in runs for f in os.listdir(sample / r)]) > 8
