"""Many users at once: real browsers on one ``gridscore serve``.

For each N (default 1, 5, 10) a fresh server is started on the bundled sample with an
empty cache folder of its own (``GRIDSCORE_CACHE`` in a temporary folder), N headless
Chromium pages (Debian's package, driven by Playwright) open the dashboard at the same
moment, and for each page the time from navigation to **first maps drawn** is measured:

    the maps view (``.gs-view-maps``) is not in its loading state, shows one NetCDF
    download button per map of the request (``.gs-download-nc``: reference + runs) and
    at least that many Bokeh canvases (``canvas`` elements inside the view).

Two inputs are made while the server is busy.  As soon as its controls are on the page
(before any map), each page picks the season "Jun–Aug (JJA)"; its first maps must be of
JJA.  A fresh session opens on the differences (one map per run).  Right after its first maps,
each page picks "Run mean" as the map field (the other pages are still loading: the
server is busy) and the script checks that the input took effect: the URL carries
``field=model_mean`` and the drawn maps are the means of the reference and the runs
(their download buttons are titled "<source> mean"), still of JJA.  A page whose URL or
drawn maps miss either input counts as an input lost.

Two waits on the server are timed for each page, to tell a busy server from busy
browsers (all share the machine's cores): **page served**, from navigation to the
page's HTML (the server builds the session's document meanwhile), and **document
sent**, from the page's websocket opening to the arrival of Bokeh's ``PULL-DOC-REPLY``
(the document the page then renders).

The server's resident memory (the process and its children, psutil) is sampled every
0.2 s, and the CPU seconds of the server and of the browsers in each round are recorded; the load average of the machine (``uptime``) is recorded beside the times, since
the browsers share the machine's cores with the server.  For each page, until its first
maps: the seconds its renderer's main thread was busy and ran scripts (CDP
``Performance.getMetrics`` TaskDuration and ScriptDuration; wall time of the tasks, so they
grow when the cores are shared) and the websocket messages it received; beside them the browsers' CPU per page, which tells how much of a page's cost
grows with the number of pages at once.

Each page is a cold, separate visitor (a new browser context: no HTTP or code cache shared
with the other pages); benchmarks/page_cost.py measures what one page costs the browser,
cold and returning.

Run: ``python benchmarks/sessions.py`` (``--sessions 1 5 10 20``; ``--profile FILE``
samples the server with py-spy under the largest N; ``--compare-scripts`` runs each round
twice, first with a server that hands every page all of Panel's scripts, and prints both).  The table is printed and written into
``benchmarks/results.md`` between the ``sessions`` markers.
"""

from __future__ import annotations

import argparse
import asyncio
import os
import shutil
import signal
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import psutil
from serving import SHADOW_FIND_JS, free_port, wait_until_live

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
SAMPLE = ROOT / "sample_output" / "manifest.toml"
RESULTS = HERE / "results.md"
BEGIN, END = "<!-- sessions: begin -->", "<!-- sessions: end -->"
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run"]
#: The target of issue 11: median time to first maps with 10 sessions at most 3x one session's.
TARGET_RATIO = 3.0
TIMEOUT_S = 600.0
#: The command before ``serve``: gridscore as installed, and (``--compare-scripts``) the same
#: with its choice of the page's scripts switched off in that process (every script Panel lists).
SERVE = (sys.executable, "-m", "app.cli")
ALL_SCRIPTS = (sys.executable, "-c", "import sys, app.server as s; s.serve_needed_scripts = lambda: None; "
               "from app.cli import main; sys.exit(main(sys.argv[1:]))")
#: The season picked while the page loads.
SEASON, SEASON_LABEL = "JJA", "Jun–Aug (JJA)"


@dataclass
class Outcome:
    first_maps: float = float("nan")  # seconds from navigation to first maps drawn
    redrawn: float = float("nan")  # seconds from the field change to the difference maps
    input_kept: bool | None = None  # None: the page never drew its first maps, so the inputs were not checked
    page_served: float = float("nan")  # seconds from navigation to the page's HTML (the session built)
    document_sent: float = float("nan")  # seconds from the websocket opening to the document's arrival
    # wall seconds the page's renderer main thread was busy until its first maps (CDP TaskDuration),
    # and running scripts (ScriptDuration): CPU time where the cores are free, more where they are shared
    main_thread: float = float("nan")
    scripts: float = float("nan")
    frames: int = 0  # websocket messages the page received until its first maps
    error: str = ""


