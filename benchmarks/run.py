"""Benchmarks of gridscore against the floor and a hand-tuned script, side by side in one run.

    python benchmarks/run.py                  # everything below (about 15 minutes on 2 quiet cores)
    python benchmarks/run.py --only request   # the issue-14 request only (a few minutes)
    python benchmarks/run.py --only daily     # the request's shape with daily input
    python benchmarks/run.py --only collections --years 30
    python benchmarks/run.py --only browser
    python benchmarks/run.py --quick          # 2 rounds, 10-year collection: a smoke test of the script

Every measurement is a whole process (imports included), started fresh, as a user runs it;
its wall time and its own peak resident memory (``ru_maxrss`` from ``wait4``) are recorded.
The steps of one case run interleaved, round after round (floor, hand-tuned script, cold,
warm, floor, ...), so that a change of the machine's load hits them alike; each ratio is
taken within a round and the median over the rounds is reported, with the load average
(``os.getloadavg``) before and after.  On a shared machine absolute times are noisy, the
ratios much less so.

Cases
-----
request      4 sources of 2° monthly tas, 40 years (1 reference, 3 runs):
             3 runs × 6 regions × 5 seasons over 1981–2010 (issue 14)
daily        the request's shape (4 sources of 2° tas, 40 years; 3 runs × 6 regions × 5
             seasons, 1981–2010) with daily input (synthetic values): the monthly means
             are made inside the read; the hand-tuned script reads monthly files only
memory       a century of 1° monthly tas (1 reference, 5 runs; fast synthetic values of the
             collection's shape): the peak memory of one cold score over the whole span
collections  the README's 1° collections: 30 and 100 years, 5 runs, 4 variables, every
             run × 8 regions × 5 seasons over the whole common span, one command per
             variable; the 100-year one also gives the peak memory of a score
browser      the served dashboard on the bundled sample in headless Debian chromium
             (Playwright): server start to first maps with a fresh cache, the overview
             after start in each of its forms (by variable, then by season, then by
             region, each on a new page), a cached change of region on the score table

Steps
-----
floor        read every value of the case's files once with xarray (``load()``), nothing else
peer         benchmarks/peer.py: load each file once, numpy reductions, the same metrics;
             its numbers are checked against gridscore's (at most 1e-10 apart)
cold         ``gridscore score`` with an empty cache
warm         the same command again (answered from the cache)

Results go to benchmarks/results.md and benchmarks/results.json with the machine's
description; the cases not run keep their last results (each with its own time and load).
Data are generated once under benchmarks/data/ (not committed).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from serving import SHADOW_FIND_JS, free_port, wait_until_live

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
REGIONS = ["global", "tropics", "nh-extratropics", "sh-extratropics", "arctic", "antarctic", "land", "ocean"]
SEASONS = ["ANN", "DJF", "MAM", "JJA", "SON"]
VARIABLES = ["tas", "pr", "psl", "rlut"]
#: The request of issue 14: 3 runs × 6 regions × 5 seasons, tas, 1981-2010.
REQUEST = {"regions": ["global", "tropics", "nh-extratropics", "sh-extratropics", "land", "ocean"], "period": "1981-2010",
           "runs": ["larkspur-2", "tidewell-3", "cobble-b"], "reference": "tessera-obs", "variable": "tas"}
#: Targets of issue 14 (ratios are of whole-process wall times).
TARGETS = {"cold_vs_floor": 1.5, "cold_vs_peer": 1.0, "warm_s": 0.3, "peak_gb": 2.0, "first_maps_s": 4.0,
           "overview_s": 5.0, "cached_region_s": 0.3}
#: Where benchmarks/sessions.py's part of results.md begins (kept when this script rewrites the file).
SESSIONS_MARK = "<!-- sessions: begin -->"
#: Where the written notes on what limits the missed targets begin (profiles; kept when this script rewrites the file).
PROFILES_MARK = "<!-- profiles: begin -->"
TOLERANCE = 1e-10  # peer and gridscore: |a - b| <= TOLERANCE * max(1, |b|)


# ----------------------------------------------------------------------------- processes
def measure(cmd: list[str], *, env: dict | None = None, cwd: Path = ROOT) -> dict:
    """Wall time and peak memory of one whole process; raises with its stderr when it fails.

    The peak resident memory comes from GNU time (``/usr/bin/time -f %M``) where present:
    ``ru_maxrss`` of a child forked from this process would count this process's own
    memory at the fork.
    """
    gnu_time = shutil.which("time") if Path("/usr/bin/time").exists() else None
    with tempfile.NamedTemporaryFile("r", suffix=".time") as report:
        full = [gnu_time, "-f", "%M %U %S", "-o", report.name, *cmd] if gnu_time else cmd
        t0 = time.perf_counter()
        proc = subprocess.run(full, env=env, cwd=cwd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
        seconds = time.perf_counter() - t0
        if proc.returncode != 0:
            raise RuntimeError(f"{' '.join(cmd[:4])} ... failed ({proc.returncode}): {proc.stderr.strip()[-400:]}")
        fields = report.read().split()
    peak_kb, user, system = (float(x) for x in fields[-3:]) if gnu_time and len(fields) >= 3 else (float("nan"),) * 3
    # CPU seconds (user + system) grow far less than wall time when other work shares the cores
    return {"seconds": seconds, "peak_mb": peak_kb / 1024.0, "cpu_seconds": user + system}


def load_average() -> float:
    return round(os.getloadavg()[0], 2)


def gridscore() -> str:
    exe = Path(sys.executable).with_name("gridscore")
    return str(exe) if exe.exists() else "gridscore"


FLOOR = (
    "import sys, xarray as xr\n"
    "for f in sys.argv[2:]:\n"
    "    with xr.open_dataset(f) as ds:\n"
    "        ds[sys.argv[1]].load()\n"
)


def floor_cmd(variable: str, files: list[str]) -> list[str]:
    return [sys.executable, "-c", FLOOR, variable, *files]


# ----------------------------------------------------------------------------- data
def ensure_request_data() -> Path:
    """The issue-14 request's files: the demo generator at 2°, 40 years, tas only."""
    from dataclasses import replace

    sys.path.insert(0, str(ROOT))
    from evaluation import demo

    folder = HERE / "data" / "request-2deg-40y-4runs"
    if not (folder / "manifest.toml").exists():
        print(f"generating {folder} ...", flush=True)
        demo.SIZES.setdefault("benchmark-2deg", replace(demo.SIZES["large"], step=2.0, variables=("tas",), years=40, runs=4))
        demo.write_demo(folder, size="benchmark-2deg")
    return folder


