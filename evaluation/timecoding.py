"""Decode the time axes modelling centres write, and bring any frequency to months.

This module turns a raw time coordinate (opened with ``decode_times=False``) into cftime
objects, and refuses what cannot be read exactly with the true reason:

* calendar names in any case; a few non-CF spellings are mapped to their CF names
  (:data:`CALENDAR_SPELLINGS`) with a note;
* ``UNIT since DATE`` with DATE in any ``Y-M-D[ h:m:s]`` form, year 0 where the calendar
  has a year 0, ``months since`` / ``years since`` by calendar-month arithmetic (whole
  numbers only);
* a bare unit (``days``) with the origin in a separate ``time_origin`` attribute;
* CF ``bounds``: the midpoint of each interval is the time of the value (so a monthly
  mean stamped at 00:00 on the 1st of the next month belongs to the month it covers);
* a ``month`` dimension (1…12) or a CF ``climatology`` axis: a 12-month climatology.

After decoding, :func:`frequency` says what the steps are (``sub-monthly``, ``monthly``,
``annual``, ``climatology``) and :func:`to_monthly` turns sub-monthly data into monthly
means lazily (dask graph only, computed in the caller's one pass per source).

Completeness of a month built from sub-monthly steps: a month enters only when its steps
cover it completely, and a cell missing in any step of the month is missing for that
month.  This is stricter than the WMO guidance for monthly values from daily data
(WMO-No. 1203, 2017: a month is missing when more than 10 daily values, or 5 or more
consecutive ones, are missing; value from memory); it matches gridscore's season rule
(no partial means), and missing cells in model output are masks that do not change with
time, where both rules agree.
"""

from __future__ import annotations

import datetime as _dt
import re
from collections.abc import Sequence

import cftime
import numpy as np
import xarray as xr
from xarray.backends import BackendArray
from xarray.core import indexing

from .errors import InputError

__all__ = [
    "CF_CALENDARS",
    "CALENDAR_SPELLINGS",
    "COMPLETENESS_RULE",
    "KIND_ATTR",
    "NOTES_ATTR",
    "canonical",
    "canonical_calendar",
    "find_time",
    "decode",
    "decode_values",
    "frequency",
    "to_monthly",
    "month_climatology_to_time",
    "stamp_notes",
    "steps_per_month",
]

CF_CALENDARS = (
    "standard",
    "gregorian",
    "proleptic_gregorian",
    "noleap",
    "365_day",
    "all_leap",
    "366_day",
    "360_day",
    "julian",
)

#: Non-CF calendar spellings seen in model output -> the CF name they mean (keys lower case).
CALENDAR_SPELLINGS = {
    "365_days": "365_day",  # plural of the CF name
    "366_days": "366_day",  # plural of the CF name
    "360_days": "360_day",  # plural of the CF name
    "360": "360_day",  # the day count alone
    "365": "365_day",  # the day count alone
    "366": "366_day",  # the day count alone
    "no_leap": "noleap",  # underscore inside the CF name
    "no-leap": "noleap",  # hyphen inside the CF name
    "all-leap": "all_leap",  # hyphen for the CF underscore
    "allleap": "all_leap",  # underscore dropped
    "gregorian_proleptic": "proleptic_gregorian",  # words in the other order
    "proleptic-gregorian": "proleptic_gregorian",  # hyphen for the CF underscore
    "mixed": "standard",  # the mixed Julian/Gregorian calendar by its description
}

#: The rule for monthly means built from sub-monthly steps (recorded in the provenance).
COMPLETENESS_RULE = (
    "a month built from sub-monthly steps enters only when its steps cover it completely, and a cell "
    "missing in any step of the month is missing for that month (stricter than WMO-No. 1203 (2017), "
    "which allows up to 10 missing days and fewer than 5 consecutive ones)"
)

#: Attribute on the decoded ``time`` coordinate naming its kind (see :func:`frequency`).
KIND_ATTR = "gridscore_kind"
#: Attribute on the decoded ``time`` coordinate holding decoding notes (calendar spellings), " | "-separated.
NOTES_ATTR = "gridscore_time_notes"
#: Coordinate along ``time`` holding each step's interval length in days (from bounds).
INTERVAL = "time_interval_days"

# Calendars in which year 0 exists for cftime (CF 1.9+: astronomical year numbering in
# proleptic_gregorian; the idealised calendars count from year 0 as well).
_YEAR_ZERO_CALENDARS = {"proleptic_gregorian", "noleap", "365_day", "all_leap", "366_day", "360_day"}

