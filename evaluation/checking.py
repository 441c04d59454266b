"""What a file holds and whether gridscore can score it (the ``gridscore check`` command).

A file *can be scored* when it opens exactly as ``score`` opens it
(:func:`evaluation.io.open_source`, which raises :class:`InputError` for anything it
cannot read exactly) and every time-varying gridded variable in it has units the unit
table reads (:func:`evaluation.units.parse_units`) and that fit its CF standard name.
Anything else that is found is a *note*: harmless, said so that nobody is surprised
(bounds inferred, a default calendar assumed, no ``Conventions`` attribute).

Every text from a file (its name, attribute values) is hostile: :func:`plain` makes it a
single printable line for the terminal; JSON output is escaped by :func:`json.dumps`.
"""

from __future__ import annotations

import calendar
import json
import os
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field

import xarray as xr

from . import grids, io, timecoding
from .errors import InputError
from .names import printable
from .timeaxis import complete_years
from .units import canonical, check_standard_units, parse_units

__all__ = ["FileReport", "check_file", "check_paths", "to_json", "plain"]

# Fixed fields that sit beside a source's time series and are read from there; a file
# holding only these is usable although it has no time axis.
def plain(text: object) -> str:
    """``text`` as one printable line: control and direction characters (escape sequences,
    newlines, U+202E) escaped."""
    return printable(text)


@dataclass
class FileReport:
    """What :func:`check_file` found about one file.

    Attributes
    ----------
    path
        The file as given (absolute once expanded).
    can_score
        True when no problem was found.
    problems
        Why it cannot be scored, one sentence each with the remedy.
    notes
        Harmless findings, one sentence each.
    grid
        ``{"kind", "size", "dims", "cells"}`` or None when no grid was recognised.
    frequency
        ``monthly``, ``annual``, ``climatology``, ``sub-monthly`` or None (no time axis).
    calendar, span
        The CF calendar, and ``{"start": "YYYY-MM", "end": "YYYY-MM", "steps": n}``.
    variables
        One dict per gridded variable: name, units (as written), units_read_as (the
        canonical form, :func:`evaluation.units.canonical`), standard_name, long_name,
        levels, has_time, unplaced (dimensions beside the grid that no coordinate variable
        with units describes: ``{"name", "size", "has_coordinate"}`` each).
    """

    path: str
    can_score: bool = False
    problems: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    grid: dict | None = None
    frequency: str | None = None
    calendar: str | None = None
    span: dict | None = None
    variables: list[dict] = field(default_factory=list)

    def as_dict(self) -> dict:
        """JSON-ready."""
        return asdict(self)

    def lines(self) -> list[str]:
        """The text summary: a first line saying what the file is, then problems and notes.

        Every line starts with the file name, so that ``grep`` finds all about one file.
        """
        what = []
        if self.grid:
            what.append(f"{self.grid['kind']} grid {self.grid['size']}")
        if self.frequency:
            what.append(self.frequency)
        if self.calendar:
            what.append(f"calendar {self.calendar}")
        if self.span:
            steps = self.span["steps"]
            what.append(
                f"{self.span['start']} to {self.span['end']} ({steps} step{'s' if steps != 1 else ''})"
            )
        if self.variables:
            what.append("variables " + ", ".join(_variable_text(v) for v in self.variables))
        verdict = "can be scored" if self.can_score else "cannot be scored"
        path = plain(self.path)
        out = [f"{path}: {verdict}" + (f"; {'; '.join(plain(w) for w in what)}" if what else "")]
        out += [f"{path}: problem: {plain(p)}" for p in self.problems]
        out += [f"{path}: note: {plain(n)}" for n in self.notes]
        return out


def _variable_text(v: dict) -> str:
    text = f"{v['name']} [{v['units'] or 'no units'}]"
    if v.get("levels"):
        text += f" on levels {v['levels']}"
    if v.get("unplaced"):
        text += f" (dimension '{v['unplaced'][0]['name']}' not read as time)"
    elif not v.get("has_time", True):
        text += " (fixed)"
    return text


def check_paths(paths: Sequence[str]) -> list[FileReport]:
    """One report per file that the paths (files or quoted globs) name.

    A path that names no file gets a report of its own with the problem, so that a
    script sees every argument accounted for.
    """
    reports = []
    for given in paths:
        try:
            files = io.expand_paths(given)
        except InputError as err:
            reports.append(FileReport(path=str(given), problems=[_sentence(err)]))
            continue
        reports.extend(check_file(f) for f in files)
    return reports