@dataclass
class Round:
    sessions: int
    outcomes: list[Outcome] = field(default_factory=list)
    peak_rss_mb: float = 0.0
    load: str = ""
    server_cpu: float = 0.0  # CPU seconds the server used in the round (all threads)
    browser_cpu: float = 0.0  # CPU seconds the browser processes used in the round
    all_scripts: bool = False  # the server handed every page all of Panel's scripts (--compare-scripts)

    def times(self) -> list[float]:
        return [o.first_maps for o in self.outcomes if o.first_maps == o.first_maps]


def _uptime() -> str:
    one, five, fifteen = os.getloadavg()
    return f"{one:.2f} {five:.2f} {fifteen:.2f}"


class Server:
    """``gridscore serve`` on a free port with a fresh cache folder; RSS sampled meanwhile.

    ``start`` is the command before ``serve`` (benchmarks/page_cost.py starts a variant)."""

    def __init__(self, manifest: Path, scratch: Path, start: Sequence[str] = SERVE) -> None:
        self.port = free_port()
        cache = scratch / f"cache-{self.port}"
        env = {**os.environ, "GRIDSCORE_CACHE": str(cache)}
        self.log = open(scratch / f"server-{self.port}.log", "w")  # noqa: SIM115 (closed in stop)
        self.process = subprocess.Popen(
            [*start, "serve", str(manifest), "--port", str(self.port)],
            cwd=ROOT, env=env, stdout=self.log, stderr=subprocess.STDOUT, start_new_session=True,
        )
        self.url = f"http://localhost:{self.port}/"
        self.peak_rss = 0
        self._sampling = True
        wait_until_live(self.port, self.process, deadline=time.monotonic() + 120, poll=0.2,
                        why=f"the server did not start; see {self.log.name}")

    def rss(self) -> int:
        try:
            proc = psutil.Process(self.process.pid)
            return proc.memory_info().rss + sum(c.memory_info().rss for c in proc.children(recursive=True))
        except psutil.Error:
            return 0

    async def sample(self) -> None:
        while self._sampling:
            self.peak_rss = max(self.peak_rss, self.rss())
            _browsers_cpu()
            await asyncio.sleep(0.2)

    def cpu(self) -> float:
        try:
            times = psutil.Process(self.process.pid).cpu_times()
            return times.user + times.system
        except psutil.Error:
            return 0.0

    def stop(self) -> str:
        self._sampling = False
        self.process.send_signal(signal.SIGINT)
        try:
            self.process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            self.process.kill()
            self.process.wait()
        self.log.close()
        return Path(self.log.name).read_text(errors="replace")


#: The definition of 'maps drawn' (see the module text), evaluated inside the page.
#: Panel's components live in shadow DOM; the walk enters every open shadow root, as
#: Playwright's CSS locators do.  One evaluation costs the page about a millisecond, where
#: the same test through five locator round trips cost ~16 ms of the page's main thread
#: and ~20 ms of browser CPU: polled every 50 ms by ten pages, that was more CPU than the
#: server's (measured with CDP Performance.getMetrics and the processes' CPU times).
MAPS_DRAWN_JS = """
([minus, maps, season]) => {""" + SHADOW_FIND_JS + """
  const views = find(document, ".gs-view-maps", []);
  if (views.length === 0 || views.some(v => v.classList.contains("pn-loading"))) return false;
  if (season && !find(document, ".gs-hint", []).some(h => h.textContent.includes(` · ${season} · `))) return false;
  const labels = within(within(views, ".gs-download-nc"), "button").map(b => b.textContent);
  if (labels.length !== maps || labels.some(t => t.includes(" minus ") !== minus)) return false;
  return within(views, "canvas").length >= maps;
}
"""
#: How often a waiting page evaluates MAPS_DRAWN_JS (ms): well below the seconds measured.
POLL_MS = 100


async def _maps_drawn(page, *, minus: bool, maps: int, season: str = "") -> bool:
    """The definition of 'maps drawn' (see the module text)."""
    return bool(await page.evaluate(MAPS_DRAWN_JS, [minus, maps, season]))


async def _wait(page, *, minus: bool, maps: int, deadline: float, season: str = SEASON) -> None:
    """Until the maps are drawn, tested inside the page every POLL_MS (no round trips)."""
    from playwright.async_api import TimeoutError as PlaywrightTimeout

    try:
        await page.wait_for_function(MAPS_DRAWN_JS, arg=[minus, maps, season], polling=POLL_MS,
                                     timeout=max(1.0, (deadline - time.monotonic()) * 1000))
    except PlaywrightTimeout:
        raise TimeoutError("maps not drawn in time") from None