def ensure_data(years: int, runs: int) -> Path:
    sys.path.insert(0, str(ROOT))
    from evaluation.demo import write_demo

    folder = HERE / "data" / f"large-{years}y-{runs}runs"
    if not (folder / "manifest.toml").exists():
        print(f"generating {folder} ...", flush=True)
        write_demo(folder, size="large", years=years, runs=runs)
    return folder


def _collection(data: Path):
    sys.path.insert(0, str(ROOT))
    from evaluation.catalog import Collection

    return Collection.from_path(data / "manifest.toml")


def _files(paths, variable: str) -> list[str]:
    import glob

    return sorted(f for p in paths for f in glob.glob(p) if Path(f).name.startswith(variable + "_"))


def _span(data: Path) -> str:
    """The years every source of a collection covers, from the file names (``<var>_<source>_<YYYYMM>-<YYYYMM>.nc``)."""
    starts: dict[str, int] = {}
    ends: dict[str, int] = {}
    for f in data.rglob("tas_*.nc"):
        source = f.parent.name
        first, last = f.stem.split("_")[-1].split("-")
        starts[source] = min(starts.get(source, 9999), int(first[:4]))
        ends[source] = max(ends.get(source, 0), int(last[:4]))
    return f"{max(starts.values())}-{min(ends.values())}"


def _request_args(ref, runs, variable: str, period: str, regions: list[str]) -> list[str]:
    args = ["--reference", f"{ref.name}={','.join(ref.paths)}"]
    for m in runs:
        args += ["--model", f"{m.name}={','.join(m.paths)}"]
    args += ["--variable", variable, "--period", period]
    for r in regions:
        args += ["--region", r]
    for s in SEASONS:
        args += ["--season", s]
    return args


# ----------------------------------------------------------------------------- the peer's check
def compare_with_peer(peer_csv: Path, gridscore_csv: Path) -> dict:
    """Largest difference of the peer's numbers from gridscore's (the peer's metrics only)."""
    import csv
    import math

    with open(gridscore_csv) as fh:
        ours = {(r["model"], r["reference"], r["region"], r["season"], r["metric"]): float(r["value"]) for r in csv.DictReader(fh)
                if r["reference"] and r["value"] != ""}
    worst, compared, missing = 0.0, 0, 0
    with open(peer_csv) as fh:
        for r in csv.DictReader(fh):
            key = (r["model"], r["reference"], r["region"], r["season"], r["metric"])
            if key not in ours:
                missing += 1
                continue
            a, b = float(r["value"]), ours[key]
            if math.isnan(a) and math.isnan(b):
                continue
            worst = max(worst, abs(a - b) / max(1.0, abs(b)))
            compared += 1
    return {"compared": compared, "missing": missing, "max_difference": worst, "equal": missing == 0 and compared > 0 and worst <= TOLERANCE}


