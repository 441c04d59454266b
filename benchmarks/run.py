"""Benchmarks of gridscore on generated data of realistic size, side by side in one run.

    python benchmarks/run.py                 # 30 and 100 years, 5 runs, 4 variables, 1° monthly
    python benchmarks/run.py --years 30      # one length only
    python benchmarks/run.py --quick         # 10 years, 2 runs: a smoke test of the script

Each measurement runs in a fresh Python process, so that its wall time and its peak
resident memory (``ru_maxrss``) are its own.  Measured:

* floor       – open and load every value once with xarray (the cost of reading the data)
* score cold  – ``gridscore score`` for every variable: all runs × 8 regions × 5 seasons,
                empty cache
* score warm  – the same commands again (served from the cache)
* baseline    – what a user writes by hand with xarray: loop over region and season,
                recompute from the files each time (remap, select, reduce), same metrics
* dashboard   – a region change to the updated score table (uncached / cached) and the
                render of a 0.25° map, through the dashboard's own state object

Results go to benchmarks/results.md and benchmarks/results.json with the machine's
description.  Data are generated once under benchmarks/data/ (not committed).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
REGIONS = ["global", "tropics", "nh-extratropics", "sh-extratropics", "arctic", "antarctic", "land", "ocean"]
SEASONS = ["ANN", "DJF", "MAM", "JJA", "SON"]
VARIABLES = ["tas", "pr", "psl", "rlut"]


# ----------------------------------------------------------------------------- helpers
def _peak_mb(who: int = resource.RUSAGE_SELF) -> float:
    return resource.getrusage(who).ru_maxrss / 1024.0  # Linux reports KiB


def _collection(data: Path):
    sys.path.insert(0, str(HERE.parent))
    from evaluation.catalog import Collection

    return Collection.from_path(data / "manifest.toml")


def _span(data: Path) -> str:
    """The years every source of a benchmark collection covers, from the file names
    (``<var>_<source>_<YYYYMM>-<YYYYMM>.nc``)."""
    starts: dict[str, int] = {}
    ends: dict[str, int] = {}
    for f in data.rglob("tas_*.nc"):
        source = f.parent.name
        first, last = f.stem.split("_")[-1].split("-")
        starts[source] = min(starts.get(source, 9999), int(first[:4]))
        ends[source] = max(ends.get(source, 0), int(last[:4]))
    return f"{max(starts.values())}-{min(ends.values())}"


def _score_commands(data: Path, variables: list[str], out: Path) -> list[list[str]]:
    coll = _collection(data)
    ref = coll.references[0]
    cmds = []
    for v in variables:
        # the whole span, not the default 1991-2020: every value of the collection is read
        cmd = ["gridscore", "score", "--reference", f"{ref.name}={','.join(ref.paths)}", "--variable", v, "--period", _span(data)]
        for m in coll.models:
            cmd += ["--model", f"{m.name}={','.join(m.paths)}"]
        for r in REGIONS:
            cmd += ["--region", r]
        for s in SEASONS:
            cmd += ["--season", s]
        cmd += ["--output", str(out / f"scores_{v}.csv")]
        cmds.append(cmd)
    return cmds


# ----------------------------------------------------------------------------- steps (run in a child)
def step_floor(data: Path, variables: list[str]) -> dict:
    import xarray as xr

    files = sorted(p for p in data.rglob("*.nc") if p.name.split("_")[0] in variables)
    nbytes = 0
    t0 = time.perf_counter()
    for f in files:
        with xr.open_dataset(f, chunks={}) as ds:
            for v in ds.data_vars:
                if v in variables:
                    nbytes += ds[v].load().nbytes
    return {"seconds": time.perf_counter() - t0, "peak_mb": _peak_mb(), "bytes": nbytes, "files": len(files)}


def step_score(data: Path, variables: list[str], cache: str, out: str) -> dict:
    env = {**os.environ, "GRIDSCORE_CACHE": cache}
    each = {}
    t0 = time.perf_counter()
    for v, cmd in zip(variables, _score_commands(data, variables, Path(out)), strict=True):
        t1 = time.perf_counter()
        subprocess.run(cmd, check=True, env=env, stdout=subprocess.DEVNULL)
        each[v] = time.perf_counter() - t1
    return {"seconds": time.perf_counter() - t0, "peak_mb": _peak_mb(resource.RUSAGE_CHILDREN), "per_variable": each}


def step_baseline(data: Path, variables: list[str], regions: list[str], seasons: list[str]) -> dict:
    """A straightforward hand-written evaluation: recompute everything per region and season."""
    import numpy as np
    import xarray as xr
    import xarray_regrid  # noqa: F401

    coll = _collection(data)
    ref_src = coll.references[0]
    months = {"ANN": list(range(1, 13)), "DJF": [12, 1, 2], "MAM": [3, 4, 5], "JJA": [6, 7, 8], "SON": [9, 10, 11]}
    bands = {"global": (-90, 90), "tropics": (-30, 30), "nh-extratropics": (30, 90), "sh-extratropics": (-90, -30),
             "arctic": (60, 90), "antarctic": (-90, -60), "land": (-90, 90), "ocean": (-90, 90)}
    rows = 0
    t0 = time.perf_counter()

    def open_var(src, v):
        import glob

        files = sorted(f for p in src.paths for f in glob.glob(p) if Path(f).name.startswith(v + "_"))
        ds = xr.open_mfdataset(files, chunks={"time": 120}, decode_times=xr.coders.CFDatetimeCoder(use_cftime=True))
        lat = "lat" if "lat" in ds.dims else "latitude"
        lon = "lon" if "lon" in ds.dims else "longitude"
        da = ds[v].rename({lat: "lat", lon: "lon"}).sortby("lat")
        da = da.assign_coords(lon=((da.lon + 180) % 360) - 180).sortby("lon")
        return da

    for v in variables:
        for region in regions:
            for season in seasons:
                ref = open_var(ref_src, v)
                start = int(_span(data).split("-")[0])
                lo, hi = bands[region]
                w = np.cos(np.deg2rad(ref.lat)) * ((ref.lat >= lo) & (ref.lat <= hi))
                sel = lambda da: da.where(da.time.dt.month.isin(months[season]) & (da.time.dt.year >= start), drop=True)  # noqa: E731
                r = sel(ref)
                r_clim = r.mean("time")
                r_series = r.groupby("time.year").mean().weighted(w).mean(("lat", "lon"))
                for m_src in coll.models:
                    m = open_var(m_src, v).regrid.conservative(ref.isel(time=0, drop=True).to_dataset(), latitude_coord="lat")
                    m = sel(m)
                    m_clim = m.mean("time")
                    mean_m = m_clim.weighted(w).mean(("lat", "lon"))
                    mean_r = r_clim.weighted(w).mean(("lat", "lon"))
                    rmse = np.sqrt(((m_clim - r_clim) ** 2).weighted(w).mean(("lat", "lon")))
                    dm, dr = m_clim - mean_m, r_clim - mean_r
                    corr = (dm * dr).weighted(w).mean(("lat", "lon")) / np.sqrt((dm**2).weighted(w).mean(("lat", "lon")) * (dr**2).weighted(w).mean(("lat", "lon")))
                    m_series = m.groupby("time.year").mean().weighted(w).mean(("lat", "lon"))
                    trend = m_series.polyfit("year", 1)
                    xr.merge([mean_m.rename("mean"), mean_r.rename("ref_mean"), rmse.rename("rmse"), corr.rename("corr"),
                              trend.polyfit_coefficients.sel(degree=1, drop=True).rename("trend"),
                              r_series.polyfit("year", 1).polyfit_coefficients.sel(degree=1, drop=True).rename("ref_trend")]).compute()
                    rows += 1
    return {"seconds": time.perf_counter() - t0, "peak_mb": _peak_mb(), "combinations": rows}


def step_dashboard(data: Path) -> dict:
    """Region change → updated table, uncached and cached; 0.25° map render."""
    sys.path.insert(0, str(HERE.parent))
    os.environ["GRIDSCORE_CACHE"] = tempfile.mkdtemp(prefix="gridscore-bench-dash-")  # a cold start
    try:
        from app.benchmarking import measure_dashboard
    except ImportError as exc:
        return {"error": f"dashboard timing not available ({exc})"}
    return {**measure_dashboard(data), "peak_mb": _peak_mb()}


STEPS = {"floor": step_floor, "score": step_score, "baseline": step_baseline, "dashboard": step_dashboard}


def _child(name: str, **kwargs) -> dict:
    code = (
        "import json, sys, pathlib; sys.path.insert(0, %r); import run; "
        "kw = json.loads(sys.argv[1]); kw['data'] = pathlib.Path(kw['data']); "
        "print('RESULT ' + json.dumps(run.STEPS[%r](**kw)))" % (str(HERE), name)
    )
    env = {**os.environ, "PYTHONWARNINGS": "ignore"}
    p = subprocess.run([sys.executable, "-c", code, json.dumps({k: str(v) if isinstance(v, Path) else v for k, v in kwargs.items()})],
                       capture_output=True, text=True, env=env)
    for line in p.stdout.splitlines():
        if line.startswith("RESULT "):
            return json.loads(line[7:])
    return {"error": (p.stderr or p.stdout).strip().splitlines()[-1:] or ["failed"]}


# ----------------------------------------------------------------------------- driver
def machine() -> dict:
    cpu = "unknown"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    mem = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / 2**30
    import dask
    import numpy
    import xarray

    return {"cpu": cpu, "cores": os.cpu_count(), "memory_gib": round(mem, 1), "python": platform.python_version(),
            "numpy": numpy.__version__, "xarray": xarray.__version__, "dask": dask.__version__, "platform": platform.platform()}


def ensure_data(years: int, runs: int) -> Path:
    sys.path.insert(0, str(HERE.parent))
    from evaluation.demo import write_demo

    folder = HERE / "data" / f"large-{years}y-{runs}runs"
    if not (folder / "manifest.toml").exists():
        print(f"generating {folder} ...", flush=True)
        write_demo(folder, size="large", years=years, runs=runs)
    return folder


def run_case(years: int, runs: int, *, baseline: bool) -> dict:
    data = ensure_data(years, runs)
    out = Path(tempfile.mkdtemp(prefix="gridscore-bench-"))
    cache = out / "cache"
    res: dict = {"years": years, "runs": runs, "variables": len(VARIABLES), "regions": len(REGIONS), "seasons": len(SEASONS)}
    print(f"[{years} y] floor ...", flush=True)
    res["floor"] = _child("floor", data=data, variables=VARIABLES)
    print(f"[{years} y] score cold ...", flush=True)
    res["score_cold"] = _child("score", data=data, variables=VARIABLES, cache=str(cache), out=str(out))
    print(f"[{years} y] score warm ...", flush=True)
    res["score_warm"] = _child("score", data=data, variables=VARIABLES, cache=str(cache), out=str(out))
    if baseline:
        # one variable (all runs x regions x seasons): the loop re-reads the files for every
        # combination, so all four variables would take most of an hour
        print(f"[{years} y] hand-written baseline ({VARIABLES[0]}) ...", flush=True)
        res["baseline"] = _child("baseline", data=data, variables=VARIABLES[:1], regions=REGIONS, seasons=SEASONS)
    print(f"[{years} y] dashboard ...", flush=True)
    res["dashboard"] = _child("dashboard", data=data)
    shutil.rmtree(out, ignore_errors=True)
    return res


def _fmt(x, digits=1):
    return "–" if x is None else f"{x:.{digits}f}"


def table(results: list[dict], info: dict) -> str:
    lines = [
        f"Machine: {info['cpu']}, {info['cores']} cores, {info['memory_gib']} GiB; Python {info['python']}, "
        f"numpy {info['numpy']}, xarray {info['xarray']}, dask {info['dask']}.",
        "",
        "| data | step | time (s) | peak memory (MB) | ratio | target |",
        "|---|---|---:|---:|---:|---|",
    ]
    for r in results:
        label = f"{r['years']} y × {r['runs']} runs × {r['variables']} vars, 1°"
        floor = r["floor"].get("seconds")
        rows = [("floor: read every value once", r["floor"], None, "")]
        cold, warm = r["score_cold"].get("seconds"), r["score_warm"].get("seconds")
        rows.append(("gridscore score, cold cache", r["score_cold"], cold / floor if cold and floor else None, "≤ 2× floor"))
        rows.append(("gridscore score, warm cache", r["score_warm"], None, f"≤ 0.5 s ({len(VARIABLES)} commands: {_fmt(warm / len(VARIABLES), 2) if warm else '–'} s each)"))
        if "baseline" in r:
            base = r["baseline"].get("seconds")
            one = r["score_cold"].get("per_variable", {}).get(VARIABLES[0])
            rows.append((f"gridscore score, cold, {VARIABLES[0]} only", {"seconds": one}, None, ""))
            rows.append((f"hand-written xarray baseline, {VARIABLES[0]} only", r["baseline"], base / one if base and one else None, "≥ 5× the cold score time"))
        d = r.get("dashboard", {})
        for key, what, target in (("first_table", "dashboard: first score table (cold start)", ""),
                                  ("region_change_uncached", "dashboard: region change, uncached", ""),
                                  ("region_change_cached", "dashboard: region change, cached", "≤ 0.5 s"),
                                  ("map_render_0p25", "dashboard: render a 0.25° map", "")):
            if key in d:
                rows.append((what, {"seconds": d[key], "peak_mb": d.get("peak_mb")}, None, target))
        if "error" in d:
            rows.append((f"dashboard: {d['error']}", {}, None, ""))
        for what, m, ratio, target in rows:
            lines.append(f"| {label} | {what} | {_fmt(m.get('seconds'), 2)} | {_fmt(m.get('peak_mb'), 0)} | {_fmt(ratio, 2)} | {target} |")
    return "\n".join(lines) + "\n"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--years", type=int, nargs="+", default=[30, 100])
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--quick", action="store_true", help="10 years, 2 runs: check that the script works")
    args = ap.parse_args()
    if args.quick:
        args.years, args.runs = [10], 2
    info = machine()
    results = [run_case(y, args.runs, baseline=(y <= 30)) for y in args.years]
    md = "# Benchmark results\n\n" + table(results, info)
    (HERE / "results.md").write_text(md)
    (HERE / "results.json").write_text(json.dumps({"machine": info, "results": results}, indent=2))
    print(md)


if __name__ == "__main__":
    main()