def _time_document(page, outcome: Outcome) -> None:
    """Record in ``outcome`` the seconds from the page's websocket opening to its document."""
    opened: list[float] = []

    def websocket(ws) -> None:
        opened.append(time.monotonic())

        def frame(payload: str | bytes) -> None:
            reply = "PULL-DOC-REPLY" in payload if isinstance(payload, str) else b"PULL-DOC-REPLY" in payload
            if reply and outcome.document_sent != outcome.document_sent:
                outcome.document_sent = time.monotonic() - opened[0]
            if outcome.first_maps != outcome.first_maps:
                outcome.frames += 1

        ws.on("framereceived", frame)

    page.on("websocket", websocket)


async def _session(browser, url: str, runs: int, start: asyncio.Event) -> Outcome:
    outcome = Outcome()
    context = await browser.new_context(viewport={"width": 1500, "height": 1000})
    try:
        page = await context.new_page()
        _time_document(page, outcome)
        console: list[str] = []  # the page's errors, shown with a problem
        page.on("console", lambda m: console.append(m.text[:200]) if m.type == "error" else None)
        page.on("pageerror", lambda e: console.append(f"page error: {str(e)[:200]}"))
        cdp = await context.new_cdp_session(page)
        await cdp.send("Performance.enable")
        await start.wait()
        begin = time.monotonic()
        deadline = begin + TIMEOUT_S
        await page.goto(url, wait_until="commit", timeout=TIMEOUT_S * 1000)  # the HTML's answer has arrived
        outcome.page_served = time.monotonic() - begin
        await page.wait_for_load_state("domcontentloaded", timeout=TIMEOUT_S * 1000)
        # the first input, while the page loads: the season
        await page.locator(".gs-season select").select_option(label=SEASON_LABEL, timeout=TIMEOUT_S * 1000)
        try:
            await _wait(page, minus=True, maps=runs, deadline=deadline)  # a fresh session: the differences
        except TimeoutError:
            if await _maps_drawn(page, minus=True, maps=runs, season=""):  # maps, but not of the season picked
                outcome.input_kept = False
            raise
        outcome.first_maps = time.monotonic() - begin
        metrics = {m["name"]: m["value"] for m in (await cdp.send("Performance.getMetrics"))["metrics"]}
        outcome.main_thread, outcome.scripts = metrics["TaskDuration"], metrics["ScriptDuration"]
        # the input: the map field "Run mean", while the other pages still load
        changed = time.monotonic()
        await page.locator(".gs-field input[value='0']").check(timeout=60_000)  # options in order: model_mean first
        try:
            # a slow answer is not a lost input: the page waits as long as a first drawing may take
            await _wait(page, minus=False, maps=runs + 1, deadline=time.monotonic() + TIMEOUT_S)
            outcome.redrawn = time.monotonic() - changed
        except TimeoutError:
            pass
        outcome.input_kept = "field=model_mean" in page.url and f"season={SEASON}" in page.url and outcome.redrawn == outcome.redrawn
        if not outcome.input_kept:
            outcome.error = f"input lost: url {page.url}" + ("" if outcome.redrawn == outcome.redrawn else " (no maps of the field)")
    except Exception as error:  # counted and shown, not fatal for the round
        outcome.error = f"{type(error).__name__}: {str(error)[:160]}"
    finally:
        if outcome.error and console:
            outcome.error += f"; console: {console[:3]}"
        await context.close()
    return outcome


