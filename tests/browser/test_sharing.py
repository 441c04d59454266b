"""Sharing a view: every value of the page goes into the link, and a link opened in a fresh
browser shows the same view at once (its period from the start, never a placeholder).

Run in headless Chromium on the sample collection.  Expected values come from the link the
test writes, from the folders on disk, or from ordering the numbers the page shows.
"""

from __future__ import annotations

import json
import os
import re
import time
from pathlib import Path
from urllib.parse import parse_qs, urlparse

import pytest
from cfdata import netcdf_dataset

from app.state import QUERY_NAMES
from app.views.results import Results, wait_until_idle
from evaluation.catalog import Collection

from .conftest import open_dashboard, serving, wait_for_view

pytestmark = pytest.mark.browser

#: A link in which every value differs from the default the sample opens on (tas, the first
#: three runs, global, ANN, 1991-2020, difference, the reference's grid, by variable,
#: normalised, collection order, maps).
EVERY_VALUE = {
    "variable": "pr",
    "level": "",
    "reference": "tessera-obs",
    "models": "larkspur-2,tidewell-3",
    "region": "arctic",
    "season": "JJA",
    "period": "1996-2015",
    "field": "model_trend",
    "target_grid": "2.5x2.5",
    "overview_by": "season",
    "taylor": "absolute",
    "sort": "-rmse",
    "tab": "taylor",
}

#: Bokeh models of the page: the period slider's value and the axis labels.
_MODELS_JS = """
() => {
  const out = {sliders: [], axes: []};
  if (typeof Bokeh === "undefined") return out;
  for (const doc of Bokeh.documents) {
    for (const m of doc.all_models) {
      const kind = String(m.type || (m.constructor && (m.constructor.__name__ || m.constructor.name)) || "");
      if (kind.endsWith("RangeSlider") && m.visible) out.sliders.push([m.title, m.value]);
      if (m.axis_label !== undefined && m.axis_label !== null) out.axes.push(String(m.axis_label));
    }
  }
  return out;
}
"""


@pytest.fixture(scope="module")
def served(sample_manifest: Path):
    results = Results(Collection.from_path(sample_manifest))
    with serving(results) as url:
        wait_until_idle()  # the server's warm-up has opened every variable's comparison
        yield url, sample_manifest.parent, results
    results.close()


def query(page) -> dict[str, str]:
    return {k: v[0] for k, v in parse_qs(urlparse(page.url).query, keep_blank_values=True).items()}


def wait_for_query(page, *, timeout_s: float = 90.0, **expected: str) -> dict[str, str]:
    deadline = time.monotonic() + timeout_s
    while True:
        now = query(page)
        if set(now) == set(QUERY_NAMES) and all(now.get(k) == v for k, v in expected.items()):
            return now
        if time.monotonic() > deadline:
            raise AssertionError(f"URL {page.url} does not hold {expected}")
        page.wait_for_timeout(50)


def link(values: dict[str, str]) -> str:
    return "/?" + "&".join(f"{k}={v}" for k, v in values.items())


def period_notes(page) -> list[str]:
    """The line under the period slider: its years, or that they are being looked up."""
    return [t for t in page.locator(".gs-hint").all_text_contents() if re.match(r"^(\d{4}–\d{4}, \d+ years?$|checking the years)", t)]


def run_order(page) -> list[str]:
    return page.locator('.gs-view-scores .tabulator-row .tabulator-cell[tabulator-field="Run"]').all_text_contents()


def column(page, field: str) -> list[float]:
    texts = page.locator(f'.gs-view-scores .tabulator-row .tabulator-cell[tabulator-field="{field}"]').all_text_contents()
    return [float(t.replace(",", "")) for t in texts]


