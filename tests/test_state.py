"""The dashboard's selection state without a browser.

Every control must change what the core is asked for; the URL query must carry the whole
state and give it back; a bad query value must fall back to the default with a notice.
The collection is the core's tiny demo scenario written to disk (real NetCDF files read
by the real core); the views' own ``load`` methods are called, as the page calls them.
"""

from __future__ import annotations

import asyncio
import json
from pathlib import Path

import numpy as np
import pytest

from app.server import check_password, is_loopback
from app.state import FIELDS, QUERY_NAMES, TABS, Selection, parse_query, query_string
from app.views.maps import MapsView, colour_range
from app.views.results import BoundedCache, Results
from app.views.scores import ScoresView, best_rows
from app.views.series import SeriesView
from evaluation.catalog import Collection
from evaluation.demo import write_demo
from evaluation.errors import InputError
from evaluation.regions import REGIONS, parse_region
from evaluation.timeaxis import SEASONS


@pytest.fixture(scope="module")
def results(tmp_path_factory: pytest.TempPathFactory) -> Results:
    manifest = write_demo(tmp_path_factory.mktemp("demo") / "collection", size="tiny")
    res = Results(Collection.from_path(manifest))
    yield res
    res.close()


def settled(results: Results, query: dict[str, str] | None = None) -> Selection:
    """A selection as a session builds it: URL first, then the period check."""
    selection = Selection(results)
    if query:
        selection.apply_query(query)
    selection.settle(*results.period_info(*selection.span_key))
    return selection


def resettle(selection: Selection, results: Results) -> None:
    """What the server does after a variable or reference change (there: off the event loop)."""
    if selection.span is None:
        selection.settle(*results.period_info(*selection.span_key))


def load(view_class, selection: Selection, results: Results):
    view = view_class(selection=selection, results=results)
    return asyncio.run(view.load(selection.request))


def other(values, current):
    return next(v for v in values if v != current)


# ---------------------------------------------------------------------------- URL
def test_every_value_is_written_defaults_included(results: Results) -> None:
    selection = settled(results)
    query = selection.query()
    # the contract names of the issue, every one present and none empty
    assert tuple(query) == QUERY_NAMES
    # every one but the level, which is empty for a variable without levels, and the sort,
    # empty for the collection's order of runs
    assert all(query[name] for name in QUERY_NAMES if name not in ("level", "sort"))
    assert query["sort"] == ""
    assert query["level"] == ("" if not results.levels(query["variable"]) else query["level"])
    assert query == selection.defaults()
    # the default period is the core's default rule for these sources
    assert query["period"] == str(results.comparison(query["reference"], query["variable"]).period)
    assert selection.notices == []


def test_url_round_trip_reproduces_the_view(results: Results) -> None:
    first = settled(results)
    variable = other(first.param.variable.objects, first.variable)
    first.variable = variable
    resettle(first, results)
    first.models = first.param.models.objects[-2:]
    first.region = "box:-20,40,-30,60"
    first.season = "JJA"
    span = first.span
    first.period = f"{span.start + 1}-{span.end}"
    first.field = "model_trend"
    first.taylor = "absolute"
    first.sort = "-rmse"
    first.overview_by = "region"
    first.tab = "taylor"
    search = query_string(first.query())
    second = settled(results, parse_query(search))
    assert second.query() == first.query()
    assert second.request == first.request
    assert second.notices == []
    # readable links: commas and the box colon are not escaped
    assert "models=" + ",".join(first.models) in search
    assert "region=box:-20,40,-30,60" in search


def test_query_names_are_the_contract() -> None:
    # issue 3, "Shareable link": these names exactly
    # and `level`, the vertical level of a variable on levels (the --level of the CLI),
    # and `target_grid`, the common grid (the --target-grid of the CLI),
    # and `overview_by`, the overview's sub-view, `taylor`, the Taylor diagram's scale, and
    # `sort`, the score table's sort column (issue 12, item 9)
    assert QUERY_NAMES == (
        "variable", "level", "reference", "models", "region", "season", "period", "field", "target_grid", "overview_by", "taylor", "sort", "tab",
    )


def test_level_from_a_link_is_read_in_any_units(results: Results) -> None:
    assert results.levels("ta") == ["1000 hPa", "850 hPa", "500 hPa", "250 hPa"]  # the reference's levels
    selection = settled(results, {"variable": "ta", "level": "85000Pa"})
    assert selection.request.level == "850 hPa" and selection.notices == []
    assert selection.query()["level"] == "850 hPa"
    selection.level = "250 hPa"
    assert selection.request.level == "250 hPa"


@pytest.mark.parametrize("value", ["700hPa", "2m", "warm", "<b>x</b>"])
def test_level_not_offered_falls_back_with_a_notice(results: Results, value: str) -> None:
    selection = settled(results, {"variable": "ta", "level": value})
    assert selection.request.level == "500 hPa"  # the default: nearest 500 hPa
    assert len(selection.notices) == 1 and "not offered" in selection.notices[0]