# ----------------------------------------------------------------------------- cases
def run_rounds(name: str, steps: dict[str, list[list[str]]], rounds: int, *, cache_env) -> dict:
    """Run ``steps`` (name -> commands run one after the other) interleaved for ``rounds``.

    ``cold`` gets an empty cache each round; ``warm`` reuses the cache ``cold`` just filled.
    """
    per: dict[str, list[dict]] = {k: [] for k in steps}
    loads = []
    for i in range(rounds):
        before = load_average()
        cache = Path(tempfile.mkdtemp(prefix="gridscore-bench-cache-"))
        for step, cmds in steps.items():
            env = cache_env(cache) if step in ("cold", "warm") else {**os.environ, "OPENBLAS_NUM_THREADS": os.environ.get("OPENBLAS_NUM_THREADS", "1")}
            parts = [measure(c, env=env) for c in cmds]
            per[step].append({"seconds": sum(p["seconds"] for p in parts), "peak_mb": max(p["peak_mb"] for p in parts),
                              "cpu_seconds": sum(p["cpu_seconds"] for p in parts), "each": [round(p["seconds"], 3) for p in parts]})
        shutil.rmtree(cache, ignore_errors=True)
        loads.append((before, load_average()))
        print(f"  [{name}] round {i + 1}/{rounds}: " + ", ".join(f"{k} {v[-1]['seconds']:.2f} s" for k, v in per.items())
              + f"  (load {before} -> {loads[-1][1]})", flush=True)
    out: dict = {"rounds": rounds, "load": loads, "measured": time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime())}
    for step, values in per.items():
        out[step] = {"seconds": statistics.median(v["seconds"] for v in values), "peak_mb": max(v["peak_mb"] for v in values),
                     "cpu_seconds": statistics.median(v["cpu_seconds"] for v in values),
                     "all": [round(v["seconds"], 3) for v in values], "each_last": values[-1]["each"]}

    def ratio(a: str, b: str, what: str = "seconds") -> float | None:
        if a not in per or b not in per:
            return None
        return statistics.median(x[what] / y[what] for x, y in zip(per[a], per[b], strict=True))

    out["ratios"] = {"cold_vs_floor": ratio("cold", "floor"), "cold_vs_peer": ratio("cold", "peer"),
                     "peer_vs_floor": ratio("peer", "floor"), "warm_vs_floor": ratio("warm", "floor")}
    out["cpu_ratios"] = {"cold_vs_floor": ratio("cold", "floor", "cpu_seconds"), "cold_vs_peer": ratio("cold", "peer", "cpu_seconds"),
                         "peer_vs_floor": ratio("peer", "floor", "cpu_seconds")}
    return out


def _cache_env(cache: Path) -> dict:
    return {**os.environ, "GRIDSCORE_CACHE": str(cache)}


def case_request(rounds: int) -> dict:
    data = ensure_request_data()
    coll = _collection(data)
    ref = next(s for s in coll.references if s.name == REQUEST["reference"])
    runs = [next(s for s in coll.models if s.name == n) for n in REQUEST["runs"]]
    out = Path(tempfile.mkdtemp(prefix="gridscore-bench-"))
    args = _request_args(ref, runs, "tas", REQUEST["period"], REQUEST["regions"])
    files = [f for s in [ref, *runs] for f in _files(s.paths, "tas")]
    steps = {
        "floor": [floor_cmd("tas", files)],
        "peer": [[sys.executable, str(HERE / "peer.py"), *args, "--output", str(out / "peer.csv")]],
        "cold": [[gridscore(), "score", *args, "--output", str(out / "scores.csv")]],
        "warm": [[gridscore(), "score", *args, "--output", str(out / "scores.csv")]],
    }
    print("[request] 4 sources of 2° monthly tas, 40 years; 3 runs x 6 regions x 5 seasons, 1981-2010", flush=True)
    res = run_rounds("request", steps, rounds, cache_env=_cache_env)
    res["peer_check"] = compare_with_peer(out / "peer.csv", out / "scores.csv")
    res["data"] = {"files": len(files), "megabytes_on_disk": round(sum(os.path.getsize(f) for f in files) / 1e6, 1),
                   "megabytes_of_values": round(sum(_values_bytes(f, "tas") for f in files) / 1e6, 1)}
    shutil.rmtree(out, ignore_errors=True)
    return res


def _values_bytes(path: str, variable: str) -> int:
    import netCDF4

    with netCDF4.Dataset(path) as ds:
        v = ds.variables[variable]
        return int(v.size * v.dtype.itemsize)


def case_collection(years: int, runs: int, rounds: int) -> dict:
    data = ensure_data(years, runs)
    coll = _collection(data)
    ref = coll.references[0]
    span = _span(data)
    out = Path(tempfile.mkdtemp(prefix="gridscore-bench-"))
    steps: dict[str, list[list[str]]] = {"floor": [], "peer": [], "cold": [], "warm": []}
    for v in VARIABLES:
        args = _request_args(ref, coll.models, v, span, REGIONS)
        files = [f for s in [ref, *coll.models] for f in _files(s.paths, v)]
        steps["floor"].append(floor_cmd(v, files))
        steps["peer"].append([sys.executable, str(HERE / "peer.py"), *args, "--output", str(out / f"peer_{v}.csv")])
        steps["cold"].append([gridscore(), "score", *args, "--output", str(out / f"scores_{v}.csv")])
        steps["warm"].append([gridscore(), "score", *args, "--output", str(out / f"scores_{v}.csv")])
    label = f"{years} y x {runs} runs x {len(VARIABLES)} vars, 1°"
    print(f"[collection] {label}: every run x {len(REGIONS)} regions x {len(SEASONS)} seasons over {span}, one command per variable", flush=True)
    res = run_rounds(label, steps, rounds, cache_env=_cache_env)
    res["peer_check"] = {v: compare_with_peer(out / f"peer_{v}.csv", out / f"scores_{v}.csv") for v in VARIABLES}
    res.update(years=years, runs=runs, span=span)
    shutil.rmtree(out, ignore_errors=True)
    return res