def test_every_state_value_survives_a_link_round_trip(browser, served) -> None:
    url, _, _ = served
    first = open_dashboard(browser, url + link(EVERY_VALUE))
    wait_for_view(first.page, "taylor")
    shown = wait_for_query(first.page, **EVERY_VALUE)
    assert shown == EVERY_VALUE
    assert first.page.locator(".gs-notice").count() == 0, first.page.locator(".gs-notice").all_text_contents()
    copied = first.page.url
    first.close()

    # the link copied from that page, opened in a fresh browser context (no shared state)
    second = open_dashboard(browser, copied)
    wait_for_view(second.page, "taylor")
    assert wait_for_query(second.page, **EVERY_VALUE) == EVERY_VALUE
    # the Taylor diagram in the variable's units (mm day-1 for precipitation), not normalised
    axes = second.page.evaluate(_MODELS_JS)["axes"]
    assert "Standard deviation (mm day-1)" in axes, axes
    assert not any("[" in a for a in axes), axes
    assert second.errors() == []
    second.close()


def test_a_header_click_sorts_every_table_and_goes_into_the_link(browser, served) -> None:
    url, _, _ = served
    values = {"variable": "tas", "models": "larkspur-2,pumice-ctl,tidewell-3,cobble-b", "tab": "scores"}
    session = open_dashboard(browser, url + link(values))
    page = session.page
    wait_for_view(page, "scores", what=".tabulator-row")
    wait_for_query(page, sort="")
    page.locator('.gs-view-scores .tabulator-col[tabulator-field="rmse"] .tabulator-col-title').first.click()
    deadline = time.monotonic() + 30
    while query(page)["sort"] not in ("rmse", "-rmse"):
        assert time.monotonic() < deadline, page.url
        page.wait_for_timeout(50)
    sort = query(page)["sort"]
    # the view is drawn again in that order: every table of it (climatology, trends, ...)
    # lists the runs in the same order
    n = len(values["models"].split(","))
    deadline = time.monotonic() + 60
    while True:
        runs = run_order(page)
        tables = [runs[i:i + n] for i in range(0, len(runs), n)]
        if len(runs) % n == 0 and len(tables) >= 2 and all(t == tables[0] for t in tables):
            break
        assert time.monotonic() < deadline, runs
        page.wait_for_timeout(100)
    rmse = column(page, "rmse")
    expected = sorted(rmse, reverse=sort.startswith("-"))  # ordering of the numbers shown (common practice)
    assert rmse == expected, (sort, rmse)

    # the link opens sorted in a fresh context
    again = open_dashboard(browser, page.url)
    wait_for_view(again.page, "scores", what=".tabulator-row")
    again.page.wait_for_timeout(500)
    assert run_order(again.page) == runs
    assert query(again.page)["sort"] == sort
    assert session.errors() == [] and again.errors() == []
    session.close()
    again.close()


def test_the_taylor_scale_control_goes_into_the_link(browser, served) -> None:
    url, _, _ = served
    session = open_dashboard(browser, url + link({"variable": "tas", "tab": "taylor"}))
    page = session.page
    wait_for_view(page, "taylor")
    assert wait_for_query(page)["taylor"] == "normalised"
    assert "Standard deviation (normalised)" in page.evaluate(_MODELS_JS)["axes"]
    page.locator(".gs-taylor-scale").get_by_text("In the variable's units").click()
    wait_for_query(page, taylor="absolute")
    deadline = time.monotonic() + 30
    while "Standard deviation (K)" not in page.evaluate(_MODELS_JS)["axes"]:
        assert time.monotonic() < deadline, page.evaluate(_MODELS_JS)["axes"]
        page.wait_for_timeout(100)
    assert session.errors() == []
    session.close()