async def _round(browser, manifest: Path, scratch: Path, n: int, runs: int, profile: Path | None,
                 start: Sequence[str] = SERVE) -> Round:
    server = Server(manifest, scratch, start)
    result = Round(sessions=n)
    spy = None
    try:
        sampler = asyncio.create_task(server.sample())
        if profile is not None:
            spy = subprocess.Popen([shutil.which("py-spy") or "py-spy", "record", "--pid", str(server.process.pid), "--rate", "50",
                                    "--format", "raw", "--output", str(profile), "--threads", "--idle", "--nonblocking"],
                                   stdout=subprocess.DEVNULL, stderr=subprocess.STDOUT)
        start = asyncio.Event()
        cpu_before, browsers_before = server.cpu(), _browsers_cpu()
        tasks = [asyncio.create_task(_session(browser, server.url, runs, start)) for _ in range(n)]
        await asyncio.sleep(0.5)  # contexts made; then every page navigates at once
        start.set()
        result.outcomes = list(await asyncio.gather(*tasks))
        result.load = _uptime()
        result.server_cpu, result.browser_cpu = server.cpu() - cpu_before, _browsers_cpu() - browsers_before
        server._sampling = False
        await sampler
        result.peak_rss_mb = server.peak_rss / 1e6
    finally:
        if spy is not None:
            spy.send_signal(signal.SIGINT)
            spy.wait(timeout=60)
        log = server.stop()
    for line in log.splitlines():
        if "Traceback" in line or "AssertionError" in line or "assert self._session" in line or line.startswith("ERROR"):
            print(f"  server log ({n} sessions): {line[:200]}", file=sys.stderr)
    return result


#: Last CPU seconds seen per Chromium process (a page's renderer ends with its page).
_BROWSER_CPU: dict[int, float] = {}


def _browsers_cpu() -> float:
    """CPU seconds of the Chromium processes this script started, ended ones included (as last sampled)."""
    for child in psutil.Process().children(recursive=True):
        try:
            if "chrom" in child.name().lower():
                times = child.cpu_times()
                _BROWSER_CPU[child.pid] = times.user + times.system
        except psutil.Error:
            continue
    return sum(_BROWSER_CPU.values())


def _runs_shown(manifest: Path) -> int:
    """How many runs a fresh session shows (the dashboard's default count, capped by the runs of tas)."""
    sys.path.insert(0, str(ROOT))
    from app.state import DEFAULT_RUNS
    from evaluation.catalog import Collection

    collection = Collection.from_path(manifest)
    holders = [s for s in collection.models if any(Path(p).name.startswith("tas") for p in _files(s))]
    return min(DEFAULT_RUNS, len(holders) or len(collection.models))


def _files(source) -> list[str]:
    from evaluation import io

    try:
        return io.expand_paths(source.paths, source=source.name)
    except Exception:
        return []


def _table(rounds: list[Round], machine: str) -> str:
    lines = [
        "| sessions | median to first maps (s) | max to first maps (s) | maps within the time limit | inputs kept "
        "| page served, median (s) | websocket to document, median / max (s) "
        "| peak server RSS (MB) | server CPU (s) | browsers CPU (s) | browsers CPU per page (s) "
        "| a page's main thread busy / in scripts to first maps, wall, median (s) | messages to first maps, median | load (1/5/15 min) at end |",
        "|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---|",
    ]
    for r in rounds:
        times = r.times()
        kept = sum(o.input_kept is True for o in r.outcomes)
        checked = sum(o.input_kept is not None for o in r.outcomes)
        # a page without maps after TIMEOUT_S counts as TIMEOUT_S: the median is then a lower bound
        every = sorted(times + [TIMEOUT_S] * (len(r.outcomes) - len(times)))
        late = len(every) - len(times)
        med = (">" if late and statistics.median(every) >= TIMEOUT_S else "") + f"{statistics.median(every):.1f}" if every else "–"
        top = f"> {TIMEOUT_S:.0f}" if late else (f"{max(times):.1f}" if times else "–")
        served = [o.page_served for o in r.outcomes if o.page_served == o.page_served]
        sent = [o.document_sent for o in r.outcomes if o.document_sent == o.document_sent]
        waits = (f"| {statistics.median(served):.2f} " if served else "| – ") + (
            f"| {statistics.median(sent):.2f} / {max(sent):.2f} " if sent else "| – ")
        drawn = [o for o in r.outcomes if o.main_thread == o.main_thread]
        page = (f"| {statistics.median(o.main_thread for o in drawn):.2f} / {statistics.median(o.scripts for o in drawn):.2f} "
                f"| {statistics.median(o.frames for o in drawn):.0f} ") if drawn else "| – | – "
        lines.append(f"| {r.sessions} | {med} | {top} | {len(times)}/{len(r.outcomes)} | {kept}/{checked} {waits}| {r.peak_rss_mb:.0f} "
                     f"| {r.server_cpu:.0f} | {r.browser_cpu:.0f} | {r.browser_cpu / max(1, len(r.outcomes)):.1f} {page}| {r.load} |")
    by_n = {r.sessions: r for r in rounds}
    ratio = ""
    if 1 in by_n and max(by_n) > 1 and by_n[1].times() and by_n[max(by_n)].outcomes:
        big = max(by_n)
        value = statistics.median([o.first_maps if o.first_maps == o.first_maps else TIMEOUT_S for o in by_n[big].outcomes])
        value /= statistics.median(by_n[1].times())
        ratio = (f"\n\nmedian({big}) / median(1) = {value:.2f} (target ≤ {TARGET_RATIO:.0f} for 10 sessions: "
                 f"{'met' if value <= TARGET_RATIO else 'missed'})")
    return f"{machine}\n\n" + "\n".join(lines) + ratio + "\n"