def _regular_grid(step: float):
    """Centres and CF coordinates of a global regular grid of ``step`` degrees (synthetic data)."""
    import numpy as np

    lat, lon = np.arange(-90 + step / 2, 90, step), np.arange(-180 + step / 2, 180, step)
    coords = {"lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude"}),
              "lon": ("lon", lon, {"units": "degrees_east", "standard_name": "longitude"})}
    return lat, lon, coords


def ensure_daily_data(years: int = 40, runs: int = 3) -> Path:
    """Daily float32 tas on a 2° grid from 1981 (a reference and ``runs`` runs, noleap
    calendar, one file each, no compression): random weather on a seasonal cycle and a
    trend, each run with its own offset.  Written fast with numpy; 0.95 GB a source."""
    folder = HERE / "data" / f"daily-2deg-{years}y-{runs + 1}sources"
    if (folder / "done").exists():
        return folder
    import numpy as np
    import xarray as xr

    print(f"generating {folder} ...", flush=True)
    lat, lon, coords = _regular_grid(2.0)
    days = 365 * years
    times = np.arange(days, dtype="float64") + 0.5  # noon of each day
    rng = np.random.default_rng(41)
    base = (300 - 40 * np.sin(np.deg2rad(lat))[:, None] ** 2 + 2 * np.cos(np.deg2rad(lon))[None, :]).astype("float32")
    for k, name in enumerate(["obs", *(f"run-{i + 1}" for i in range(runs))]):
        (folder / name).mkdir(parents=True, exist_ok=True)
        data = np.empty((days, lat.size, lon.size), dtype="float32")
        for t in range(days):
            data[t] = base + 8 * np.cos(2 * np.pi * (t % 365) / 365) + 0.02 * t / 365 + 2 * rng.standard_normal(base.shape, dtype="float32") + 0.3 * k
        time_attrs = {"units": "days since 1981-01-01", "calendar": "noleap", "standard_name": "time", "axis": "T"}
        ds = xr.Dataset({"tas": (("time", "lat", "lon"), data, {"units": "K", "standard_name": "air_temperature"})},
                        coords={"time": ("time", times, time_attrs), **coords})
        ds.to_netcdf(folder / name / f"tas_{name}.nc")
        del data, ds
    (folder / "done").write_text("")
    return folder


def case_daily(rounds: int, years: int = 40) -> dict:
    """The request's shape with daily input: floor, cold and warm (the hand-tuned script reads monthly files only)."""
    data = ensure_daily_data(years)
    sources = sorted(p.name for p in data.iterdir() if p.is_dir())
    args = ["--reference", f"obs={data / 'obs' / '*.nc'}"]
    for name in sources:
        if name != "obs":
            args += ["--model", f"{name}={data / name / '*.nc'}"]
    args += ["--variable", "tas", "--period", REQUEST["period"]]
    for r in REQUEST["regions"]:
        args += ["--region", r]
    for s in SEASONS:
        args += ["--season", s]
    files = [str(f) for name in sources for f in sorted((data / name).glob("*.nc"))]
    out = Path(tempfile.mkdtemp(prefix="gridscore-bench-"))
    steps = {
        "floor": [floor_cmd("tas", files)],
        "cold": [[gridscore(), "score", *args, "--output", str(out / "scores.csv")]],
        "warm": [[gridscore(), "score", *args, "--output", str(out / "scores.csv")]],
    }
    print(f"[daily] {len(sources)} sources of 2° daily tas, {years} years; 3 runs x 6 regions x 5 seasons, {REQUEST['period']}", flush=True)
    res = run_rounds("daily", steps, rounds, cache_env=_cache_env)
    res["data"] = {"files": len(files), "megabytes_on_disk": round(sum(os.path.getsize(f) for f in files) / 1e6, 1)}
    shutil.rmtree(out, ignore_errors=True)
    return res


