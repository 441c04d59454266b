"""The served dashboard in headless Chromium, on the sample collection.

Checks what a person does: open the page (no console errors), look at every view, change
region, season and period and see the table change, send the link to someone else,
download tables, figures and fields and open the files.  Times of the first render and
of a change of region that was seen before are written to
``test-artifacts/timings.json``.
"""

from __future__ import annotations

import io
import json
import time
import xml.etree.ElementTree as ET
import zipfile
from pathlib import Path
from urllib.parse import parse_qs, urlparse

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from PIL import Image

from app.state import QUERY_NAMES, TABS
from app.views.results import Results
from evaluation.catalog import Collection
from evaluation.export import TIDY_COLUMNS

from .conftest import SCREENSHOTS, open_dashboard, serving, wait_for_view

pytestmark = pytest.mark.browser

TIMINGS = SCREENSHOTS.parent / "timings.json"
#: What shows that a view has drawn: Bokeh canvases, or the table's rows.
DRAWN = {tab: "canvas" for tab in TABS} | {"scores": ".tabulator-row", "budget": ".tabulator-row"}
# the first variable of the sample has no levels: the section view says so instead of drawing
DRAWN["section"] = "canvas, .gs-empty"
timings: dict[str, float] = {}


@pytest.fixture(scope="module")
def served(sample_manifest: Path):
    results = Results(Collection.from_path(sample_manifest))
    with serving(results) as url:
        yield url, results
    results.close()
    TIMINGS.parent.mkdir(parents=True, exist_ok=True)
    TIMINGS.write_text(json.dumps(timings, indent=2))
    print(f"\ntimings: {timings} (written to {TIMINGS})")


def rows(page, tab: str = "scores") -> list[str]:
    return page.locator(f".gs-view-{tab} .tabulator-row").all_text_contents()


def wait_for_change(page, before: list[str], *, timeout_s: float = 60.0) -> float:
    """Seconds until the score rows differ from ``before``."""
    start = time.monotonic()
    while True:
        now = rows(page)
        if now and now != before:
            return time.monotonic() - start
        if time.monotonic() - start > timeout_s:
            raise AssertionError("the score table did not change")
        page.wait_for_timeout(10)


def query(page) -> dict[str, str]:
    return {k: v[0] for k, v in parse_qs(urlparse(page.url).query, keep_blank_values=True).items()}


def wait_for_query(page, **expected: str) -> None:
    deadline = time.monotonic() + 30
    while set(query(page)) != set(QUERY_NAMES) or any(query(page).get(k) != v for k, v in expected.items()):
        if time.monotonic() > deadline:
            raise AssertionError(f"URL {page.url} does not hold {expected}")
        page.wait_for_timeout(20)


def click_tab(page, tab: str) -> None:
    page.locator(".gs-tabs").get_by_text(TABS[tab], exact=True).first.click()
    wait_for_view(page, tab, what=DRAWN[tab])


# ---------------------------------------------------------------------------- the page
def test_first_render_without_console_errors(browser, served, screenshots: Path) -> None:
    url, _ = served
    start = time.monotonic()
    session = open_dashboard(browser, url + "/")
    wait_for_view(session.page, "maps")
    timings["first_render_s"] = round(time.monotonic() - start, 3)
    page = session.page
    # every value is in the address bar, defaults included
    wait_for_query(page, tab="maps")
    assert set(query(page)) == set(QUERY_NAMES)
    assert page.locator(".gs-view-maps canvas").count() >= 1
    page.screenshot(path=str(screenshots / "maps.png"), full_page=True)
    assert session.errors() == []
    session.close()


