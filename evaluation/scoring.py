"""One comparison: a reference, a variable, a period and several runs.

:class:`Comparison` opens every source once (lazily), brings the runs into the
reference's units and onto the target grid, and reduces the monthly data in **one dask
pass per source** to yearly season means (and, when asked, a monthly climatology).
Every number and field the CLI and the dashboard show is then derived from those small
reduced arrays, which are kept in memory.

Remapping happens after the time reduction: both conservative and bilinear maps are
linear in the data, so remapping a mean equals the mean of remapped months wherever the
missing-value mask does not change in time (true of land/ocean masks); it costs 12-120×
less.
"""

from __future__ import annotations

import re
import threading
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import xarray as xr

from . import io
from .cache import Cache, default_cache
from .errors import InputError
from .export import TIDY_COLUMNS
from .grids import REGRID_METHODS, describe_method, grid_of, regrid, same_grid
from .grids.target import covered_part, parse_target_grid, regular_grid, regular_near
from .levels import LEVEL_DIM, interpolate_levels, parse_level, section_scores, section_weights, select_level
from .metrics import METRICS, pattern_stats, relative_errors, weighted_mean, zonal_mean
from .names import repeated
from .regions import parse_region, region_weights
from .request import Source, scores_key
from .timeaxis import (
    MONTH_NAMES,
    SEASONS,
    Period,
    climatology,
    complete_years,
    default_period,
    monthly_climatology,
    parse_period,
    parse_season,
    season_means,
    years_with_data,
)
from .timecoding import COMPLETENESS_RULE, NOTES_ATTR, frequency
from .units import cf_units, convert, trend_units

__all__ = ["Source", "Comparison", "TIDY_COLUMNS", "score_table", "preferred_units"]


# Units people read these quantities in; the data may be stored in any convertible unit.
_PREFERRED_UNITS = {
    "precipitation_flux": "mm day-1",
    "air_pressure_at_mean_sea_level": "hPa",
}


def preferred_units(standard_name: str | None, stored: str) -> str:
    """The unit scores are reported in: mm day-1 for precipitation, hPa for sea-level pressure, else as stored."""
    return _PREFERRED_UNITS.get(standard_name or "", stored)


#: The most bytes of yearly means :meth:`Comparison.scores` holds in memory: the first seasons
#: asked for, as many as fit, are held from the read until scored; the others wait in the
#: cache (written in the background while the next source is read) and are read back one
#: season at a time.  A century of 1-degree months and 6 sources: 3 of 5 seasons held,
#: 0.9 GB; peak memory of the command about 1.5 GB (benchmarks/run.py --only memory).
HOLD_LIMIT_BYTES = 1 << 30

#: Bytes of stored values a source's monthly data are read in at a time (whole years) when
#: its yearly season means are made from a file read without dask: the monthly values are
#: never in memory whole.  Measured on the 1-degree century (6 files of 311 MB of float32):
#: 5.4-5.6 s in blocks of 5-10 years against 11-15 s read whole, most of the difference the
#: system time of first touching a few hundred MB of new memory on this virtual machine.
BLOCK_BYTES = 24 * 2**20


@dataclass
class _Prepared:
    monthly: xr.DataArray  # lazy, in comparison units, native grid
    span: Period | None
    files: list[str]
    seasons: dict[str, xr.DataArray] = field(default_factory=dict)  # on target grid, in memory
    cycle: xr.DataArray | None = None  # (month, lat, lon) on target grid
    kind: str = "monthly"  # monthly | annual | climatology (evaluation.timecoding.frequency)
    members: tuple[str, ...] = ()  # an ensemble mean: the mean of these runs' reductions (evaluation.ensembles)
    stored_units: str | None = None  # values still in the file: converted from these units when read


def _climatology_kind(monthly: xr.DataArray) -> str:
    """``12-month climatology`` or ``climatology of JAN, JUL only``: the months a climatology holds."""
    months = sorted({t.month for t in monthly["time"].values})
    return "12-month climatology" if len(months) == 12 else f"climatology of {', '.join(MONTH_NAMES[m - 1] for m in months)} only"


