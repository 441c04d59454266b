"""The selection state of one dashboard session and its URL query.

A :class:`Selection` holds what the person picked (variable, reference, model runs,
region, season, period, map field, tab).  Controls write these parameters; after
validation the selection publishes a frozen :class:`Request`, and the views draw only
that, so a half-made choice (a variable whose period is not checked yet) never reaches
the core.

The URL query carries every value, defaults included, under the names ``variable``,
``level`` (``500 hPa``; empty for a variable without levels), ``reference``, ``models``
(comma-separated), ``region``, ``season``, ``period`` (``YYYY-YYYY``), ``field``,
``target_grid`` (``reference``, a source's name or a spacing such as ``2.5x2.5``; the
options are the collection's), ``overview_by`` (what the overview shows besides the
variables: ``variable`` alone, ``season`` or ``region``; see :data:`OVERVIEW_BY`), ``taylor``
(the Taylor diagram's scale: ``normalised`` or ``absolute``; :data:`TAYLOR_SCALES`), ``sort``
(the score table's sort column, a metric key or ``model``, with ``-`` in front for
descending; empty for the collection's order of runs) and ``tab``.  Query values are validated against the options
before they are applied; a bad value falls back to the default and leaves a notice.

This module does not import Panel: the state can be built and tested without a server.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Protocol
from urllib.parse import quote, unquote, unquote_plus

import param

from evaluation.errors import InputError
from evaluation.levels import default_level, parse_level
from evaluation.metrics import METRICS
from evaluation.regions import parse_region
from evaluation.timeaxis import SEASONS, Period, parse_period, parse_season

__all__ = [
    "FIELDS",
    "OVERVIEW_BY",
    "TABS",
    "QUERY_NAMES",
    "SORT_KEYS",
    "TAYLOR_SCALES",
    "parse_sort",
    "Options",
    "Request",
    "Selection",
    "join_models",
    "parse_query",
    "query_string",
    "split_models",
]

#: Map fields: URL value -> label.
FIELDS: dict[str, str] = {
    "model_mean": "Run mean",
    "reference_mean": "Reference mean",
    "difference": "Run minus reference",
    "model_trend": "Run trend",
    "trend_difference": "Run trend minus reference trend",
}

#: Tabs: URL value -> label, in the order the dashboard shows them.
TABS: dict[str, str] = {
    "maps": "Maps",
    "zonal": "Zonal mean",
    "section": "Vertical section",
    "series": "Time series",
    "cycle": "Seasonal cycle",
    "scores": "Scores",
    "taylor": "Taylor diagram",
    "overview": "Overview",
    "budget": "Energy budget",
}

#: The URL query names, in the order they are written.
QUERY_NAMES: tuple[str, ...] = (
    "variable", "level", "reference", "models", "region", "season", "period", "field", "target_grid", "overview_by", "taylor", "sort", "tab",
)

#: The Taylor diagram's scales (URL ``taylor``): value -> label.
TAYLOR_SCALES: dict[str, str] = {
    "normalised": "Normalised: standard deviations divided by the reference's",
    "absolute": "In the variable's units",
}
#: The score table's sort columns (URL ``sort``, ``-`` in front for descending): the run's
#: name (``model``, the tidy table's column) or a metric of the registry.
SORT_KEYS: tuple[str, ...] = ("model", *METRICS)


def parse_sort(text: str) -> tuple[str, bool] | None:
    """``(key, descending)`` of a ``sort`` URL value; ``None`` for the collection's order.

    Raises :class:`InputError` for a key that is not in :data:`SORT_KEYS`.
    """
    value = str(text).strip()
    if not value:
        return None
    descending = value.startswith("-")
    key = value[1:] if descending else value
    if key not in SORT_KEYS:
        raise InputError(f"unknown sort column '{key}'", remedy=f"use one of {', '.join(SORT_KEYS)}, with '-' in front for descending")
    return key, descending

#: The overview's sub-views (URL ``overview_by``): value -> label.  ``variable``: one value per
#: run and variable for the sidebar's region and season; ``season``: every season for the
#: sidebar's region; ``region``: every predefined region for the sidebar's season.
OVERVIEW_BY: dict[str, str] = {"variable": "By variable", "season": "By season", "region": "By region"}


def _one_of(what: str, allowed: Mapping[str, str]) -> Callable[[str], str]:
    """A reader of a URL value that must be one of ``allowed``'s keys."""
    def read(value: str) -> str:
        if value not in allowed:
            raise InputError(f"{what} '{_echo(value)}' is not known ({', '.join(allowed)})", remedy=f"use one of {', '.join(allowed)}")
        return value

    return read