def test_every_view_draws(browser, served, screenshots: Path) -> None:
    url, _ = served
    session = open_dashboard(browser, url + "/")
    page = session.page
    wait_for_view(page, "maps")
    offered = [t for t in TABS if page.locator(".gs-tabs").get_by_text(TABS[t], exact=True).count()]
    # the vertical section is offered because the sample holds a variable on levels
    assert offered[:8] == ["maps", "zonal", "section", "series", "cycle", "scores", "taylor", "overview"]
    for tab in offered[1:]:
        click_tab(page, tab)
        wait_for_query(page, tab=tab)
        body = page.locator(f".gs-view-{tab}")
        assert body.locator(".gs-error").count() == 0, body.text_content()
        page.screenshot(path=str(screenshots / f"{tab}.png"), full_page=True)
    assert session.errors() == []
    session.close()


def test_map_fields(browser, served, screenshots: Path) -> None:
    url, _ = served
    session = open_dashboard(browser, url + "/?field=model_mean")
    page = session.page
    wait_for_view(page, "maps")
    wait_for_query(page, field="model_mean")
    titles = page.locator(".gs-view-maps .gs-download-nc button").all_text_contents()
    request = query(page)
    # reference first, then one map per selected run
    assert titles[0].strip() == f"{request['reference']} mean"
    assert len(titles) == 1 + len(request["models"].split(","))
    page.screenshot(path=str(screenshots / "maps-mean.png"), full_page=True)
    page.locator(".gs-field").get_by_text("Run trend minus reference trend").click()
    wait_for_query(page, field="trend_difference")
    deadline = time.monotonic() + 60
    while not all("trend minus" in t for t in page.locator(".gs-view-maps .gs-download-nc button").all_text_contents()):
        assert time.monotonic() < deadline, "the maps did not change to trend differences"
        page.wait_for_timeout(20)
    wait_for_view(page, "maps")
    titles = page.locator(".gs-view-maps .gs-download-nc button").all_text_contents()
    assert len(titles) == len(request["models"].split(","))
    assert session.errors() == []
    session.close()


# ---------------------------------------------------------------------------- controls
def test_region_season_period_update_the_table(browser, served, screenshots: Path) -> None:
    url, _ = served
    session = open_dashboard(browser, url + "/?tab=scores")
    page = session.page
    wait_for_view(page, "scores", what=".tabulator-row")
    global_rows = rows(page)

    page.locator(".gs-region select").select_option(label="Tropics (30°S–30°N)")
    wait_for_change(page, global_rows)
    wait_for_query(page, region="tropics")
    tropics_rows = rows(page)
    # back to a region seen before: answered from the cache
    page.locator(".gs-region select").select_option(label="Global")
    timings["cached_region_change_s"] = round(wait_for_change(page, tropics_rows), 3)
    assert rows(page) == global_rows  # the time is recorded for the benchmarks, not asserted here

    page.locator(".gs-season select").select_option(label="Jun–Aug (JJA)")
    wait_for_change(page, global_rows)
    wait_for_query(page, season="JJA")
    jja_rows = rows(page)

    start, end = (int(y) for y in query(page)["period"].split("-"))
    page.locator(".gs-period .noUi-handle-lower").focus()
    page.keyboard.press("ArrowRight")
    wait_for_query(page, period=f"{start + 1:04d}-{end:04d}")
    wait_for_change(page, jja_rows)

    page.locator(".gs-box input").fill("-20,20,-60,60")
    page.locator(".gs-box input").press("Enter")
    wait_for_query(page, region="box:-20,20,-60,60")
    page.screenshot(path=str(screenshots / "scores-box.png"), full_page=True)
    assert session.errors() == []
    session.close()


