"""The sample's invented ensemble in headless Chromium.

The ensemble is one entry of the run list that expands to its members while it is ticked;
the time series and the seasonal cycle draw its members' range as a band in its colour
with the ensemble mean as a line, and the Taylor diagram draws the members as a cloud of
small points beside one point for the mean.  What the figures hold is read from the page's
Bokeh document (legend items), not from pixels.
"""

from __future__ import annotations

from pathlib import Path
from urllib.parse import parse_qs, urlsplit

import pytest

from app.views.results import Results
from evaluation.catalog import Collection

from .conftest import open_dashboard, serving, wait_for_view
from .test_observational_spread import drawn

pytestmark = pytest.mark.browser

MEAN = "fennel%20(ensemble%20mean)"


@pytest.fixture(scope="module")
def served(sample_manifest: Path):
    collection = Collection.from_path(sample_manifest)
    if not collection.ensembles:
        pytest.skip("the collection served has no ensemble")
    results = Results(collection)
    with serving(results) as url:
        yield url
    results.close()


def run_list(page) -> list[str]:
    return [t.strip() for t in page.locator(".gs-models label").all_inner_texts()]


def figure_of(browser, url: str, tab: str, picture: Path) -> dict:
    """Legend labels and glyph types of one view opened at ``url``, with a screenshot."""
    session = open_dashboard(browser, url)
    wait_for_view(session.page, tab)
    found = drawn(session.page)
    session.page.wait_for_timeout(500)  # let the canvas finish painting before the picture
    session.page.screenshot(path=str(picture), full_page=True)
    errors = session.errors()
    session.close()
    assert errors == []
    return found


@pytest.mark.parametrize("tab", ["series", "cycle"])
def test_members_range_as_a_band_and_the_mean_as_a_line(browser, served, screenshots: Path, tab: str) -> None:
    found = figure_of(browser, served + f"/?variable=tas&models=larkspur-2,{MEAN}&tab={tab}", tab, screenshots / f"ensemble-{tab}.png")
    labels = found["labels"]
    assert "fennel: members' range (3)" in labels, labels
    assert any(label.startswith("fennel (ensemble mean)") for label in labels), labels
    # members not ticked are in the band only, not lines of their own
    assert not any(label.startswith("fennel-r") for label in labels), labels
    assert {"VArea", "Patch"} & set(found["glyphs"]), found["glyphs"]


def test_taylor_members_as_a_cloud_and_the_mean_as_one_point(browser, served, screenshots: Path) -> None:
    url = served + f"/?variable=tas&models=larkspur-2,{MEAN}&tab=taylor&taylor=units"
    labels = figure_of(browser, url, "taylor", screenshots / "ensemble-taylor.png")["labels"]
    assert "fennel: members (3)" in labels and "fennel (ensemble mean)" in labels, labels


def test_the_ensemble_is_one_entry_that_expands_to_its_members(browser, served) -> None:
    session = open_dashboard(browser, served + "/?variable=tas&models=larkspur-2&tab=series")
    page = session.page
    wait_for_view(page, "series")
    entries = run_list(page)
    assert "fennel (ensemble mean of 3)" in entries and not any(e.startswith("↳") for e in entries), entries
    page.locator(".gs-models label", has_text="fennel (ensemble mean of 3)").click()
    for _ in range(300):
        if any(e.startswith("↳") for e in run_list(page)):
            break
        page.wait_for_timeout(20)
    assert [e for e in run_list(page) if e.startswith("↳")] == ["↳ fennel-r1", "↳ fennel-r2", "↳ fennel-r3"]
    # a member ticked on its own is a line; the link names the mean and the member
    page.locator(".gs-models label", has_text="↳ fennel-r2").click()
    for _ in range(300):
        if "fennel-r2" in page.url:
            break
        page.wait_for_timeout(20)
    models = parse_qs(urlsplit(page.url).query)["models"][0]
    assert models.split(",") == ["larkspur-2", "fennel (ensemble mean)", "fennel-r2"], page.url
    wait_for_view(page, "series")
    for _ in range(300):
        if any(label.startswith("fennel-r2") for label in drawn(page)["labels"]):
            break
        page.wait_for_timeout(50)
    assert any(label.startswith("fennel-r2") for label in drawn(page)["labels"])
    assert session.errors() == []
    session.close()
