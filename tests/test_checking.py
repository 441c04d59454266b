"""``gridscore check``: exit 0 only when every file can be scored; problems apart from notes.

Real small NetCDF files written here (tests/cfdata.py); the command run through
``app.cli.main`` and, for the exit status a shell sees, as a subprocess.  "Can be scored"
is checked against ``score`` itself: every file ``check`` passes is scored, every file it
refuses is refused by ``score`` too (exit 2 both).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from cfdata import cf_dataset, write_cf

from app.cli import main
from evaluation.checking import check_file, check_paths, plain

COMMON = dict(dlat=15.0, start_year=1995, years=2, dtype="float64")


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, Path]:
    tmp = tmp_path_factory.mktemp("check")
    p = {
        "ok": write_cf(tmp / "ok.nc", calendar="noleap", **COMMON),
        "degdotc": write_cf(tmp / "degdotc.nc", units="deg. C", offset=-273.15, **COMMON),
        "angle": write_cf(tmp / "angle.nc", units="degrees", **COMMON),  # a temperature in an angle unit
        "coulomb": write_cf(tmp / "coulomb.nc", units="C", offset=-273.15, **COMMON),
        "nounits": write_cf(tmp / "nounits.nc", units=None, **COMMON),
        "notime": write_cf(tmp / "notime.nc", with_time=False, **COMMON),
        "nolat": write_cf(tmp / "nolat.nc", identify_by="none", **COMMON),
        "lunar": write_cf(tmp / "lunar.nc", calendar="lunar", **COMMON),
        # a land fraction written with time steps (as regional models do) is still not a time series
        "landfrac": write_cf(tmp / "landfrac.nc", variable="sftlf", standard_name="land_area_fraction", units="1", **COMMON),
    }
    p["noise"] = tmp / "noise.nc"
    p["noise"].write_bytes(np.random.default_rng(7).bytes(4096))
    whole = p["ok"].read_bytes()
    p["half"] = tmp / "half.nc"
    p["half"].write_bytes(whole[: len(whole) // 2])
    classic = tmp / "classic.nc"
    cf_dataset(**COMMON).to_netcdf(classic, format="NETCDF3_CLASSIC")
    p["half3"] = tmp / "half3.nc"
    p["half3"].write_bytes(classic.read_bytes()[: classic.stat().st_size // 2])
    poor = cf_dataset(bounds=False, calendar=None, standard_name=None, **COMMON)
    del poor.attrs["Conventions"]
    p["poor"] = tmp / "poor.nc"
    poor.to_netcdf(p["poor"])
    hostile = tmp / "evil\x1b[31mname.nc"
    shutil.copy(p["ok"], hostile)
    p["hostile"] = hostile
    return p


CAN = ("ok", "degdotc", "poor")
CANNOT = ("angle", "coulomb", "nounits", "notime", "nolat", "lunar", "noise", "half", "half3", "landfrac")


@pytest.mark.parametrize("case", CAN)
def test_files_that_can_be_scored(files, case):
    report = check_file(str(files[case]))
    assert report.can_score and report.problems == [], report.problems
    assert main(["check", str(files[case])]) == 0


@pytest.mark.parametrize("case", CANNOT)
def test_files_that_cannot_be_scored_exit_2_with_the_reason(files, case, capsys):
    assert main(["check", str(files["ok"]), str(files[case])]) == 2
    out = capsys.readouterr().out
    lines = [line for line in out.splitlines() if line.startswith(f"{files[case]}: problem:")]
    assert lines, out
    assert "Traceback" not in out


@pytest.mark.parametrize("case", CAN + CANNOT)
def test_check_agrees_with_score(files, case, tmp_path):
    # the definition of "can be scored": score against a good reference succeeds exactly
    # when check passes the file
    out = tmp_path / "t.csv"
    score = main(
        [
            "score",
            "--reference",
            f"obs={files['ok']}",
            "--model",
            f"m={files[case]}",
            "--variable",
            "tas",
            "--output",
            str(out),
        ]
    )
    assert (score == 0) == check_file(str(files[case])).can_score


@pytest.mark.parametrize(("case", "needle"), [
    ("angle", "an angle"), ("coulomb", "coulomb"), ("nounits", "no units"), ("notime", "time axis"), ("nolat", "latitude"),
    ("lunar", "calendar"), ("noise", "cannot read"), ("half3", "truncated"), ("landfrac", "only fixed fields"),
])  # fmt: skip
def test_problems_name_the_true_reason(files, case, needle):
    assert any(needle in p for p in check_file(str(files[case])).problems), check_file(
        str(files[case])
    ).problems


def test_summary_says_what_the_file_is(files, capsys):
    assert main(["check", str(files["ok"])]) == 0
    first = capsys.readouterr().out.splitlines()[0]
    for part in (
        str(files["ok"]),
        "can be scored",
        "regular grid 12x24",
        "monthly",
        "calendar noleap",
        "1995-01 to 1996-12 (24 steps)",
        "tas [K]",
    ):
        assert part in first, part


def test_notes_are_not_problems(files):
    report = check_file(str(files["poor"]))
    text = "\n".join(report.notes)
    for needle in ("Conventions", "no bounds", "calendar", "standard_name"):
        assert needle in text, needle
    assert report.problems == [] and report.can_score


def test_json_output(files, capsys):
    code = main(
        [
            "check",
            "--json",
            str(files["ok"]),
            str(files["degdotc"]),
            str(files["noise"]),
            str(files["ok"].parent / "absent.nc"),
        ]
    )
    record = json.loads(capsys.readouterr().out)
    assert code == 2 and record["can_score"] is False
    by_name = {Path(f["path"]).name: f for f in record["files"]}
    ok = by_name["ok.nc"]
    assert ok["can_score"] and ok["grid"]["kind"] == "regular" and ok["grid"]["size"] == "12x24"
    assert (
        ok["frequency"] == "monthly"
        and ok["calendar"] == "noleap"
        and ok["span"] == {"start": "1995-01", "end": "1996-12", "steps": 24}
    )
    assert ok["variables"][0]["name"] == "tas" and ok["variables"][0]["units"] == "K"
    assert by_name["degdotc.nc"]["variables"][0]["units"] == "deg. C" and by_name["degdotc.nc"]["can_score"]
    assert not by_name["noise.nc"]["can_score"] and by_name["noise.nc"]["problems"]
    assert by_name["absent.nc"]["problems"] == ["file not found — check the path"]
    for f in record["files"]:
        assert set(f) == {
            "path",
            "can_score",
            "problems",
            "notes",
            "grid",
            "frequency",
            "calendar",
            "span",
            "variables",
        }


def test_hostile_names_are_printed_as_plain_text(files, capsys):
    assert main(["check", str(files["hostile"])]) == 0
    out = capsys.readouterr().out
    assert "\x1b" not in out and "evil\\x1b[31mname.nc" in out
    assert main(["check", "--json", str(files["hostile"])]) == 0
    raw = capsys.readouterr().out
    assert "\x1b" not in raw and json.loads(raw)["files"][0]["path"] == str(files["hostile"])


def test_plain_escapes_control_characters():
    assert plain("a\nb\x1b[0m\u2028c") == "a\\nb\\x1b[0m\\u2028c"


def test_a_glob_and_a_missing_path(files):
    reports = check_paths([str(files["ok"].parent / "o*.nc"), str(files["ok"].parent / "nothing-*.nc")])
    assert [Path(r.path).name for r in reports] == ["ok.nc", "nothing-*.nc"]
    assert reports[0].can_score and not reports[1].can_score


def test_exit_status_seen_by_a_shell(files):
    exe = Path(sys.executable).with_name("gridscore")
    env = {k: v for k, v in os.environ.items() if k != "GRIDSCORE_DEBUG"}
    good = subprocess.run(
        [str(exe), "check", str(files["ok"])], capture_output=True, text=True, env=env, timeout=300
    )
    bad = subprocess.run(
        [str(exe), "check", str(files["half"])], capture_output=True, text=True, env=env, timeout=300
    )
    assert good.returncode == 0 and bad.returncode == 2
    assert "Traceback" not in bad.stdout + bad.stderr


def test_units_as_read_and_hostile_units(tmp_path, capsys):
    path = write_cf(tmp_path / "odd_units.nc", units="\x1b[2JK", **COMMON)
    assert main(["check", str(path)]) == 2
    out = capsys.readouterr().out
    assert "\x1b" not in out and "\\x1b[2JK" in out
    report = check_file(str(write_cf(tmp_path / "c.nc", units="deg. C", offset=-273.15, **COMMON)))
    assert report.variables[0]["units_read_as"] == "degC"


def test_a_file_without_a_complete_year_names_the_months_it_has(tmp_path):
    path = write_cf(tmp_path / "janfeb.nc", months=[(1995, 1), (1995, 2), (1996, 1), (1996, 2)], **COMMON)
    report = check_file(str(path))
    assert report.can_score
    assert any("no complete year" in n and "JAN, FEB" in n for n in report.notes), report.notes


def test_a_time_coordinate_without_units_is_named_as_the_cause(tmp_path):
    # an analysis climatology written with a bare number as its time (no units): the cause is
    # the missing units attribute, not the calendar (CF conventions 1.10 §4.4: time needs units)
    import xarray as xr

    ds = xr.Dataset(
        {"tas": (("time", "lat", "lon"), np.full((1, 6, 12), 280.0), {"units": "K", "standard_name": "air_temperature"})},
        coords={
            "time": ("time", [120.0]),
            "lat": ("lat", np.arange(-75.0, 90.0, 30.0), {"units": "degrees_north"}),
            "lon": ("lon", np.arange(15.0, 360.0, 30.0), {"units": "degrees_east"}),
        },
    )
    ds.to_netcdf(tmp_path / "bare.nc")
    report = check_file(str(tmp_path / "bare.nc"))
    assert not report.can_score
    assert any("time coordinate has no units attribute" in p for p in report.problems), report.problems
    # the variable has a time dimension whose values cannot be read: it is not called fixed
    text = "\n".join(report.lines())
    assert "(fixed)" not in text and "(dimension 'time' not read as time)" in text


def test_a_step_dimension_without_a_coordinate_and_missing_units_are_both_problems(tmp_path):
    # a mesh model's field written as (Time, nCells) with no Time variable and no units: both
    # problems at once, so that one round of fixes is enough (CF conventions 1.10 §4.4 and §3.1:
    # time needs a coordinate variable with units, a field needs units; common practice)
    import xarray as xr

    n = 40
    lat = np.rad2deg(np.arcsin(np.linspace(-0.95, 0.95, n)))
    ds = xr.Dataset(
        {"ps": (("Time", "nCells"), np.full((1, n), 1.0e5))},
        coords={
            "latCell": ("nCells", np.deg2rad(lat), {"units": "radians"}),
            "lonCell": ("nCells", np.deg2rad(np.arange(n) * 137.5 % 360.0), {"units": "radians"}),
        },
    )
    ds.to_netcdf(tmp_path / "mesh.nc")
    report = check_file(str(tmp_path / "mesh.nc"))
    assert not report.can_score
    assert any("has no units attribute" in p for p in report.problems), report.problems
    assert any("dimension 'Time' of 1 step with no coordinate variable" in p and "Time(Time)" in p for p in report.problems), report.problems
    assert "(fixed)" not in report.lines()[0]
    assert report.variables[0]["unplaced"] == [{"name": "Time", "size": 1, "has_coordinate": False}]


def test_a_file_of_fixed_fields_has_no_season_note(tmp_path):
    # a land fraction stamped with one time step: which seasons it could serve is beside the point
    import xarray as xr

    ds = xr.Dataset(
        {"sftlf": (("time", "lat", "lon"), np.full((1, 6, 12), 0.5), {"units": "1", "standard_name": "land_area_fraction"})},
        coords={
            "time": ("time", [0.0], {"units": "days since 1949-12-01", "calendar": "proleptic_gregorian"}),
            "lat": ("lat", np.arange(-75.0, 90.0, 30.0), {"units": "degrees_north"}),
            "lon": ("lon", np.arange(15.0, 360.0, 30.0), {"units": "degrees_east"}),
        },
    )
    ds.to_netcdf(tmp_path / "sftlf.nc")
    report = check_file(str(tmp_path / "sftlf.nc"))
    assert any("only fixed fields" in p for p in report.problems), report.problems
    assert not any("complete year" in n for n in report.notes), report.notes