def check_file(path: str) -> FileReport:
    """Open ``path`` as ``score`` would and report what it is and whether it can be scored.

    Notes
    -----
    Never raises for the file's content: every :class:`InputError` becomes a problem.
    Data values are not read (NaN fields are not detected here); only coordinates,
    attributes and the time axis are.
    """
    report = FileReport(path=str(path))
    try:
        listing = io.variables_in([path])  # a reader failure (random bytes, truncated file) raises here
        report.variables = [_variable_entry(name, meta) for name, meta in listing.items()]
        # the attributes as written (netCDF-C is not thread-safe: io's lock, as every open)
        with io._OPEN_LOCK, xr.open_dataset(path, decode_times=False, decode_cf=False) as raw:
            report.notes += _attribute_notes(raw)
            report.notes += timecoding.stamp_notes(raw)
            desc = grids.describe(raw, where=path)
            report.grid = {
                "kind": desc.kind,
                "size": "x".join(map(str, desc.shape)),
                "dims": list(desc.dims),
                "cells": desc.cells,
            }
            report.variables = [
                v for v in report.variables if v["name"] not in (desc.lat, desc.lon)
            ]  # 2-D coordinates
            # CF flag variables (CF 1.10 section 3.5: flag_values/flag_meanings, no units) are
            # status masks beside a field, such as the stippling of a map download: not scored
            flags = sorted(str(k) for k in raw.data_vars if "flag_meanings" in raw.variables[k].attrs)
            report.variables = [v for v in report.variables if v["name"] not in flags]
            report.notes += [f"variable '{name}' is a CF flag variable (a mask beside the data), not scored" for name in flags]
            report.notes += list(desc.notes)
            if desc.kind == "regular":
                report.notes += _bounds_notes(raw, desc)
            for v in report.variables:
                # a dimension beside the grid that no coordinate variable with units describes (a
                # 'Time' of one step, a time without units): the variable does not read as timed
                v["unplaced"] = [
                    {"name": str(d), "size": int(raw.sizes[d]), "has_coordinate": d in raw.variables}
                    for d in raw.variables[v["name"]].dims
                    if d not in desc.dims and (d not in raw.variables or "units" not in raw.variables[d].attrs)
                ]
        ds = io.open_source([path], source=path)
    except InputError as err:
        report.problems.append(_sentence(err))
        return report
    except (
        Exception
    ) as exc:  # a reader's failure on a file nobody foresaw: one line, and the other files still checked
        if os.environ.get("GRIDSCORE_DEBUG"):
            raise
        text = " ".join(f"{type(exc).__name__}: {exc}".split())[:200]
        report.problems.append(
            f"gridscore could not read this file ({text}) — please report it; GRIDSCORE_DEBUG=1 shows the traceback"
        )
        return report
    _describe_time(ds, report)
    refused = dict(ds.attrs.get(io.REFUSED_ATTR, {}) or {})
    report.problems += [str(why) for why in refused.values()]
    report.variables = [
        _as_opened(v, ds) for v in report.variables if v["name"] in ds.data_vars or v["name"] in refused
    ]
    _check_variables(report, set(refused))
    for name in ds.data_vars:
        if not {"valid_range", "valid_min", "valid_max"} & set(ds.variables[name].attrs):
            continue
        report.notes += io.ignored_limits(str(name), ds.variables[name].attrs)
        try:
            low, high = io.valid_range_of(ds, str(name))  # as applied to the steps (daily packed values too)
        except InputError as err:
            report.problems.append(_sentence(err))
            continue
        if low is not None and high is not None and low > high:
            report.notes.append(f"variable '{name}' has a valid range whose lowest value {low:g} is above its highest {high:g}: "
                                "every value is read as missing (as the netCDF library reads it) — write the range as [lowest, highest]")
        elif low is not None or high is not None:
            shown = f"[{low:g}, {high:g}]" if low is not None and high is not None else (f"below {low:g}" if low is not None else f"above {high:g}")
            report.notes.append(
                f"variable '{name}' has a valid range: values {'outside ' if shown.startswith('[') else ''}{shown} are read as missing (cf-conventions 2.5.1)"
            )
    report.can_score = not report.problems
    return report


def _sentence(err: InputError) -> str:
    """The problem and its remedy, without the file name (the report is per file)."""
    text = err.problem if err.remedy is None else f"{err.problem} — {err.remedy}"
    return " ".join(text.split())


def _variable_entry(name: str, meta: dict) -> dict:
    return {
        "name": name,
        "units": meta.get("units", ""),
        "units_read_as": canonical(meta.get("units", "")) if meta.get("units") else None,
        "standard_name": meta.get("standard_name", ""),
        "long_name": meta.get("long_name", ""),
        "levels": meta.get("levels", ""),
        "has_time": meta.get("has_time") != "False",
    }


def _as_opened(entry: dict, ds: xr.Dataset) -> dict:
    """A listing entry corrected by the opened dataset: time axis and levels as ``score`` sees them
    (a ``month`` climatology dimension has become time; a single level has been squeezed)."""
    if entry["name"] not in ds.data_vars:
        return entry
    da = ds.variables[entry["name"]]  # not ds[name]: a DataArray gathers every coordinate
    levels = ""
    for dim in (d for d in da.dims if str(d).startswith("level")):
        coord = ds.variables[dim]
        levels = f"{', '.join(f'{x:g}' for x in coord.values)} {coord.attrs.get('units', '')}".strip()
    return {**entry, "has_time": "time" in da.dims, "levels": levels, "unplaced": [] if "time" in da.dims else entry.get("unplaced", [])}


