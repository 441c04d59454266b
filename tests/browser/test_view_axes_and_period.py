"""Each view keeps its own axes, the period control always shows the period used, and the
runs and variable a session opens on follow the collection.

Run in headless Chromium on the sample collection.  The plotted ranges are read from the
page's Bokeh document (every plot model with its title and its x/y ranges), so the test
sees what the person sees.
"""

from __future__ import annotations

import time
from urllib.parse import parse_qs, urlparse

import pytest

from app.state import TABS

from .conftest import open_dashboard, wait_for_view

pytestmark = pytest.mark.browser

#: Every Bokeh plot of the page: its title and the ranges it draws.
_RANGES_JS = """
() => {
  const out = [];
  for (const doc of Bokeh.documents) {
    for (const m of doc.all_models) {
      if (m.x_range === undefined || m.y_range === undefined || m.title == null) continue;
      const title = typeof m.title === "string" ? m.title : (m.title.text || "");
      out.push({title, x: [m.x_range.start, m.x_range.end], y: [m.y_range.start, m.y_range.end]});
    }
  }
  return out;
}
"""


@pytest.fixture(scope="module")
def served(served_sample: str) -> str:
    return served_sample


def query(page) -> dict[str, str]:
    return {k: v[0] for k, v in parse_qs(urlparse(page.url).query, keep_blank_values=True).items()}


def wait_for_query(page, **expected: str) -> None:
    deadline = time.monotonic() + 60
    while any(query(page).get(k) != v for k, v in expected.items()):
        if time.monotonic() > deadline:
            raise AssertionError(f"URL {page.url} does not hold {expected}")
        page.wait_for_timeout(20)


def y_range(page, title_start: str) -> tuple[float, float]:
    """The y-range of the plot whose title starts with ``title_start`` (once it is settled)."""
    deadline = time.monotonic() + 30
    while True:
        found = [p for p in page.evaluate(_RANGES_JS) if p["title"].startswith(title_start)]
        if found and all(isinstance(v, (int, float)) for v in found[0]["y"]):
            page.wait_for_timeout(300)  # ranges linked after the first render would arrive now
            found = [p for p in page.evaluate(_RANGES_JS) if p["title"].startswith(title_start)]
            return tuple(sorted(found[0]["y"]))
        if time.monotonic() > deadline:
            titles = [p["title"] for p in page.evaluate(_RANGES_JS)]
            raise AssertionError(f"no plot titled {title_start!r} on the page (plots: {titles})")
        page.wait_for_timeout(50)


def click_tab(page, tab: str) -> None:
    page.locator(".gs-tabs").get_by_text(TABS[tab], exact=True).first.click()
    wait_for_view(page, tab)


# ---------------------------------------------------------------------------- axes
@pytest.mark.parametrize("later", ["series", "cycle"])
def test_a_view_keeps_its_own_axes_after_the_zonal_mean(browser, served, later: str) -> None:
    """A line plot's y-range is the same whether or not the zonal mean was drawn first.

    The zonal mean of air temperature spans the globe (about 220-305 K); the Arctic series
    and cycle span far less.  Linked, they would take the zonal mean's range.
    """
    title = {"series": "Arctic", "cycle": "Arctic"}[later]
    link = f"/?variable=tas&region=arctic&season=ANN&tab={later}"
    alone = open_dashboard(browser, served + link)
    wait_for_view(alone.page, later)
    own = y_range(alone.page, title)
    alone.close()

    session = open_dashboard(browser, served + link.replace(f"tab={later}", "tab=zonal"))
    page = session.page
    wait_for_view(page, "zonal")
    zonal = y_range(page, "Zonal mean")
    click_tab(page, later)
    wait_for_query(page, tab=later)
    after = y_range(page, title)
    # the zonal mean's range is wider than the Arctic one (else the check proves nothing)
    assert zonal[1] - zonal[0] > 2 * (own[1] - own[0]), (zonal, own)
    assert after == pytest.approx(own, rel=1e-9), f"{later} drawn after the zonal mean: y {after}, alone {own}"
    # and the zonal mean keeps its own range when it is drawn again after the other view
    click_tab(page, "zonal")
    assert y_range(page, "Zonal mean") == pytest.approx(zonal, rel=1e-9)
    assert session.errors() == []
    session.close()