def _sort_text(value: str) -> str:
    parsed = parse_sort(value)
    return "" if parsed is None else ("-" if parsed[1] else "") + parsed[0]


#: URL names read by one rule: name -> (reader giving the value or raising InputError, what the
#: notice says is shown instead; empty: the parameter's default).  A refused value falls back
#: to the parameter's default.
_URL_READERS: dict[str, tuple[Callable[[str], str], str]] = {
    "region": (lambda value: parse_region(value).id, ""),
    "overview_by": (_one_of("overview sub-view", OVERVIEW_BY), ""),
    "taylor": (_one_of("Taylor scale", TAYLOR_SCALES), ""),
    "sort": (_sort_text, "showing the runs in the collection's order"),
}

#: Global spacings the common-grid control offers besides the sources' own grids.
TARGET_SPACINGS: tuple[str, ...] = ("1x1", "2.5x2.5", "5x5")

#: How many runs a fresh session shows: enough to compare, few enough to read the maps.
DEFAULT_RUNS = 3
#: Longest piece of a rejected query value repeated in a notice.
_ECHO = 40


#: What a fresh session shows first when the collection holds it: near-surface air
#: temperature, by its usual name, else by its CF standard name on a single level.
PREFERRED_VARIABLE = ("tas", "air_temperature")


def first_variable(options: Options, variables: Sequence[str]) -> str:
    """The variable a fresh session opens on (see :data:`PREFERRED_VARIABLE`), else the first."""
    name, standard_name = PREFERRED_VARIABLE
    if name in variables:
        return name
    info = getattr(options, "variable_info", None)
    for variable in variables:
        held = info(variable) if info is not None else None
        if held is not None and held.standard_name == standard_name and not options.levels(variable):
            return variable
    return variables[0]


class Options(Protocol):
    """What the selection needs to know about the collection being served."""

    def variables(self) -> list[str]: ...

    def references(self, variable: str) -> list[str]: ...

    def models(self, variable: str) -> list[str]: ...

    def levels(self, variable: str) -> list[str]: ...


@dataclass(frozen=True)
class Request:
    """A validated selection: what the views ask the core for."""

    variable: str
    reference: str
    models: tuple[str, ...]
    region: str
    season: str
    period: str
    field: str
    level: str = ""  # "500 hPa"; empty for a variable without levels
    target_grid: str = "reference"  # the common grid: reference, a source's name or a spacing
    overview_by: str = "variable"  # the overview's sub-view (OVERVIEW_BY)
    taylor: str = "normalised"  # the Taylor diagram's scale (TAYLOR_SCALES)
    sort: str = ""  # the score table's sort: "rmse", "-corr"; "" for the collection's order

    def query(self, *, tab: str) -> dict[str, str]:
        """Every URL value of this request, defaults included.

        ``models`` is already URL-encoded: each name percent-encoded (a comma in a name
        becomes ``%2C``), the names separated by plain commas.
        """
        return {
            "variable": self.variable,
            "level": self.level,
            "reference": self.reference,
            "models": join_models(self.models),
            "region": self.region,
            "season": self.season,
            "period": self.period,
            "field": self.field,
            "target_grid": self.target_grid,
            "overview_by": self.overview_by,
            "taylor": self.taylor,
            "sort": self.sort,
            "tab": tab,
        }


def _echo(value: str) -> str:
    value = " ".join(str(value).split())
    return value if len(value) <= _ECHO else value[: _ECHO - 1] + "…"


def join_models(names: Sequence[str]) -> str:
    """The ``models`` URL value: percent-encoded names separated by commas."""
    return ",".join(quote(n, safe="") for n in names)


def split_models(value: str) -> list[str]:
    """The names of a ``models`` URL value (see :func:`join_models`), blanks dropped."""
    return [n for n in (unquote(part).strip() for part in value.split(",")) if n]


def _sentence(problem: str) -> str:
    """A core problem text ("unknown region 'x'") as the start of a notice, shortened."""
    text = _echo(problem) if len(problem) > 3 * _ECHO else problem
    return text[:1].upper() + text[1:]