def test_shared_link_reproduces_the_view(browser, served) -> None:
    url, _ = served
    first = open_dashboard(browser, url + "/")
    page = first.page
    wait_for_view(page, "maps")
    page.locator(".gs-region select").select_option(label="Southern extratropics (90°S–30°S)")
    page.locator(".gs-season select").select_option(label="Dec–Feb (DJF)")
    boxes = page.locator(".gs-models input[type=checkbox]")
    boxes.nth(0).uncheck()
    click_tab(page, "scores")
    wait_for_query(page, region="sh-extratropics", season="DJF", tab="scores")
    page.wait_for_timeout(300)
    link, shown = page.url, rows(page)
    # three tables (climatology, trends and variability, significance), one row per ticked run each
    assert len(shown) == 3 * len(query(page)["models"].split(","))

    # a colleague opens the link in another browser (a new context shares nothing)
    second = open_dashboard(browser, link)
    other = second.page
    wait_for_view(other, "scores", what=".tabulator-row")
    wait_for_query(other, **query(page))
    assert query(other) == query(page)
    assert rows(other) == shown
    assert other.locator(".gs-region select").evaluate("e => e.options[e.selectedIndex].text").startswith("Southern")
    assert first.errors() == [] and second.errors() == []
    first.close()
    second.close()


def test_bad_link_values_fall_back_with_a_notice(browser, served, screenshots: Path) -> None:
    url, _ = served
    session = open_dashboard(browser, url + "/?season=XYZ&region=box:95,10,0,0&tab=nope")
    page = session.page
    wait_for_view(page, "maps")
    notice = page.locator(".gs-notice")
    notice.first.wait_for()
    text = notice.first.text_content()
    assert "Season 'XYZ'" in text and "Region" in text and "Tab 'nope'" in text
    wait_for_query(page, season="ANN", region="global", tab="maps")
    page.screenshot(path=str(screenshots / "notice.png"))
    assert session.errors() == []
    session.close()


# ---------------------------------------------------------------------------- downloads
def download(page, css: str, *, nth: int = 0):
    with page.expect_download(timeout=60_000) as info:
        page.locator(css).nth(nth).locator("button, a").first.click()
    d = info.value
    return d.suggested_filename, Path(d.path()).read_bytes()


def test_table_downloads_are_valid_files(browser, served) -> None:
    url, results = served
    session = open_dashboard(browser, url + "/?tab=scores&region=tropics&season=MAM")
    page = session.page
    wait_for_view(page, "scores", what=".tabulator-row")
    wait_for_query(page, tab="scores", region="tropics", season="MAM")
    request = query(page)
    runs = request["models"].split(",")

    name, data = download(page, ".gs-download-csv")
    assert name.endswith(".csv")
    table = pd.read_csv(io.BytesIO(data))
    assert list(table.columns) == list(TIDY_COLUMNS)  # the tidy contract (DESIGN.md)
    # the selected runs, and the other references scored against the selected one
    others = set(results.references(request["variable"])) - {request["reference"]}
    assert set(runs) <= set(table["model"]) <= set(runs) | others
    assert set(table["region"]) == {"tropics"} and set(table["season"]) == {"MAM"}
    assert set(table["period"]) == {request["period"]}

    name, data = download(page, ".gs-download-xlsx")
    assert name.endswith(".xlsx") and zipfile.is_zipfile(io.BytesIO(data))
    sheets = pd.read_excel(io.BytesIO(data), sheet_name=None)
    assert {"scores", "provenance"} <= set(sheets)
    # the same numbers as the CSV (openpyxl round trip of the same table)
    merged = sheets["scores"].merge(table, on=["model", "reference", "metric"], suffixes=("_x", "_c"))
    np.testing.assert_allclose(merged["value_x"], merged["value_c"], rtol=1e-12, equal_nan=True)

    name, data = download(page, ".gs-download-md")
    text = data.decode("utf-8")
    assert name.endswith(".md") and all(r in text for r in runs) and "|" in text

    name, data = download(page, ".gs-download-tex")
    text = data.decode("utf-8")
    assert name.endswith(".tex") and "\\begin{tabular}" in text and "\\end{tabular}" in text
    assert session.errors() == []
    session.close()