SEASON_NOTE = "no complete year of months"


def _describe_time(ds: xr.Dataset, report: FileReport) -> None:
    if "time" not in ds.dims or not ds.sizes["time"]:
        return
    t = ds["time"]
    values = t.values
    report.frequency = timecoding.frequency(t)
    report.calendar = str(getattr(values[0], "calendar", "") or t.encoding.get("calendar", "")) or None
    report.span = {
        "start": f"{values[0].year:04d}-{values[0].month:02d}",
        "end": f"{values[-1].year:04d}-{values[-1].month:02d}",
        "steps": int(values.size),
    }
    if report.frequency == "monthly" and complete_years(t) is None:
        months = sorted({v.month for v in values})
        names = ", ".join(calendar.month_abbr[m].upper() for m in months)
        report.notes.append(
            f"{SEASON_NOTE}: ANN and seasons missing a month cannot be scored; the months present are {names} "
            "(choose those with --season)"
        )


def _check_variables(report: FileReport, refused: set[str]) -> None:
    """Units each variable must have for ``score``; a file of fixed fields only is a note."""
    timed = [v for v in report.variables if v["has_time"]]
    for v in report.variables:
        where = f"variable '{v['name']}'"
        if v["name"] in refused:
            continue  # the opener said why (io.REFUSED_ATTR)
        if not v["units"]:
            if v["has_time"] or v.get("unplaced"):
                report.problems.append(
                    f"{where} has no units attribute — add a CF units attribute (e.g. 'K', 'kg m-2 s-1')"
                )
            continue
        try:
            parse_units(v["units"])
            check_standard_units(v["standard_name"], v["units"])
        except InputError as err:
            report.problems.append(f"{where}: {_sentence(err)}")
        if v["has_time"] and not v["standard_name"]:
            report.notes.append(f"{where} has no standard_name: it is found by its name only")
        if v["levels"]:
            report.notes.append(f"{where} has the levels {v['levels']}: choose one with --level")
    # what `score` refuses in Comparison._open: fixed fields (even with a time step) and untimed variables
    scoreable = [v for v in timed if v["standard_name"] not in io.FIXED_FIELDS]
    names = ", ".join(v["name"] for v in report.variables)
    if not report.variables:
        report.problems.append("no gridded variable — nothing to score")
    elif not scoreable and all(v["standard_name"] in io.FIXED_FIELDS for v in report.variables):
        kinds = ", ".join(sorted({io.FIXED_FIELDS[v["standard_name"]] for v in report.variables}))
        # which seasons the time steps make does not matter for fields that are not scored
        report.notes = [n for n in report.notes if not n.startswith(SEASON_NOTE)]
        report.problems.append(
            f"only fixed fields ({names}: {kinds}), which are not scored on their own — put this file beside a "
            "source's time series (its land fraction is then used for the land and ocean regions)"
        )
    elif not scoreable and any(v.get("unplaced") for v in report.variables):
        for v in (v for v in report.variables if v.get("unplaced")):
            first = v["unplaced"][0]
            dim, size = first["name"], first["size"]
            report.problems.append(
                f"variable '{v['name']}' has a dimension '{dim}' of {size} step{'s' if size != 1 else ''} "
                f"{'whose coordinate variable has no units' if first['has_coordinate'] else 'with no coordinate variable'}, "
                f"so its steps cannot be placed in time — if '{dim}' is time, add a coordinate variable {dim}({dim}) with units "
                "such as 'days since 2000-01-01' and a calendar"
            )
    elif not scoreable:
        report.problems.append(
            f"no variable with a time axis ({names}) — give monthly, annual or climatological time series"
        )


def _attribute_notes(raw: xr.Dataset) -> list[str]:
    notes = []
    if "Conventions" not in raw.attrs:
        notes.append("no global Conventions attribute (add Conventions = 'CF-1.10')")
    name = timecoding.find_time(raw)
    if name is not None and "calendar" not in raw[name].attrs:
        notes.append("time has no calendar attribute: the CF default 'standard' is assumed")
    return notes


def _bounds_notes(raw: xr.Dataset, desc) -> list[str]:
    return [
        f"coordinate '{name}' has no bounds: they are inferred half-way between centres"
        for name in (desc.lat, desc.lon)
        if name in raw.variables and "bounds" not in raw[name].attrs
    ]


def to_json(reports: Sequence[FileReport]) -> str:
    """The reports as a JSON document: ``{"can_score": bool, "files": [...]}``."""
    return json.dumps(
        {"can_score": all(r.can_score for r in reports), "files": [r.as_dict() for r in reports]}, indent=2
    )