@pytest.mark.parametrize("values", [
    {"variable": "pr", "period": "1996-2015", "tab": "scores"},
    {"variable": "rlut", "period": "2003-2018", "region": "arctic", "tab": "taylor"},
])
@pytest.mark.parametrize("cold", [False, True], ids=["years-known", "years-looked-up"])
def test_a_reopened_link_opens_on_its_period(browser, served, values: dict[str, str], cold: bool) -> None:
    """From the first moment the page shows a period slider, it shows the link's years, never
    a placeholder (1900 .. 2000); with the comparison open (the server opens every variable's
    at start) the page never says "checking the years…"."""
    url, _, results = served
    if cold:
        results._comparisons.clear()  # as after a change of the files: the years must be looked up again
    first, last = (int(y) for y in values["period"].split("-"))
    context = browser.new_context(viewport={"width": 1600, "height": 1000})
    page = context.new_page()
    page.goto(url + link(values), wait_until="commit")
    seen_sliders: list = []
    seen_notes: list[str] = []
    deadline = time.monotonic() + 60
    while True:
        sliders = [s[1] for s in page.evaluate(_MODELS_JS)["sliders"]]
        notes = period_notes(page)
        seen_sliders += [s for s in sliders if s not in seen_sliders]
        seen_notes += [n for n in notes if n not in seen_notes]
        if seen_sliders and seen_notes:
            break
        assert time.monotonic() < deadline, (seen_sliders, seen_notes)
        page.wait_for_timeout(20)
    page.wait_for_timeout(1000)  # and it stays so
    seen_sliders += [s[1] for s in page.evaluate(_MODELS_JS)["sliders"] if s[1] not in seen_sliders]
    seen_notes += [t for t in period_notes(page) if t not in seen_notes]
    assert seen_sliders == [[first, last]], seen_sliders
    if not cold:
        assert not any("checking" in n for n in seen_notes), seen_notes
    assert seen_notes[-1].startswith(f"{first}–{last}"), seen_notes
    context.close()


def test_the_table_downloads_list_the_files_of_the_table_only(browser, served) -> None:
    url, sample, _ = served
    session = open_dashboard(browser, url + link({"variable": "tas", "models": "larkspur-2,cobble-b", "region": "land", "tab": "scores"}))
    page = session.page
    wait_for_view(page, "scores", what=".tabulator-row")
    with page.expect_download(timeout=60_000) as info:
        page.locator(".gs-download-provenance").first.locator("button, a").first.click()
    record = json.loads(Path(info.value.path()).read_bytes())
    listed = {i["path"] for i in record["inputs"]}
    # from the folders on disk: each source's near-surface temperature files, and the primary
    # reference's land fraction (a land region is scored); the other references are in the
    # table (scored against the primary), the unticked runs are not
    expected = set()
    for folder in (sample / "references" / "tessera-obs", sample / "references" / "halyard-rean",
                   sample / "runs" / "larkspur-2", sample / "runs" / "cobble-b"):
        expected |= {str(folder / f) for f in os.listdir(folder) if f.startswith("tas_")}
    expected |= {str(sample / "references" / "tessera-obs" / "sftlf_tessera-obs.nc")}
    assert listed == {os.path.abspath(p) for p in expected}
    for entry in record["inputs"]:
        assert entry["size"] == os.stat(entry["path"]).st_size
    assert session.errors() == []
    session.close()


def test_a_map_download_lists_the_files_of_its_run_and_reference(browser, served) -> None:
    url, sample, _ = served
    runs = ["larkspur-2", "pumice-ctl", "tidewell-3"]
    session = open_dashboard(browser, url + link({"variable": "tas", "models": ",".join(runs), "field": "difference", "tab": "maps"}))
    page = session.page
    wait_for_view(page, "maps")
    with page.expect_download(timeout=60_000) as info:
        page.locator(".gs-view-maps .gs-download-nc").first.locator("button, a").first.click()
    name = info.value.suggested_filename
    run = next(r for r in runs if r in name)
    with netcdf_dataset(info.value.path()) as nc:
        record = json.loads(nc.getncattr("provenance"))
    # from the folders on disk: the near-surface temperature files of that run and of the reference
    expected = {str(sample / "runs" / run / f) for f in os.listdir(sample / "runs" / run) if f.startswith("tas_")}
    expected |= {str(sample / "references" / "tessera-obs" / f) for f in os.listdir(sample / "references" / "tessera-obs") if f.startswith("tas_")}
    assert {i["path"] for i in record["inputs"]} == {os.path.abspath(p) for p in expected}
    assert session.errors() == []
    session.close()