def test_section_view_draws_the_core_sections(results: Results) -> None:
    from app.views.look import load_extensions
    from app.views.section import SectionView

    load_extensions()  # the options of both plotting backends are set on the elements
    selection = settled(results, {"variable": "ta", "level": "500hPa", "tab": "section"})
    data = load(SectionView, selection, results)
    runs = [n for n in data if n != selection.reference]
    assert selection.reference in data and runs == ["larkspur-2"]  # the only run on levels
    section = data["larkspur-2"]
    assert section.attrs["bias"] < 0  # its cold upper troposphere (sample README)
    view = SectionView(selection=selection, results=results)
    assert len(view.figure(data, selection.request)) == 3  # reference, run, difference


def test_level_of_a_variable_without_levels_is_empty(results: Results) -> None:
    selection = settled(results, {"variable": "tas", "level": "500hPa"})
    assert selection.request.level == "" and "no vertical levels" in selection.notices[0]
    selection = settled(results, {"variable": "ta"})
    selection.variable = "tas"
    resettle(selection, results)
    assert selection.request.level == ""


BAD_VALUES = [
    ("variable", "no-such-variable"),
    ("reference", "no-such-reference"),
    ("models", "no-such-run"),
    ("models", ""),
    ("region", "mars"),
    ("region", "box:60,10,0,20"),  # south above north
    ("region", "box:1,2,3"),
    ("season", "XYZ"),
    ("period", "last-decade"),
    ("period", "1850-1860"),  # outside the years every source covers
    ("field", "<script>alert(1)</script>"),
    ("tab", "settings"),
]


@pytest.mark.parametrize(("name", "value"), BAD_VALUES)
def test_bad_query_value_falls_back_with_a_notice(results: Results, name: str, value: str) -> None:
    defaults = settled(results).query()
    selection = settled(results, {name: value})
    assert selection.query()[name] == defaults[name]
    assert selection.query() == defaults
    assert len(selection.notices) == 1
    assert name in selection.notices[0].lower() or {"models": "run"}[name] in selection.notices[0].lower()


def test_unknown_parameter_is_ignored_with_a_notice(results: Results) -> None:
    selection = settled(results, {"colour": "red", "season": "DJF"})
    assert selection.season == "DJF"
    assert len(selection.notices) == 1 and "colour" in selection.notices[0]


def test_known_runs_are_kept_when_one_is_unknown(results: Results) -> None:
    selection = settled(results)
    run = selection.param.models.objects[-1]
    selection = settled(results, {"models": f"{run},ghost-run"})
    assert selection.request.models == (run,)
    assert len(selection.notices) == 1 and "ghost-run" in selection.notices[0]


def test_season_and_region_are_read_as_the_core_reads_them(results: Results) -> None:
    selection = settled(results, {"season": "djf", "region": "TROPICS"})
    assert selection.request.season == "DJF"
    assert selection.request.region == "tropics"
    assert selection.notices == []


# ---------------------------------------------------------------------------- controls -> core
def test_variable_changes_what_is_scored(results: Results) -> None:
    selection = settled(results)
    variable = other(selection.param.variable.objects, selection.variable)
    selection.variable = variable
    assert selection.request is None or selection.request.variable != variable  # waits for the period check
    resettle(selection, results)
    data = load(ScoresView, selection, results)
    assert set(data["tidy"]["variable"]) == {variable}
    assert selection.reference in results.references(variable)
    assert set(selection.models) <= set(results.models(variable))


def test_reference_changes_what_is_scored(results: Results) -> None:
    variable = next(v for v in results.variables() if len(results.references(v)) > 1)
    selection = settled(results, {"variable": variable})
    reference = other(selection.param.reference.objects, selection.reference)
    selection.reference = reference
    resettle(selection, results)
    data = load(ScoresView, selection, results)
    assert set(data["tidy"]["reference"]) == {reference}


def test_models_change_what_is_shown(results: Results) -> None:
    selection = settled(results)
    runs = selection.param.models.objects
    selection.models = [runs[-1]]
    assert set(load(ScoresView, selection, results)["tidy"]["model"]) == {runs[-1]}
    maps = load(MapsView, selection, results)["items"]
    assert [item.source for item in maps] == [runs[-1]]


@pytest.mark.parametrize("region", ["tropics", "land", "box:-30,30,-60,60"])
def test_region_changes_what_is_scored(results: Results, region: str) -> None:
    selection = settled(results)
    selection.region = region
    assert selection.request.region == parse_region(region).id
    assert set(load(ScoresView, selection, results)["tidy"]["region"]) == {parse_region(region).id}
    series = load(SeriesView, selection, results)
    assert {da.attrs["region"] for da in series.values()} == {parse_region(region).id}


