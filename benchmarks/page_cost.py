"""What one page of the dashboard costs the browser: scripts, CPU and time to first maps.

A ``gridscore serve`` of the bundled sample (fresh cache folder) is started and warmed by
one page that waits for its maps, so that the pages measured after it wait for the browser,
not for the server's first computation.  Then, for each round, a **cold visitor** (a new
browser context: empty HTTP cache, no compiled-code cache) opens the dashboard and is timed
to its first maps (the definition of benchmarks/sessions.py), and one second more is let
pass; a **returning visitor** then loads the page again in the same context (its HTTP
cache and Chromium's code cache hold the scripts of the first visit).  For each page:

* seconds from navigation to first maps;
* CPU seconds of all Chromium processes (psutil) from navigation to one second after the maps;
* the renderer's main-thread ``TaskDuration``, ``ScriptDuration``, ``RecalcStyleDuration`` and
  ``LayoutDuration`` (CDP ``Performance.getMetrics``);
* the scripts the page loaded and their bytes (the Resource Timing entries of the page).

``--trace`` records one cold page with Chromium's tracing and prints, per script, the
main thread's milliseconds compiling and running it (``v8.compile``, ``v8.compileModule``,
``EvaluateScript``), so that one can see which bundle costs what.

``--returning`` adds, in each round, three visits in a row of one browser profile kept on
disk, as a person's browser returns to the page: its HTTP cache and Chromium's cache of
compiled script code (which an off-the-record context, such as a new Playwright context,
does not keep) hold the scripts of the earlier visits.

``--compare`` alternates, round by round, the server as it is with a server that hands
every page all the scripts Panel lists (gridscore's script selection switched off in that
process only), and prints the per-page ratios within each round.

Run under the measurement lock, e.g.
``flock /tmp/gridscore-bench.lock python benchmarks/page_cost.py --rounds 3 --compare``.
"""

from __future__ import annotations

import argparse
import json
import shutil
import statistics
import tempfile
import time
from collections import defaultdict
from pathlib import Path

from sessions import (
    ALL_SCRIPTS,
    CHROMIUM_ARGS,
    MAPS_DRAWN_JS,
    SAMPLE,
    SERVE,
    Server,
    _browsers_cpu,
    _runs_shown,
    _uptime,
)

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
METRICS = ("first_maps_s", "browser_cpu_s", "task_s", "script_s", "style_s", "layout_s")
SCRIPTS_JS = """() => performance.getEntriesByType("resource")
  .filter(e => e.initiatorType === "script" || e.name.split("?")[0].endsWith(".js"))
  .map(e => [e.name.split("?")[0].split("/").pop(), e.encodedBodySize, e.transferSize])"""


def _load(page, url: str, runs: int) -> dict:
    """One navigation to first maps and a second after: seconds, CPU and the scripts."""
    cdp = page.context.new_cdp_session(page)
    cdp.send("Performance.enable")
    before_metrics = {m["name"]: m["value"] for m in cdp.send("Performance.getMetrics")["metrics"]}
    cpu = _browsers_cpu()
    begin = time.monotonic()
    page.goto(url, wait_until="commit", timeout=300_000)
    page.wait_for_function(MAPS_DRAWN_JS, arg=[True, runs, ""], polling=100, timeout=300_000)
    seconds = time.monotonic() - begin
    page.wait_for_timeout(1000)
    cpu = _browsers_cpu() - cpu
    metrics = {m["name"]: m["value"] for m in cdp.send("Performance.getMetrics")["metrics"]}
    scripts = page.evaluate(SCRIPTS_JS)
    cdp.detach()
    return {"first_maps_s": seconds, "browser_cpu_s": cpu,
            "task_s": metrics["TaskDuration"] - before_metrics.get("TaskDuration", 0.0),
            "script_s": metrics["ScriptDuration"] - before_metrics.get("ScriptDuration", 0.0),
            "style_s": metrics["RecalcStyleDuration"] - before_metrics.get("RecalcStyleDuration", 0.0),
            "layout_s": metrics["LayoutDuration"] - before_metrics.get("LayoutDuration", 0.0),
            "scripts": scripts}


def _visit(browser, url: str, runs: int) -> dict:
    """A cold visitor (new context), then the same visitor returning (same context)."""
    context = browser.new_context(viewport={"width": 1500, "height": 1000})
    try:
        cold = _load(context.new_page(), url, runs)
        warm = _load(context.new_page(), url, runs)
    finally:
        context.close()
    return {"cold": cold, "warm": warm}


def _returning(playwright, chromium: str, url: str, runs: int, profile: Path, visits: int = 3) -> list[dict]:
    """One visitor with a browser profile on disk, as a person's browser keeps it: ``visits``
    loads in a row.  A new context of a running browser is off the record, and Chromium keeps
    no compiled-code cache for such a context; V8 stores a script's code at its second load
    and uses it from the third (V8 blog, "Improved code caching", 2018)."""
    context = playwright.chromium.launch_persistent_context(str(profile), executable_path=chromium, args=CHROMIUM_ARGS,
                                                            viewport={"width": 1500, "height": 1000})
    try:
        return [_load(context.new_page(), url, runs) for _ in range(visits)]
    finally:
        context.close()