def _machine() -> str:
    return (f"Machine: {os.cpu_count()} cores, {psutil.virtual_memory().total / 2**30:.1f} GiB; "
            f"load at start {_uptime()}; {time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}. "
            "Browsers, server and other work share the cores.")


def _record(text: str) -> None:
    block = f"{BEGIN}\n## Many sessions at once (`python benchmarks/sessions.py`)\n\n{text}{END}\n"
    old = RESULTS.read_text() if RESULTS.exists() else "# Benchmark results\n"
    if BEGIN in old and END in old:
        head, rest = old.split(BEGIN, 1)
        new = head + block + rest.split(END, 1)[1].lstrip("\n")
    else:
        new = old.rstrip("\n") + "\n\n" + block
    RESULTS.write_text(new)


async def main_async(args: argparse.Namespace) -> list[Round]:
    from playwright.async_api import async_playwright

    chromium = shutil.which("chromium")
    if chromium is None:
        raise SystemExit("sessions.py: no 'chromium' on the PATH (Debian: apt-get install chromium)")
    manifest = Path(args.collection).resolve()
    runs = _runs_shown(manifest)
    rounds = []
    with tempfile.TemporaryDirectory(prefix="gridscore-sessions-") as tmp:
        scratch = Path(tmp)
        logs = Path(args.logs) if args.logs else None
        async with async_playwright() as playwright:
            browser = await playwright.chromium.launch(executable_path=chromium, args=CHROMIUM_ARGS)
            for n in args.sessions:
                profile = Path(args.profile).resolve() if args.profile and n == max(args.sessions) else None
                for start in ([ALL_SCRIPTS, SERVE] if args.compare_scripts else [SERVE]):
                    r = await _round(browser, manifest, scratch, n, runs, profile, start)
                    r.all_scripts = start is ALL_SCRIPTS
                    errors = [o.error for o in r.outcomes if o.error]
                    print(f"{n} sessions{' (every script)' if r.all_scripts else ''}: first maps {sorted(round(t, 1) for t in r.times())}, "
                          f"peak RSS {r.peak_rss_mb:.0f} MB, load {r.load}" + (f"; problems: {errors[:3]}" if errors else ""), flush=True)
                    rounds.append(r)
                if logs is not None:
                    logs.mkdir(parents=True, exist_ok=True)
                    for log in scratch.glob("server-*.log"):
                        shutil.copy(log, logs / log.name)
            await browser.close()
    return rounds


def main() -> None:
    global TIMEOUT_S
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--sessions", type=int, nargs="+", default=[1, 5, 10], metavar="N")
    parser.add_argument("--collection", default=str(SAMPLE), help="manifest to serve (default: the bundled sample)")
    parser.add_argument("--profile", metavar="FILE", help="sample the server with py-spy under the largest N (collapsed stacks)")
    parser.add_argument("--logs", metavar="DIR", help="keep the servers' logs in DIR")
    parser.add_argument("--no-record", action="store_true", help="print only; leave benchmarks/results.md as it is")
    parser.add_argument("--compare-scripts", action="store_true",
                        help="before each round, the same round with a server that hands every page all of Panel's scripts "
                             "(printed only)")
    parser.add_argument("--timeout", type=float, default=TIMEOUT_S, help=f"seconds a page may take to its maps (default {TIMEOUT_S:.0f})")
    args = parser.parse_args()
    TIMEOUT_S = args.timeout
    machine = _machine()
    rounds = asyncio.run(main_async(args))
    if args.compare_scripts:
        print("Every script Panel lists (gridscore's choice of scripts off):\n")
        print(_table([r for r in rounds if r.all_scripts], machine))
        print("As served:\n")
    text = _table([r for r in rounds if not r.all_scripts], machine)
    print(text)
    if not args.no_record and not args.compare_scripts:
        _record(text)


if __name__ == "__main__":
    main()
