"""Several references in headless Chromium, on the sample collection.

The sample holds two temperature references (tessera-obs, halyard-rean).  With tas chosen,
the zonal mean must draw the references' spread as a band, the Taylor diagram must place
the second reference as a point of its own, and the score page must state the rule.  The
figures are Bokeh canvases: what they hold is read from the page's Bokeh document (the
legend items), not from pixels.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

from app.views.results import Results
from evaluation.catalog import Collection

from .conftest import open_dashboard, serving, wait_for_view

pytestmark = pytest.mark.browser

#: Where the lead looks at the picture.
#: where a run by hand keeps its screenshots to look at (unset: none are kept)
NOTES = Path(os.environ["GRIDSCORE_SCREENSHOTS"]) if os.environ.get("GRIDSCORE_SCREENSHOTS") else None

#: Every legend label and every glyph type of the page's Bokeh documents.
_MODELS_JS = """() => {
  const labels = [], glyphs = [];
  for (const doc of Bokeh.documents) {
    const models = doc.all_models ?? doc._all_models?.values() ?? [];
    for (const m of models) {
      if (m.type === "LegendItem") {
        const l = m.label;
        labels.push(typeof l === "string" ? l : (l && (l.value ?? l.toString())) || "");
      }
      if (m.type === "GlyphRenderer") glyphs.push(m.glyph.type);
    }
  }
  return {labels, glyphs};
}"""


@pytest.fixture(scope="module")
def served(sample_manifest: Path):
    results = Results(Collection.from_path(sample_manifest))
    if len(results.references("tas")) < 2:
        pytest.skip("the collection served has one temperature reference only")
    with serving(results) as url:
        yield url
    results.close()


def drawn(page) -> dict:
    for _ in range(500):
        found = page.evaluate(_MODELS_JS)
        if found["labels"]:
            return found
        page.wait_for_timeout(20)
    return page.evaluate(_MODELS_JS)


def test_band_and_second_reference_point(browser, served, screenshots: Path) -> None:
    session = open_dashboard(browser, served + "/?variable=tas&reference=tessera-obs&tab=zonal")
    page = session.page
    wait_for_view(page, "zonal")
    found = drawn(page)
    assert any(label.startswith("reference spread (tessera-obs, halyard-rean)") for label in found["labels"]), found["labels"]
    assert {"VArea", "Patch"} & set(found["glyphs"]), found["glyphs"]  # the band is a filled area
    session.close()

    # the Arctic series, where the second reference is 1 K warmer: a band wide enough to see
    session = open_dashboard(browser, served + "/?variable=tas&reference=tessera-obs&region=arctic&tab=series")
    page = session.page
    wait_for_view(page, "series")
    assert any(label.startswith("reference spread (") for label in drawn(page)["labels"])
    page.wait_for_timeout(500)  # let the canvas finish painting before the picture
    page.screenshot(path=str(screenshots / "obs-spread.png"), full_page=True)
    if NOTES is not None and NOTES.is_dir():
        shutil.copy(screenshots / "obs-spread.png", NOTES / "obs-spread.png")
    assert session.errors() == []
    session.close()

    session = open_dashboard(browser, served + "/?variable=tas&reference=tessera-obs&tab=taylor")
    page = session.page
    wait_for_view(page, "taylor")
    labels = drawn(page)["labels"]
    assert "tessera-obs (reference)" in labels and "halyard-rean (alternative reference)" in labels, labels
    page.wait_for_timeout(500)
    page.screenshot(path=str(screenshots / "obs-spread-taylor.png"), full_page=True)
    assert session.errors() == []
    session.close()

    session = open_dashboard(browser, served + "/?variable=tas&reference=tessera-obs&tab=scores")
    page = session.page
    wait_for_view(page, "scores", what=".tabulator-row")
    rule = page.locator(".gs-obs-rule")
    rule.first.wait_for()
    assert "within observational uncertainty" in rule.first.text_content()
    # the text column naming the tied metrics (a marker that is not colour alone)
    assert page.get_by_text("≈ best (obs. uncertainty)").count() >= 1
    page.wait_for_timeout(300)
    page.screenshot(path=str(screenshots / "obs-spread-scores.png"), full_page=True)
    assert session.errors() == []
    session.close()