def test_season_changes_what_is_computed(results: Results) -> None:
    selection = settled(results)
    selection.season = "SON"
    assert set(load(ScoresView, selection, results)["tidy"]["season"]) == {"SON"}
    assert {item.data.attrs["season"] for item in load(MapsView, selection, results)["items"]} == {"SON"}


def test_several_choices_set_at_once_make_one_request_with_all_of_them(results: Results) -> None:
    # param delivers the events of one ``param.update`` call to a watcher of several
    # parameters together (param documentation, "Dependencies and watchers": batched events)
    selection = settled(results)
    requests = []
    selection.param.watch(lambda event: requests.append(event.new), "request")
    selection.param.update(season="JJA", field="difference", region="not a region")
    assert len(requests) == 1
    assert (requests[0].season, requests[0].field) == ("JJA", "difference")
    assert requests[0].region == selection.param.region.default  # the bad one is put back, with a notice
    assert set(load(ScoresView, selection, results)["tidy"]["season"]) == {"JJA"}


def test_period_changes_what_is_computed(results: Results) -> None:
    selection = settled(results)
    span = selection.span
    period = f"{span.start}-{span.end - 1}"
    selection.period = period
    assert set(load(ScoresView, selection, results)["tidy"]["period"]) == {period}
    assert {item.data.attrs["period"] for item in load(MapsView, selection, results)["items"]} == {period}
    series = load(SeriesView, selection, results)
    # yearly means of exactly the chosen years (season label years, DJF by its January)
    for da in series.values():
        np.testing.assert_array_equal(da["year"].values, np.arange(span.start, span.end))


EXPECTED_FIELD = {
    # field -> (map kinds as the core names its outputs, does the reference get a map, signed palette)
    "model_mean": ("", True, False),
    "reference_mean": ("", True, False),
    "difference": ("_difference", False, True),
    "model_trend": ("_trend", True, True),
    "trend_difference": ("_trend_difference", False, True),
}


@pytest.mark.parametrize("field", list(FIELDS))
def test_field_changes_what_the_maps_ask_for(results: Results, field: str) -> None:
    selection = settled(results)
    selection.field = field
    items = load(MapsView, selection, results)["items"]
    suffix, with_reference, signed = EXPECTED_FIELD[field]
    assert {item.data.name for item in items} == {f"{selection.variable}{suffix}"}
    assert (selection.reference in [item.source for item in items]) is with_reference
    assert {item.signed for item in items} == {signed}
    if field == "reference_mean":
        assert [item.source for item in items] == [selection.reference]
    if "trend" in field:  # trends are per decade (DESIGN.md)
        assert all(item.data.attrs["units"].endswith("/decade") for item in items)


def test_tab_is_part_of_the_link_but_not_of_the_request(results: Results) -> None:
    selection = settled(results)
    request = selection.request
    selection.tab = "scores"
    assert selection.request is request
    assert selection.query()["tab"] == "scores"
    assert set(selection.param.tab.objects) <= set(TABS)


def test_bad_interactive_values_are_refused_with_a_notice(results: Results) -> None:
    selection = settled(results)
    before = selection.query()
    selection.region = "box:80,10,0,10"
    selection.period = "1000-1001"
    selection.models = []
    assert selection.query() == before
    assert len(selection.notices) == 3


def test_region_and_season_options_are_the_cores() -> None:
    # the sidebar offers exactly the core's regions and seasons (DESIGN.md contract list)
    assert list(REGIONS) == ["global", "tropics", "nh-extratropics", "sh-extratropics", "arctic", "antarctic", "land", "ocean"]
    assert list(SEASONS)[:5] == ["ANN", "DJF", "MAM", "JJA", "SON"]


def test_no_query_value_reaches_a_file_path(results: Results, tmp_path: Path) -> None:
    secret = tmp_path / "secret.nc"
    secret.write_bytes(b"not data")
    selection = settled(results, {"reference": str(secret), "models": str(secret), "variable": str(secret)})
    sources = {s.name for s in (*results.collection.references, *results.collection.models)}
    assert selection.reference in sources and set(selection.models) <= sources
    assert len(selection.notices) == 3


# ---------------------------------------------------------------------------- caching
def test_revisited_selection_is_served_from_the_cache(results: Results) -> None:
    selection = settled(results)
    first = load(ScoresView, selection, results)
    selection.region = "tropics"
    load(ScoresView, selection, results)
    selection.region = "global"
    again = load(ScoresView, selection, results)
    assert again["tidy"].equals(first["tidy"])
    key = ("scores", selection.reference, selection.variable, selection.period, "global", selection.season, selection.level, selection.target_grid)
    assert key in results.products


