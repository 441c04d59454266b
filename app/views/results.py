"""The one door from the dashboard to the evaluation core, shared by every session.

A :class:`Results` object is made once per server.  It knows the served collection,
keeps one :class:`~evaluation.scoring.Comparison` per reference × variable × period
(every run of the collection that holds the variable at once, so that ticking a run on
or off, or opening the overview of all runs, reuses the reductions already made) and a
bounded cache of every product the views draw.

Every call into the core runs on one worker thread: the netCDF-C/HDF5 libraries are not
thread-safe (pydata/xarray#4100), and one worker keeps two browser sessions from
reducing the same files twice at once.  A product already in the cache is answered on
the event loop without waiting behind a computation that is running.
"""

from __future__ import annotations

import asyncio
import logging
import re
import threading
import time
import weakref
from collections import OrderedDict
from collections.abc import Callable, Hashable, Iterator, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any, TypeVar

import pandas as pd
import xarray as xr
from bokeh.colors import named

from evaluation import io
from evaluation.ensembles import mean_name
from evaluation.errors import InputError
from evaluation.export import TIDY_COLUMNS
from evaluation.levels import default_level, labels_from_listing
from evaluation.regions import REGIONS, parse_region
from evaluation.scoring import Comparison, Source
from evaluation.timeaxis import Period, parse_period, parse_season

__all__ = ["OVERVIEW_SEASONS", "BoundedCache", "MapField", "Results", "VariableInfo", "is_colour", "overview_args"]

log = logging.getLogger("gridscore.app")
T = TypeVar("T")
_HEX = re.compile(r"^#(?:[0-9a-f]{3}|[0-9a-f]{6})$")
_NAMED = frozenset(named.__all__)
_MISSING = object()
#: Seconds after which a failure (an unreadable file, a run left out) is tried again even
#: though no input file changed (a network file system that was briefly away).
RETRY_SECONDS = 30.0
#: Seconds during which one look at the input files answers every session that asks
#: (:meth:`Results.fresh`): ten sessions drawing at once stat the files once, not ten times.
LOOK_SECONDS = 1.0
#: Seconds the background work waits after a session's last call into the core before its next step.
PAUSE_SECONDS = 0.25
#: The seasons of the overview's "by season" form.
OVERVIEW_SEASONS = ("ANN", "DJF", "MAM", "JJA", "SON")
#: The overview's forms, in the order the background scores them (see :func:`overview_args`).
OVERVIEW_FORMS = ("variable", "season", "region")


def overview_args(reference: str, period: str, region: str, season: str, target_grid: str, by: str) -> tuple:
    """The arguments of :meth:`Results.overview` for one form of the overview: ``by`` =
    ``variable`` (the region and season chosen), ``season`` (the region chosen, every season of
    :data:`OVERVIEW_SEASONS`) or ``region`` (every region of the core, the season chosen)."""
    regions = tuple(REGIONS) if by == "region" else (region,)
    seasons = OVERVIEW_SEASONS if by == "season" else (season,)
    return (reference, period, regions, seasons, target_grid)



def stopping(error: BaseException) -> bool:
    """Whether ``error`` is the one a thread pool raises once the process is stopping.

    A step of the background scoring still running when the server is stopped (Ctrl+C,
    a terminate) finds the pools of the reading library shut down; that is the end of
    the work, not a failure to report with a traceback.  The standard library gives no
    other sign than its message (concurrent.futures: "cannot schedule new futures after
    shutdown" / "after interpreter shutdown").
    """
    return isinstance(error, RuntimeError) and "cannot schedule new futures after" in str(error)


class BoundedCache:
    """A thread-safe least-recently-used mapping with a fixed number of entries.

    ``functools.lru_cache`` cannot be asked whether a key is present without computing
    it; the dashboard needs exactly that to answer cached selections on the event loop.

    Notes
    -----
    Storing beyond ``max_items`` drops the least recently used entry.  ``None`` is a
    valid value.
    """

    def __init__(self, *, max_items: int) -> None:
        if max_items < 1:
            raise ValueError("max_items must be at least 1")
        self.max_items = max_items
        self._data: OrderedDict[Hashable, Any] = OrderedDict()
        self._lock = threading.Lock()

    def get(self, key: Hashable, default: Any = _MISSING) -> Any:
        with self._lock:
            if key in self._data:
                self._data.move_to_end(key)
                return self._data[key]
        return default

    def put(self, key: Hashable, value: Any) -> None:
        with self._lock:
            self._data[key] = value
            self._data.move_to_end(key)
            while len(self._data) > self.max_items:
                self._data.popitem(last=False)

    def __contains__(self, key: Hashable) -> bool:
        with self._lock:
            return key in self._data

    def __len__(self) -> int:
        with self._lock:
            return len(self._data)

    def clear(self) -> None:
        with self._lock:
            self._data.clear()


