"""Tests of the ``gridscore`` console script, run as a subprocess on real NetCDF files.

The contract is in shared/DESIGN.md and issue 2, item 8: the tidy CSV columns, every
combination of --region and --season, periods written YYYY-YYYY, and exit 2 with one line
naming the file and the remedy (no traceback, no file written) for every bad input.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from cfdata import cf_dataset, write_cf

CONTRACT_COLUMNS = ["model", "reference", "variable", "level", "region", "season", "period", "metric", "value", "units"]
CONTRACT_METRICS = {
    "mean", "ref_mean", "bias", "rmse", "crmse", "corr", "std_ratio", "taylor_skill",
    "trend", "ref_trend", "trend_pvalue", "ref_trend_pvalue", "iav_ratio", "rel_error",
    "bias_signif_area", "rmse_diff_lo", "rmse_diff_hi", "abs_bias_diff_lo", "abs_bias_diff_hi",
}  # fmt: skip
UNITLESS = {"corr", "std_ratio", "taylor_skill", "trend_pvalue", "ref_trend_pvalue", "iav_ratio", "rel_error", "bias_signif_area"}


def gridscore() -> str:
    """The console script of the environment running the tests."""
    exe = Path(sys.executable).with_name("gridscore")
    return str(exe) if exe.exists() else (shutil.which("gridscore") or "gridscore")


def run(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if k != "GRIDSCORE_DEBUG"}
    return subprocess.run([gridscore(), *map(str, args)], capture_output=True, text=True, timeout=300, cwd=cwd, env=env)


@pytest.fixture(scope="module")
def data(tmp_path_factory) -> dict[str, Path]:
    tmp = tmp_path_factory.mktemp("cli")
    common = dict(dlat=10.0, start_year=1995, years=6, dtype="float64")
    p = {
        "ref": write_cf(tmp / "ref.nc", **common),
        "warm": write_cf(tmp / "warm.nc", offset=1.0, **common),  # the reference plus 1 K everywhere
        "coarse": write_cf(tmp / "coarse.nc", dlat=15.0, start_year=1995, years=6, calendar="360_day", lon_0_360=True, lat_descending=True, units="degC", offset=-273.15),
    }
    p["noise"] = tmp / "noise.nc"
    p["noise"].write_bytes(np.random.default_rng(1).bytes(8192))
    whole = p["warm"].read_bytes()
    p["half"] = tmp / "half.nc"
    p["half"].write_bytes(whole[: len(whole) // 2])
    classic = tmp / "classic.nc"
    ds = cf_dataset(offset=1.0, bounds=False, **common)
    ds.to_netcdf(classic, format="NETCDF3_CLASSIC")
    p["half3"] = tmp / "half3.nc"
    p["half3"].write_bytes(classic.read_bytes()[: classic.stat().st_size // 2])
    p["nolat"] = write_cf(tmp / "nolat.nc", identify_by="none", **common)
    p["notime"] = write_cf(tmp / "notime.nc", with_time=False, dlat=10.0)
    p["lunar"] = write_cf(tmp / "lunar.nc", calendar="lunar", **common)
    p["flux"] = write_cf(tmp / "flux.nc", units="W m-2", **common)
    p["pr"] = write_cf(tmp / "pr.nc", variable="pr", units="kg m-2 s-1", standard_name="precipitation_flux", **common)
    p["old"] = write_cf(tmp / "old.nc", dlat=10.0, start_year=1950, years=5)
    p["pacific_nan"] = write_cf(tmp / "pacific_nan.nc", nan_mask=lambda la, lo: (np.abs(la) < 30) & ((lo > 140) | (lo < -130)), **common)
    p["dir"] = tmp
    return p


# ---------------------------------------------------------------------------- score


@pytest.fixture(scope="module")
def scored(data, tmp_path_factory):
    out = tmp_path_factory.mktemp("out") / "scores.csv"
    proc = run(
        "score", "--reference", data["ref"], "--model", f"warm={data['warm']}", "--model", f"coarse={data['coarse']}",
        "--variable", "tas", "--region", "global", "--region", "tropics", "--region", "box:-10,10,160,-150",
        "--season", "ANN", "--season", "DJF", "--output", out,
    )  # fmt: skip
    return proc, out


def test_score_writes_the_tidy_csv(scored):
    proc, out = scored
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr
    table = pd.read_csv(out, keep_default_na=False, na_values=["", "NaN", "nan"])
    assert list(table.columns) == CONTRACT_COLUMNS
    assert set(table.metric) == CONTRACT_METRICS
    # every combination of model × region × season, each with every metric once
    combos = table.groupby(["model", "region", "season"]).metric.nunique()
    assert len(combos) == 2 * 3 * 2 and (combos == len(CONTRACT_METRICS)).all()
    assert set(table.region) == {"global", "tropics", "box:-10,10,160,-150"} and set(table.season) == {"ANN", "DJF"}
    assert table.period.astype(str).str.fullmatch(r"\d{4}-\d{4}").all()
    assert set(table.period.astype(str)) == {"1995-2000"}  # the overlap, WMO 1991-2020 not covered
    assert set(table.reference) == {"ref"} and set(table.variable) == {"tas"}


def test_units_column(scored):
    _, out = scored
    table = pd.read_csv(out)
    units = table.groupby("metric").units.unique()
    for metric, u in units.items():
        if metric in UNITLESS:
            assert list(u) == ["1"], metric
        elif metric in ("trend", "ref_trend"):
            assert list(u) == ["K/decade"], metric  # trends per decade (shared/DESIGN.md)
        else:
            assert list(u) == ["K"], metric


def test_score_numbers_for_a_run_that_is_the_reference_plus_one(scored):
    _, out = scored
    t = pd.read_csv(out)
    warm = t[(t.model == "warm")].set_index(["region", "season", "metric"]).value
    for region in ("global", "tropics", "box:-10,10,160,-150"):
        for season in ("ANN", "DJF"):
            # a uniform +1 K shift: bias = rmse = 1, no centred error, perfect pattern (Taylor 2001)
            assert warm[(region, season, "bias")] == pytest.approx(1.0, abs=1e-9)
            assert warm[(region, season, "rmse")] == pytest.approx(1.0, abs=1e-9)
            assert warm[(region, season, "crmse")] == pytest.approx(0.0, abs=1e-7)
            assert warm[(region, season, "corr")] == pytest.approx(1.0, abs=1e-9)
            assert warm[(region, season, "taylor_skill")] == pytest.approx(1.0, abs=1e-9)
            assert warm[(region, season, "trend")] == pytest.approx(warm[(region, season, "ref_trend")], abs=1e-9)


def test_score_writes_provenance_beside_the_csv(scored):
    _, out = scored
    import json

    record = json.loads(out.with_name("scores.provenance.json").read_text())
    assert "1995-2000" in json.dumps(record)


def test_score_without_output_prints_a_table(data, tmp_path):
    proc = run("score", "--reference", data["ref"], "--model", f"warm={data['warm']}", "--variable", "tas", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "warm" in proc.stdout and "bias" in proc.stdout and "1995-2000" in proc.stdout
    assert list(tmp_path.iterdir()) == []  # nothing written


def test_score_with_an_explicit_period_and_glob(data, tmp_path):
    out = tmp_path / "s.csv"
    proc = run("score", "--reference", data["ref"], "--model", f"w={data['dir'] / 'war*.nc'}", "--variable", "air_temperature", "--period", "1996-1998", "--regrid", "bilinear", "--output", out)
    assert proc.returncode == 0, proc.stderr
    t = pd.read_csv(out)
    assert set(t.period) == {"1996-1998"} and set(t.model) == {"w"}


def test_a_partial_table_lists_each_omission_on_stderr(data, tmp_path):
    # a run whose file is noise is left out whole, the other run is scored, and the exit code is 0
    # (DJF 1995 lacks December 1994, so the DJF rows come from DJF 1996 alone)
    out = tmp_path / "s.csv"
    proc = run("score", "--reference", data["ref"], "--model", f"warm={data['warm']}", "--model", f"noisy={data['noise']}",
               "--variable", "tas", "--period", "1995-1996", "--season", "DJF", "--season", "JJA", "--output", out)
    assert proc.returncode == 0, proc.stderr
    lines = [line for line in proc.stderr.splitlines() if line.startswith("gridscore: left out: ")]
    assert any(line.startswith("gridscore: left out: noisy all: ") and str(data["noise"]) in line for line in lines)
    t = pd.read_csv(out)
    assert set(t.model) == {"warm"} and set(t.season) == {"DJF", "JJA"}
    assert "Traceback" not in proc.stderr


def test_score_with_two_references(data, tmp_path):
    # the first --reference is the primary; the second (unnamed: named after its file) is an alternative
    out = tmp_path / "s.csv"
    proc = run("score", "--reference", f"obs={data['ref']}", "--reference", data["coarse"], "--model", f"warm={data['warm']}",
               "--model", f"same={data['ref']}", "--variable", "tas", "--region", "global", "--region", "tropics",
               "--season", "ANN", "--season", "JJA", "--output", out)
    assert proc.returncode == 0, proc.stderr
    t = pd.read_csv(out, keep_default_na=False)
    # (2 runs x 2 references + 1 alternative reference scored against the primary) x regions x seasons x metrics
    assert len(t) == (2 * 2 + 1) * 2 * 2 * len(CONTRACT_METRICS)
    assert list(t.columns) == CONTRACT_COLUMNS
    assert set(t.loc[t.reference == "coarse", "model"]) == {"warm", "same"}
    assert set(t.loc[t.reference == "obs", "model"]) == {"warm", "same", "coarse"}
    import json

    record = json.loads(out.with_name("s.provenance.json").read_text())
    assert record["references"] == ["obs", "coarse"] and "observational uncertainty" in record["observational_uncertainty"]
    # a run identical to the primary: its bias against the alternative is minus the alternative's bias (common practice: linearity of the mean)
    # (an empty value is NaN: the bootstrap intervals of a reference scored as a run)
    v = t.set_index(["model", "reference", "region", "season", "metric"])["value"].replace("", "nan").astype(float)
    for region in ("global", "tropics"):
        assert v[("same", "coarse", region, "ANN", "bias")] == pytest.approx(-v[("coarse", "obs", region, "ANN", "bias")], abs=1e-6)


def test_score_with_two_references_prints_one_table_each(data, tmp_path):
    proc = run("score", "--reference", data["ref"], "--reference", f"alt={data['coarse']}", "--model", f"warm={data['warm']}",
               "--variable", "tas", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "tas against ref" in proc.stdout and "tas against alt" in proc.stdout and "Observational uncertainty:" in proc.stdout


# ---------------------------------------------------------------------------- check


def test_check_lists_what_it_found(data):
    proc = run("check", data["ref"], data["coarse"])
    assert proc.returncode == 0, proc.stderr
    lines = proc.stdout.splitlines()
    ref_line = next(line for line in lines if line.startswith(f"{data['ref']}: can be scored"))
    for part in ("tas [K]", "18x36", "standard", "1995-01", "2000-12"):
        assert part in ref_line
    coarse_line = next(line for line in lines if line.startswith(f"{data['coarse']}: can be scored"))
    assert "360_day" in coarse_line and "12x24" in coarse_line and "degC" in coarse_line


def test_check_lists_problems_one_line_each_and_exits_2(data):
    proc = run("check", data["half3"], data["nolat"], data["noise"])
    assert proc.returncode == 2, proc.stderr
    problems = [line for line in proc.stdout.splitlines() if ": problem: " in line]
    assert any(line.startswith(str(data["nolat"])) and "latitude" in line for line in problems)
    assert any(line.startswith(str(data["noise"])) for line in problems)
    assert any(line.startswith(str(data["half3"])) and "truncated" in line for line in problems)
    assert "Traceback" not in proc.stdout + proc.stderr


# ---------------------------------------------------------------------------- bad input

BAD = {
    # case: (arguments after `score` with placeholders, text the line must contain)
    "unreadable file": (["--model", "m={noise}"], "{noise}"),
    "truncated file": (["--model", "m={half}"], "{half}"),
    "truncated netcdf3 file": (["--model", "m={half3}"], "{half3}"),
    "missing file": (["--model", "m={dir}/absent.nc"], "absent.nc"),
    "no latitude": (["--model", "m={nolat}"], "{nolat}"),
    "no time": (["--model", "m={notime}"], "{notime}"),
    "unknown calendar": (["--model", "m={lunar}"], "{lunar}"),
    "incompatible units": (["--model", "m={flux}"], "{flux}"),
    "variable absent": (["--model", "m={pr}"], "{pr}"),
    "periods do not overlap": (["--model", "m={old}"], "1950"),
    "period not covered": (["--model", "m={warm}", "--period", "1991-2020"], "{ref}"),
    "no valid cell": (["--model", "m={pacific_nan}", "--region", "box:-10,10,160,-150"], "no valid cell"),
    "bad --model syntax": (["--model", "{warm}"], "NAME=PATH"),
    "unknown season": (["--model", "m={warm}", "--season", "WINTER"], "WINTER"),
    "unknown region": (["--model", "m={warm}", "--region", "atlantis"], "atlantis"),
    "unknown output extension": (["--model", "m={warm}", "--output", "{out}.docx"], ".docx"),
    "bad period syntax": (["--model", "m={warm}", "--period", "the nineties"], "the nineties"),
}


@pytest.fixture(scope="module")
def bad_runs(data, tmp_path_factory):
    """Run every bad case once, two at a time (the machine has two cores)."""
    results = {}

    def one(case):
        outdir = tmp_path_factory.mktemp("bad")
        args, needle = BAD[case]
        fill = {k: str(v) for k, v in data.items()} | {"out": str(outdir / "scores")}
        argv = ["score", "--reference", str(data["ref"]), "--variable", "tas", *[a.format(**fill) for a in args]]
        if "--output" not in argv:
            argv += ["--output", str(outdir / "scores.csv")]
        return case, run(*argv), needle.format(**fill), outdir

    with ThreadPoolExecutor(max_workers=2) as pool:
        for case, proc, needle, outdir in pool.map(one, BAD):
            results[case] = (proc, needle, outdir)
    return results


@pytest.mark.parametrize("case", list(BAD))
def test_bad_input_gives_exit_2_and_one_line(bad_runs, case):
    proc, needle, outdir = bad_runs[case]
    assert proc.returncode == 2, (proc.returncode, proc.stderr)
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert len(lines) == 1, proc.stderr
    line = lines[0]
    assert line.startswith("gridscore: ")
    assert "Traceback" not in proc.stderr and "Traceback" not in proc.stdout
    assert needle in line, line
    assert " — " in line or "see 'gridscore" in line, line  # a remedy follows the problem
    assert list(outdir.iterdir()) == []  # no output file, not even a partial one


@pytest.mark.parametrize(
    "case",
    ["unreadable file", "truncated file", "truncated netcdf3 file", "no latitude", "no time", "unknown calendar", "incompatible units", "variable absent", "period not covered"],
)
def test_bad_file_messages_name_the_file(bad_runs, case):
    proc, needle, _ = bad_runs[case]
    assert needle.endswith(".nc") and needle in proc.stderr


def test_usage_errors_exit_2(tmp_path):
    proc = run("score", "--reference", "x.nc")  # --model and --variable missing
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1
    proc = run("score", "--reference", "x.nc", "--model", "a=y.nc", "--variable", "tas", "--regrid", "nearest")
    assert proc.returncode == 2 and len(proc.stderr.strip().splitlines()) == 1


def test_a_reader_that_stops_early_gets_no_error_message(tmp_path):
    # `gridscore check --json FILE | head`: the pipe closes while gridscore writes. A shell
    # tool says nothing then (coreutils; Python's signal documentation, "Note on SIGPIPE");
    # gridscore printed "internal error (BrokenPipeError ...)"
    import xarray as xr

    names = {f"field_{i:04d}": (("time", "lat", "lon"), np.ones((1, 2, 2), "float32"), {"units": "K"}) for i in range(400)}
    ds = xr.Dataset(names, coords={"time": ("time", [15.0], {"units": "days since 2001-01-01"}),
                                   "lat": ("lat", [-45.0, 45.0], {"units": "degrees_north"}),
                                   "lon": ("lon", [-90.0, 90.0], {"units": "degrees_east"})})
    ds.to_netcdf(tmp_path / "many.nc")
    proc = subprocess.Popen([sys.executable, "-m", "app.cli", "check", "--json", str(tmp_path / "many.nc")],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=Path(__file__).resolve().parents[1])
    assert proc.stdout is not None and proc.stderr is not None
    assert proc.stdout.read(10)  # the report begins (it is larger than a pipe's buffer, 64 KiB on Linux)
    proc.stdout.close()
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=120) == 2
    assert err == "", err


def test_a_run_given_as_a_climatology_of_some_months_is_refused_naming_its_months(tmp_path, capsys):
    # an analysis written as a `month` dimension holding January and July only: the refusal
    # names those two months (calendar month numbers 1 and 7, common practice), not "12-month"
    import xarray as xr

    from app.cli import main

    ds = xr.Dataset(
        {"ua": (("month", "lat", "lon"), np.ones((2, 6, 12)), {"units": "m s-1", "standard_name": "eastward_wind"})},
        coords={"month": ("month", np.array([1, 7], "int32")),
                "lat": ("lat", np.arange(75.0, -90.0, -30.0), {"units": "degrees_north"}),
                "lon": ("lon", np.arange(-165.0, 180.0, 30.0), {"units": "degrees_east"})},
    )
    ds.to_netcdf(tmp_path / "jan-jul.nc")
    path = str(tmp_path / "jan-jul.nc")
    assert main(["score", "--reference", f"ref={path}", "--model", f"run={path}", "--variable", "ua", "--season", "JAN"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "jan-jul.nc" in err[0], err
    assert "climatology of JAN, JUL only" in err[0] and "12-month" not in err[0], err


def test_a_refused_time_axis_names_the_file_not_the_source(tmp_path, capsys):
    # a climatology written with a bare number as its time (no units, CF conventions 1.10 §4.4):
    # the one line must name the file to change, not only the name the source was given
    import xarray as xr

    from app.cli import main

    grid = {"lat": ("lat", np.arange(-75.0, 90.0, 30.0), {"units": "degrees_north"}),
            "lon": ("lon", np.arange(15.0, 360.0, 30.0), {"units": "degrees_east"})}
    xr.Dataset({"tas": (("time", "lat", "lon"), np.full((1, 6, 12), 280.0), {"units": "K"})},
               coords={"time": ("time", [120.0]), **grid}).to_netcdf(tmp_path / "bare-time.nc")
    run = str(write_cf(tmp_path / "run.nc", dlat=30.0, years=1))
    assert main(["score", "--reference", str(tmp_path / "bare-time.nc"), "--model", f"run={run}", "--variable", "tas"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith(f"gridscore: {tmp_path / 'bare-time.nc'}: the time coordinate has no units"), err