def test_bounded_cache_drops_the_least_recently_used() -> None:
    cache = BoundedCache(max_items=2)
    cache.put("a", 1)
    cache.put("b", 2)
    assert cache.get("a") == 1  # "a" is now the most recent
    cache.put("c", 3)
    assert "b" not in cache and "a" in cache and "c" in cache and len(cache) == 2


# ---------------------------------------------------------------------------- drawing rules
def test_colour_range_of_a_constant_field_is_not_empty(results: Results) -> None:
    # a run compared with itself: zero everywhere (holoviz/holoviews#3373)
    selection = settled(results)
    field = load(MapsView, selection, results)["items"][0].data
    zero = field * 0.0
    low, high = colour_range([zero], signed=True)
    assert low < 0 < high and low == -high
    low, high = colour_range([zero + 5.0], signed=False)
    assert low < 5.0 < high
    assert colour_range([zero * np.nan], signed=False) is None


def test_best_values_follow_the_metric_registry() -> None:
    import pandas as pd

    values = pd.Series([-0.2, 0.1, np.nan, 0.3])
    assert best_rows(values, "bias") == [False, True, False, False]  # smallest magnitude
    assert best_rows(values, "rmse") == [True, False, False, False]  # lowest
    assert best_rows(values, "corr") == [False, False, False, True]  # highest
    assert best_rows(pd.Series([0.7, 1.2, 0.95]), "std_ratio") == [False, False, True]  # nearest one
    assert best_rows(values, "mean") == [False] * 4  # no better direction


# ---------------------------------------------------------------------------- serving options
def test_password_option_is_validated(tmp_path: Path) -> None:
    assert check_password(None) is None
    assert check_password("a long secret") == "a long secret"
    with pytest.raises(InputError, match="at least 8"):
        check_password("short")
    # a mistyped credentials path must not become the password (holoviz/panel#4703)
    with pytest.raises(InputError, match="looks like a file path"):
        check_password(str(tmp_path / "users.jsn"))
    with pytest.raises(InputError, match="looks like a file path"):
        check_password("credentials.json")
    good = tmp_path / "users.json"
    good.write_text(json.dumps({"ana": "correct horse battery"}))
    assert check_password(str(good)) == {"ana": "correct horse battery"}
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps(["ana"]))
    with pytest.raises(InputError, match="credentials file"):
        check_password(str(bad))


@pytest.mark.parametrize(
    ("address", "loopback"),
    [("127.0.0.1", True), ("127.3.2.1", True), ("::1", True), ("localhost", True), ("0.0.0.0", False), ("192.0.2.7", False), ("example.org", False)],
)
def test_loopback_addresses(address: str, loopback: bool) -> None:
    # RFC 5735 / RFC 4291: 127.0.0.0/8 and ::1 are loopback; 192.0.2.0/24 is a documentation range
    assert is_loopback(address) is loopback


def test_common_grid_from_a_link_is_checked_against_the_options(results: Results) -> None:
    sel = Selection(results)
    offered = sel.param.target_grid.objects
    assert offered[0] == "reference" and "2.5x2.5" in offered and all(s.name in offered for s in results.collection.sources)
    sel.apply_query({"target_grid": "2.5x2.5"})
    assert sel.target_grid == "2.5x2.5" and not sel.notices
    sel.apply_query({"target_grid": "<b>0.7x0.7</b>"})
    assert sel.target_grid == "reference"
    assert sel.notices and "is not offered" in sel.notices[-1]


# ---------------------------------------------------------------------------- first choices
def test_a_fresh_session_opens_on_near_surface_air_temperature(results: Results) -> None:
    assert "tas" in results.variables()  # the demo holds it (else the check proves nothing)
    selection = settled(results)
    assert selection.variable == "tas" and selection.request.variable == "tas"
    assert selection.defaults()["variable"] == "tas"


def test_a_link_to_a_variable_selects_the_runs_that_hold_it(results: Results) -> None:
    from app.state import DEFAULT_RUNS

    for variable in results.variables():
        holders = results.models(variable)
        selection = settled(results, {"variable": variable})
        # every run that holds the variable, up to the default count, in the collection's order
        assert list(selection.models) == holders[:DEFAULT_RUNS], variable
        assert set(selection.models) <= set(holders)
    few = [v for v in results.variables() if len(results.models(v)) <= DEFAULT_RUNS]
    assert few  # a variable held by few runs shows all of them
    for variable in few:
        assert list(settled(results, {"variable": variable}).models) == results.models(variable)


def test_an_unknown_overview_sub_view_falls_back_with_a_notice(results: Results) -> None:
    selection = settled(results, {"overview_by": "cells"})
    assert selection.request.overview_by == "variable"
    assert any("cells" in n for n in selection.notices)
    assert settled(results, {"overview_by": "season"}).request.overview_by == "season"