# Time units: spelling -> (cftime unit, or 'months'/'years' for calendar arithmetic).
_UNITS = {
    **dict.fromkeys(("days", "day", "d"), "days"),
    **dict.fromkeys(("hours", "hour", "hrs", "hr", "h"), "hours"),
    **dict.fromkeys(("minutes", "minute", "mins", "min"), "minutes"),
    **dict.fromkeys(("seconds", "second", "secs", "sec", "s"), "seconds"),
    **dict.fromkeys(("months", "month", "mons", "mon"), "months"),
    **dict.fromkeys(("years", "year", "yrs", "yr"), "years"),
}
_SINCE = re.compile(r"^\s*(?P<unit>[A-Za-z]+)\s+since\s+(?P<ref>.+?)\s*$", re.IGNORECASE)
_ISO_REF = re.compile(
    r"^(?P<y>[+-]?\d{1,4})-(?P<m>\d{1,2})-(?P<d>\d{1,2})"
    r"(?:(?:T|\s+)(?P<H>\d{1,2}):(?P<M>\d{1,2})(?::(?P<S>\d{1,2}(?:\.\d*)?))?)?"
    r"\s*(?P<tz>Z|UTC|GMT|[+-]\d{1,2}(?::?\d{2})?)?$",
    re.IGNORECASE,
)
# "1-JAN-1990 00:00:00", "01-JAN-0000:00:00:00" (the separate time_origin attribute)
_MON_REF = re.compile(
    r"^(?P<d>\d{1,2})-(?P<mon>[A-Za-z]{3})-(?P<y>\d{1,4})(?:[\s:]+(?P<H>\d{1,2}):(?P<M>\d{1,2})(?::(?P<S>\d{1,2}(?:\.\d*)?))?)?\s*$"
)
_MONTHS = {m: i + 1 for i, m in enumerate(("jan", "feb", "mar", "apr", "may", "jun", "jul", "aug", "sep", "oct", "nov", "dec"))}


def _text(value) -> str:
    """An attribute as one line of text (attributes are hostile: shown, never interpreted)."""
    return " ".join(str(value).split())


def canonical_calendar(value: str | None, *, file: str | None = None, notes: list[str] | None = None) -> str:
    """The CF calendar name for ``value`` (``None`` -> ``standard``, the CF default).

    Any case is accepted; spellings in :data:`CALENDAR_SPELLINGS` are mapped with a note
    appended to ``notes``.  Anything else raises :class:`InputError`.
    """
    if value is None:
        return "standard"
    key = _text(value).lower()
    if key in CF_CALENDARS:
        return key  # 'gregorian' is kept: CF's deprecated alias of 'standard', which cftime reads alike
    if key in CALENDAR_SPELLINGS:
        name = CALENDAR_SPELLINGS[key]
        if notes is not None:
            notes.append(f"time:calendar '{_text(value)}' is read as the CF calendar '{name}' (write calendar = '{name}')")
        return name
    raise InputError(
        f"unknown calendar '{_text(value)}' in the time variable's calendar attribute",
        file=file,
        remedy=f"set time:calendar to one of {', '.join(CF_CALENDARS)}",
    )


def _looks_like_time(var: xr.Variable) -> bool:
    units = var.attrs.get("units")
    if units is None:
        return False
    text = _text(units).lower()
    if _SINCE.match(text):
        return True
    return text in _UNITS and ("time_origin" in var.attrs or str(var.attrs.get("standard_name", "")).lower() == "time" or str(var.attrs.get("axis", "")).upper() == "T")


def find_time(ds: xr.Dataset) -> str | None:
    """Name of the time coordinate: by CF attributes, or a bare time unit with ``time_origin``."""
    from .io import find_axis

    name = find_axis(ds, "time")
    if name is not None:
        return name
    for n in ds.variables:
        var = ds.variables[n]
        if var.ndim == 1 and var.dims[0] == n and _looks_like_time(var):
            return str(n)
    return None