# ---------------------------------------------------------------------------- period
def slider_years(page) -> tuple[int, int]:
    """The years the period slider shows (its handles' values, as the person reads them)."""
    handles = page.locator(".gs-period .noUi-handle")
    return tuple(int(float(handles.nth(i).get_attribute("aria-valuenow"))) for i in (0, 1))


def settled_query(page, *, quiet_ms: int = 1500, timeout_s: float = 60) -> dict[str, str]:
    """The URL's values once they have not changed for ``quiet_ms``."""
    deadline = time.monotonic() + timeout_s
    last, since = page.url, time.monotonic()
    while time.monotonic() - since < quiet_ms / 1000:
        assert time.monotonic() < deadline, "the URL kept changing"
        page.wait_for_timeout(50)
        if page.url != last:
            last, since = page.url, time.monotonic()
    return query(page)


def assert_one_period(page) -> None:
    """Slider, the note under it, the view's context line and the URL name one period."""
    used = settled_query(page)["period"]
    start, end = (int(y) for y in used.split("-"))
    wait_for_view(page, "scores", what=".tabulator-row")
    deadline = time.monotonic() + 20
    while slider_years(page) != (start, end):
        assert time.monotonic() < deadline, f"the slider shows {slider_years(page)} while the URL uses {used}"
        page.wait_for_timeout(50)
    page.wait_for_timeout(500)
    assert slider_years(page) == (start, end), f"the slider moved to {slider_years(page)} after settling on {used}"
    assert page.get_by_text(f"{start}–{end}, {end - start + 1} years").count() == 1
    context = page.locator("div.gs-hint", has_text="Showing:").first.text_content()
    assert context.endswith(used), context


@pytest.mark.parametrize("gap_ms", [0, 100])
def test_the_period_slider_shows_the_period_used_after_keys(browser, served, gap_ms: int) -> None:
    """Keys pressed faster than the server answers, and at about its pace (both left the
    slider on an older year while the URL and the views used a later one)."""
    session = open_dashboard(browser, served + "/?variable=tas&tab=scores")
    page = session.page
    wait_for_view(page, "scores", what=".tabulator-row")
    start, end = (int(y) for y in settled_query(page)["period"].split("-"))
    handle = page.locator(".gs-period .noUi-handle-lower")
    handle.focus()
    for _ in range(20):
        page.keyboard.press("ArrowRight")
        page.wait_for_timeout(gap_ms)
    assert_one_period(page)
    # the upper handle, a few presses back and forth
    upper = page.locator(".gs-period .noUi-handle-upper")
    upper.focus()
    for key in ["ArrowLeft"] * 6 + ["ArrowRight"] * 2:
        page.keyboard.press(key)
        page.wait_for_timeout(gap_ms)
    assert_one_period(page)
    moved = settled_query(page)["period"]
    assert moved != f"{start}-{end}"
    # back to the default with the button, then the same keys again: the same period as before
    page.get_by_role("button", name="Default period").click()
    wait_for_query(page, period=f"{start}-{end}")
    assert_one_period(page)
    handle.focus()
    for _ in range(20):
        page.keyboard.press("ArrowRight")
        page.wait_for_timeout(gap_ms)
    upper.focus()
    for key in ["ArrowLeft"] * 6 + ["ArrowRight"] * 2:
        page.keyboard.press(key)
        page.wait_for_timeout(gap_ms)
    assert_one_period(page)
    assert settled_query(page)["period"] == moved
    assert session.errors() == []
    session.close()