def test_figure_and_field_downloads_are_valid_files(browser, served) -> None:
    url, _ = served
    session = open_dashboard(browser, url + "/?field=difference")
    page = session.page
    wait_for_view(page, "maps")
    wait_for_query(page, field="difference", tab="maps")
    request = query(page)

    name, data = download(page, ".gs-view-maps .gs-download-nc")
    assert name.endswith(".nc")
    with _open_netcdf(data) as ds:
        field = ds[f"{request['variable']}_difference"]
        assert field.dims == ("time", "lat", "lon") and field.sizes["time"] == 1  # a CF climatology of one step
        assert "units" in field.attrs and ds.attrs["Conventions"].startswith("CF-")
        assert json.loads(ds.attrs["provenance"])["period"] == request["period"]
        assert np.isfinite(field.values).any()

    page.locator(".gs-download-png button").first.wait_for()
    name, data = download(page, ".gs-download-png")
    assert name.endswith(".png")
    image = Image.open(io.BytesIO(data))
    assert image.format == "PNG" and image.width > 400 and image.height > 200

    name, data = download(page, ".gs-download-svg")
    assert name.endswith(".svg")
    root = ET.fromstring(data)
    assert root.tag.endswith("svg")

    click_tab(page, "taylor")
    name, data = download(page, ".gs-download-png")
    assert Image.open(io.BytesIO(data)).format == "PNG" and "taylor" in name
    assert session.errors() == []
    session.close()


def _open_netcdf(data: bytes):
    """Open NetCDF bytes with the netCDF4 engine (it reads files only: use a temporary one)."""
    import tempfile

    handle = tempfile.NamedTemporaryFile(suffix=".nc", delete=False)
    handle.write(data)
    handle.close()
    ds = xr.open_dataset(handle.name, engine="netcdf4").load()
    Path(handle.name).unlink()
    return ds


# ---------------------------------------------------------------------------- maps interaction
def test_map_hover_and_box_select(browser, served) -> None:
    url, _ = served
    session = open_dashboard(browser, url + "/?field=difference")
    page = session.page
    wait_for_view(page, "maps")
    canvas = page.locator(".gs-view-maps canvas").first
    box = canvas.bounding_box()
    # hover: latitude, longitude and the value with its units
    page.mouse.move(box["x"] + box["width"] * 0.35, box["y"] + box["height"] * 0.4)
    deadline = time.monotonic() + 10
    while not any("Latitude" in t for t in page.locator(".bk-tooltip-content").all_text_contents()):
        assert time.monotonic() < deadline, "no hover tooltip on the map"
        page.mouse.move(box["x"] + box["width"] * 0.36, box["y"] + box["height"] * 0.41)
        page.wait_for_timeout(100)
    tip = next(t for t in page.locator(".bk-tooltip-content").all_text_contents() if "Latitude" in t)
    assert "Longitude" in tip and "Difference" in tip
    # drag a box with the box-select tool: it becomes the region
    page.locator(".gs-view-maps [title='Box Select']").first.click()
    x0, y0 = box["x"] + box["width"] * 0.3, box["y"] + box["height"] * 0.3
    page.mouse.move(x0, y0)
    page.mouse.down()
    page.mouse.move(x0 + 120, y0 + 60, steps=8)
    page.mouse.up()
    deadline = time.monotonic() + 30
    while not query(page).get("region", "").startswith("box:"):
        assert time.monotonic() < deadline, f"the drawn box did not become the region ({page.url})"
        page.wait_for_timeout(50)
    south, north, west, east = (float(v) for v in query(page)["region"][4:].split(","))
    assert -90 <= south < north <= 90 and -180 <= west < east <= 180
    assert session.errors() == []
    session.close()


def test_closed_sessions_are_released(browser, served) -> None:
    """Open and close sessions; their selection state must not stay in memory (panel#4116)."""
    import gc

    from app.state import Selection

    url, _ = served

    def alive() -> int:
        gc.collect()
        return sum(isinstance(o, Selection) for o in gc.get_objects())

    before = alive()
    for _ in range(4):
        session = open_dashboard(browser, url + "/?tab=series")
        wait_for_view(session.page, "series")
        session.close()
    deadline = time.monotonic() + 20
    while alive() > before:
        assert time.monotonic() < deadline, f"{alive() - before} closed sessions still hold their state"
        time.sleep(0.25)