class Comparison:
    """Scores and fields of several runs against one reference for one variable.

    Parameters
    ----------
    reference
        The reference source.
    models
        The runs to score (at least one).
    variable
        Variable name or CF standard_name, looked up in every source.
    period
        ``Period``, ``"YYYY-YYYY"`` or ``None`` for the default rule: the WMO 1991–2020
        normal when every source covers it, else the overlap of all sources.
    regrid
        ``"conservative"`` (default), ``"bilinear"`` or ``"nearest"``: how every source
        is brought onto the target grid (:data:`evaluation.grids.REMAPPERS`).
    target_grid
        ``"reference"`` (default: the reference's grid), the name of a source, or a
        spacing such as ``"2.5x2.5"`` (a global regular grid).  A chosen grid that is not
        regular is replaced by a regular grid of about its mean spacing (see
        :mod:`evaluation.grids.target`); :attr:`target_grid_text` says which grid was used.
    alternatives
        Further references, in order (``reference`` is the primary).  Every run is also
        scored against each, and each is scored against the primary as if it were a run,
        on the same period, target grid and region weights.  One that cannot be read is
        left out like a run (:attr:`omissions`).
    units
        Units to compare in; default :func:`preferred_units` of the reference.
    cache
        ``True`` (default) uses the persistent cache named by the environment
        (:func:`evaluation.cache.default_cache`), ``False``/``None`` none, or a
        :class:`~evaluation.cache.Cache`.

    Raises
    ------
    InputError
        For every problem with the sources (see :mod:`evaluation.io`), incompatible
        units, or a period a source does not cover.
    """

    def __init__(
        self,
        *,
        reference: Source,
        models: Sequence[Source],
        variable: str,
        period: Period | str | None = None,
        regrid: str = "conservative",
        units: str | None = None,
        level: str | None = None,
        target_grid: str | None = None,
        cache: Cache | None | bool = True,
        alternatives: Sequence[Source] = (),
        ensembles: Sequence = (),
    ) -> None:
        if not models:
            raise InputError("no model run given", remedy="add at least one --model NAME=PATH")
        names = [reference.name, *(a.name for a in alternatives), *(m.name for m in models)]
        dupes = repeated(names)  # also two spellings of one name ('é' as one character or two)
        if dupes:
            raise InputError(f"source names must be unique (repeated: {', '.join(dupes)})", remedy="give each run and the reference its own name")
        if regrid not in REGRID_METHODS:
            raise InputError(f"unknown regrid method '{regrid}'", remedy=f"use one of {', '.join(REGRID_METHODS)}")
        self._target_choice = parse_target_grid(target_grid, sources=names, reference=reference.name)
        self.reference = reference
        self.models = list(models)
        #: alternative references: every run is also scored against each, and each is scored
        #: against the primary ``reference`` as if it were a run (the observational spread)
        self.alternatives = list(alternatives)
        self.variable = variable
        self.regrid_method = regrid
        self._lock = threading.RLock()
        self._land: dict[str, xr.DataArray] = {}
        #: per source, the files read for the request (the variable's, a cell-area file its
        #: cell_measures names); the primary's land-fraction file joins once a region uses it
        self._used: dict[str, list[str]] = {}
        self._land_file: list[str] = []  # the primary reference's land-fraction file(s), read lazily
        self._land_read = False
        self._grids: dict[str, xr.Dataset] = {}
        self._close_files: dict[str, object] = {}  # per source, what closes its files (io.open_source)
        #: per source, its files' identities when first opened: a source whose files were closed
        #: is read again through a new opening by path, checked against these first
        self._opened_as: dict[str, list] = {}
        self._closed: set[str] = set()
        self._cache = default_cache() if cache is True else (cache or None)

        # the level asked for (``850hPa``); ``self.level`` is its canonical text ("850 hPa")
        self._level_request = parse_level(level) if level else None
        self._columns: dict[str, xr.DataArray] = {}  # every level, for zonal sections
        self._sections: dict[tuple[str, str], xr.DataArray] = {}
        ref = self._open(reference)
        self.level = str(ref.attrs.get("level", ""))
        self.standard_name = ref.attrs.get("standard_name")
        self.long_name = ref.attrs.get("long_name", variable)
        stored = ref.attrs.get("units")
        if stored is None:
            raise InputError(f"variable '{variable}' has no units attribute", file=io.expand_paths(reference.paths, source=reference.name), remedy="add a CF units attribute")
        self.units = cf_units(units or preferred_units(self.standard_name, str(stored)))  # 'deg. C' -> 'degC'
        #: what could not be scored: {source, season, reason} ("all" seasons for a run left out whole)
        self.omissions: list[dict[str, str]] = []
        #: plain sentences about how the numbers were made (printed by the CLI, kept in the provenance)
        self.notes: list[str] = []
        self._sources: dict[str, Source] = {reference.name: reference}
        self._prepared: dict[str, _Prepared] = {reference.name: self._prepare_source(reference, ref)}
        if self._prepared[reference.name].kind == "annual":
            self.notes.append(f"the reference '{reference.name}' holds annual means: only ANN can be scored")
        failures: list[InputError] = []
        for m in [*self.alternatives, *self.models]:
            try:
                prepared = self._prepare_source(m, self._open(m))
                if prepared.kind == "climatology":
                    raise InputError(
                        f"'{m.name}' is a {_climatology_kind(prepared.monthly)}: a climatology can serve as the primary reference only",
                        file=prepared.files,
                        remedy="give the run's monthly, daily or annual time series",
                    )
            except InputError as err:
                if m in self.models:
                    failures.append(err)
                self._omit(m.name, "all", err.message)
                continue
            self._sources[m.name] = m
            self._prepared[m.name] = prepared
        self.models = [m for m in self.models if m.name in self._prepared]
        self.alternatives = [a for a in self.alternatives if a.name in self._prepared]
        self._require_runs(failures)
        self.period = self._choose_period(period, failures)
        self._require_runs(failures)
        alternative = {a.name for a in self.alternatives}
        spans = [p.span for n, p in self._prepared.items() if p.kind != "climatology" and n not in alternative]
        self.span = self._overlap(spans)  # the years the primary reference and every run cover
        self._note_time_kinds()
        self._target_grid, self.target_grid_text = self._choose_target()
        #: ensembles of runs (evaluation.ensembles.Ensemble); each mean is a run named "<name> (ensemble mean)"
        self.ensembles: list = []
        if ensembles:
            from .ensembles import attach

            attach(self, ensembles)

    # ------------------------------------------------------------------ opening
    def _open(self, src: Source) -> xr.DataArray:
        stored_as = src.name_in_files(self.variable)  # e.g. 'TS' for 'tas' (Source.variables)
        inputs = {stored: wanted for wanted, stored in src.names_in_files(self.variable).items() if wanted != self.variable}
        # a source that fits in memory is opened without dask and read whole when first reduced
        ds = io.open_source(src.paths, variables=[stored_as, *inputs], source=src.name, without_dask=True)
        self._close_files[src.name] = ds.close
        self._opened_as[src.name] = io.file_identity([f for f in str(ds.attrs.get("gridscore_files", "")).split("\n") if f])
        self._grids[src.name] = grid_of(ds)
        ds = ds.rename({k: v for k, v in inputs.items() if k in ds.data_vars and v not in ds.data_vars})  # derived inputs
        da = io.get_variable(ds, stored_as, source=src.name)
        if stored_as != self.variable:
            da = da.rename(self.variable)
        fixed = io.FIXED_FIELDS.get(str(da.attrs.get("standard_name", "")))
        if fixed is not None:
            # a land fraction or cell area written with a time step is still not a time series
            files = io.expand_paths(src.paths, source=src.name)
            raise InputError(
                f"variable '{self.variable}' of '{src.name}' is a fixed field ({fixed}), not a time series that scores compare",
                file=files,
                remedy="score a time-varying variable; a land fraction in the reference's files is used for the land and ocean regions",
            )
        if "time" not in da.dims:
            # name the files, not only the source: the message must say which file to fix
            files = io.expand_paths(src.paths, source=src.name)
            raise InputError(f"variable '{self.variable}' of '{src.name}' has no time axis", file=files, remedy="give monthly time series")
        used = io.files_holding(src.paths, [stored_as, *inputs], source=src.name)
        area = re.search(r"area:\s*(\S+)", str(da.attrs.get("cell_measures", "")))
        if area and "cell_area" in da.coords:
            used = sorted({*used, *io.files_holding(src.paths, [area.group(1)], source=src.name)})
        self._used[src.name] = used
        land = next((v for v in ds.data_vars if v == "sftlf" or ds[v].attrs.get("standard_name") == "land_area_fraction"), None)
        if land is not None and src.name == self.reference.name:
            # only the primary's land fraction shapes the land and ocean regions; it is read
            # when a region needs it (see _reference_land), and only then named in the provenance
            self._land[src.name] = ds[land]
            self._land_file = io.files_holding(src.paths, [str(land)], source=src.name)
        return self._one_level(src, da)

    def _one_level(self, src: Source, da: xr.DataArray) -> xr.DataArray:
        """The variable on the level asked for, right after it is taken from the files
        (native grid, before the time reduction; see :func:`evaluation.levels.select_level`)."""
        # the file holding the variable (xarray records it), not every file of the source
        files = [da.encoding["source"]] if da.encoding.get("source") else io.expand_paths(src.paths, source=src.name)
        if LEVEL_DIM in da.dims:
            kind = da[LEVEL_DIM].attrs.get("level_kind")
            first = next(iter(self._columns.values()), None)
            family = {"model": "pressure"}  # model levels are read at a pressure
            if first is not None and family.get(first[LEVEL_DIM].attrs.get("level_kind"), first[LEVEL_DIM].attrs.get("level_kind")) != family.get(kind, kind):
                raise InputError(
                    f"'{src.name}' holds '{self.variable}' on {kind} levels, the reference on {first[LEVEL_DIM].attrs.get('level_kind')} levels",
                    file=files,
                    remedy="compare sources on the same kind of vertical axis",
                )
            self._columns[src.name] = da
        return select_level(da, self._level_request, source=src.name, files=files)

    def _prepare_source(self, src: Source, da: xr.DataArray) -> _Prepared:
        files = io.expand_paths(src.paths, source=src.name)
        stored_units = None
        try:
            if da.chunks is None and not da.variable._in_memory:
                # values still in the file (opened without dask): converting them now would read
                # every source into memory at once; the units are checked now, on no values, and
                # the conversion is applied when the values are read (_monthly_in_memory)
                checked = convert(xr.DataArray(np.empty(0, dtype=da.dtype), dims="x", name=da.name, attrs=da.attrs), self.units, source=src.name)
                stored_units = str(da.attrs["units"])
                da = da.copy(deep=False)
                da.attrs = dict(checked.attrs)
            else:
                da = convert(da, self.units, source=src.name)
        except InputError as err:
            raise InputError(f"{err.problem} (source '{src.name}')", file=files, remedy=err.remedy) from None
        kind = frequency(da["time"])
        span = complete_years(da["time"])
        if span is None and kind == "monthly" and da.sizes["time"]:
            # months with gaps (one month a year, say): the seasons whose months are there can be scored
            span = years_with_data(da["time"])
            self.notes.append(f"'{src.name}' has no complete year of months: its years {span} serve the seasons whose months it has")
        return _Prepared(monthly=da, span=span, files=files, kind=kind, stored_units=stored_units)

    # ------------------------------------------------------------------ partial tables
    def _omit(self, source: str, season: str, reason: str) -> None:
        entry = {"source": source, "season": season, "reason": " ".join(str(reason).split())}
        if entry not in self.omissions:
            self.omissions.append(entry)

    def _omitted(self, source: str, season: str, against: str | None = None) -> str | None:
        """The reason a source (or the reference it is scored against) has no rows for a season."""
        for o in self.omissions:
            if o["source"] in (source, against or self.reference.name) and o["season"] in (season, "all"):
                return o["reason"]
        return None

    def _require_runs(self, failures: list[InputError]) -> None:
        """Refuse when no run is left to score (with the one reason, or all of them)."""
        if self.models:
            return
        if len(failures) == 1:
            raise failures[0]
        raise InputError(
            "no run could be scored: " + "; ".join(f.message for f in failures),
            remedy="fix the runs' files as each reason says",
        )

    def _choose_period(self, period: Period | str | None, failures: list[InputError]) -> Period:
        """The period: asked for, or the default rule over the sources that have years.

        A run without a complete year, or not covering an asked-for period, is left out
        (an omission); the reference failing either way is refused.
        """
        ref = self.reference.name
        dated = {n: p for n, p in self._prepared.items() if p.kind != "climatology"}
        for name, prep in list(dated.items()):
            if prep.span is None:
                if prep.monthly.sizes.get("time", 0) == 0 and prep.monthly["time"].attrs.get("gridscore_from") == "sub-monthly":
                    err = InputError("the sub-monthly steps complete no month", file=prep.files, remedy="give every step of at least one whole month")
                else:
                    err = InputError("no complete year of monthly data", file=prep.files, remedy="give at least twelve consecutive months")
                if name == ref:
                    raise err
                failures.append(err)
                self._drop_run(name, err.message)
                del dated[name]
        if not self.models:
            return Period(0, 0)
        alternative = {a.name for a in self.alternatives}
        if period is None:
            # the primary and the runs decide; an alternative reference that does not cover it is left out
            core = {n: p for n, p in dated.items() if n not in alternative}
            chosen = default_period([p.span for p in core.values()], names=list(core))
        else:
            chosen = parse_period(period)
        for name, prep in dated.items():
            if not prep.span.covers(chosen):  # type: ignore[union-attr]
                err = InputError(
                    f"'{name}' does not cover the period {chosen} (its complete years: {prep.span})",
                    file=prep.files,
                    remedy=f"choose a period within {prep.span}",
                )
                if name == ref:
                    raise err
                failures.append(err)
                self._drop_run(name, err.message)
        return chosen

    def _drop_run(self, name: str, reason: str) -> None:
        self._omit(name, "all", reason)
        self._prepared.pop(name, None)
        self._sources.pop(name, None)
        self.models = [m for m in self.models if m.name != name]
        self.alternatives = [a for a in self.alternatives if a.name != name]

    def _note_time_kinds(self) -> None:
        ref = self._prepared[self.reference.name]
        if ref.kind == "climatology":
            years = ref.monthly["time"].attrs.get("gridscore_climatology_years")
            self.notes.append(
                f"the reference '{self.reference.name}' is a "
                + _climatology_kind(ref.monthly)
                + (f" of {years}" if years else " (its years are not stated)")
                + f"; the runs' means over {self.period} are compared with it, and ref_trend, ref_trend_pvalue "
                "and iav_ratio, which need the reference's years, are left empty"
            )
        for name, prep in self._prepared.items():
            for note in str(prep.monthly["time"].attrs.get(NOTES_ATTR, "")).split(" | "):
                if note:
                    self.notes.append(f"'{name}': {note}")  # e.g. a calendar spelling read as its CF name
        monthly_from = [n for n, p in self._prepared.items() if p.monthly["time"].attrs.get("gridscore_from") == "sub-monthly"]
        if monthly_from:
            self.notes.append(f"monthly means built from sub-monthly steps for {', '.join(monthly_from)}: {COMPLETENESS_RULE}")

    @staticmethod
    def _overlap(spans: Iterable[Period | None]) -> Period:
        valid = [s for s in spans if s is not None]
        return Period(max(s.start for s in valid), min(s.end for s in valid))

    # ------------------------------------------------------------------ reduction
    @property
    def sources(self) -> list[str]:
        """Names of the reference and the runs, reference first."""
        return list(self._sources)

    def _check_name(self, name: str) -> _Prepared:
        if name not in self._prepared:
            raise InputError(f"'{name}' is not part of this comparison", remedy=f"use one of {', '.join(self._sources)}")
        return self._prepared[name]

    def prepare(self, seasons: Iterable[str], *, cycle: bool = False, keep: bool | Iterable[str] = True) -> None:
        """Reduce every source for the given seasons in one pass over its data.

        Already reduced seasons are not recomputed; the results stay in memory, or with
        ``keep=False`` (and a cache) in the cache only, read back when a season is asked
        for; ``keep`` may also name the seasons held in memory (the others in the cache only).
        """
        seasons = [parse_season(s) for s in seasons]
        held = set(seasons) if keep is True else set() if keep is False else {parse_season(s) for s in keep}
        with self._lock:
            todo: list[tuple[str, str]] = []
            done: list[tuple[str, str, xr.DataArray]] = []
            for name, prep in self._prepared.items():
                if prep.members:
                    continue  # an ensemble mean: averaged from its members' reductions below
                wanted = [s for s in seasons if s not in prep.seasons] + (["_cycle"] if cycle and prep.cycle is None else [])
                for s in wanted:
                    if s != "_cycle" and self._omitted(name, s) is not None:
                        continue
                    if s == "_cycle" and prep.kind == "annual":
                        continue  # annual means have no seasonal cycle (seasonal_cycle says so)
                    if prep.kind == "annual" and s != "ANN":
                        self._omit(name, s, "annual means (one value per year): only ANN can be scored")
                        continue
                    hit = self._cache.get(self._cache_key(name, s)) if self._cache else None
                    if hit is not None:
                        done.append((name, s, hit))
                    else:
                        todo.append((name, s))
            if not todo and not done:
                self._ensemble_means(seasons, cycle)
                return
            # One pass per source: all its wanted reductions share one read of its monthly
            # data -- loaded whole and reduced with numpy when it fits in memory, else one
            # dask pass with only this source's chunks in flight, so that memory stays
            # bounded by chunk size however many sources there are.
            spilled: list[str] = []  # cache keys of the previous source's means not held
            for source in dict.fromkeys(t[0] for t in todo):
                batch = [t for t in todo if t[0] == source]
                if source in self._closed:
                    self._require_unchanged(source)
                if not any(s == "_cycle" for _, s in batch) and self._reads_in_blocks(source):
                    computed = self._season_means_in_blocks(source, [s for _, s in batch])
                    # read through: its files' chunk caches go (64 MB a file); opened again if read again
                    self._close_files[source]()  # type: ignore[operator]
                    self._closed.add(source)
                else:
                    monthly = self._monthly_in_memory(source, cycle=any(s == "_cycle" for _, s in batch))
                    computed = [monthly_climatology(monthly, self.period) if s == "_cycle" else season_means(monthly, s, self.period) for _, s in batch]
                    if monthly.chunks is not None:  # too large for memory: one dask pass over the chunks
                        import dask

                        computed = dask.compute(*computed)
                    del monthly
                # what is not held waits for its writer (scipy's, on the cache's thread) before
                # the next source's means are made: at most two sources' worth in flight
                for key in spilled:
                    self._cache.wait(key)  # type: ignore[union-attr]
                spilled = []
                for (name, s), value in zip(batch, computed, strict=True):
                    if self._cache is not None:
                        # written while the next source is read and the scoring goes on
                        key = self._cache_key(name, s)
                        self._cache.put_later(key, value)
                        if s not in held and s != "_cycle" and value.sizes.get("year", 0):
                            spilled.append(key)
                            continue  # in the cache only (an entry that could not be written is recomputed)
                    done.append((name, s, value))
                del computed
            for name, s, value in done:
                if s != "_cycle" and value.sizes.get("year", 0) == 0:
                    # a partial table: this source and season have no rows, the others do
                    where = "in the climatology" if self._prepared[name].kind == "climatology" else f"within {self.period}"
                    self._omit(name, s, f"no complete {s} season {where} (a season needs all its months)")
                    continue
                value = self._to_target(value, name)
                if s == "_cycle":
                    self._prepared[name].cycle = value
                else:
                    self._prepared[name].seasons[s] = value
            self._ensemble_means(seasons, cycle)

    def _ensemble_means(self, seasons: list[str], cycle: bool) -> None:
        if self.ensembles:
            from .ensembles import fill_means

            fill_means(self, seasons, cycle)

    def _require_unchanged(self, name: str) -> None:
        """Refuse to read a source again whose files changed since it was opened.

        Its files were closed after a read (:meth:`scores`); reading them again opens them
        by path, while the time axis, packing and valid ranges decoded at the first opening
        are kept: a file replaced meanwhile would be read with the old file's metadata, and
        one comparison would mix two versions of it.  The remedy is a new comparison (the
        server starts one when its look at the files sees the change).
        """
        then = self._opened_as.get(name, [])
        try:
            now = io.file_identity([f.path for f in then])
        except OSError as exc:
            raise InputError("the file went away while gridscore was scoring it", file=getattr(exc, "filename", None) or name,
                             remedy="score again once the file is back") from None
        for old, new in zip(then, now, strict=True):
            if old != new:
                raise InputError(
                    "the file changed while gridscore was scoring it (its other seasons were read from the file as it was)",
                    file=old.path, remedy="score again: the new file is read from its start",
                )

    def _held(self, seasons: list[str]) -> list[str]:
        """The seasons whose yearly means :meth:`scores` holds in memory from the read until
        scored: the first ones, as many as :data:`HOLD_LIMIT_BYTES` holds (every season
        without a cache); the others wait in the cache.

        A century of 1-degree months, 6 sources and 5 seasons make 1.5 GB of yearly means;
        3 seasons are held (0.9 GB), the other 2 read back from the cache one at a time.
        """
        if self._cache is None or self.ensembles:
            return list(seasons)
        # a source's yearly means stay on its own grid until every source is read, then go on
        # the target grid: the larger of the two sums bounds what a season holds
        target = int(np.prod([self._target_grid.sizes[d] for d in ("lat", "lon")]))
        own = sum(int(np.prod([n for d, n in p.monthly.sizes.items() if d != "time"])) for p in self._prepared.values())
        per_season = max(own, len(self._prepared) * target) * self.period.length * 8
        return list(seasons[:int(HOLD_LIMIT_BYTES // max(per_season, 1))])

    def _reads_in_blocks(self, name: str) -> bool:
        """Whether a source's season means are made from its monthly values read a few years
        at a time (:meth:`_season_means_in_blocks`): monthly steps still in one file (opened
        without dask), not made from sub-monthly steps (those are read a few months at a
        time already)."""
        prep = self._prepared[name]
        da = prep.monthly
        return (prep.kind == "monthly" and da.chunks is None and not da.variable._in_memory and da.sizes["time"] > 0
                and da["time"].attrs.get("gridscore_from") != "sub-monthly")

    def _season_means_in_blocks(self, name: str, seasons: list[str]) -> list[xr.DataArray]:
        """:func:`~evaluation.timeaxis.season_means` of a source over the period for each of
        ``seasons``, reading its monthly values a few whole years at a time
        (:data:`BLOCK_BYTES`).

        Each block holds every month of its label years (and the months before its first
        year that a season across the new year, DJF, takes), so each year's mean is made
        from the same values, in the same order, as from the whole series: the same
        numbers.  The monthly values are never in memory whole.
        """
        da = self._prepared[name].monthly
        stored = self._prepared[name].stored_units
        time = da["time"].values
        years = np.fromiter((t.year for t in time), dtype=int, count=time.size)
        months = np.fromiter((t.month for t in time), dtype=int, count=time.size)
        # the first month of the year before a block that a season across the new year takes
        earliest = min((SEASONS[s][0] for s in seasons if SEASONS[s][0] > SEASONS[s][-1]), default=13)
        cells = int(np.prod([n for d, n in da.sizes.items() if d != "time"]))
        per_block = max(1, int(BLOCK_BYTES // max(12 * cells * da.dtype.itemsize, 1)))
        start, end = max(self.period.start, int(years.min())), min(self.period.end, int(years.max()))  # label years with data
        joined = {s: _YearlyMeans(end - start + 1) for s in seasons}
        for first in range(start, end + 1, per_block):
            last = min(first + per_block - 1, end)
            steps = np.flatnonzero(((years == first - 1) & (months >= earliest)) | ((years >= first) & (years <= last)))
            if steps.size == 0:
                continue
            # a contiguous range of steps: the time axis is increasing (io.normalise checks it)
            block = da.isel(time=slice(int(steps[0]), int(steps[-1]) + 1)).compute()
            if stored is not None:  # the unit conversion put off by _prepare_source
                block = convert(block.assign_attrs(units=stored), self.units, source=name)
            for s in seasons:
                joined[s].add(season_means(block, s, Period(first, last)))
            del block
        if not any(j.template is not None for j in joined.values()):  # no month in the period: the empty means of the whole series
            return [season_means(da.isel(time=slice(0, 0)), s, self.period) for s in seasons]
        return [joined[s].result() for s in seasons]

    def _monthly_in_memory(self, name: str, *, cycle: bool) -> xr.DataArray:
        """A source's monthly data for the period, read into memory when they fit
        (:func:`evaluation.io.fits_in_memory`); else the lazy (dask) data.

        Only the years of the period are read (and the December before it, which DJF of
        its first year needs); every year for a seasonal cycle or non-monthly steps.
        """
        da = self._prepared[name].monthly
        if self._prepared[name].kind == "monthly" and not cycle and da.sizes["time"]:
            years = np.fromiter((t.year for t in da["time"].values), dtype=int, count=da.sizes["time"])
            inside = np.flatnonzero((years >= self.period.start - 1) & (years <= self.period.end))
            if inside.size:
                da = da.isel(time=slice(int(inside[0]), int(inside[-1]) + 1))
        if da.chunks is None:
            # in memory already, or opened without dask (io.open_source): read now, once
            loaded = da.compute()
            stored = self._prepared[name].stored_units
            if stored is not None:  # the unit conversion put off by _prepare_source
                loaded = convert(loaded.assign_attrs(units=stored), self.units, source=name)
            return loaded
        # a copy (the lazy data stay lazy); graph not optimised: a few tasks per file, named as read
        return da.compute(optimize_graph=False) if io.fits_in_memory(da) else da

    def _cache_key(self, name: str, what: str) -> str:
        prep = self._prepared[name]
        files = [vars(f) for f in io.file_identity(prep.files)]
        stored_as = sorted(self._sources[name].names_in_files(self.variable).items())
        return Cache.key(kind="reduction-v3", files=files, variable=self.variable, stored_as=stored_as, units=self.units, what=what, period=str(self.period), level=self.level)

    def _choose_target(self) -> tuple[xr.Dataset, str]:
        """The regular grid every source is remapped onto, and the sentence saying which."""
        choice = self._target_choice
        for name in self._sources:
            describe_method(self._grids[name].attrs["grid_kind"], self.regrid_method)  # refuses e.g. bilinear from a mesh
        if choice.is_resolution:
            assert choice.dlat is not None and choice.dlon is not None
            # a regional rotated or curvilinear primary: its edge cells count with the part it covers
            grid = covered_part(regular_grid(choice.dlat, choice.dlon), self._grids[self.reference.name])
            return grid, f"global regular {choice.dlat:g}° x {choice.dlon:g}° grid"
        name = choice.source or self.reference.name
        if name not in self._grids or name not in self._sources:
            raise InputError(f"the target grid '{name}' is not a source of this comparison", remedy="use --target-grid reference or a spacing such as 2.5x2.5")
        grid = self._grids[name]
        kind = grid.attrs["grid_kind"]
        if kind == "regular":
            return grid, f"grid of '{name}' (regular {grid.sizes['lat']}x{grid.sizes['lon']})"
        near, spacing = regular_near(grid)
        dlat = float(near["lat_bnds"].values[0, 1] - near["lat_bnds"].values[0, 0])
        text = (
            f"regular {dlat:g}° x {dlat:g}° grid ({near.sizes['lat']}x{near.sizes['lon']}, "
            f"{float(near['lat_bnds'].values.min()):g}° to {float(near['lat_bnds'].values.max()):g}° N, "
            f"{float(near['lon_bnds'].values.min()):g}° to {float(near['lon_bnds'].values.max()):g}° E) "
            f"close to the mean spacing ({spacing:.3g}°) of '{name}', whose {kind} grid is not regular"
        )
        return near, text

    def _to_target(self, da: xr.DataArray, name: str) -> xr.DataArray:
        grid = self._target_grid
        if same_grid(da, grid):
            out = da.assign_coords(cell_area=grid["cell_area"])
        else:
            out = regrid(da, grid, method=self.regrid_method, source_grid=self._grids[name])  # type: ignore[arg-type]
        return out.transpose(..., "lat", "lon")

    def _reference_land(self) -> xr.DataArray | None:
        """The reference files' own land fraction on the target grid, if they hold one."""
        land = self._land.get(self.reference.name)
        if land is None:
            return None
        with self._lock:
            if not self._land_read:
                land = self._land[self.reference.name] = _land_from(land.to_dataset(name="sftlf"))
                self._land_read = True
            land = self._land[self.reference.name]
        if same_grid(land, self._target_grid):
            return land
        method = "conservative" if self._grids[self.reference.name].attrs["grid_kind"] != "unstructured" else "nearest"
        key = f"on-target-{method}"
        if key not in self._land:
            out = regrid(land, self._target_grid, method=method, source_grid=self._grids[self.reference.name])
            self._land[key] = out.fillna(0.0).clip(0.0, 1.0).drop_vars(["cell_area"], errors="ignore")
        return self._land[key]

    def season_series(self, name: str, season: str) -> xr.DataArray:
        """Yearly season means ``(year, lat, lon)`` of one source on the target grid."""
        prep = self._check_name(name)
        season = parse_season(season)
        if season not in prep.seasons:
            self.prepare([season])
        if season not in prep.seasons:
            reason = self._omitted(name, season) or f"no {season} values"
            raise InputError(f"'{name}' has no {season} values: {reason}", file=prep.files, remedy="choose another season")
        return prep.seasons[season]

    # ------------------------------------------------------------------ masks and weights
    def _pair(self, name: str, season: str, against: str | None = None) -> tuple[xr.DataArray, xr.DataArray, xr.DataArray]:
        """Climatologies of a run and the reference (or ``against``, another reference) over
        their common label years, and their common validity mask."""
        run_series, ref_series = self._aligned(name, season, against)
        model = climatology(run_series)
        ref = climatology(ref_series)
        mask = model.notnull() & ref.notnull()
        return model, ref, mask

    def _aligned(self, name: str, season: str, against: str | None = None) -> tuple[xr.DataArray, xr.DataArray]:
        """Yearly season means of a run and the reference (or ``against``) on the label years both have.

        A season complete in one source only (DJF of the period's first year when the
        other source starts in January) must enter neither, else the two cover
        different years and a trend shows up as bias.
        """
        against = against or self.reference.name
        run_series = self.season_series(name, season)
        ref_series = self.season_series(against, season)
        if self._prepared[against].kind == "climatology":
            # the reference has no years: its climatology stands beside each of the run's years
            ref_series = ref_series.isel(year=0, drop=True).expand_dims(year=run_series["year"].values).transpose(*run_series.dims)
            return run_series, ref_series
        years = np.intersect1d(run_series["year"].values, ref_series["year"].values)

        def on_years(series: xr.DataArray) -> xr.DataArray:
            # the same years already (the usual case): the series itself, not a copy of it
            return series if np.array_equal(series["year"].values, years) else series.sel(year=years)

        return on_years(run_series), on_years(ref_series)

    def _weights(self, region: str, mask: xr.DataArray) -> xr.DataArray:
        grid = self._target_grid
        land = self._reference_land() if parse_region(region).surface else None
        frac = region_weights(region, grid, land=land)
        return grid["cell_area"] * frac * mask

    # ------------------------------------------------------------------ fields
    def _attrs(self, what: str, season: str) -> dict:
        return {"units": self.units, "long_name": f"{self.long_name} — {what}", "season": season, "period": str(self.period), "variable": self.variable,
                **({"level": self.level} if self.level else {})}

    def climatology(self, name: str, season: str) -> xr.DataArray:
        """Climatological mean ``(lat, lon)`` over the period; a run is masked with the reference."""
        if name == self.reference.name:
            out = climatology(self.season_series(name, season))
        else:
            model, _, mask = self._pair(name, season)
            out = model.where(mask)
        out.attrs = self._attrs(f"{name} mean", season)
        out.name = self.variable
        return out

    def difference(self, name: str, season: str) -> xr.DataArray:
        """Run minus reference climatology on the common mask (the bias map)."""
        model, ref, mask = self._pair(name, season)
        out = (model - ref).where(mask)
        out.attrs = self._attrs(f"{name} minus {self.reference.name}", season)
        out.name = f"{self.variable}_difference"
        return out

    def trend_map(self, name: str, season: str) -> xr.DataArray:
        """Per-cell OLS trend of the yearly season means, per decade."""
        from .trends import trend_field

        if name == self.reference.name:
            out = trend_field(self.season_series(name, season), dim="year") * 10.0
        else:
            out = trend_field(self._aligned(name, season)[0], dim="year") * 10.0
            out = out.where(self._pair(name, season)[2])
        out.attrs = {**self._attrs(f"{name} trend", season), "units": trend_units(self.units)}
        out.name = f"{self.variable}_trend"
        return out

    def trend_difference(self, name: str, season: str) -> xr.DataArray:
        """Run trend minus reference trend over their common years, per decade, on the common mask."""
        from .trends import trend_field

        if self._prepared[self.reference.name].kind == "climatology":
            raise InputError(
                f"the reference '{self.reference.name}' is a climatology: it has no years, so no trend to subtract",
                remedy="look at the run's own trend map, or choose a reference with years",
            )
        run_series, ref_series = self._aligned(name, season)
        out = (trend_field(run_series, dim="year") - trend_field(ref_series, dim="year")) * 10.0
        out = out.where(self._pair(name, season)[2])
        out.attrs = {**self._attrs(f"{name} trend minus {self.reference.name} trend", season), "units": trend_units(self.units)}
        out.name = f"{self.variable}_trend_difference"
        return out

    def difference_significance(self, name: str, season: str, *, region: str = "global", adjust: bool = True,
                                level: float | None = None) -> xr.Dataset:
        """Where the bias map stands out from interannual variability (:mod:`evaluation.significance`).

        Returns
        -------
        Dataset
            ``difference``, ``t``, ``dof``, ``pvalue``, ``n_eff_a`` (run), ``n_eff_b``
            (reference) on the target grid and ``significant`` (Benjamini–Hochberg at
            ``level``, default :data:`evaluation.significance.FDR_LEVEL`); attributes
            ``fdr_level``, ``p_threshold`` and ``significant_area`` (area fraction of the
            tested cells of ``region``).

        Notes
        -----
        The yearly season means of the label years both have, on the common mask.  The
        false discovery rate is controlled over the cells of ``region``; cells outside it,
        masked or untestable (NaN p-value) are never significant.
        """
        from .significance import FDR_LEVEL, difference_test, fdr_significant, significant_area_fraction

        if self._prepared[self.reference.name].kind == "climatology":
            raise InputError(
                f"the reference '{self.reference.name}' is a climatology: it has no years to test a difference against",
                remedy="choose a reference with years",
            )
        level = FDR_LEVEL if level is None else level
        run_series, ref_series = self._aligned(name, season)
        mask = self._pair(name, season)[2]
        weights = self._weights(region, mask)
        out = difference_test(run_series, ref_series, dim="year", adjust=adjust).where(weights > 0)
        significant, threshold = fdr_significant(out["pvalue"], level=level)
        out["significant"] = significant
        out.attrs.update(
            fdr_level=level,
            p_threshold=threshold,
            significant_area=significant_area_fraction(significant, weights, tested=out["pvalue"].notnull()),
            region=parse_region(region).id,
            **self._attrs(f"{name} minus {self.reference.name}: significance", season),
        )
        return out

    def trend_significance(self, name: str, season: str, *, level: float | None = None) -> xr.Dataset:
        """Where the trend map of a source stands out from interannual variability.

        Returns
        -------
        Dataset
            ``slope`` (per year), ``pvalue``, ``n_eff`` (:func:`evaluation.significance.trend_test`,
            Santer et al. 2000) on the cells of :meth:`trend_map`, and ``significant``
            (Benjamini–Hochberg at ``level``, default
            :data:`evaluation.significance.FDR_LEVEL`, over every tested cell of the map);
            attributes ``fdr_level`` and ``p_threshold``.
        """
        from .significance import FDR_LEVEL, fdr_significant, trend_test

        level = FDR_LEVEL if level is None else level
        if name == self.reference.name:
            series = self.season_series(name, season)
            mask = climatology(series).notnull()
        else:
            series, mask = self._aligned(name, season)[0], self._pair(name, season)[2]
        out = trend_test(series, dim="year").where(mask)
        significant, threshold = fdr_significant(out["pvalue"], level=level)
        out["significant"] = significant
        out.attrs.update(fdr_level=level, p_threshold=threshold, **self._attrs(f"{name} trend: significance", season))
        return out

    def trend_difference_significance(self, name: str, season: str, *, level: float | None = None) -> xr.Dataset:
        """Where a run's trend minus the reference's stands out from interannual variability.

        Returns
        -------
        Dataset
            ``difference`` (per year), ``t``, ``dof``, ``pvalue``, ``n_eff_a`` (run),
            ``n_eff_b`` (reference) (:func:`evaluation.significance.trend_difference_test`)
            on the cells of :meth:`trend_difference`, and ``significant``
            (Benjamini–Hochberg at ``level``, default
            :data:`evaluation.significance.FDR_LEVEL`, over every tested cell of the map);
            attributes ``fdr_level`` and ``p_threshold``.
        """
        from .significance import FDR_LEVEL, fdr_significant, trend_difference_test

        if self._prepared[self.reference.name].kind == "climatology":
            raise InputError(
                f"the reference '{self.reference.name}' is a climatology: it has no years, so no trend to compare with",
                remedy="look at the run's own trend map, or choose a reference with years",
            )
        level = FDR_LEVEL if level is None else level
        run_series, ref_series = self._aligned(name, season)
        out = trend_difference_test(run_series, ref_series, dim="year").where(self._pair(name, season)[2])
        significant, threshold = fdr_significant(out["pvalue"], level=level)
        out["significant"] = significant
        out.attrs.update(fdr_level=level, p_threshold=threshold,
                         **self._attrs(f"{name} trend minus {self.reference.name} trend: significance", season))
        return out

    def significance_mask(self, name: str, season: str, *, of: str = "difference") -> xr.DataArray:
        """The stippling of a map as a CF flag variable (:func:`evaluation.significance.significance_flags`).

        ``of`` is ``"difference"`` (the bias map: :meth:`difference_significance` over the
        whole map), ``"trend_map"`` (:meth:`trend_significance`) or ``"trend_difference"``
        (:meth:`trend_difference_significance`).  Against a reference without years
        nothing is tested (the trend difference is refused, as :meth:`trend_difference` is).
        """
        from .significance import FDR_LEVEL, significance_flags

        if of == "difference":
            if self._prepared[self.reference.name].kind == "climatology":
                field = self.difference(name, season)
                return significance_flags(field.notnull() & False, field.notnull() & False, name=f"{self.variable}_difference_significance",
                                          long_name="not tested: the reference has no years", level=FDR_LEVEL, threshold=0.0, test="none")
            ds = self.difference_significance(name, season)
            what, test, target = "difference", ds.attrs["test"], f"{self.variable}_difference"
        elif of == "trend_map":
            ds = self.trend_significance(name, season)
            what, test, target = "trend", ds.attrs["test"], f"{self.variable}_trend"
        elif of == "trend_difference":
            ds = self.trend_difference_significance(name, season)
            what, test, target = "trend difference", ds.attrs["test"], f"{self.variable}_trend_difference"
        else:
            raise ValueError(f"no significance for maps of kind {of!r}")
        out = significance_flags(ds["significant"], ds["pvalue"].notnull(), name=f"{target}_significance",
                                 long_name=f"significance of the {what} at each cell", level=float(ds.attrs["fdr_level"]),
                                 threshold=float(ds.attrs["p_threshold"]), test=test)
        out.attrs.update(season=season, period=str(self.period))
        return out

    def zonal_mean(self, name: str, season: str) -> xr.DataArray:
        """Zonal mean ``(lat)`` of the climatology (run masked with the reference)."""
        out = zonal_mean(self.climatology(name, season))
        out.attrs = self._attrs(f"{name} zonal mean", season)
        return out

    # ------------------------------------------------------------------ vertical sections
    @property
    def has_levels(self) -> bool:
        """Whether the reference holds the variable on several levels (a section can be drawn)."""
        return self.reference.name in self._columns

    def _column_climatology(self, name: str, season: str) -> xr.DataArray:
        """Climatology ``(level, lat, lon)`` of every level of one source on the target grid."""
        if (name, season) in self._sections:
            return self._sections[(name, season)]
        column = self._columns.get(name)
        if column is None:
            raise InputError(
                f"'{name}' holds '{self.variable}' on a single level; a vertical section needs several",
                file=self._prepared[name].files,
                remedy="choose a variable stored on pressure, height or depth levels",
            )
        if column[LEVEL_DIM].attrs.get("level_kind") == "model":
            raise InputError(
                f"'{name}' holds '{self.variable}' on model levels; a vertical section needs fixed pressure, height or depth levels",
                file=self._prepared[name].files,
                remedy="give the variable on pressure levels for the section (scores at one --level work)",
            )
        key = self._cache_key(name, f"levels-{season}")
        means = self._cache.get(key) if self._cache else None
        if means is None:
            means = season_means(convert(column, self.units, source=name), season, self.period).compute()
            if self._cache is not None:
                self._cache.put(key, means)
        if means.sizes.get("year", 0) == 0:
            raise InputError(f"no complete {season} season within {self.period}", file=name, remedy="choose a longer period or another season")
        out = climatology(self._to_target(means, name))
        self._sections[(name, season)] = out
        return out

    def zonal_section(self, name: str, season: str) -> xr.Dataset:
        """Zonal-mean section ``(level, lat)`` of a run and the reference, and its scores.

        Returns
        -------
        Dataset
            ``run``, ``reference`` and ``difference`` (run minus reference) on the
            reference's levels and the target grid's latitudes, ``weight`` (Δp × Δ sin φ,
            :func:`evaluation.levels.section_weights`); attributes ``bias`` and ``rmse``
            (:func:`evaluation.levels.section_scores`), ``units``, ``level_kind``.

        Notes
        -----
        Every level of each source is reduced to its season climatology on its own grid,
        remapped onto the target grid, then brought onto the reference's levels (linear in
        ln p, or in height/depth).  The vertical interpolation is a weighted sum of two
        levels with fixed weights, linear in the data, so doing it after the time mean
        gives the same numbers as before it, NaN included.  Levels of the reference
        outside a run's levels are NaN (no extrapolation).  Cells missing in either
        source (below the surface, outside the levels) are left out of both zonal means.
        """
        self._check_name(name)
        season = parse_season(season)
        with self._lock:
            ref = self._column_climatology(self.reference.name, season)
            run = ref if name == self.reference.name else self._column_climatology(name, season)
        if run is not ref:
            run = interpolate_levels(run, ref[LEVEL_DIM].values, units=str(ref[LEVEL_DIM].attrs["units"]))
        mask = run.notnull() & ref.notnull()
        zonal_ref, zonal_run = zonal_mean(ref.where(mask)), zonal_mean(run.where(mask))
        grid = self._target_grid
        if "lat_bnds" in grid.coords:
            lat_bnds = grid["lat_bnds"].values
        else:
            from .grid import infer_bounds

            lat_bnds = infer_bounds(grid["lat"].values, kind="lat")
        weight = section_weights(zonal_ref, lat_bnds)
        scores = section_scores(zonal_run, zonal_ref, weight)
        out = xr.Dataset(
            {"run": zonal_run, "reference": zonal_ref, "difference": zonal_run - zonal_ref, "weight": weight},
        ).transpose(LEVEL_DIM, "lat")
        for var in ("run", "reference", "difference"):
            out[var].attrs = {"units": self.units}
        out.attrs = {
            **self._attrs(f"{name} zonal-mean section", season),
            "source": name,
            "level_kind": str(ref[LEVEL_DIM].attrs.get("level_kind", "")),
            "bias": scores["bias"],
            "rmse": scores["rmse"],
        }
        return out

    def _region_mask(self, name: str, season: str) -> xr.DataArray:
        if name == self.reference.name:
            return climatology(self.season_series(name, season)).notnull()
        return self._pair(name, season)[2]

    def regional_series(self, name: str, region: str, season: str) -> xr.DataArray:
        """Area-weighted regional mean of the yearly season means ``(year)``."""
        mask = self._region_mask(name, season)
        w = self._weights(region, mask)
        series = self.season_series(name, season)
        if self._prepared[name].kind == "climatology":
            # no years of its own: the climatology drawn level across the period
            series = series.isel(year=0, drop=True).expand_dims(year=self.period.years)
        out = weighted_mean(series, w)
        out.attrs = {**self._attrs(f"{name} {parse_region(region).label} mean", season), "region": parse_region(region).id}
        return out

    def seasonal_cycle(self, name: str, region: str) -> xr.DataArray:
        """Monthly climatology of the regional mean ``(month)``."""
        prep = self._check_name(name)
        if prep.cycle is None:
            self.prepare([], cycle=True)
        if prep.cycle is None:
            raise InputError(f"'{name}' holds annual means: it has no seasonal cycle", file=prep.files, remedy="give monthly or daily data for a seasonal cycle")
        mask = prep.cycle.notnull().all("month") & self._region_mask(name, "ANN")
        out = weighted_mean(prep.cycle, self._weights(region, mask))
        out.attrs = {**self._attrs(f"{name} monthly climatology", "ANN"), "region": parse_region(region).id}
        return out

    # ------------------------------------------------------------------ scores
    def _arrays(self, name: str, season: str, against: str | None = None, shared: dict | None = None
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Plain arrays of one run against the reference (or ``against``) for one season.

        ``years``, the run's and the reference's yearly means ``(year, cell)`` with
        masked cells set to 0, both climatologies ``(cell)`` and the common mask.  The
        score loop runs on these with matrix products instead of labelled arrays: it
        visits every region with the same arrays.  ``shared`` keeps the reference's
        array and climatology for the next run over the same years (one season, one
        reference).
        """
        run_s, ref_s = self._aligned(name, season, against)
        years = run_s["year"].values.astype("float64")
        m = np.asarray(run_s.transpose("year", "lat", "lon").values, dtype="float64").reshape(years.size, -1)
        key = ("reference", years.tobytes())
        if shared is None or key not in shared:
            r = np.asarray(ref_s.transpose("year", "lat", "lon").values, dtype="float64").reshape(years.size, -1)
            if shared is not None:
                shared[key] = (r, r.mean(axis=0))
        r, clim_r = shared[key] if shared is not None else (r, r.mean(axis=0))
        clim_m = m.mean(axis=0)  # NaN in any year gives NaN, as climatology()
        mask = np.isfinite(clim_m) & np.isfinite(clim_r)
        if mask.all():
            # nothing to set to 0: read-only views of the arrays as they are (the reference's serves every run)
            m, r = m.view(), r.view()
            m.flags.writeable = r.flags.writeable = False
            return years, m, r, clim_m, clim_r, mask
        return years, np.where(mask, m, 0.0), np.where(mask, r, 0.0), clim_m, clim_r, mask

    def _score_runs(self, scored: list[Source], season: str, against: str, regions: list[str], area: np.ndarray,
                    fraction: dict[str, np.ndarray], moments: dict | None = None) -> dict[str, dict[str, dict[str, float]]]:
        """Every metric but ``rel_error`` and the bootstrap intervals of each run against one
        reference: region -> run -> metric -> value.

        A run without a season in years the reference has is removed from ``scored`` and
        recorded as an omission.  ``moments`` (region -> run) collects what the bootstrap
        of :func:`evaluation.bootstrap.difference_intervals` needs; the regions whose
        fraction of each cell depends on its latitude only (the whole map, latitude bands)
        share one pass over the cells (:func:`evaluation.bootstrap.row_grams`).
        """
        from .bootstrap import banded_error_moments, error_moments, row_grams
        from .trends import detrend, ols_trend

        values: dict[str, dict[str, dict[str, float]]] = {r: {} for r in regions}
        shared: dict = {}  # the reference's arrays and moments, made once for every run
        rows = self._target_grid.sizes["lat"]
        by_row = {}  # region -> its fraction of the cells of each latitude row, when that is all it depends on
        for region in regions:
            f = fraction[region].reshape(rows, -1)
            if f.shape[1] > 1 and (f == f[:, :1]).all():
                by_row[region] = f[:, 0]
        for m in list(scored):
            years, ms_all, rs_all, clim_m, clim_r, mask = self._arrays(m.name, season, against, shared)
            if years.size == 0:
                # against an alternative reference the omission names the pair, so the run keeps its primary rows
                who = m.name if against == self.reference.name else f"{m.name} against {against}"
                self._omit(who, season, f"no {season} season in years the reference '{against}' also has")
                scored.remove(m)
                continue
            significant, tested = self._significant_cells(ms_all, years, mask, against, shared)
            difference = ms_all - rs_all if moments is not None else None  # once for every region
            grams = row_grams(difference, area * mask, rows) if moments is not None and len(by_row) > 1 else None
            for region in regions:
                w = area * fraction[region] * mask
                stats = pattern_stats(clim_m, clim_r, w, where=f"{m.name}, {region}, {season}")
                ms = ms_all @ w / w.sum()
                # the reference's regional means: the same for every run that misses no cell
                key = ("reference mean", region, years.tobytes()) if mask.all() else None
                rs = shared.get(key) if key else None
                if rs is None:
                    rs = rs_all @ w / w.sum()
                    if key:
                        shared[key] = rs
                t_m, t_r = ols_trend(ms, years), ols_trend(rs, years)
                sd_m = float(np.nanstd(detrend(ms, years), ddof=1)) if years.size > 2 else float("nan")
                sd_r = float(np.nanstd(detrend(rs, years), ddof=1)) if years.size > 2 else float("nan")
                stats.update(
                    trend=t_m.slope * 10.0,
                    ref_trend=t_r.slope * 10.0,
                    trend_pvalue=t_m.pvalue,
                    ref_trend_pvalue=t_r.pvalue,
                    iav_ratio=sd_m / sd_r if sd_r > 0 else float("nan"),
                )
                if self._prepared[against].kind == "climatology":
                    # these need the reference's own years, which a climatology does not have
                    stats.update(ref_trend=float("nan"), ref_trend_pvalue=float("nan"), iav_ratio=float("nan"))
                tested_w = w * tested
                stats["bias_signif_area"] = float((tested_w * significant).sum() / tested_w.sum()) if tested_w.sum() > 0 else float("nan")
                if moments is not None:
                    moments.setdefault(region, {})[m.name] = (
                        banded_error_moments(grams, by_row[region], difference, w, years) if grams is not None and region in by_row
                        else error_moments(difference, w, years))
                values[region][m.name] = stats
            del ms_all, rs_all, difference, grams
        return values

    def _significant_cells(self, ms_all: np.ndarray, years: np.ndarray, mask: np.ndarray, against: str, shared: dict
                           ) -> tuple[np.ndarray, np.ndarray]:
        """Cells ``(cell)`` where the run's climatology differs significantly from the reference's,
        and the cells tested: the test and the false-discovery control over the whole map of
        :meth:`difference_significance` (none against a reference without years).

        The test of a cell uses that cell's years only, so the reference's moments over
        all its cells (from ``shared``, made by :meth:`_arrays`) serve every run, and the
        run's masked cells (0 in ``ms_all``) are left untested afterwards: the numbers are
        those of :func:`evaluation.significance.difference_test` on the masked maps.
        """
        from .significance import FDR_LEVEL, difference_statistics, fdr_significant, sample_moments

        if self._prepared[against].kind == "climatology":
            return np.zeros(mask.shape, dtype=bool), np.zeros(mask.shape, dtype=bool)
        key = ("reference moments", years.tobytes())
        if key not in shared:
            shared[key] = sample_moments(shared[("reference", years.tobytes())][0])
        # p-values that cannot pass the false-discovery control are not computed (see only_below)
        pvalue = difference_statistics(sample_moments(ms_all), shared[key], only_below=FDR_LEVEL)[3]
        pvalue = np.where(mask, pvalue, np.nan)
        return fdr_significant(pvalue)[0], np.isfinite(pvalue)

    def scores(self, *, regions: Sequence[str] = ("global",), seasons: Sequence[str] = ("ANN",)) -> pd.DataFrame:
        """The tidy score table (columns :data:`TIDY_COLUMNS`, metrics in registry order).

        Notes
        -----
        Spatial statistics use the climatologies over the label years both sources
        have; regional-mean series, trends and interannual variability use the same
        years and the same common mask.

        With alternative references, every run is scored against each reference (the
        ``reference`` column says which), then each alternative reference against the
        primary as if it were a run.  All references share the period, the target grid
        and the region weights (land and ocean from the primary's land fraction), so a
        run's rows against reference B equal a request with B alone on that grid, period
        and land fraction.  ``rel_error`` is relative to the median RMSE of the runs
        (never of the references) against the same reference.

        ``rmse_diff_lo``/``_hi`` and ``abs_bias_diff_lo``/``_hi`` are moving-block bootstrap
        intervals against the best other run (:func:`evaluation.bootstrap.difference_intervals`),
        among the runs only (NaN for an alternative reference's rows and with one run);
        ``bias_signif_area`` is the area fraction of the region's tested cells stippled on
        the bias map (:meth:`difference_significance`, FDR over the whole map).
        """
        from .bootstrap import INTERVAL_METRICS, difference_intervals
        from .ensembles import mean_name

        seasons = [parse_season(s) for s in seasons]
        regions = [parse_region(r).id for r in regions]
        held = self._held(seasons)
        lean = len(held) < len(seasons)
        _import_while_reading()
        self.prepare(seasons, keep=held)
        grid = self._target_grid
        area = grid["cell_area"].values.ravel()
        land = self._reference_land() if any(parse_region(r).surface for r in regions) else None
        fraction = {r: region_weights(r, grid, land=land).values.ravel() for r in regions}
        rows = []
        primary = self.reference.name
        means = {mean_name(e.name) for e in self.ensembles}
        for season in seasons:
            for against in [primary, *(a.name for a in self.alternatives)]:
                # against the primary, each alternative reference is scored as if it were a run
                scored = [*self.models, *(self.alternatives if against == primary else [])]
                scored = [m for m in scored if self._omitted(m.name, season, against) is None]
                moments: dict = {}
                values = self._score_runs(scored, season, against, regions, area, fraction, moments)
                for region in regions:
                    # like against like: an ensemble mean averages its members' weather away, so it
                    # would beat any single run; means compete with means, single runs with single runs
                    intervals: dict = {}
                    for kind in (False, True):
                        intervals.update(difference_intervals({
                            m.name: moments[region][m.name] for m in self.models
                            if (m.name in means) == kind and m.name in moments.get(region, {})
                        }))
                    for name in values[region]:
                        values[region][name].update({k: float(intervals.get(name, {}).get(k, np.nan)) for k in INTERVAL_METRICS})
                    # the median of the runs only: an alternative reference does not move the runs' relative errors
                    runs_rmse = {k: v["rmse"] for k, v in values[region].items() if k in {m.name for m in self.models}}
                    rel = relative_errors(runs_rmse)
                    finite = [v for v in runs_rmse.values() if np.isfinite(v)]
                    median = float(np.median(finite)) if finite else float("nan")
                    for m in scored:
                        if m.name not in values[region]:
                            continue
                        rmse = values[region][m.name]["rmse"]
                        # an alternative reference: its RMSE against the primary relative to the runs' median
                        values[region][m.name]["rel_error"] = rel[m.name] if m.name in rel else (rmse - median) / median if median else float("nan")
                        for key, metric in METRICS.items():
                            rows.append(
                                (m.name, against, self.variable, self.level, region, season, str(self.period), key,
                                 float(values[region][m.name][key]), metric.units(self.units))
                            )
            if lean:
                for prep in self._prepared.values():
                    prep.seasons.pop(season, None)  # scored: back to the cache only
        if not rows:
            raise InputError(
                "nothing could be scored: " + "; ".join(f"{o['source']} {o['season']}: {o['reason']}" for o in self.omissions),
                file=[f for p in self._prepared.values() for f in p.files],
                remedy="choose seasons and a period every source has",
            )
        table = pd.DataFrame(rows, columns=list(TIDY_COLUMNS))
        if self.ensembles:
            from .ensembles import spread_rows

            # the members' min, max and std of every metric, as rows "<ensemble> (members' min)" ...
            table = pd.concat([table, spread_rows(table, self.ensembles)], ignore_index=True)
        return table

    def provenance(self, *, regions: Sequence[str] = ("global",), seasons: Sequence[str] = ("ANN",)) -> dict:
        """Where the numbers come from, for the exporters."""
        from .export import provenance

        every = [self.reference, *self.alternatives, *self.models]
        surface = any(parse_region(r).surface for r in regions)
        # the files read for this request: the variable's (and a cell-area file), and the
        # primary's land fraction when a land or ocean region is scored; not every file of a source
        srcs = [
            _Expanded(s.name, s.role, tuple(sorted({*self._used[s.name], *(self._land_file if surface and s is self.reference else ())})))
            for s in every
        ]
        renamed = {
            s.name: "; ".join(f"{wanted} read from {stored}" for wanted, stored in s.names_in_files(self.variable).items())
            for s in every
            if s.names_in_files(self.variable)
        }
        record = provenance(
            sources=srcs,
            variable=self.variable,
            period=str(self.period),
            seasons=[parse_season(s) for s in seasons],
            regions={parse_region(r).id: parse_region(r).definition for r in regions},
            regrid=self.regrid_method,
            extra={"reference": self.reference.name, "units": self.units, "level": self.level, "target_grid": self.target_grid_text},
        )
        record["remapping"] = {
            name: "none (on the target grid)" if same_grid(grid, self._target_grid)
            else f"{grid.attrs['grid_kind']} grid: {describe_method(grid.attrs['grid_kind'], self.regrid_method)}"
            for name, grid in self._grids.items() if name in self._prepared
        }
        if surface:
            record["land_fraction"] = (
                f"read from the primary reference '{self.reference.name}'" if self._land_file
                else "the land fraction bundled with gridscore (the primary reference has none), remapped conservatively"
            )
        if renamed:
            record["variable_names"] = renamed  # e.g. {"run-a": "tas read from TS"}
        # the primary first; with several, the rule by which run differences are read against their spread
        record["references"] = [self.reference.name, *(a.name for a in self.alternatives)]
        if self.alternatives:
            from .uncertainty import RULE

            record["observational_uncertainty"] = RULE
        if self.ensembles:
            record["ensembles"] = {e.name: list(e.members) for e in self.ensembles}
        record["significance"] = self._significance_record()
        record["omitted"] = [dict(o) for o in self.omissions]  # rows left out: {source, season, reason}
        if self.notes:
            record["notes"] = list(self.notes)
        return record


    @staticmethod
    def _significance_record() -> dict:
        """How the dots, ``bias_signif_area`` and the bootstrap intervals are made (for the provenance)."""
        from .bootstrap import BEST_RULE, CONFIDENCE, RESAMPLES, SEED
        from .significance import FDR_LEVEL

        return {
            "cell_test": "two-sided t-test of yearly season means with Santer et al. (2000) effective sample sizes",
            "trend_difference_test": "run trend minus reference trend over both slopes' standard errors, each with its Santer et al. "
                                     "(2000) effective sample size, Welch-Satterthwaite degrees of freedom",
            "fdr": f"Benjamini-Hochberg over the tested cells of the map, level {FDR_LEVEL:g} (Wilks 2016)",
            "bootstrap": f"moving-block bootstrap over years (Kuensch 1989), block length of Wilks (1997), {RESAMPLES} draws, "
                         f"seed {SEED}, {CONFIDENCE:.0%} expanded percentile interval (Hesterberg 2015)",
            "best_rule": BEST_RULE,
        }


@dataclass(frozen=True)
class _Expanded:
    name: str
    role: str
    paths: tuple[str, ...]


class _YearlyMeans:
    """Yearly means made block by block (:meth:`Comparison._season_means_in_blocks`) joined
    along ``year`` as :func:`~evaluation.timeaxis.season_means` of the whole series gives
    them, in one array of at most ``years`` years made at the first block: each block's
    small array goes as soon as it is copied in (no list of blocks, then a second copy of
    the whole when joined)."""

    def __init__(self, years: int) -> None:
        self.capacity = years
        self.template: xr.DataArray | None = None  # the first block with years (its coordinates, attributes)
        self.values: np.ndarray | None = None  # years first
        self.years: list[np.ndarray] = []
        self.count = 0

    def add(self, part: xr.DataArray) -> None:
        if self.template is None:
            self.template = part  # also a block without a complete season: the empty result
        n = part.sizes["year"]
        if n == 0:
            return
        if self.values is None:
            self.template = part
            self.values = np.empty((self.capacity, *(size for d, size in part.sizes.items() if d != "year")), dtype=part.dtype)
        self.values[self.count:self.count + n] = np.moveaxis(part.values, part.get_axis_num("year"), 0)
        self.years.append(part["year"].values)
        self.count += n

    def result(self) -> xr.DataArray:
        first = self.template
        assert first is not None
        if self.values is None:
            return first
        values = self.values[:self.count]  # fewer years than room (a season incomplete): a view, not a copy
        values = np.moveaxis(values, 0, first.get_axis_num("year"))
        coords = {k: c for k, c in first.coords.items() if "year" not in c.dims}
        return xr.DataArray(values, dims=first.dims, coords={**coords, "year": np.concatenate(self.years)},
                            name=first.name, attrs=dict(first.attrs))


def _land_from(ds: xr.Dataset) -> xr.DataArray:
    var = ds["sftlf"] if "sftlf" in ds.data_vars else next(ds[v] for v in ds.data_vars if ds[v].attrs.get("standard_name") == "land_area_fraction")
    if "time" in var.dims:
        var = var.isel(time=0, drop=True)
    lf = var.astype("float64").load()
    if str(var.attrs.get("units", "1")).strip() in ("%", "percent"):
        lf = lf / 100.0
    return lf.clip(0.0, 1.0)


#: Modules the scoring rows import after the read (scipy.special: 0.12-0.19 s measured on 2 cores).
_SCORING_MODULES = ("evaluation.trends", "evaluation.significance")


def _import_while_reading() -> None:
    """Import :data:`_SCORING_MODULES` on a thread of their own while the sources are read:
    netCDF-C reads without holding Python's lock, so the imports overlap the read (the
    benchmark request's cold command: 0.935 of its time without, median of 10 interleaved
    rounds at load 1.5-2.4).  An import that fails there is tried again, and reported, where
    the module is used."""
    import sys

    missing = [m for m in _SCORING_MODULES if m not in sys.modules]
    if not missing:
        return

    def run() -> None:
        import importlib

        for name in missing:
            try:
                importlib.import_module(name)
            except Exception:
                return

    # not a daemon: a command refused during the read ends after the import, never inside it
    threading.Thread(target=run, name="gridscore-imports").start()


def score_table(
    *,
    reference: Source,
    models: Sequence[Source],
    variable: str,
    regions: Sequence[str] = ("global",),
    seasons: Sequence[str] = ("ANN",),
    period: Period | str | None = None,
    regrid: str = "conservative",
    level: str | None = None,
    target_grid: str | None = None,
    cache: Cache | None | bool = True,
    alternatives: Sequence[Source] = (),
    ensembles: Sequence = (),
) -> tuple[pd.DataFrame, dict]:
    """The tidy table and its provenance for one request, served whole from the cache when
    the same request on the same files (path, size, modification time) was answered before.

    ``reference`` is the primary reference; ``alternatives`` are further references (every
    run is scored against each, and each against the primary; see :meth:`Comparison.scores`).
    ``ensembles`` (:class:`evaluation.ensembles.Ensemble`) group runs; such a table is not
    kept whole in the cache (its key does not hold the grouping), only the reductions are.
    """
    store = default_cache() if cache is True else (cache or None)
    key = None
    if store is not None and not ensembles:
        key = scores_key(reference=reference, alternatives=alternatives, models=models, variable=variable, regions=regions,
                         seasons=seasons, period=period, regrid=regrid, level=level, target_grid=target_grid)
        hit = store.get_json(key)
        if hit is not None:
            return pd.DataFrame(hit["table"], columns=list(TIDY_COLUMNS)), hit["provenance"]
    cmp = Comparison(reference=reference, models=models, variable=variable, period=period, regrid=regrid, level=level, target_grid=target_grid,
                     cache=store or False, alternatives=alternatives, ensembles=ensembles)
    table = cmp.scores(regions=regions, seasons=seasons)
    prov = cmp.provenance(regions=regions, seasons=seasons)
    if store is not None:
        # the background writes (Cache.put_later) are stored and evicted within the bound when
        # this returns: a caller in this process saw an entry above the bound mid-write
        store.flush()
    if store is not None and key is not None:
        store.put_json(key, {"table": table.to_dict(orient="list"), "provenance": prov})
    return table, prov