def ensure_memory_data(years: int = 100, runs: int = 5) -> Path:
    """One variable of the 1° collection's shape (a reference with its land fraction and
    ``runs`` runs, ``years`` of monthly float32 tas), written fast: random weather on a
    seasonal cycle.  Peak memory depends on the shapes and the code path, not the values;
    the demo generator takes many minutes for a century."""
    folder = HERE / "data" / f"memory-1deg-{years}y-{runs}runs"
    if (folder / "done").exists():
        return folder
    import cftime
    import numpy as np
    import xarray as xr

    print(f"generating {folder} ...", flush=True)
    lat, lon, coords = _regular_grid(1.0)
    months = 12 * years
    times = [cftime.DatetimeNoLeap(2021 - years + i // 12, i % 12 + 1, 15) for i in range(months)]
    rng = np.random.default_rng(14)
    base = (300 - 40 * np.sin(np.deg2rad(lat))[:, None] ** 2 + 0 * lon[None, :]).astype("float32")
    for k, name in enumerate(["obs", *(f"run-{i + 1}" for i in range(runs))]):
        (folder / name).mkdir(parents=True, exist_ok=True)
        data = np.empty((months, lat.size, lon.size), dtype="float32")
        for t in range(months):
            data[t] = base + 5 * np.cos(2 * np.pi * (t % 12) / 12) + rng.standard_normal(base.shape, dtype="float32") + 0.3 * k
        ds = xr.Dataset({"tas": (("time", "lat", "lon"), data, {"units": "K", "standard_name": "air_temperature"})},
                        coords={"time": ("time", times), **coords})
        ds.time.encoding.update(units="days since 1900-01-01", calendar="noleap")
        ds.to_netcdf(folder / name / f"tas_{name}.nc")
        if name == "obs":
            land = (100 * (rng.random(base.shape) > 0.7)).astype("float32")
            xr.Dataset({"sftlf": (("lat", "lon"), land, {"units": "%", "standard_name": "land_area_fraction"})}, coords=coords).to_netcdf(folder / name / "sftlf_obs.nc")
    (folder / "done").write_text("")
    return folder


def case_memory(years: int = 100, runs: int = 5) -> dict:
    """Peak memory of one cold ``gridscore score`` of a century of 1° months: every run x 8 regions x 5 seasons, the whole span."""
    data = ensure_memory_data(years, runs)
    args = ["--reference", f"obs={data / 'obs' / '*.nc'}"]
    for i in range(runs):
        args += ["--model", f"run-{i + 1}={data / f'run-{i + 1}' / '*.nc'}"]
    args += ["--variable", "tas", "--period", f"{2021 - years}-2020"]
    for r in REGIONS:
        args += ["--region", r]
    for s in SEASONS:
        args += ["--season", s]
    cache = Path(tempfile.mkdtemp(prefix="gridscore-bench-cache-"))
    out = Path(tempfile.mkdtemp(prefix="gridscore-bench-"))
    before = load_average()
    print(f"[memory] {years} y of 1° tas, 1 reference + {runs} runs, {len(REGIONS)} regions x {len(SEASONS)} seasons", flush=True)
    try:
        res = measure([gridscore(), "score", *args, "--output", str(out / "scores.csv")], env=_cache_env(cache))
    finally:
        shutil.rmtree(cache, ignore_errors=True)
        shutil.rmtree(out, ignore_errors=True)
    return {**res, "years": years, "runs": runs, "load": [(before, load_average())], "measured": time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime())}


# ----------------------------------------------------------------------------- browser
def case_browser(rounds: int) -> dict:
    """Server start to first maps (fresh cache), the overview after start in each form, a cached region change."""
    chromium = shutil.which("chromium")
    if chromium is None:
        return {"error": "no chromium on the PATH"}
    from playwright.sync_api import sync_playwright

    sample = ROOT / "sample_output" / "manifest.toml"
    per: list[dict] = []
    loads = []
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=chromium, args=["--headless", "--no-sandbox", "--disable-gpu"])
        for i in range(rounds):
            before = load_average()
            cache = Path(tempfile.mkdtemp(prefix="gridscore-bench-dash-"))
            port = free_port()
            env = {**os.environ, "GRIDSCORE_CACHE": str(cache)}
            t0 = time.perf_counter()
            server = subprocess.Popen([gridscore(), "serve", str(sample), "--port", str(port)], env=env,
                                      stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
            try:
                url = f"http://127.0.0.1:{port}"
                wait_until_live(port, server, deadline=time.monotonic() + 120, poll=0.05,
                                why="the server did not start within 120 s")
                listening = time.perf_counter() - t0
                page = browser.new_page(viewport={"width": 1500, "height": 1000})
                page.goto(url + "/?tab=maps", wait_until="domcontentloaded")
                _wait_drawn(page, "maps", "canvas")
                first_maps = time.perf_counter() - t0
                overview = _overview_time(browser, url)
                for by in ("season", "region"):  # the overview's other forms, opened one after the other
                    overview.update(_overview_time(browser, url, by))
                region = _cached_region_change(browser, url)
                later = _page_cost(browser, url)  # last: the overview is still timed right after the first maps
                page.close()
            finally:
                server.terminate()
                server.wait(timeout=30)
                shutil.rmtree(cache, ignore_errors=True)
            per.append({"listening_s": listening, "first_maps_s": first_maps, **later, **overview, "cached_region_s": region})
            loads.append((before, load_average()))
            print(f"  [browser] round {i + 1}/{rounds}: " + ", ".join(f"{k} {v:.2f}" for k, v in per[-1].items() if isinstance(v, float))
                  + f"  (load {before} -> {load_average()})", flush=True)
        browser.close()
    out = {k: statistics.median(p[k] for p in per if p.get(k) is not None) for k in per[0] if isinstance(per[0][k], float)}
    return {**out, "rounds": rounds, "load": loads, "all": per}


def _wait_drawn(page, tab: str, what: str, timeout_s: float = 120.0) -> None:
    page.locator(f".gs-view-{tab}").locator(what).first.wait_for(state="attached", timeout=timeout_s * 1000)
    deadline = time.perf_counter() + timeout_s
    while page.locator(f".gs-view-{tab}.pn-loading").count():
        if time.perf_counter() > deadline:
            raise RuntimeError(f"view {tab} still loading")
        page.wait_for_timeout(10)


def _browser_cpu() -> float:
    """CPU seconds (user + system) so far of the Chromium processes this script started."""
    import psutil

    total = 0.0
    for process in psutil.Process().children(recursive=True):
        try:
            if "chrom" in process.name().lower():
                times = process.cpu_times()
                total += times.user + times.system
        except psutil.Error:  # a process that has just ended
            continue
    return total


def _page_cost(browser, url: str) -> dict:
    """What a later page (the server warm, its maps computed) costs Chromium until its maps
    are drawn and one second after: CPU seconds of the browser's processes, and of its
    renderer's main thread (CDP ``Performance.getMetrics`` TaskDuration)."""
    page = browser.new_page(viewport={"width": 1500, "height": 1000})
    cdp = page.context.new_cdp_session(page)
    cdp.send("Performance.enable")
    before = _browser_cpu()
    t0 = time.perf_counter()
    page.goto(url + "/?tab=maps", wait_until="domcontentloaded")
    _wait_drawn(page, "maps", "canvas")
    seconds = time.perf_counter() - t0
    page.wait_for_timeout(1000)
    metrics = {m["name"]: m["value"] for m in cdp.send("Performance.getMetrics")["metrics"]}
    cpu = _browser_cpu() - before  # the page is still open: its renderer is counted
    page.close()
    return {"later_page_s": seconds, "later_page_browser_cpu_s": cpu, "later_page_renderer_s": metrics["TaskDuration"]}


def _overview_time(browser, url: str, by: str = "variable") -> dict:
    """Seconds from opening the overview tab in its form ``by`` (variable: right after the
    first maps) on a new page until it is drawn."""
    key = "overview_s" if by == "variable" else f"overview_{by}_s"
    page = browser.new_page(viewport={"width": 1500, "height": 1000})
    t0 = time.perf_counter()
    page.goto(url + f"/?tab=overview&overview_by={by}", wait_until="domcontentloaded")
    try:
        _wait_drawn(page, "overview", "canvas, .tabulator-row", timeout_s=120)
        return {key: time.perf_counter() - t0}
    except Exception as error:  # a dashboard without an overview tab
        return {key: None, f"{key[:-2]}_error": str(error).splitlines()[0][:120]}
    finally:
        page.close()


#: The score table's rows (".gs-view-scores .tabulator-row") differ from ``before`` (and,
#: given ``expected``, are all ``expected``), read inside the page.
ROWS_CHANGED_JS = """
([before, expected]) => {""" + SHADOW_FIND_JS + """
  const rows = within(find(document, ".gs-view-scores", []), ".tabulator-row").map(r => r.textContent);
  const same = (a, b) => a.length === b.length && a.every((x, i) => x === b[i]);
  return rows.length > 0 && !same(rows, before) && (expected === null || same(rows, expected));
}
"""


def _cached_region_change(browser, url: str) -> float:
    """Global -> tropics -> global on the score table; seconds of the last (cached) change."""
    page = browser.new_page(viewport={"width": 1500, "height": 1000})
    page.goto(url + "/?tab=scores", wait_until="domcontentloaded")
    _wait_drawn(page, "scores", ".tabulator-row")

    def rows():
        return page.locator(".gs-view-scores .tabulator-row").all_text_contents()

    def change(label: str, before, expected=None) -> float:
        """Seconds until the rows differ from ``before`` (and, given ``expected``, are all
        ``expected``: every table of the view drawn anew, not only the first)."""
        t0 = time.perf_counter()
        page.locator(".gs-region select").select_option(label=label)
        # tested inside the page at every frame it paints: polling through Playwright every
        # 5 ms (a locator round trip reading every row) kept the page's main thread busy
        # while it was drawing the tables it waited for
        page.wait_for_function(ROWS_CHANGED_JS, arg=[before, expected], polling="raf", timeout=120_000)
        return time.perf_counter() - t0

    global_rows = rows()
    change("Tropics (30°S–30°N)", global_rows)
    page.wait_for_timeout(500)  # every table of the tropics drawn
    tropics = rows()
    seconds = change("Global", tropics, expected=global_rows)
    page.close()
    return seconds


# ----------------------------------------------------------------------------- report
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


def _f(x, digits=2) -> str:
    return "–" if x is None else f"{x:.{digits}f}"


def _verdict(value, target, *, at_most=True) -> str:
    if value is None:
        return "not measured"
    return "met" if (value <= target if at_most else value >= target) else f"missed by {value / target:.2f}x"


def _loads(res: dict) -> str:
    values = [x for pair in res.get("load", []) for x in pair]
    return f"{min(values):.1f}–{max(values):.1f}" if values else "–"


def report(results: dict, info: dict) -> str:
    lines = [
        "# Benchmark results",
        "",
        f"Machine: {info['cpu']}, {info['cores']} cores, {info['memory_gib']} GiB; Python {info['python']}, "
        f"numpy {info['numpy']}, xarray {info['xarray']}, dask {info['dask']}.  Written {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())} "
        "by `python benchmarks/run.py`; each case says when it was measured (a case not run keeps its last results).",
        "",
        "Whole processes (imports included), interleaved rounds, medians; each ratio is taken within a round; "
        "CPU: user + system seconds of the process (GNU time), which grow far less than wall time when the cores are shared. "
        "Load: the 1-minute load average before and after the rounds (2 cores: above 2 the machine was shared, "
        "and absolute times grow with it; the ratios much less).",
    ]
    header = ["", "| step | time (s) | CPU (s) | peak memory (MB) | ratio | CPU ratio | target | verdict |", "|---|---:|---:|---:|---:|---:|---|---|"]
    for label, res in results.items():
        if label in ("browser", "memory"):
            continue
        r, c = res.get("ratios", {}), res.get("cpu_ratios", {})
        when = f"; measured {res['measured']}" if res.get("measured") else ""
        lines += ["", f"### {label}", "", f"{res['rounds']} rounds; load {_loads(res)}{when}.", *header]
        commands = len(res["warm"].get("each_last", [1]))
        warm_each = res["warm"]["seconds"] / commands
        rows = [
            ("floor: read every value once (xarray load)", res["floor"], None, None, "", ""),
            *([("hand-tuned script (benchmarks/peer.py), vs floor", res["peer"], r.get("peer_vs_floor"), c.get("peer_vs_floor"), "", "")]
              if "peer" in res else []),
            ("gridscore score, cold, vs floor", res["cold"], r.get("cold_vs_floor"), c.get("cold_vs_floor"), f"≤ {TARGETS['cold_vs_floor']}",
             _verdict(r.get("cold_vs_floor"), TARGETS["cold_vs_floor"])),
            *([("gridscore score, cold, vs hand-tuned", res["cold"], r.get("cold_vs_peer"), c.get("cold_vs_peer"), f"≤ {TARGETS['cold_vs_peer']}",
                _verdict(r.get("cold_vs_peer"), TARGETS["cold_vs_peer"]))] if "peer" in res else
              [("gridscore score, cold, vs hand-tuned", res["cold"], None, None, f"≤ {TARGETS['cold_vs_peer']}",
                "not measured (the hand-tuned script reads monthly files only)")]),
            (f"gridscore score, warm ({commands} command{'s' if commands > 1 else ''}, {warm_each:.2f} s each)", res["warm"], None, None,
             f"≤ {TARGETS['warm_s']} s each", _verdict(warm_each, TARGETS["warm_s"])),
        ]
        if res.get("years", 0) >= 100:
            rows.append(("gridscore score, cold: peak memory of one command", {"seconds": None, "peak_mb": res["cold"]["peak_mb"]},
                         None, None, f"≤ {TARGETS['peak_gb']:g} GB", _verdict(res["cold"]["peak_mb"] / 1000, TARGETS["peak_gb"])))
        for what, m, ratio, cpu, target, verdict in rows:
            lines.append(f"| {what} | {_f(m.get('seconds'))} | {_f(m.get('cpu_seconds'))} | {_f(m.get('peak_mb'), 0)} | {_f(ratio)} | {_f(cpu)} | {target} | {verdict} |")
        checks = res.get("peer_check", {})
        checks = {"tas": checks} if "equal" in checks else checks
        lines.append("")
        for v, c in checks.items():
            lines.append(f"- {v}: the hand-tuned numbers {'equal' if c['equal'] else 'DIFFER from'} gridscore's "
                         f"({c['compared']} values, largest difference {c['max_difference']:.1e} × max(1, |value|); tolerance {TOLERANCE:g}).")
    if "memory" in results:
        m = results["memory"]
        lines += ["", f"### Memory: {m['years']} y of 1° monthly tas, 1 reference + {m['runs']} runs (synthetic values)", "",
                  f"One cold `gridscore score`: every run × {len(REGIONS)} regions × {len(SEASONS)} seasons over the whole span; load {_loads(m)}"
                  + (f"; measured {m['measured']}." if m.get("measured") else "."), "",
                  "| step | time (s) | peak memory (MB) | target | verdict |", "|---|---:|---:|---|---|",
                  f"| gridscore score, cold | {_f(m['seconds'])} | {_f(m['peak_mb'], 0)} | ≤ {TARGETS['peak_gb']:g} GB | {_verdict(m['peak_mb'] / 1000, TARGETS['peak_gb'])} |"]
    if "browser" in results:
        b = results["browser"]
        lines += ["", "### Dashboard on the bundled sample (headless chromium, fresh cache each round)", ""]
        if "error" in b:
            lines.append(f"Not measured: {b['error']}.")
        else:
            lines += [f"{b['rounds']} rounds; load {_loads(b)}.", "", "| step | time (s) | target | verdict |", "|---|---:|---|---|",
                      f"| server start to listening | {_f(b.get('listening_s'))} | | |",
                      f"| server start to first maps drawn | {_f(b.get('first_maps_s'))} | ≤ {TARGETS['first_maps_s']:g} s | {_verdict(b.get('first_maps_s'), TARGETS['first_maps_s'])} |",
                      f"| a later page to its maps drawn (the server warm) | {_f(b.get('later_page_s'))} | | |",
                      f"| that page's cost to Chromium, CPU-s of its processes (of its renderer's main thread) | {_f(b.get('later_page_browser_cpu_s'))} ({_f(b.get('later_page_renderer_s'))}) | | |",
                      f"| overview opened after the first maps, until drawn | {_f(b.get('overview_s'))} | ≤ {TARGETS['overview_s']:g} s | {_verdict(b.get('overview_s'), TARGETS['overview_s'])} |",
                      *(f"| then the overview by {by} on a new page, until drawn | {_f(b.get(f'overview_{by}_s'))} | ≤ {TARGETS['overview_s']:g} s "
                        f"| {_verdict(b.get(f'overview_{by}_s'), TARGETS['overview_s'])} |" for by in ("season", "region") if f"overview_{by}_s" in b),
                      f"| cached change of region, score table | {_f(b.get('cached_region_s'), 3)} | ≤ {TARGETS['cached_region_s']:g} s | {_verdict(b.get('cached_region_s'), TARGETS['cached_region_s'])} |"]
    return "\n".join(lines) + "\n"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--only", choices=("request", "daily", "memory", "collections", "browser"), action="append", help="run only these cases (repeatable)")
    ap.add_argument("--years", type=int, nargs="+", default=[30, 100], help="lengths of the 1° collections")
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--rounds", type=int, default=5, help="interleaved rounds per case (medians)")
    ap.add_argument("--collection-rounds", type=int, help="rounds of the 1° collections (default: --rounds, half of it for 100 years)")
    ap.add_argument("--quick", action="store_true", help="2 rounds, a 10-year 2-run collection: check that the script works")
    args = ap.parse_args()
    if args.quick:
        args.years, args.runs, args.rounds = [10], 2, 2
    cases = args.only or ["request", "daily", "memory", "collections", "browser"]
    info = machine()
    results: dict = {}
    try:  # the cases not run this time keep their last results (each says when and at what load)
        results.update(json.loads((HERE / "results.json").read_text())["results"])
    except (OSError, ValueError, KeyError, TypeError):
        pass
    if "request" in cases:
        results["2°, 40 y, 4 sources, tas (issue 14 request)"] = case_request(args.rounds)
    if "daily" in cases:
        results["2°, 40 y, 4 sources, tas, daily input"] = case_daily(args.rounds)
    if "memory" in cases:
        results["memory"] = case_memory()
    if "collections" in cases:
        for y in args.years:
            rounds = args.collection_rounds or (max(1, args.rounds // 2) if y >= 100 else args.rounds)
            res = case_collection(y, args.runs, rounds)
            results[f"{y} y × {args.runs} runs × {len(VARIABLES)} vars, 1°"] = res
    if "browser" in cases:
        results["browser"] = case_browser(args.rounds)
    md = report(results, info)
    previous = (HERE / "results.md").read_text() if (HERE / "results.md").exists() else ""
    for mark in (PROFILES_MARK, SESSIONS_MARK):  # parts of the file written by hand and by benchmarks/sessions.py
        if mark in previous:
            start = previous.index(mark)
            others = [previous.index(m) for m in (PROFILES_MARK, SESSIONS_MARK) if m in previous and previous.index(m) > start]
            md = md.rstrip("\n") + "\n\n" + previous[start:min(others, default=len(previous))].rstrip("\n") + "\n"
    (HERE / "results.md").write_text(md)
    (HERE / "results.json").write_text(json.dumps({"machine": info, "results": results}, indent=2, default=str))
    print(md)


if __name__ == "__main__":
    main()