def is_colour(text: str) -> bool:
    """A manifest colour the plots can use: ``#rgb``, ``#rrggbb`` or a CSS colour name."""
    text = str(text).strip().lower()
    return bool(_HEX.match(text)) or text in _NAMED


def _blames(error: InputError, source: Source) -> bool:
    """Whether ``error`` is about ``source`` (named by source name or by one of its files)."""
    if error.file is None:
        return False
    named = error.file.split(" (+")[0]  # InputError shortens lists to "first (+n more)"
    if named == source.name:
        return True
    try:
        return named in io.expand_paths(source.paths, source=source.name)
    except InputError:
        return False


@dataclass(frozen=True)
class VariableInfo:
    """How a variable is named in the menus (texts come from files: show them as text)."""

    name: str
    long_name: str
    units: str
    standard_name: str = ""
    levels: tuple[str, ...] = ()  # "1000 hPa", ...; empty for a variable without levels

    @property
    def label(self) -> str:
        # Units are left out: the comparison may convert them (precipitation to mm day-1).
        return self.name if not self.long_name or self.long_name == self.name else f"{self.long_name} ({self.name})"


@dataclass(frozen=True)
class MapField:
    """One map: whose field it is, what it shows and the field itself."""

    source: str
    title: str
    data: xr.DataArray
    signed: bool  # differences and trends: diverging palette symmetric about zero
    quantity: str = "Value"  # what a value of the map is ("Mean", "Difference", "Trend")


#: every worker thread pool of this process (see :func:`wait_until_idle`)
_WORKERS: weakref.WeakSet[ThreadPoolExecutor] = weakref.WeakSet()
#: the end of every background chain started by :meth:`Results.warm` (see :func:`wait_until_idle`)
_CHAINS: weakref.WeakSet[Future] = weakref.WeakSet()


def wait_until_idle(timeout: float = 120.0) -> None:
    """Return once every worker has finished what was queued before the call.

    Each worker has one thread and runs its queue in order, so a no-op submitted now
    completes after everything already queued (a warm-up still reading files, say).
    Used where the files' readers must be quiet: netCDF-C/HDF5 is not thread-safe
    (pydata/xarray#4100), so a file written while a worker reads may crash the process.
    """
    for chain in list(_CHAINS):  # background work queues its steps one at a time: wait for the last
        # a chain still running after ``timeout`` raises TimeoutError, as a busy worker does below:
        # it goes on queueing reads, so the files are not quiet (a chain never ends with an error)
        chain.result(timeout=timeout)
    for worker in list(_WORKERS):
        try:
            worker.submit(lambda: None).result(timeout=timeout)
        except RuntimeError:  # shut down: nothing more runs on it
            pass


