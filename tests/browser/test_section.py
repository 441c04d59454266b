"""The vertical section and the level control in headless Chromium, on the sample collection.

The sample holds air temperature on pressure levels (ta) for the reference and one run on
a different set of levels; a link with ``level=500hPa`` must select that level, and the
section view must draw the reference, the run and their difference.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path
from urllib.parse import parse_qs, urlparse

import pytest

from app.views.results import Results
from evaluation.catalog import Collection

from .conftest import open_dashboard, serving, wait_for_view

pytestmark = pytest.mark.browser

#: Where the lead looks at the section view.
#: where a run by hand keeps its screenshots to look at (unset: none are kept)
NOTES = Path(os.environ["GRIDSCORE_SCREENSHOTS"]) if os.environ.get("GRIDSCORE_SCREENSHOTS") else None


@pytest.fixture(scope="module")
def served(sample_manifest: Path):
    results = Results(Collection.from_path(sample_manifest))
    with serving(results) as url:
        yield url
    results.close()


def query(page) -> dict[str, str]:
    return {k: v[0] for k, v in parse_qs(urlparse(page.url).query, keep_blank_values=True).items()}


def wait_for(page, **expected: str) -> None:
    for _ in range(1500):
        if all(query(page).get(k) == v for k, v in expected.items()):
            return
        page.wait_for_timeout(20)
    raise AssertionError(f"URL {page.url} does not hold {expected}")


def test_section_draws_and_a_link_selects_the_level(browser, served, screenshots: Path) -> None:
    session = open_dashboard(browser, served + "/?variable=ta&level=500hPa&tab=section")
    page = session.page
    wait_for_view(page, "section")
    wait_for(page, variable="ta", level="500 hPa", tab="section")  # the link's spelling, read with units
    body = page.locator(".gs-view-section")
    assert body.locator(".gs-error").count() == 0, body.text_content()
    # reference, run and difference panels, and the section scores of the run
    assert body.locator("canvas").count() >= 3
    scores = body.locator(".gs-section-scores")
    scores.wait_for()
    assert "larkspur-2" in scores.text_content()
    level = page.locator(".gs-level select")
    assert level.is_visible() and level.evaluate("e => e.value") == "500 hPa"
    page.wait_for_timeout(500)  # let the canvases finish painting before the picture
    page.screenshot(path=str(screenshots / "section.png"), full_page=True)
    if NOTES is not None and NOTES.is_dir():
        shutil.copy(screenshots / "section.png", NOTES / "section.png")
    # choosing another level changes the link (the section itself shows every level)
    level.select_option(label="850 hPa")
    wait_for(page, level="850 hPa")
    assert session.errors() == []
    session.close()


def test_level_control_is_hidden_without_levels(browser, served) -> None:
    session = open_dashboard(browser, served + "/?variable=tas&tab=scores")
    page = session.page
    wait_for_view(page, "scores", what=".tabulator-row")
    wait_for(page, variable="tas", level="")
    assert not page.locator(".gs-level select").is_visible()
    assert session.errors() == []
    session.close()
