"""Dots on the maps and the best-marking rule in headless Chromium, on the sample collection.

The dots are a Bokeh Scatter glyph over the image of each run-minus-reference and trend
map, read from the page's Bokeh documents; the legend sentence and the rule are page text.
"""

from __future__ import annotations

import pytest

from app.views.maps import STIPPLE_LEGEND
from evaluation.bootstrap import BEST_RULE

from .conftest import PAGE_MODELS_JS, open_dashboard, wait_for_view

pytestmark = pytest.mark.browser

#: Glyph types of the page's Bokeh documents, with the number of points of each Scatter.
_GLYPHS_JS = """() => {
  const found = [];
  for (const m of """ + PAGE_MODELS_JS + """) {
    if (m.type === "GlyphRenderer") {
      const data = m.data_source && m.data_source.data;
      const column = data ? (data instanceof Map ? [...data.values()][0] : Object.values(data)[0]) : null;
      const n = column ? column.length : -1;
      found.push([m.glyph.type, n]);
    }
  }
  return found;
}"""


def glyphs(page) -> list:
    for _ in range(500):
        found = page.evaluate(_GLYPHS_JS)
        if any(kind == "Scatter" for kind, _ in found):
            return found
        page.wait_for_timeout(20)
    return page.evaluate(_GLYPHS_JS)


@pytest.mark.parametrize("field", ["difference", "model_trend"])
def test_maps_are_stippled_with_the_legend(browser, served_sample, screenshots, field) -> None:
    session = open_dashboard(browser, served_sample + f"/?field={field}")
    page = session.page
    wait_for_view(page, "maps", timeout_ms=300_000)  # the first view reduces the sample cold
    dots = [n for kind, n in glyphs(page) if kind == "Scatter"]
    # one set of dots per map; the sample's injected biases and trends leave dots on every map
    assert len(dots) >= 2 and all(n > 0 for n in dots), dots
    legend = STIPPLE_LEGEND[0].upper() + STIPPLE_LEGEND[1:]
    assert page.get_by_text(legend, exact=False).count() >= 1
    page.wait_for_timeout(500)
    page.screenshot(path=str(screenshots / f"stippled-{field}.png"), full_page=True)
    session.close()


# trend-difference maps carry dots too: tests/browser/test_trend_difference_dots.py


def test_score_page_states_the_best_rule(browser, served_sample) -> None:
    session = open_dashboard(browser, served_sample + "/?variable=tas&tab=scores")
    page = session.page
    wait_for_view(page, "scores", what=".tabulator", timeout_ms=300_000)
    assert page.locator(".gs-best-rule").count() == 1
    assert "rmse_diff_hi < 0" in page.locator(".gs-best-rule").inner_text()
    assert BEST_RULE[:60] in page.locator(".gs-best-rule").inner_text()
    session.close()