class Results:
    """Products of the core for one collection, computed once and kept in bounded caches.

    Parameters
    ----------
    collection
        The served collection (``evaluation.catalog.Collection``).
    max_items
        Entries of the product cache (maps, tables, series); a 1° map is about 0.5 MB.
    max_comparisons
        Comparisons kept open (each holds its reduced seasons in memory).
    regrid
        Remapping method passed to every comparison.
    """

    def __init__(self, collection: Any, *, max_items: int = 512, max_comparisons: int = 24, regrid: str = "conservative",
                 origin: Any = None) -> None:
        self.collection = collection
        #: the manifest or folder the collection was read from: read again at every look at the
        #: files, so that a new run folder, a source added to the manifest or one removed is
        #: offered (None: the collection as given, for tests)
        self.origin = origin
        #: why the manifest or folder could not be read again at the last look (the sources read
        #: before are used meanwhile), or None
        self.listing_problem: str | None = None
        self.regrid = regrid
        #: the common grid of every comparison: the manifest's target_grid (default: each reference's own)
        self.target_grid = str(getattr(collection, "target_grid", "reference"))
        self.products = BoundedCache(max_items=max_items)
        self._comparisons = BoundedCache(max_items=max_comparisons)
        self._lock = threading.RLock()
        self._worker = ThreadPoolExecutor(max_workers=1, thread_name_prefix="gridscore-core")
        _WORKERS.add(self._worker)
        #: sources whose files cannot be read: name -> problem (left out, and said so)
        self._unreadable: dict[str, str] = {}
        self._listing_lock = threading.Lock()
        self._variables = self._list_variables()
        # Freshness: products are kept per generation of the input files; a change of any
        # file (its identity: size, times, inode, content sample) starts a new generation.
        self._generation = 0
        self._stamp = self._inputs_stamp()
        self._checked = time.monotonic()
        self._failed = bool(self._unreadable)
        # the shared look at the files (stat and content sample: no netCDF, safe on any thread)
        self._watcher = ThreadPoolExecutor(max_workers=1, thread_name_prefix="gridscore-watch")
        self._look_lock = threading.Lock()
        self._looking: Future | None = None
        self._looked = time.monotonic()
        #: wall-clock time of the last new generation (for "numbers updated at HH:MM")
        self.changed_at: float | None = None
        #: the rows of every region and season already scored, per comparison (see :meth:`_scores_of`)
        self._score_blocks: weakref.WeakKeyDictionary[Comparison, dict[tuple[str, str], pd.DataFrame]] = weakref.WeakKeyDictionary()
        #: requests with a period that a comparison refused, per generation (the overview asks again and again)
        self._refused: BoundedCache = BoundedCache(max_items=256)
        #: what the core worker is doing for an overview now, in the background (:meth:`warm`) or
        #: for a page (plain text; "" when neither)
        self.background = ""
        #: sessions' calls waiting for the worker now, and when the last one ended (the background yields to them)
        self._asking = 0
        self._asked = 0.0
        self._warm_lock = threading.Lock()
        self._warming: Future | None = None
        self._overview_warming = False

    # ------------------------------------------------------------------ the collection
    def _list_variables(self) -> dict[str, dict[str, VariableInfo]]:
        """variable -> source name -> how that source describes it (files read once)."""
        found: dict[str, dict[str, VariableInfo]] = {}
        self._unreadable = {}
        # not the core lock: a listing (headers only) must not wait behind a computation
        with self._listing_lock:
            for src in (*self.collection.references, *self.collection.models):
                try:
                    listing = io.variables_in(io.expand_paths(src.paths, source=src.name))
                except InputError as error:  # left out and said so; retried when files change
                    self._unreadable[src.name] = error.problem
                    continue
                for name, meta in listing.items():
                    if meta.get("has_time") == "False":
                        continue  # fixed fields (cell area, land fraction) are not compared
                    if meta.get("level_problem"):
                        continue  # refused by the core (model levels, ...): `gridscore check` says why
                    found.setdefault(name, {})[src.name] = VariableInfo(
                        name, meta.get("long_name", ""), meta.get("units", ""), meta.get("standard_name", ""),
                        tuple(labels_from_listing(meta.get("levels", ""))),
                    )
                # the manifest's `variables = { tas = "TS" }`: this source holds tas as TS
                for wanted, stored in getattr(src, "variables", {}).items():
                    meta = listing.get(stored)
                    if meta is not None and meta.get("has_time") != "False":
                        found.setdefault(wanted, {})[src.name] = VariableInfo(
                            wanted, meta.get("long_name", ""), meta.get("units", ""), meta.get("standard_name", "")
                        )
        return found

    def variables(self) -> list[str]:
        """Variables that at least one run and one reference hold, in the collection's order."""
        # from the listing made here (not the collection's), which leaves unreadable sources out
        return [v for v in sorted(self._variables) if self.references(v) and self.models(v)]

    def variable_info(self, variable: str) -> VariableInfo:
        """Name, long name and units as the first reference holding it describes them."""
        by_source = self._variables.get(variable, {})
        for src in self.collection.references:
            if src.name in by_source:
                return by_source[src.name]
        return next(iter(by_source.values()), VariableInfo(variable, "", ""))

    def holds(self, source: str, name: str, standard_name: str = "") -> bool:
        """Whether a source has a variable of this name or CF standard name."""
        for variable, by_source in self._variables.items():
            info = by_source.get(source)
            if info is not None and (variable == name or (standard_name and info.standard_name == standard_name)):
                return True
        return False

    def levels(self, variable: str) -> list[str]:
        """The levels offered for a variable: those of the first reference holding it."""
        return list(self.variable_info(variable).levels)

    def _level(self, variable: str, level: str) -> str | None:
        """The level a comparison is made on: the one asked for, else the variable's default."""
        return level or default_level(self.levels(variable)) or None

    def references(self, variable: str) -> list[str]:
        """The references holding ``variable``, in the collection's order for it (``reference_for``)."""
        holders = self._variables.get(variable, {})
        ordered = getattr(self.collection, "references_for", lambda v: self.collection.references)(variable)
        return [s.name for s in ordered if s.name in holders]

    def models(self, variable: str) -> list[str]:
        """The runs holding ``variable``; an ensemble's mean (``"<name> (ensemble mean)"``,
        see :mod:`evaluation.ensembles`) comes right before its members."""
        runs = self._runs(variable)
        means = {e.members[0]: mean_name(e.name) for e in self._ensembles(runs)}
        return [n for r in runs for n in ((means[r], r) if r in means else (r,))]

    def _runs(self, variable: str) -> list[str]:
        holders = self._variables.get(variable, {})
        return [s.name for s in self.collection.models if s.name in holders]

    def _ensembles(self, runs: Sequence[str]) -> tuple:
        """The collection's ensembles with at least two members among ``runs``."""
        return getattr(self.collection, "ensembles_of", lambda runs: ())(runs)

    def ensemble_members(self, name: str) -> tuple[str, ...]:
        """The members of the ensemble whose mean is called ``name``; () for any other name."""
        return next((e.members for e in self._ensembles(None) if mean_name(e.name) == name), ())

    def source(self, name: str) -> Source:
        members = self.ensemble_members(name)
        if members:
            # an ensemble mean: its members' files, and the colour of its first member
            first = self.collection.source(members[0])
            return Source(name=name, role="model", paths=tuple(p for m in members for p in self.collection.source(m).paths), colour=first.colour)
        return self.collection.source(name)

    def colour(self, name: str) -> str:
        """The line colour of a source: black for references, the manifest's or a palette colour for runs."""
        # imported here: the collection is opened (without Panel) while the server's modules load
        from .look import REFERENCE_COLOUR, run_colour

        if name in {s.name for s in self.collection.references}:
            return REFERENCE_COLOUR
        names = [s.name for s in self.collection.models]
        wanted = getattr(self.source(name), "colour", None)
        if wanted and is_colour(wanted):
            return str(wanted).strip().lower()
        return run_colour(names.index(name) if name in names else 0)

    # ------------------------------------------------------------------ running
    async def run(self, function: Callable[..., T], *args: Any) -> T:
        """Run a core call on the worker thread and wait for it without blocking the loop."""
        loop = asyncio.get_running_loop()
        self._asking += 1  # on the event loop only; the background waits while sessions ask (see warm)
        try:
            return await loop.run_in_executor(self._worker, self._locked, function, args)
        finally:
            self._asking -= 1
            self._asked = time.monotonic()

    def _locked(self, function: Callable[..., T], args: Sequence[Any]) -> T:
        with self._lock:
            return function(*args)

    # ------------------------------------------------------------------ freshness
    def _current_collection(self) -> Any:
        """The collection as its manifest or folder says now; the one in use when it cannot be
        read (a manifest being written, a new folder without files yet: read at a later look)."""
        if self.origin is None:
            return self.collection
        from evaluation.catalog import Collection

        try:
            collection = Collection.from_path(self.origin)
        except InputError as error:
            self.listing_problem = error.message
            return self.collection
        except OSError as error:
            self.listing_problem = f"{self.origin}: cannot be read ({type(error).__name__})"
            return self.collection
        self.listing_problem = None
        return collection

    def _inputs_stamp(self) -> tuple:
        """The collection and the identity of every input file (one stat each; see
        ``io.file_identity``); a new generation takes the collection of its stamp."""
        collection = self._current_collection()
        stamp: list = [collection, self.listing_problem]  # a new problem is a change to report
        for src in collection.sources:
            try:
                stamp.append((src.name, tuple(io.file_identity(io.expand_paths(src.paths, source=src.name)))))
            except (InputError, OSError) as error:
                stamp.append((src.name, str(error)))
        return tuple(stamp)

    @property
    def generation(self) -> int:
        """Counts the changes of the input files seen so far (0 at the start)."""
        return self._generation

    def _outdated(self, stamp: tuple) -> bool:
        retry = self._failed and time.monotonic() - self._checked > RETRY_SECONDS
        return stamp != self._stamp or retry

    def revalidate(self) -> bool:
        """Forget what was computed from files that changed; retry failures after a while.

        Returns whether a new generation started.  Products and comparisons of the old
        generation are never served again.  On the calling thread (tests, exports, a new
        session after a change); the dashboard's views use :meth:`fresh`, which keeps the
        event loop free.
        """
        stamp = self._inputs_stamp()
        if not self._outdated(stamp):
            return False
        with self._lock:  # the listing reads file headers: never beside the worker's reads
            return self._new_generation(stamp)

    def _new_generation(self, stamp: tuple) -> bool:
        """Start a generation for ``stamp`` (under the core lock)."""
        if not self._outdated(stamp):  # another caller made it meanwhile
            return False
        self._stamp, self._checked, self._failed = stamp, time.monotonic(), False
        if stamp and stamp[0] is not self.collection and stamp[0] != self.collection:
            self.collection = stamp[0]
            self.target_grid = str(getattr(stamp[0], "target_grid", "reference"))
        # a fresh product cache: a computation still running for the old files stores its
        # result in the old one, which nobody asks any more
        self.products = BoundedCache(max_items=self.products.max_items)
        self._comparisons = BoundedCache(max_items=self._comparisons.max_items)
        self._variables = self._list_variables()
        self._failed = bool(self._unreadable)
        self.changed_at = time.time()
        self._generation += 1  # last: a session that sees the new number finds the new listing
        return True

    def stale(self) -> bool:
        """Whether the input files changed since the last look (a stat per file)."""
        return self._outdated(self._inputs_stamp())

    async def fresh(self) -> int:
        """Look at the input files off the event loop and start a new generation if they changed.

        One look answers every session asking within :data:`LOOK_SECONDS` (they await the
        same look); the files are stat'ed on a thread of their own and the new listing is
        made on the core worker, so the event loop only waits.  Returns :attr:`generation`.
        """
        with self._look_lock:
            look = self._looking
            if look is None or (look.done() and time.monotonic() - self._looked >= LOOK_SECONDS):
                look = self._looking = self._watcher.submit(self._look)
        await asyncio.wrap_future(look)
        return self._generation

    def _look(self) -> None:
        self._looked = time.monotonic()
        stamp = self._inputs_stamp()
        if self._outdated(stamp):
            self._worker.submit(self._locked, self._new_generation, (stamp,)).result()

    async def fetch(self, key: tuple, function: Callable[..., T], *args: Any) -> T:
        """A cached product: answered at once when present, else computed off the loop."""
        products = self.products
        value = products.get(key)
        if value is not _MISSING:
            return value
        return await self.run(self._product, key, function, args, products)

    def product(self, key: tuple, function: Callable[..., T], *args: Any) -> T:
        """The same as :meth:`fetch`, on the calling thread (for tests and exports)."""
        with self._lock:
            return self._product(key, function, args)

    def _product(self, key: tuple, function: Callable[..., T], args: Sequence[Any], products: BoundedCache | None = None) -> T:
        products = self.products if products is None else products
        value = products.get(key)
        if value is _MISSING:  # another session may have made it while this one queued
            value = function(*args)
            products.put(key, value)
        return value

    def warm(self, *, overview: bool = False) -> Future:
        """Start the work a fresh session asks for first, then the rest, in the background.

        The steps run on the worker thread one after another, each queued when the one
        before has ended, so that a session's own request waits behind one step at most:
        the first variable's comparison is opened (its years settle a fresh page), its
        annual means are reduced (the first maps), every other variable's comparison is
        opened (a link to any of them opens on its period at once) and, with ``overview``,
        the overview of a fresh page is scored in each of its forms (:data:`OVERVIEW_FORMS`),
        each variable a step; :attr:`background` says which.  Problems are left for the
        session to report (it asks for the same things).  A second call returns the first
        one's future (asking for the overview then adds it), which ends with the last step.
        """
        with self._warm_lock:
            if self._warming is not None and (self._overview_warming or not overview):
                return self._warming
            again = self._warming is not None  # started without the overview: only the overview now
            self._overview_warming = overview
            done: Future = Future()
            self._warming = done
        _CHAINS.add(done)
        generation = self._generation
        steps = self._overview_steps() if again else self._warm_steps(overview=overview)

        def run(job: Callable[[], None]) -> None:
            if generation != self._generation:
                return  # the files changed: what a step would make is of the old files
            try:
                job()
            except InputError:
                pass
            except Exception as error:  # a bug must not stop the server; the log has details
                if stopping(error):
                    log.debug("background step left: the server is stopping")
                else:
                    log.exception("background step failed")
            finally:
                self.background = ""  # between two steps the worker may run a session's work

        def next_step(_: Any = None) -> None:
            if generation == self._generation and (self._asking or time.monotonic() - self._asked < PAUSE_SECONDS):
                # a session is asking (a page loads its maps one fetch after another): it goes first
                pause = threading.Timer(PAUSE_SECONDS, next_step)
                pause.daemon = True
                pause.start()
                return
            try:
                job = next(steps, None) if generation == self._generation else None
            except InputError:  # the rest is left for the sessions to ask (they report it)
                log.debug("background work stopped", exc_info=True)
                job = None
            except Exception:  # a bug must not stop the server, nor go unseen: the log has details
                log.exception("background work stopped")
                job = None
            if job is None:
                self.background = ""
                done.set_result(None)
                return
            try:
                self._worker.submit(self._locked, run, (job,)).add_done_callback(next_step)
            except RuntimeError:  # shut down
                self.background = ""
                done.set_result(None)

        next_step()
        return done

    def _warm_steps(self, *, overview: bool) -> Iterator[Callable[[], None]]:
        """The steps of :meth:`warm`, made one at a time (each from what the one before left)."""
        from app.state import first_variable

        variables = self.variables()
        if not variables:
            return
        first = first_variable(self, variables)  # what a fresh session opens on
        reference = self.references(first)[0]
        yield lambda: self.comparison(reference, first)
        yield lambda: self.comparison(reference, first).prepare(["ANN"])
        # the years of every variable (files opened, nothing reduced)
        for other in variables:
            if other != first:
                yield lambda other=other: self.comparison(self.references(other)[0], other)
        if overview:
            yield from self._overview_steps()

    def _overview_steps(self) -> Iterator[Callable[[], None]]:
        """Score the overview of a fresh page (the first variable's reference and default period,
        the default region and season and common grid) in each form, one variable a step."""
        from app.state import first_variable

        variables = self.variables()
        if not variables:
            return
        first = first_variable(self, variables)
        reference = self.references(first)[0]
        try:
            period = str(self.comparison(reference, first).period)
        except InputError:
            return
        from app.state import Selection

        picked = Selection.param  # the defaults a fresh page starts from
        region, season, grid = picked.region.default, picked.season.default, self.target_grid
        for by in OVERVIEW_FORMS:
            args = overview_args(reference, period, region, season, grid, by)
            if ("overview",) + args in self.products:
                continue
            for i, variable in enumerate(variables, 1):
                def score(variable: str = variable, i: int = i, by: str = by, args: tuple = args) -> None:
                    self.background = f"scoring the overview (by {by}): {variable}, {i} of {len(variables)} variables"
                    self._overview_table(variable, *args)
                yield score
            yield lambda args=args: (self._product(("overview",) + args, self.overview, args),
                                     self._product(("overview_ties",) + args, self.overview_ties, args))

    def close(self) -> None:
        self._worker.shutdown(wait=False, cancel_futures=True)
        self._watcher.shutdown(wait=False, cancel_futures=True)

    # ------------------------------------------------------------------ comparisons
    def target_grids(self) -> list[str]:
        """The common grids offered: the collection's own choice first, the reference's grid,
        every source's, and a few global spacings."""
        from app.state import TARGET_SPACINGS

        names = [s.name for s in (*self.collection.references, *self.collection.models)]
        return list(dict.fromkeys([self.target_grid, "reference", *names, *TARGET_SPACINGS]))

    def comparison(self, reference: str, variable: str, period: str | None = None, level: str = "", target_grid: str = "") -> Comparison:
        """The comparison of every run holding ``variable`` against ``reference``.

        Runs that the core rejects (unreadable, or not covering ``period``) are left out
        and listed by :meth:`left_out`; a problem of the reference raises its InputError.
        ``period=None`` is the core's default rule; asking for the default period by its
        years gives the same object.
        """
        with self._lock:
            return self._entry(reference, variable, period, level, target_grid)[0]

    def left_out(self, reference: str, variable: str, period: str | None = None, level: str = "", target_grid: str = "") -> tuple[str, ...]:
        """The runs that comparison could not use, each as ``"name: reason"``, and the
        sources whose files cannot be read at all."""
        with self._lock:
            left = self._entry(reference, variable, period, level, target_grid)[1]
            return (*left, *(f"{name}: {problem}" for name, problem in self._unreadable.items() if name != reference))

    def _entry(self, reference: str, variable: str, period: str | None, level: str = "", target_grid: str = "") -> tuple[Comparison, tuple[str, ...]]:
        level = self._level(variable, level) or ""
        target_grid = target_grid or self.target_grid
        if period is not None:
            period = str(parse_period(period))
            default = self._entry(reference, variable, None, level, target_grid)
            if str(default[0].period) == period:
                return default
        key = (reference, variable, period, level, target_grid)
        comparisons = self._comparisons  # of this generation, even if files change meanwhile
        entry = comparisons.get(key)
        if entry is not _MISSING:
            return entry
        runs = [self.source(n) for n in self._runs(variable)]
        ensembles = self._ensembles([r.name for r in runs])
        if not runs:
            raise InputError(f"no model run holds '{variable}'", remedy="choose another variable")
        # every other reference holding the variable: its spread is drawn and marks run differences
        alternatives = [self.source(n) for n in self.references(variable) if n != reference]
        left: list[str] = []
        while True:
            try:
                cmp = Comparison(reference=self.source(reference), models=runs, variable=variable, period=period, regrid=self.regrid,
                                 level=level or None, target_grid=target_grid, alternatives=alternatives,
                                 ensembles=self._ensembles([r.name for r in runs]) if ensembles else ())
                break
            except InputError as error:
                other = next((a for a in alternatives if _blames(error, a)), None)
                if other is not None:  # an alternative reference is left out; the runs are still scored
                    left.append(f"{other.name}: {error.problem}")
                    alternatives = [a for a in alternatives if a is not other]
                    continue
                culprit = next((r.name for r in runs if _blames(error, r)), None)
                if culprit is None or len(runs) == 1:
                    raise
                left.append(f"{culprit}: {error.problem}")
                runs = [r for r in runs if r.name != culprit]
        # runs the comparison itself left out whole (unreadable files, no common years)
        left += [f"{o['source']}: {o['reason']}" for o in cmp.omissions if o["season"] == "all"]
        entry = (cmp, tuple(left))
        self._failed = self._failed or bool(left)
        comparisons.put(key, entry)
        return entry

    def known_period(self, reference: str, variable: str) -> tuple[Period, Period, tuple[str, ...]] | None:
        """``(span, default period, left out)`` of :meth:`period_info` when that comparison is
        already open, else ``None``; never computes or waits (called on the event loop, so that
        a session opened on a known comparison starts with its years)."""
        key = (reference, variable, None, self._level(variable, "") or "", self.target_grid)
        entry = self._comparisons.get(key)
        if entry is _MISSING:
            return None
        cmp, left = entry
        return cmp.span, cmp.period, (*left, *(f"{name}: {problem}" for name, problem in self._unreadable.items() if name != reference))

    def period_info(self, reference: str, variable: str) -> tuple[Period, Period]:
        """``(span, default period)`` of the years every source of the comparison covers."""
        cmp = self.comparison(reference, variable, None)
        return cmp.span, cmp.period

    # ------------------------------------------------------------------ products (worker thread)
    def scores(self, reference: str, variable: str, period: str, region: str, season: str, level: str = "", target_grid: str = "") -> pd.DataFrame:
        """The tidy score table of every run of the comparison (the views pick theirs): rows
        against every reference, and the alternative references' rows against ``reference``."""
        cmp = self.comparison(reference, variable, period, level, target_grid)
        return self._scores_of(cmp, [region], [season])

    def _scores_of(self, cmp: Comparison, regions: Sequence[str], seasons: Sequence[str]) -> pd.DataFrame:
        """``cmp.scores(regions=..., seasons=...)``, each region and season scored once per comparison.

        The rows of one region and season do not depend on the others scored with them
        (every statistic, median and bootstrap draw is made per region and season), so the
        score tab's table of one region, the overview's of every region and the background's
        share them.  Rows are ordered by season, then region.
        """
        regions = list(dict.fromkeys(parse_region(r).id for r in regions))
        seasons = list(dict.fromkeys(parse_season(x) for x in seasons))
        done = self._score_blocks.setdefault(cmp, {})
        todo_regions = [r for r in regions if any((r, x) not in done for x in seasons)]
        todo_seasons = [x for x in seasons if any((r, x) not in done for r in regions)]
        if todo_regions:
            try:
                table = cmp.scores(regions=todo_regions, seasons=todo_seasons)
            except InputError:
                table = None  # one region or season refused refuses them all: each on its own below
            for r in todo_regions:
                for x in todo_seasons:
                    if (r, x) in done:
                        continue
                    if table is not None:
                        rows = table[(table["region"] == r) & (table["season"] == x)]
                    else:  # a region without cells (a regional grid has no Antarctic) leaves only itself out
                        try:
                            rows = cmp.scores(regions=[r], seasons=[x])
                        except InputError:
                            rows = pd.DataFrame(columns=list(TIDY_COLUMNS))  # the error is raised below if nothing else is
                    done[(r, x)] = rows.reset_index(drop=True)
        blocks = [done[(r, x)] for x in seasons for r in regions]
        if all(b.empty for b in blocks):
            return cmp.scores(regions=regions, seasons=seasons)  # nothing to score: its own InputError
        return pd.concat([b for b in blocks if not b.empty], ignore_index=True)

    def provenance(self, reference: str, variable: str, period: str, region: str, season: str, level: str = "", target_grid: str = "") -> dict:
        cmp = self.comparison(reference, variable, period, level, target_grid)
        return cmp.provenance(regions=[parse_region(region).id], seasons=[season])

    def map_field(self, reference: str, variable: str, period: str, season: str, kind: str, name: str, level: str = "", target_grid: str = "") -> xr.DataArray:
        """One field of :class:`~evaluation.scoring.Comparison`: ``kind`` is the method name."""
        cmp = self.comparison(reference, variable, period, level, target_grid)
        method = {
            "climatology": cmp.climatology,
            "difference": cmp.difference,
            "trend_map": cmp.trend_map,
            "trend_difference": cmp.trend_difference,
            # the stippling of the bias, trend and trend-difference maps (CF flag variables)
            "difference_significance": lambda n, s: cmp.significance_mask(n, s, of="difference"),
            "trend_map_significance": lambda n, s: cmp.significance_mask(n, s, of="trend_map"),
            "trend_difference_significance": lambda n, s: cmp.significance_mask(n, s, of="trend_difference"),
        }[kind]
        return method(name, season).load()

    def zonal_mean(self, reference: str, variable: str, period: str, season: str, name: str, level: str = "", target_grid: str = "") -> xr.DataArray:
        return self.comparison(reference, variable, period, level, target_grid).zonal_mean(name, season).load()

    def zonal_section(self, reference: str, variable: str, period: str, season: str, name: str, level: str = "", target_grid: str = "") -> xr.Dataset:
        """Zonal-mean section (level × latitude) of a run and the reference, with its scores."""
        return self.comparison(reference, variable, period, level, target_grid).zonal_section(name, season).load()

    def regional_series(self, reference: str, variable: str, period: str, region: str, season: str, name: str, level: str = "", target_grid: str = "") -> xr.DataArray:
        return self.comparison(reference, variable, period, level, target_grid).regional_series(name, parse_region(region).id, season).load()

    def seasonal_cycle(self, reference: str, variable: str, period: str, region: str, name: str, level: str = "", target_grid: str = "") -> xr.DataArray:
        return self.comparison(reference, variable, period, level, target_grid).seasonal_cycle(name, parse_region(region).id).load()

    def alternatives(self, reference: str, variable: str, period: str, level: str = "", target_grid: str = "") -> list[str]:
        """The other references of the comparison (those it could read), in order."""
        return [a.name for a in self.comparison(reference, variable, period, level, target_grid).alternatives]

    def units(self, reference: str, variable: str, period: str, level: str = "", target_grid: str = "") -> str:
        return self.comparison(reference, variable, period, level, target_grid).units

    def overview(self, reference: str, period: str, regions: tuple[str, ...], seasons: tuple[str, ...], target_grid: str = "") -> pd.DataFrame:
        """Scores of every run for every variable of the collection (for the summary heat map).

        The selected reference is used where it holds the variable, else the first
        reference that does; the selected period where every source covers it, else the
        default period of that variable.  Variables the core cannot score are skipped.
        """
        tables = [
            table[(table["reference"] == ref) & table["model"].isin(runs)]
            for ref, runs, table in self._overview_tables(reference, period, regions, seasons, target_grid)
        ]
        if not tables:
            return pd.DataFrame(columns=list(TIDY_COLUMNS))
        return pd.concat(tables, ignore_index=True)

    def _overview_tables(self, reference: str, period: str, regions: tuple[str, ...], seasons: tuple[str, ...], target_grid: str = ""):
        """Per variable: the reference used, the runs, and the whole table (every reference)."""
        variables = self.variables()
        for i, variable in enumerate(variables, 1):
            self.background = f"scoring the overview: {variable}, {i} of {len(variables)} variables"
            found = self._overview_table(variable, reference, period, regions, seasons, target_grid)
            if found is not None:
                yield found
        self.background = ""

    def _overview_table(self, variable: str, reference: str, period: str, regions: tuple[str, ...], seasons: tuple[str, ...],
                        target_grid: str = "") -> tuple[str, set[str], pd.DataFrame] | None:
        """One variable of :meth:`_overview_tables`; ``None`` where the core cannot score it."""
        refs = self.references(variable)
        if not refs:
            return None
        ref = reference if reference in refs else refs[0]
        refused = (self._generation, ref, variable, period, target_grid)
        try:
            try:
                if refused in self._refused:
                    raise InputError("refused before")  # not asked again: it opens the files to refuse
                cmp = self.comparison(ref, variable, period, target_grid=target_grid)
            except InputError:
                self._refused.put(refused, True)
                cmp = self.comparison(ref, variable, None, target_grid=target_grid)
            table = self._scores_of(cmp, regions, seasons)
        except InputError:
            return None
        return ref, {m.name for m in cmp.models}, table

    def overview_ties(self, reference: str, period: str, regions: tuple[str, ...], seasons: tuple[str, ...], target_grid: str = "") -> pd.DataFrame:
        """The overview's cells within observational uncertainty of the best run of their column.

        Columns ``model variable level region season``: runs whose relative error is not the
        lowest but within observational uncertainty of a run with the lowest
        (:func:`evaluation.uncertainty.run_pairs`); empty where a variable has one reference.
        """
        from evaluation.uncertainty import run_pairs, tied_with

        found = []
        keys = ["variable", "level", "region", "season"]
        for ref, runs, table in self._overview_tables(reference, period, regions, seasons, target_grid):
            if table["reference"].nunique() < 2:
                continue
            rel = table[(table["metric"] == "rel_error") & table["model"].isin(runs)]
            pairs = run_pairs(rel, primary=ref)
            primary = rel[rel["reference"] == ref]
            for key, block in primary.groupby(keys, sort=False, dropna=False):
                best = set(block.loc[block["value"] == block["value"].min(), "model"])
                here = pairs[(pairs[keys] == pd.Series(key, index=keys)).all(axis=1)]
                found += [(m, *key) for m in sorted(tied_with(here, best))]
        return pd.DataFrame(found, columns=["model", *keys])