def _trace(browser, url: str, runs: int, out: Path) -> dict[str, dict[str, float]]:
    """Main-thread ms per script (compile, run) of one cold page, from a Chromium trace."""
    context = browser.new_context(viewport={"width": 1500, "height": 1000})
    page = context.new_page()
    browser.start_tracing(page=page, path=str(out), categories=[
        "devtools.timeline", "v8", "disabled-by-default-v8.compile", "disabled-by-default-devtools.timeline"])
    page.goto(url, wait_until="commit")
    page.wait_for_function(MAPS_DRAWN_JS, arg=[True, runs, ""], polling=100, timeout=300_000)
    page.wait_for_timeout(1000)
    browser.stop_tracing()
    context.close()
    events = json.loads(out.read_text())
    events = events["traceEvents"] if isinstance(events, dict) else events
    per: dict[str, dict[str, float]] = defaultdict(lambda: defaultdict(float))
    for e in events:
        if e.get("ph") != "X" or "dur" not in e:
            continue
        data = (e.get("args") or {}).get("data") or (e.get("args") or {})
        name = e.get("name", "")
        source = str(data.get("url") or data.get("fileName") or "")
        if not source:
            continue
        script = source.split("?")[0].split("/").pop() or "(page)"
        if name in ("v8.compile", "v8.compileModule", "V8.CompileCode"):
            per[script]["compile_ms"] += e["dur"] / 1000
        elif name == "EvaluateScript":
            per[script]["evaluate_ms"] += e["dur"] / 1000
        elif name == "v8.parseOnBackground":
            per[script]["background_parse_ms"] += e["dur"] / 1000
    return {k: dict(v) for k, v in per.items()}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--compare", action="store_true", help="alternate with a server that serves every script Panel lists")
    parser.add_argument("--returning", action="store_true",
                        help="also time three visits in a row of one browser profile on disk (HTTP and code caches kept)")
    parser.add_argument("--trace", action="store_true", help="print main-thread compile/run time per script of one cold page")
    args = parser.parse_args()
    from playwright.sync_api import sync_playwright

    chromium = shutil.which("chromium")
    if chromium is None:
        raise SystemExit("page_cost.py: no 'chromium' on the PATH (Debian: apt-get install chromium)")
    runs = _runs_shown(SAMPLE)
    kinds = ["needed", "all"] if args.compare else ["needed"]
    print(f"load at start {_uptime()}; {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}", flush=True)
    results: dict[str, list[dict]] = {k: [] for k in kinds}
    with tempfile.TemporaryDirectory(prefix="gridscore-page-") as tmp, sync_playwright() as playwright:
        scratch = Path(tmp)
        browser = playwright.chromium.launch(executable_path=chromium, args=CHROMIUM_ARGS)
        servers = {k: Server(SAMPLE, scratch, start=ALL_SCRIPTS if k == "all" else SERVE) for k in kinds}
        try:
            for server in servers.values():  # the first page computes the maps: not measured
                _visit(browser, server.url, runs)
            for kind, server in servers.items():
                if args.trace:
                    per = _trace(browser, server.url, runs, scratch / f"trace-{kind}.json")
                    print(f"\n[{kind}] main thread per script of one cold page (ms):")
                    for script, v in sorted(per.items(), key=lambda kv: -sum(kv[1].values())):
                        if sum(v.values()) >= 1:
                            print(f"  {script:45s} " + "  ".join(f"{k} {x:7.1f}" for k, x in sorted(v.items())))
            for i in range(args.rounds):
                for kind, server in servers.items():
                    visit = _visit(browser, server.url, runs)
                    results[kind].append(visit)
                    c, w = visit["cold"], visit["warm"]
                    if args.returning:
                        visits = _returning(playwright, chromium, server.url, runs, scratch / f"profile-{kind}-{i}")
                        visit["visits"] = visits
                        print(f"round {i + 1} [{kind}] one profile, visits 1-3: " + "; ".join(
                            f"maps {v['first_maps_s']:.2f} s, CPU {v['browser_cpu_s']:.2f} s, script {v['script_s']:.2f} s" for v in visits),
                            flush=True)
                    print(f"round {i + 1} [{kind}] cold: maps {c['first_maps_s']:.2f} s, browser CPU {c['browser_cpu_s']:.2f} s, "
                          f"main thread {c['task_s']:.2f} s (script {c['script_s']:.2f}, style {c['style_s']:.2f}, layout {c['layout_s']:.2f}); "
                          f"same context again: maps {w['first_maps_s']:.2f} s, "
                          f"CPU {w['browser_cpu_s']:.2f} s, script {w['script_s']:.2f} s  (load {_uptime()})", flush=True)
        finally:
            for server in servers.values():
                server.stop()
            browser.close()
    for kind in kinds:
        first = results[kind][0]["cold"]["scripts"]
        print(f"\n[{kind}] scripts of a cold page: {len(first)}, {sum(s[1] for s in first) / 1e6:.2f} MB: "
              + ", ".join(f"{name} {size / 1e3:.0f} kB" for name, size, _ in first))
        for visitor in ("cold", "warm"):
            med = {k: statistics.median(r[visitor][k] for r in results[kind]) for k in METRICS}
            print(f"[{kind}] {visitor:4s} median of {args.rounds}: " + ", ".join(f"{k} {v:.2f}" for k, v in med.items()))
        for n in range(3 if args.returning else 0):
            med = {k: statistics.median(r["visits"][n][k] for r in results[kind]) for k in METRICS}
            print(f"[{kind}] one profile, visit {n + 1}, median of {args.rounds}: " + ", ".join(f"{k} {v:.2f}" for k, v in med.items()))
    if args.compare:
        for key in ("first_maps_s", "browser_cpu_s", "script_s"):
            ratios = [n["cold"][key] / a["cold"][key] for n, a in zip(results["needed"], results["all"], strict=True)]
            print(f"cold {key}: needed / all, per round: {', '.join(f'{r:.2f}' for r in ratios)} (median {statistics.median(ratios):.2f})")
    print(f"load at end {_uptime()}")


if __name__ == "__main__":
    main()