def _parse_reference(text: str, *, file, calendar: str, attribute: str, unit: str, calendar_given: bool = True) -> tuple[int, int, int, int, int, float]:
    raw = _text(text)
    m = _ISO_REF.match(raw)
    mon = None
    if m is None:
        mon = _MON_REF.match(raw)
        if mon is None or mon.group("mon").lower() not in _MONTHS:
            raise InputError(
                f"cannot read the reference date '{raw}' in {attribute}",
                file=file,
                remedy=f"set time:units to '{unit} since YYYY-MM-DD hh:mm:ss', e.g. '{unit} since 1850-01-01 00:00:00'",
            )
        m = mon
    y = int(m.group("y"))
    month = _MONTHS[m.group("mon").lower()] if mon is not None else int(m.group("m"))
    d = int(m.group("d"))
    H, M = int(m.group("H") or 0), int(m.group("M") or 0)
    S = float(m.group("S") or 0.0)
    tz = None if mon is not None else m.group("tz")
    if tz and tz.upper() not in ("Z", "UTC", "GMT") and re.sub(r"[+\-:0]", "", tz):
        raise InputError(
            f"the reference date '{raw}' carries the time-zone offset {tz}",
            file=file,
            remedy=f"write the reference date in UTC in {attribute}",
        )
    first = "0000-01-01" if calendar in _YEAR_ZERO_CALENDARS else "0001-01-01"
    if month == 0 or d == 0 or month > 12:
        # month 0 / day 0 name no date; udunits-style normalisation would guess which one
        raise InputError(
            f"the reference date '{raw}' in {attribute} is not a date (month {month}, day {d})",
            file=file,
            remedy=f"set time:units to '{unit} since {first}' (or the date the counting really starts from)",
        )
    if y == 0 and calendar not in _YEAR_ZERO_CALENDARS:
        fix = "set time:time_origin to '01-JAN-0001 00:00:00'" if attribute == "time:time_origin" else f"set time:units to '{unit} since 0001-01-01'"
        raise InputError(
            f"the reference date '{raw}' in {attribute} is in year 0, which the '{calendar}' calendar"
            + (" (the CF default: time has no calendar attribute)" if not calendar_given else "")
            + " does not have",
            file=file,
            remedy=f"{fix} with the values counted from that date"
            + ("" if calendar_given else ", or, if the model counted in a calendar with a year 0, add time:calendar naming it (e.g. 'noleap', '360_day' or 'proleptic_gregorian')"),
        )
    try:
        cftime.datetime(y, month, d, calendar=calendar, has_year_zero=calendar in _YEAR_ZERO_CALENDARS)
    except ValueError:
        raise InputError(
            f"the reference date '{raw}' in {attribute} does not exist in the '{calendar}' calendar",
            file=file,
            remedy=f"set time:units to '{unit} since {first}' (or the date the counting really starts from)",
        ) from None
    return y, month, d, H, M, S


def decode_values(
    values: np.ndarray,
    units: str | None,
    calendar: str | None = None,
    *,
    time_origin: str | None = None,
    file: str | None = None,
    notes: list[str] | None = None,
) -> np.ndarray:
    """Numbers of a raw time variable -> cftime objects (object array of the same shape).

    Raises :class:`InputError` with the attribute to change for anything ambiguous.

    Notes
    -----
    Missing values (NaN) in a time variable are refused: a value without a time cannot be
    placed.  An empty array gives an empty object array.
    """
    cal = canonical_calendar(calendar, file=file, notes=notes)
    values = np.asarray(values, dtype="float64")
    if np.isnan(values).any():
        raise InputError("the time variable has missing values", file=file, remedy="give every time step a value (and time:bounds if steps are intervals)")
    units_text = _text(units) if units is not None else ""
    m = _SINCE.match(units_text)
    attribute = "time:units"
    if m is not None:
        unit_word, ref = m.group("unit"), m.group("ref")
    elif units_text.lower() in _UNITS and time_origin is not None:
        unit_word, ref = units_text, _text(time_origin)
        attribute = "time:time_origin"
    elif units_text.lower() in _UNITS:
        same = values.size > 1 and bool(np.all(values == values.flat[0]))
        raise InputError(
            f"time has units '{units_text}' with no reference date (CF time units are 'UNIT since DATE')"
            + (f", and all {values.size} time values are equal" if same else ""),
            file=file,
            remedy=f"set time:units to '{_UNITS[units_text.lower()]} since YYYY-MM-DD', naming the date the values count from "
            f"(e.g. '{_UNITS[units_text.lower()]} since 1990-01-01')" + (", and number the steps 0, 1, 2, …" if same else ""),
        )
    else:
        raise InputError(
            f"time has units '{units_text or 'none'}', which are not CF time units",
            file=file,
            remedy="set time:units to 'UNIT since DATE', e.g. 'days since 1850-01-01'",
        )
    unit = _UNITS.get(unit_word.lower())
    if unit is None:
        raise InputError(
            f"unknown time unit '{_text(unit_word)}' in time:units",
            file=file,
            remedy="use days, hours, minutes, seconds, months or years, e.g. 'days since 1850-01-01'",
        )
    y, mo, d, H, M, S = _parse_reference(ref, file=file, calendar=cal, attribute=attribute, unit=unit, calendar_given=calendar is not None)
    zero = cal in _YEAR_ZERO_CALENDARS
    if unit in ("months", "years"):
        per = 12 if unit == "years" else 1
        whole = np.round(values)
        if values.size and np.max(np.abs(values - whole)) > 1e-6:
            raise InputError(
                f"time in '{units_text}' has fractional values (a fraction of a calendar {unit[:-1]} has no fixed length)",
                file=file,
                remedy=f"give whole {unit} (and time:bounds for intervals), or write the time in days, e.g. 'days since {y:04d}-{mo:02d}-{d:02d}'",
            )
        out = np.empty(values.shape, dtype=object)
        for i, n in np.ndenumerate(whole.astype("int64")):
            k = mo - 1 + int(n) * per
            yy, mm = y + k // 12, k % 12 + 1
            if not zero and yy <= 0:
                yy -= 1  # no year 0: 1 BC precedes AD 1
            try:
                out[i] = cftime.datetime(yy, mm, d, H, M, int(S), calendar=cal, has_year_zero=zero)
            except ValueError:
                raise InputError(
                    f"'{units_text}' from day {d} reaches a month without that day ({yy:04d}-{mm:02d})",
                    file=file,
                    remedy=f"set time:units to '{unit} since {y:04d}-{mo:02d}-01' or write the time in days",
                ) from None
        return out
    seconds = int(S)
    ref_text = f"{y:04d}-{mo:02d}-{d:02d} {H:02d}:{M:02d}:{seconds:02d}"
    try:
        out = cftime.num2date(values, f"{unit} since {ref_text}", calendar=cal, has_year_zero=zero, only_use_cftime_datetimes=True)
    except (ValueError, OverflowError) as exc:
        raise InputError(
            f"cannot decode time '{units_text}' in the '{cal}' calendar ({_text(exc)})",
            file=file,
            remedy="check time:units and the time values",
        ) from None
    if S != seconds:
        out = out + _dt.timedelta(seconds=S - seconds)
    return np.asarray(out, dtype=object).reshape(values.shape)