def parse_query(search: str) -> dict[str, str]:
    """The query part of a URL (with or without the leading ``?``) as name -> text.

    Notes
    -----
    A name given twice keeps its last value; blank values are kept (they fall back to
    the default with a notice, like any other bad value).  Percent-escapes are decoded,
    except in ``models``, whose names are decoded one by one after splitting at the
    commas (:func:`split_models`), so that a comma inside a run's name survives.
    """
    query: dict[str, str] = {}
    for part in search.lstrip("?").split("&"):
        if not part:
            continue
        raw_name, _, raw_value = part.partition("=")
        name = unquote_plus(raw_name)
        query[name] = raw_value.replace("+", " ") if name == "models" else unquote_plus(raw_value)
    return query


def query_string(query: Mapping[str, str]) -> str:
    """``?name=value&...`` with commas and colons left readable (``models=a,b``, ``box:``)."""
    parts = []
    for name, value in query.items():
        text = str(value) if name == "models" else quote(str(value), safe=",:")
        parts.append(f"{quote(name)}={text}")
    return "?" + "&".join(parts)


class Selection(param.Parameterized):
    """The choices of one session.

    Parameters
    ----------
    options
        The collection's variables, references and runs (``app.views.results.Results``).
    tabs
        The tab values the dashboard offers (a subset of :data:`TABS`, in order).

    Notes
    -----
    ``request`` stays ``None`` until :meth:`settle` has checked the period against the
    years the chosen reference and runs share; the views wait for it.
    """

    variable = param.Selector(objects=[], doc="The compared variable.")
    level = param.Selector(default="", objects=[""], doc="The vertical level ('500 hPa'); '' without levels.")
    reference = param.Selector(objects=[], doc="The reference dataset.")
    models = param.ListSelector(default=[], objects=[], doc="The model runs shown.")
    region = param.String(default="global", doc="A region id of the core or box:S,N,W,E.")
    season = param.Selector(default="ANN", objects=list(SEASONS), doc="The season.")
    period = param.String(default="", doc="YYYY-YYYY within the common years.")
    field = param.Selector(default="difference", objects=list(FIELDS), doc="What the maps show.")
    tab = param.Selector(default="maps", objects=list(TABS), doc="The view on display.")
    target_grid = param.Selector(default="reference", objects=["reference"], doc="The common grid every source is remapped onto.")
    overview_by = param.Selector(default="variable", objects=list(OVERVIEW_BY), doc="The overview's sub-view.")
    taylor = param.Selector(default="normalised", objects=list(TAYLOR_SCALES), doc="The Taylor diagram's scale.")
    sort = param.String(default="", doc="The score table's sort column ('-' in front: descending); '' for the collection's order.")

    span = param.ClassSelector(class_=Period, default=None, allow_None=True, doc="Years every source covers.")
    default_period = param.ClassSelector(class_=Period, default=None, allow_None=True)
    request = param.ClassSelector(class_=Request, default=None, allow_None=True, doc="Validated selection.")
    notices = param.List(default=[], item_type=str, doc="Messages for the person (plain text).")
    choices = param.Integer(default=0, doc="Counts the changes of the offered choices (refresh_options).")

    def __init__(self, options: Options, *, tabs: Sequence[str] = tuple(TABS)) -> None:
        super().__init__()
        self._options = options
        self._wanted_period: str | None = None
        self._busy = False
        variables = options.variables()
        if not variables:
            raise InputError(
                "the collection has no variable that a model run and a reference both provide",
                remedy="add a reference (or a run) holding the same variable",
            )
        self.param.tab.objects = [t for t in TABS if t in tabs]
        self.param.tab.default = self.param.tab.objects[0]
        self.tab = self.param.tab.default
        self.param.variable.objects = variables
        self.param.variable.default = first_variable(options, variables)
        # the collection's own choice (manifest target_grid) first; test doubles may offer none
        grids = list(dict.fromkeys(getattr(options, "target_grids", lambda: ["reference"])()))
        self.param.target_grid.objects = grids
        self.param.target_grid.default = grids[0]
        self.target_grid = grids[0]
        self._set_variable(self.param.variable.default)
        self.param.watch(self._variable_changed, ["variable"])
        self.param.watch(self._span_source_changed, ["reference"])
        self.param.watch(self._choice_changed, ["models", "region", "season", "period", "field", "level", "target_grid", "overview_by", "taylor", "sort"])

    # ------------------------------------------------------------------ options
    def _set_variable(self, variable: str) -> None:
        """Point reference and models at the sources that hold ``variable``."""
        references = self._options.references(variable)
        models = self._options.models(variable)
        with param.parameterized.discard_events(self):
            self.variable = variable
            self.param.reference.objects = references
            self.param.reference.default = references[0]
            if self.reference not in references:
                self.reference = references[0]
            self.param.models.objects = models
            self.param.models.default = models[:DEFAULT_RUNS]
            # the runs ticked before that hold this variable, topped up with its other runs
            # to the default count (a variable that few runs hold shows all of them)
            kept = [m for m in models if m in (self.models or [])]
            extra = [m for m in models if m not in kept][: max(0, DEFAULT_RUNS - len(kept))]
            self.models = [m for m in models if m in kept or m in extra]
            levels = self._options.levels(variable) or [""]
            self.param.level.objects = levels
            self.param.level.default = default_level(levels)
            if self.level not in levels:
                self.level = self.param.level.default

    def defaults(self) -> dict[str, str]:
        """The value of every URL name when nothing is asked for (the period once settled)."""
        variable = self.param.variable.default
        return {
            "variable": variable,
            "level": default_level(self._options.levels(variable)),
            "reference": self._options.references(variable)[0],
            "models": join_models(self._options.models(variable)[:DEFAULT_RUNS]),
            "region": self.param.region.default,
            "season": self.param.season.default,
            "period": str(self.default_period) if self.default_period else "",
            "field": self.param.field.default,
            "target_grid": self.param.target_grid.default,
            "overview_by": self.param.overview_by.default,
            "taylor": self.param.taylor.default,
            "sort": self.param.sort.default,
            "tab": self.param.tab.default,
        }

    def refresh_options(self) -> list[str]:
        """Offer what the collection holds now (after its files changed), keeping every choice
        that still exists.

        Variables, references, runs, levels and common grids are read again from the options.
        A chosen item that is gone falls back to the default (runs: the ticked runs that
        remain, else the default runs) and is named in the returned sentences (plain text,
        for a notice); new items are offered without being chosen.  The period is not checked
        here: the caller settles it against the new years.  Parameter changes only, without
        events; :attr:`choices` is bumped for the controls.
        """
        variables = self._options.variables()
        if not variables:
            return ["No variable is held by both a model run and a reference any more; the previous choices are kept."]
        lost: list[str] = []
        grids = list(dict.fromkeys(getattr(self._options, "target_grids", lambda: ["reference"])()))
        with param.parameterized.discard_events(self):
            self.param.variable.objects = variables
            self.param.variable.default = first_variable(self._options, variables)
            if self.variable not in variables:
                lost.append(f"variable {_echo(self.variable)} (showing {self.param.variable.default})")
                self.variable = self.param.variable.default
            references = self._options.references(self.variable)
            models = self._options.models(self.variable)
            self.param.reference.objects = references
            self.param.reference.default = references[0]
            if self.reference not in references:
                lost.append(f"reference {_echo(self.reference)} (showing {references[0]})")
                self.reference = references[0]
            gone = [m for m in self.models or [] if m not in models]
            kept = [m for m in models if m in (self.models or [])]
            self.param.models.objects = models
            self.param.models.default = models[:DEFAULT_RUNS]
            self.models = kept or list(self.param.models.default)
            if gone:
                lost.append(f"run{'s' if len(gone) > 1 else ''} {', '.join(_echo(m) for m in gone)}"
                            + ("" if kept else f" (showing {', '.join(self.models)})"))
            levels = self._options.levels(self.variable) or [""]
            self.param.level.objects = levels
            self.param.level.default = default_level(levels)
            if self.level not in levels:
                if self.level:
                    lost.append(f"level {self.level} (showing {self.param.level.default or 'the single level'})")
                self.level = self.param.level.default
            self.param.target_grid.objects = grids
            self.param.target_grid.default = grids[0]
            if self.target_grid not in grids:
                lost.append(f"common grid {_echo(self.target_grid)} (showing {grids[0]})")
                self.target_grid = grids[0]
        self.choices += 1
        return [f"No longer in the collection: {'; '.join(lost)}."] if lost else []

    # ------------------------------------------------------------------ notices
    def notify(self, text: str) -> None:
        """Add a message for the person (shown as plain text, never as markup)."""
        self.notices = [*self.notices, " ".join(str(text).split())]

    def dismiss(self) -> None:
        self.notices = []

    # ------------------------------------------------------------------ URL query
    def apply_query(self, query: Mapping[str, str]) -> None:
        """Apply URL values, each checked against the options; bad ones leave a notice.

        Parameters
        ----------
        query
            URL name -> text (see :func:`parse_query`).  Names not in
            :data:`QUERY_NAMES` are ignored with a notice.

        Notes
        -----
        The period is only parsed here; :meth:`settle` checks it against the common years
        once they are known, so a valid link never shows the default period first.
        """
        self._busy = True
        try:
            self._apply_query(query)
        finally:
            self._busy = False

    def _apply_query(self, query: Mapping[str, str]) -> None:
        unknown = [k for k in query if k not in QUERY_NAMES]
        if unknown:
            self.notify(f"Link parameter {', '.join(repr(_echo(k)) for k in unknown)} is not known and was ignored.")
        if "variable" in query:
            value = query["variable"].strip()
            if value in self.param.variable.objects:
                self._set_variable(value)
            else:
                self.notify(f"Variable '{_echo(value)}' is not in this collection; showing {self.variable}.")
        if "level" in query:
            self._apply_level(query["level"])
        if "reference" in query:
            value = query["reference"].strip()
            if value in self.param.reference.objects:
                with param.parameterized.discard_events(self):
                    self.reference = value
            else:
                self.notify(f"Reference '{_echo(value)}' has no {self.variable} here; showing {self.reference}.")
        if "models" in query:
            names = list(dict.fromkeys(split_models(query["models"])))
            known = [n for n in names if n in self.param.models.objects]
            bad = [n for n in names if n not in known]
            if bad:
                self.notify(f"Run {', '.join(repr(_echo(n)) for n in bad)} has no {self.variable} here and was left out.")
            with param.parameterized.discard_events(self):
                if known:
                    self.models = [m for m in self.param.models.objects if m in known]
                else:
                    self.models = list(self.param.models.default)
                    if not bad:
                        self.notify("The link names no model run; showing the default runs.")
        if "season" in query:
            try:
                season = parse_season(query["season"])
            except InputError:
                self.notify(f"Season '{_echo(query['season'])}' is not known; showing {self.param.season.default}.")
                season = self.param.season.default
            with param.parameterized.discard_events(self):
                self.season = season
        if "period" in query:
            try:
                self._wanted_period = str(parse_period(query["period"]))
            except InputError:
                self.notify(f"Period '{_echo(query['period'])}' is not of the form YYYY-YYYY; showing the default period.")
                self._wanted_period = None
        if "field" in query:
            value = query["field"].strip()
            with param.parameterized.discard_events(self):
                if value in FIELDS:
                    self.field = value
                else:
                    self.notify(f"Map field '{_echo(value)}' is not known; showing '{FIELDS[self.param.field.default]}'.")
                    self.field = self.param.field.default
        if "target_grid" in query:
            value = query["target_grid"].strip()
            with param.parameterized.discard_events(self):
                if value in self.param.target_grid.objects:
                    self.target_grid = value
                else:
                    offered = ", ".join(self.param.target_grid.objects)
                    self.notify(f"Common grid '{_echo(value)}' is not offered ({_echo(offered)}); showing {self.param.target_grid.default}.")
                    self.target_grid = self.param.target_grid.default
        for name, (read, fallback) in _URL_READERS.items():
            if name not in query:
                continue
            try:
                value = read(query[name].strip())
            except InputError as error:
                value = self.param[name].default
                self.notify(f"{_sentence(error.problem)}; {fallback or f'showing {value}'}.")
            with param.parameterized.discard_events(self):
                setattr(self, name, value)
        if "tab" in query:
            value = query["tab"].strip()
            if value in self.param.tab.objects:
                self.tab = value
            else:
                self.notify(f"Tab '{_echo(value)}' is not offered; showing {TABS[self.param.tab.default]}.")

    def _apply_level(self, text: str) -> None:
        """A level from a link: any spelling of a level offered (``500hPa``, ``50000 Pa``)."""
        offered = [v for v in self.param.level.objects if v]
        value = text.strip()
        try:
            value = parse_level(value).label() if value else ""
        except InputError:
            pass
        if value in self.param.level.objects:
            with param.parameterized.discard_events(self):
                self.level = value
            return
        if offered:
            self.notify(f"Level '{_echo(text)}' is not offered for {self.variable} ({', '.join(offered)}); showing {self.level}.")
        elif text.strip():
            self.notify(f"{self.variable} has no vertical levels; the link's level '{_echo(text)}' was ignored.")

    def query(self) -> dict[str, str]:
        """The URL values of the published request and the tab (empty before :meth:`settle`)."""
        return {} if self.request is None else self.request.query(tab=self.tab)

    # ------------------------------------------------------------------ settling
    @property
    def span_key(self) -> tuple[str, str]:
        """What the common years depend on: every run of a variable is compared at once."""
        return (self.reference, self.variable)

    def settle(self, span: Period, default: Period) -> None:
        """Check the period against the common years and publish the request.

        Parameters
        ----------
        span
            The years every source of :attr:`span_key` covers.
        default
            The period the core's default rule gives for them.

        Notes
        -----
        A period outside ``span`` (from a link, or kept from another variable) falls back
        to ``default`` with a notice; an empty period takes ``default`` silently.
        """
        wanted = self._wanted_period if self._wanted_period is not None else self.period
        self._wanted_period = None
        period = default
        if wanted:
            try:
                asked = parse_period(wanted)
            except InputError:
                self.notify(f"Period '{_echo(wanted)}' is not of the form YYYY-YYYY; showing {default}.")
            else:
                if span.covers(asked):
                    period = asked
                else:
                    self.notify(f"Period {asked} lies outside the years all sources cover ({span}); showing {default}.")
        with param.parameterized.discard_events(self):
            self.span = span
            self.default_period = default
            self.period = str(period)
        self.param.trigger("span")
        self.publish()

    def publish(self) -> None:
        """Publish the current choices as the request (when they differ from the last one)."""
        if self.span is None:
            return
        request = Request(
            variable=self.variable,
            reference=self.reference,
            models=tuple(m for m in self.param.models.objects if m in self.models),
            region=self.region,
            season=self.season,
            period=self.period,
            field=self.field,
            level=self.level,
            target_grid=self.target_grid,
            overview_by=self.overview_by,
            taylor=self.taylor,
            sort=self.sort,
        )
        if request != self.request:
            self.request = request

    # ------------------------------------------------------------------ watchers
    def _variable_changed(self, event: param.parameterized.Event) -> None:
        if self._busy:
            return
        self._set_variable(event.new)
        self._span_source_changed(event)

    def _span_source_changed(self, event: param.parameterized.Event) -> None:
        # The common years may differ for another variable or reference: the request waits
        # until `settle` has checked the period (the dashboard fetches the years off-loop).
        if self._busy:
            return
        self.span = None

    def _choice_changed(self, *events: param.parameterized.Event) -> None:
        # param hands a watcher of several parameters all the events of one
        # ``param.update(a=..., b=...)`` at once: each is checked, then one request is made.
        if self._busy or self.span is None:
            return
        accepted = [self._choice_accepted(event) for event in events]  # every event checked
        if any(accepted):
            self.publish()

    def _choice_accepted(self, event: param.parameterized.Event) -> bool:
        """Check one changed choice; ``False`` when it was put back (with a notice) or
        set again in its canonical spelling (which publishes on its own)."""
        if event.name == "region":
            try:
                canonical = parse_region(event.new).id
            except InputError as error:
                self.notify(f"{_sentence(error.problem)}; kept {event.old}.")
                with param.parameterized.discard_events(self):
                    self.region = event.old
                self.param.trigger("region")
                return False
            if canonical != event.new:
                self.region = canonical  # re-enters with the canonical spelling
                return False
        if event.name == "period":
            try:
                asked = parse_period(event.new)
            except InputError:
                asked = None
            if asked is None or not self.span.covers(asked):
                self.notify(f"Period '{_echo(event.new)}' must lie within {self.span}; kept {event.old}.")
                with param.parameterized.discard_events(self):
                    self.period = event.old
                self.param.trigger("period")
                return False
            if str(asked) != event.new:
                self.period = str(asked)
                return False
        if event.name == "sort":
            try:
                parse_sort(event.new)
            except InputError as error:
                self.notify(f"{_sentence(error.problem)}; kept the previous order.")
                with param.parameterized.discard_events(self):
                    self.sort = event.old
                return False
        if event.name == "models" and not event.new:
            self.notify("Pick at least one model run; kept the previous choice.")
            with param.parameterized.discard_events(self):
                self.models = list(event.old)
            self.param.trigger("models")
            return False
        return True