def test_the_period_slider_shows_the_period_used_after_a_drag(browser, served) -> None:
    session = open_dashboard(browser, served + "/?variable=tas&tab=scores")
    page = session.page
    wait_for_view(page, "scores", what=".tabulator-row")
    before = settled_query(page)["period"]
    handle = page.locator(".gs-period .noUi-handle-lower").bounding_box()
    track = page.locator(".gs-period .noUi-base").bounding_box()
    x, y = handle["x"] + handle["width"] / 2, handle["y"] + handle["height"] / 2
    page.mouse.move(x, y)
    page.mouse.down()
    # to about two thirds of the track in small steps, pausing as a hand does
    target = track["x"] + 0.66 * track["width"]
    for step in range(1, 13):
        page.mouse.move(x + (target - x) * step / 12, y)
        page.wait_for_timeout(25)
    page.mouse.up()
    assert_one_period(page)
    assert settled_query(page)["period"] != before
    assert session.errors() == []
    session.close()


# ---------------------------------------------------------------------------- first choices
def test_a_fresh_session_opens_on_air_temperature_and_a_variable_link_ticks_its_runs(browser, served) -> None:
    session = open_dashboard(browser, served + "/")
    wait_for_view(session.page, "maps")
    wait_for_query(session.page, variable="tas")
    session.close()
    # rlut: larkspur-2, pumice-ctl and cobble-b hold it (cobble-b is the run with the drift)
    session = open_dashboard(browser, served + "/?variable=rlut&tab=scores")
    page = session.page
    wait_for_view(page, "scores", what=".tabulator-row")
    wait_for_query(page, variable="rlut", models="larkspur-2,pumice-ctl,cobble-b")
    ticked = page.locator(".gs-models input[type=checkbox]")
    assert [ticked.nth(i).is_checked() for i in range(ticked.count())] == [True, True, True]
    assert session.errors() == []
    session.close()


# ---------------------------------------------------------------------------- energy budget
def budget_rows(page) -> list[list[str]]:
    rows = page.locator(".gs-view-budget .gs-budget-table .tabulator-row")
    cells = ".tabulator-cell:not([tabulator-field='_index'])"  # Panel keeps a hidden index column
    return [[c.strip() for c in rows.nth(i).locator(cells).all_text_contents()] for i in range(rows.count())]


def test_the_energy_budget_lists_every_source_whatever_the_variable(browser, served, screenshots) -> None:
    tables = []
    for variable in ("pr", "tas"):
        session = open_dashboard(browser, served + f"/?variable={variable}&tab=budget")
        page = session.page
        wait_for_view(page, "budget", what=".gs-budget-table .tabulator-row")
        rows = budget_rows(page)
        tables.append(rows)
        # the sample: tessera-obs (reference) and three runs hold the four fields; halyard-rean
        # (a reference), tidewell-3 and the ensemble fennel's members lack the radiation fields
        members = ["fennel-r1", "fennel-r2", "fennel-r3"]
        assert [r[0] for r in rows] == ["tessera-obs", "halyard-rean", "larkspur-2", "pumice-ctl", "tidewell-3", "cobble-b", *members]
        by_name = {r[0]: r for r in rows}
        assert by_name["tessera-obs"][1] == "reference"
        reasons = page.locator(".gs-budget-reasons").text_content()
        for name in ("halyard-rean", "tidewell-3", *members):
            assert f"{name}: no rsdt, rsut, rlut in its files" in reasons, reasons
            assert set(by_name[name][2:]) <= {"–", ""}, by_name[name]
        for name in ("tessera-obs", "larkspur-2", "pumice-ctl", "cobble-b"):
            assert "–" not in by_name[name] and f"{name}:" not in reasons, by_name[name]
        # no cell of the table cuts its text
        cut = page.locator(".gs-view-budget .tabulator-cell").evaluate_all(
            "cells => cells.filter(c => c.textContent.trim() && c.scrollWidth > c.clientWidth + 1).map(c => c.textContent)"
        )
        assert cut == [], cut
        page.screenshot(path=str(screenshots / f"budget-{variable}.png"), full_page=True)
        assert session.errors() == []
        session.close()
    assert tables[0] == tables[1]