def _midpoints(lower: np.ndarray, upper: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    span = upper - lower
    mid = np.array([lo + s / 2 for lo, s in zip(lower, span, strict=True)], dtype=object)
    days = np.array([s.total_seconds() / 86400.0 for s in span], dtype="float64")
    return mid, days


def _month_index(dates: Sequence) -> np.ndarray:
    return np.array([t.year * 12 + t.month - 1 for t in dates], dtype="int64")


def _month_span(year: int, month: int, calendar: str) -> tuple[cftime.datetime, cftime.datetime]:
    """00:00 on the 1st of the month and of the month after, in ``calendar``."""
    zero = calendar in _YEAR_ZERO_CALENDARS
    first = cftime.datetime(year, month, 1, calendar=calendar, has_year_zero=zero)
    following = cftime.datetime(year + (month == 12), month % 12 + 1, 1, calendar=calendar, has_year_zero=zero)
    return first, following


def _mid_month(year: int, month: int, calendar: str) -> cftime.datetime:
    first, following = _month_span(year, month, calendar)
    return first + (following - first) / 2


def _month_days(year: int, month: int, calendar: str) -> float:
    first, following = _month_span(year, month, calendar)
    return (following - first).total_seconds() / 86400.0


def _month_coordinate(ds: xr.Dataset) -> str | None:
    """A 1-D coordinate ``month`` holding distinct month numbers 1…12 (a climatology axis)."""
    for name in ds.coords:
        var = ds[name]
        label = _text(var.attrs.get("standard_name", var.attrs.get("long_name", name))).lower()
        if var.ndim == 1 and var.dims[0] == name and (str(name).lower() == "month" or label == "month"):
            values = np.asarray(var.values)
            if np.issubdtype(values.dtype, np.number) and values.size and np.all(values == np.round(values)):
                v = values.astype(int)
                if v.min() >= 1 and v.max() <= 12 and np.unique(v).size == v.size:
                    return str(name)
    return None


def month_climatology_to_time(ds: xr.Dataset, name: str) -> xr.Dataset:
    """A ``month`` dimension (1…12) -> a ``time`` climatology axis in a 365-day year.

    The months carry no calendar; month lengths of the ``noleap`` calendar weight them
    in season means (a 365-day year: February has 28 days).
    """
    months = np.asarray(ds[name].values).astype(int)
    order = np.argsort(months, kind="stable")
    ds = ds.isel({name: order})
    times = np.array([_mid_month(1, int(m), "noleap") for m in months[order]], dtype=object)
    out = ds.drop_vars(name).rename({name: "time"}).assign_coords(time=("time", times))
    out["time"].attrs = {"standard_name": "time", "axis": "T", "calendar": "noleap", KIND_ATTR: "climatology"}
    out["time"].encoding = {"calendar": "noleap"}
    return out


def _climatological_steps(ds: xr.Dataset, name: str, values: np.ndarray) -> bool:
    """At most 12 steps in distinct months of one year, and a variable whose ``cell_methods``
    say climatological statistics (CF 1.10 section 7.4: ``time: mean within years time: mean
    over years``) — a climatology written without climatology bounds."""
    if values.size == 0 or values.size > 12 or len({t.year for t in values}) != 1 or len({t.month for t in values}) != values.size:
        return False
    for v in ds.data_vars:
        var = ds.variables[v]  # not ds[v]: a DataArray gathers every coordinate (slow for thousands of variables)
        methods = _text(var.attrs.get("cell_methods", "")).lower()
        if name in var.dims and ("within years" in methods or "over years" in methods):
            return True
    return False


def decode(ds: xr.Dataset, *, file: str | None = None, notes: list[str] | None = None) -> xr.Dataset:
    """Decode the time coordinate of one raw file (opened with ``decode_times=False``).

    Returns a dataset whose time coordinate holds cftime objects: interval midpoints when
    the coordinate has CF ``bounds`` (or ``climatology`` bounds), else the stamps.  The
    interval lengths in days are kept as the coordinate ``time_interval_days``; the
    bounds variable is dropped.  Datasets without a time axis are returned unchanged
    except for a ``month`` climatology dimension, which becomes a time axis.

    Raises
    ------
    InputError
        Unknown calendar, unreadable or impossible reference date, units without a
        reference date, fractional months, missing time values.
    """
    file = file or ds.encoding.get("source")
    notes = [] if notes is None else notes
    name = find_time(ds)
    if name is None:
        month = _month_coordinate(ds)
        return month_climatology_to_time(ds, month) if month is not None else ds
    t = ds[name]
    attrs = {k: v for k, v in t.attrs.items()}
    calendar_attr = attrs.get("calendar")
    cal = canonical_calendar(calendar_attr, file=file, notes=notes)
    units = attrs.get("units")
    origin = attrs.get("time_origin")
    stamps = decode_values(t.values, units, calendar_attr, time_origin=origin, file=file, notes=notes)
    bname = attrs.get("climatology") or attrs.get("bounds")
    kind = "climatology" if attrs.get("climatology") else None
    values, interval = stamps, None
    drop = []
    if bname and str(bname) in ds.variables:
        b = ds[str(bname)]
        drop.append(str(bname))
        if b.ndim == 2 and b.shape[0] == t.size and b.shape[1] == 2:
            bunits = b.attrs.get("units", units)
            bcal = b.attrs.get("calendar", calendar_attr)
            bounds = decode_values(np.asarray(b.values), bunits, bcal, time_origin=b.attrs.get("time_origin", origin), file=file)
            if kind == "climatology":
                # CF 7.4: the bounds span first-year start to last-year end; the month is the lower bound's
                values = np.array([_mid_month(lo.year, lo.month, cal) for lo in bounds[:, 0]], dtype=object)
                years = f"{bounds[0, 0].year:04d}-{(bounds[0, 1] - _dt.timedelta(seconds=1)).year:04d}"
                attrs["gridscore_climatology_years"] = years
            else:
                values, interval = _midpoints(bounds[:, 0], bounds[:, 1])
                outside = int(sum(1 for t, lo, hi in zip(stamps, bounds[:, 0], bounds[:, 1], strict=True) if t < lo or t > hi))
                if outside:
                    notes.append(f"{outside} of {stamps.size} time stamps lie outside their bounds: the bounds decide which month each value belongs to — check time:bounds")
                if np.any(interval <= 0):
                    raise InputError(
                        f"time bounds '{_text(bname)}' have an interval that does not end after it starts",
                        file=file,
                        remedy="write each time bound as [start, end] with end after start",
                    )
    if kind is None and interval is None and _climatological_steps(ds, name, values):
        kind = "climatology"
    new_attrs = {k: v for k, v in attrs.items() if k not in ("units", "calendar", "bounds", "climatology", "time_origin")}
    new_attrs.update(standard_name="time", axis="T", calendar=cal)
    if kind:
        new_attrs[KIND_ATTR] = kind
    if notes:
        new_attrs[NOTES_ATTR] = " | ".join(dict.fromkeys(notes))  # shown by the scoring as notes
    out = ds.drop_vars(drop).assign_coords({name: (t.dims, values, new_attrs)})
    out[name].encoding = {"calendar": cal, "units": _text(units) if units else None}
    if interval is not None:
        out = out.assign_coords({INTERVAL: (t.dims, interval, {"units": "days", "long_name": "length of the time interval of each step"})})
    return out


def frequency(time: xr.DataArray) -> str:
    """``'climatology'``, ``'annual'``, ``'monthly'`` or ``'sub-monthly'`` for a decoded time axis.

    From the interval lengths when the axis had bounds, else from the steps between
    stamps: less than 27 days is sub-monthly, 27–32 days monthly (any calendar), 359–367
    days annual; a single step or an irregular axis with at most one step per month is
    taken as monthly (months with gaps).

    Notes
    -----
    An empty axis is ``monthly`` (nothing to aggregate).
    """
    kind = time.attrs.get(KIND_ATTR)
    if kind in ("climatology", "annual", "monthly"):
        return str(kind)
    values = time.values
    if values.size == 0:
        return "monthly"
    if INTERVAL in time.coords:
        step = float(np.median(time[INTERVAL].values))
    elif values.size > 1:
        step = float(np.median([(b - a).total_seconds() / 86400.0 for a, b in zip(values[:-1], values[1:], strict=True)]))
    else:
        return "monthly"
    if step < 27.0:
        return "sub-monthly"
    if 359.0 <= step <= 367.0:
        if INTERVAL in time.coords or np.all(np.diff([t.year for t in values]) == 1):
            return "annual"
    return "monthly"


def to_monthly(ds: xr.Dataset, *, file: str | None = None) -> xr.Dataset:
    """Monthly means of sub-monthly data, lazily (a dask graph; nothing is computed).

    Each step is weighted by its interval length (from bounds), or equally without
    bounds.  A month enters only when its steps cover it completely (see the module
    docstring); a cell missing in any step of a month is missing for that month.

    Notes
    -----
    Variables without ``time`` pass through unchanged.  Data with no complete month give
    a time axis of length 0.
    """
    time = ds["time"]
    dates = time.values
    cal = str(time.attrs.get("calendar", getattr(dates[0], "calendar", "standard") if dates.size else "standard"))
    key = _month_index(dates)
    nominal = float(np.median(ds[INTERVAL].values)) if INTERVAL in ds.coords else (
        float(np.median([(b - a).total_seconds() / 86400.0 for a, b in zip(dates[:-1], dates[1:], strict=True)])) if dates.size > 1 else 1.0
    )
    per_day = 1.0 / nominal if nominal > 0 else 0.0
    if nominal > 1.0 + 1e-9 or abs(per_day - round(per_day)) > 1e-6:
        # pentads or weeks straddle month boundaries: no exact monthly mean can be made from them
        raise InputError(
            f"time steps of {nominal:g} days do not divide a day, so they straddle month boundaries",
            file=file or ds.attrs.get("gridscore_files", "").split("\n")[0] or None,
            remedy="give daily or sub-daily steps (whole steps per day), or monthly means",
        )
    if INTERVAL in ds.coords:
        weights = np.asarray(ds[INTERVAL].values, dtype="float64")
        covered = {k: weights[key == k].sum() for k in np.unique(key)}
        complete = {k for k, c in covered.items() if abs(c - _month_days(k // 12, k % 12 + 1, cal)) < 1e-6}
    else:
        weights = np.ones(dates.size)
        step = nominal  # the median step in days, as above
        complete = {k for k in np.unique(key) if int((key == k).sum()) == int(round(_month_days(k // 12, k % 12 + 1, cal) / step))}
    steps = np.flatnonzero(np.isin(key, sorted(complete)))
    months = np.array(sorted(complete), dtype="int64")
    new_time = np.array([_mid_month(int(k // 12), int(k % 12 + 1), cal) for k in months], dtype=object)
    tattrs = {k: v for k, v in time.attrs.items() if k != KIND_ATTR}
    tattrs[KIND_ATTR] = "monthly"
    tattrs["gridscore_from"] = "sub-monthly"
    sub = ds.drop_vars([INTERVAL], errors="ignore").isel(time=steps)
    w = xr.DataArray(weights[steps], dims="time")
    label = xr.DataArray(key[steps], dims="time", name="month_key")
    # each complete month one run of steps in the file, the months in order (months left out
    # between them are skipped), so that values still in the file can be reduced a few months at a time
    first_of = np.r_[0, np.flatnonzero(np.diff(key[steps])) + 1] if steps.size else np.zeros(0, "int64")
    starts = steps[first_of] if steps.size else first_of
    ends = np.r_[steps[first_of[1:] - 1], steps[-1]] + 1 if steps.size else first_of
    runs = steps.size > 0 and bool(np.all(np.diff(key[steps]) >= 0)) and int(np.sum(ends - starts)) == steps.size
    out = {}
    for name, var in sub.data_vars.items():
        if "time" not in var.dims:
            out[name] = var
            continue
        if runs and var.chunks is None and not var.variable._in_memory:
            # opened without dask (evaluation.io.open_source): the means are made when the months are read
            data = MonthlyMeans(ds[name].variable, var.get_axis_num("time"), starts, ends, weights)
            mean = xr.DataArray(xr.Variable(var.dims, indexing.LazilyIndexedArray(data), attrs=dict(var.attrs)),
                                coords={c: v for c, v in var.coords.items() if "time" not in v.dims})
            out[name] = mean.assign_coords(time=("time", new_time, tattrs))
            continue
        if steps.size == 0:  # no complete month: an empty time axis (xarray cannot group nothing)
            empty = var.astype("float64")
            empty.attrs = dict(var.attrs)
            out[name] = empty.drop_vars("time", errors="ignore").assign_coords(time=("time", new_time, tattrs))
            continue
        if var.chunks is None and not var.variable._in_memory:
            # values still in the file in an order MonthlyMeans cannot read month by month: a month of
            # steps a chunk, never every step in float64 at once
            var = var.chunk({"time": max(1, int(round(31 / nominal)))})
        x = var.astype("float64")
        total = (x * w).groupby(label).sum("time", skipna=False)
        norm = w.groupby(label).sum("time")
        mean = (total / norm).rename(month_key="time")
        mean.attrs = dict(var.attrs)
        out[name] = mean.drop_vars("time", errors="ignore").assign_coords(time=("time", new_time, tattrs))
    keep_coords = {c: sub.coords[c] for c in sub.coords if "time" not in sub.coords[c].dims}
    result = xr.Dataset(out, coords={**keep_coords, "time": ("time", new_time, tattrs)}, attrs=dict(ds.attrs))
    result["time"].encoding = dict(time.encoding)
    return result


class MonthlyMeans(BackendArray):
    """Monthly means of sub-monthly values still in the file, made when they are read.

    ``daily`` is the variable as opened without dask (xarray's lazily indexed file array);
    month ``i`` is the weighted mean of its steps ``starts[i] … ends[i] - 1`` along ``axis``
    with ``weights`` (one per step of ``daily``); steps between one month's end and the next
    month's start (an incomplete month) are not used.  Reading a range of
    months reads only their steps, a few months at a time (about ``$GRIDSCORE_CHUNK_MB`` of
    float64 a block), so the memory is the block and the means, never every step: the same
    numbers as :func:`to_monthly`'s dask reduction (``sum(w x) / sum(w)`` in float64, NaN in
    any step giving NaN), without dask's import, task graph and joining of chunks.
    """

    def __init__(self, daily: xr.Variable, axis: int, starts: np.ndarray, ends: np.ndarray, weights: np.ndarray) -> None:
        self.daily, self.axis = daily, axis
        self.starts = np.asarray(starts, dtype="int64")
        self.ends = np.asarray(ends, dtype="int64")
        self.weights = np.asarray(weights, dtype="float64")
        shape = list(daily.shape)
        shape[axis] = self.starts.size
        self.shape, self.dtype = tuple(shape), np.dtype("float64")

    def __getitem__(self, key: indexing.ExplicitIndexer) -> np.ndarray:
        return indexing.explicit_indexing_adapter(key, self.shape, indexing.IndexingSupport.BASIC, self._read)

    def _read(self, key: tuple) -> np.ndarray:
        from .request import chunk_megabytes

        months = np.arange(self.shape[self.axis])[key[self.axis]]
        scalar = months.ndim == 0
        months = np.atleast_1d(months)
        other = tuple(slice(None) if i == self.axis else k for i, k in enumerate(key))
        per_step = 8 * int(np.prod([np.arange(n)[k].size for i, (n, k) in enumerate(zip(self.shape, other, strict=True))
                                    if i != self.axis and isinstance(k, slice)] or [1]))
        block = max(1, int(chunk_megabytes() * 2**20 // max(per_step * 31, 1)))  # months a block
        parts = []
        for i in range(0, months.size, block):
            chosen = months[i:i + block]
            if chosen.size > 1 and not np.all(np.diff(chosen) == 1):
                parts.extend(self._months(np.atleast_1d(m), other) for m in chosen)
                continue
            parts.append(self._months(chosen, other))
        axis = self.axis - sum(isinstance(k, (int, np.integer)) for k in other[:self.axis])
        out = np.concatenate(parts, axis=axis) if parts else np.empty(tuple(np.arange(n)[k].size for n, k in zip(self.shape, key, strict=True)
                                                                             if not isinstance(k, (int, np.integer))))
        return np.take(out, 0, axis=axis) if scalar else out

    def _months(self, months: np.ndarray, other: tuple) -> np.ndarray:
        """The means of consecutive ``months``, read at once."""
        lo, hi = int(self.starts[months[0]]), int(self.ends[months[-1]])
        index = tuple(slice(lo, hi) if i == self.axis else k for i, k in enumerate(other))
        values = np.asarray(self.daily[index].values)
        axis = self.axis - sum(isinstance(k, (int, np.integer)) for k in other[:self.axis])
        w = self.weights[lo:hi].reshape([-1 if i == axis else 1 for i in range(values.ndim)])
        offsets, ends = self.starts[months] - lo, self.ends[months] - lo
        if not np.all(w == 1.0):
            values = values.astype("float64") * w
        # else steps of equal length (one day each; no bounds): w x is x, summed in float64 without a float64 copy.
        # One reduction per month: the same sums, in the same order, as numpy.add.reduceat, about 3x faster
        total = np.stack([np.add.reduce(values[(slice(None),) * axis + (slice(a, b),)], axis=axis, dtype="float64")
                          for a, b in zip(offsets, ends, strict=True)], axis=axis)
        # each month's weights summed in order (numpy.add.reduceat over [start, end] pairs, the steps
        # of a month left out in between skipped); the 0 appended lets the last end be an index
        bounds = np.stack([offsets, ends], axis=1).ravel()
        norm = np.add.reduceat(np.r_[self.weights[lo:hi], 0.0], bounds)[::2].reshape([-1 if i == axis else 1 for i in range(values.ndim)])
        return total / norm


def stamp_notes(ds: xr.Dataset) -> list[str]:
    """Notes on a file's time stamps for the check: one line each, with the remedy.

    Accepts a raw (``decode_times=False``) or a decoded dataset.  Notes: a non-CF
    calendar spelling read as its CF name; monthly stamps all at 00:00 on the 1st of a
    month without time bounds (they may be interval ends: the values would then belong
    to the month before); one value per year without bounds (taken as annual means).
    Decoding problems are not notes: they raise :class:`InputError` when the file is
    opened.

    Notes
    -----
    A dataset without a time axis, or whose time cannot be decoded, gives no notes.
    """
    notes: list[str] = []
    name = find_time(ds)
    if name is None:
        return notes
    t = ds[name]
    bounded = bool(t.attrs.get("bounds") or t.attrs.get("climatology") or t.encoding.get("bounds"))
    try:
        if t.dtype == object:
            dates = t.values
        else:
            dates = decode_values(t.values, t.attrs.get("units"), t.attrs.get("calendar"), time_origin=t.attrs.get("time_origin"), notes=notes)
    except InputError:
        return notes
    if bounded or dates.size < 2:
        return notes
    kind = frequency(xr.DataArray(dates, dims="time"))
    midnight_first = all(d.day == 1 and d.hour == 0 and d.minute == 0 and d.second == 0 for d in dates)
    if midnight_first and kind == "monthly":
        notes.append(
            "every time stamp is at 00:00 on the 1st of a month and time has no bounds: each value is taken as the "
            "month it is stamped in, but such stamps are often interval ends (the mean of the month before) — "
            "add time:bounds = 'time_bnds' holding each step's [start, end] so the month is certain"
        )
    if kind == "annual":
        notes.append(
            "one value per year and time has no bounds: the values are taken as annual means (scored for ANN only) — "
            "add time:bounds holding each year's [start, end] to say so"
        )
    if kind == "monthly":
        months = _month_index(dates)
        gaps = int(np.sum(np.diff(months) - 1))
        if gaps > 0:
            notes.append(
                f"the monthly steps leave {gaps} months out between {dates[0].year:04d}-{dates[0].month:02d} and "
                f"{dates[-1].year:04d}-{dates[-1].month:02d}: a season is scored only in years where all its months are present"
            )
    return notes


def steps_per_month(ds: xr.Dataset) -> float:
    """Estimated time steps per month of a raw dataset (1 for monthly or coarser data).

    Used to size dask chunks; an unreadable time axis counts as monthly.
    """
    name = find_time(ds)
    if name is None or ds.sizes.get(name, 0) < 2:
        return 1.0
    t = ds[name]
    try:
        dates = decode_values(np.asarray(t.values[:50]), t.attrs.get("units"), t.attrs.get("calendar"), time_origin=t.attrs.get("time_origin"))
    except InputError:
        return 1.0
    step = float(np.median([(b - a).total_seconds() / 86400.0 for a, b in zip(dates[:-1], dates[1:], strict=True)]))
    return max(1.0, 30.4375 / step) if step > 0 else 1.0


def canonical(ds: xr.Dataset) -> xr.Dataset:
    """The time part of the canonical form: monthly, annual or climatology steps.

    Sub-monthly data become monthly means (lazily, :func:`to_monthly`); the kind of the
    steps is written to the time coordinate's :data:`KIND_ATTR`.  The interval-length
    coordinate is dropped once it has served.

    Notes
    -----
    A dataset without ``time`` is returned unchanged.
    """
    if "time" not in ds.dims:
        return ds
    kind = frequency(ds["time"])
    if kind == "sub-monthly":
        return to_monthly(ds)
    out = ds.drop_vars(INTERVAL, errors="ignore")
    out["time"].attrs[KIND_ATTR] = kind
    return out
