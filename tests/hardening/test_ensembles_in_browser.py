"""Ensembles, the overview's hover and the link keys ``taylor``, ``sort`` and ``overview_by``
with hostile names, in the browser: every name is text (no dialog opens, no element of a
name's markup appears), the hover shows the names as written.

The collection is the reference and three runs, each the reference plus a constant; two of
them form an ensemble whose name is markup.  The values are not checked here (the numbers
are tested in tests/validation); what is checked is where the names land.
"""

from __future__ import annotations

import pytest
from browser.conftest import open_dashboard, wait_for_view

from .hostile import ENSEMBLE, ENSEMBLE_RUNS, ensemble_collection
from .live import served

pytestmark = pytest.mark.browser

RUNS = ENSEMBLE_RUNS

# every tooltip row value on the page (Bokeh draws tooltips in shadow roots)
_TOOLTIP_VALUES = """() => { const out = []; const walk = (root) => { for (const e of root.querySelectorAll('*')) {
  if (e.shadowRoot) walk(e.shadowRoot);
  if (String(e.className).includes('bk-tooltip-row-value')) out.push(e.textContent.trim()); } };
  walk(document); return out; }"""


@pytest.fixture(scope="module")
def app_url(tmp_path_factory):
    yield from served(ensemble_collection(tmp_path_factory.mktemp("ensembles")))


def _open(browser, url: str):
    session = open_dashboard(browser, url)
    dialogs: list[str] = []
    session.page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
    return session, dialogs


def _nothing_ran(page, dialogs: list[str]) -> None:
    assert dialogs == [], dialogs
    for selector in ("img[src='x']", "svg[onload]"):
        assert page.locator(selector).count() == 0, selector


def test_the_overview_hover_shows_hostile_names_as_text(browser, app_url) -> None:
    session, dialogs = _open(browser, app_url + "/?tab=overview&overview_by=variable")
    page = session.page
    wait_for_view(page, "overview")
    canvases = page.locator(".gs-view-overview canvas")
    boxes = [b for b in (canvases.nth(i).bounding_box() for i in range(canvases.count())) if b]
    plot = max(boxes, key=lambda b: b["width"] * b["height"])
    seen: set[str] = set()
    y = plot["y"] + 2
    while y < plot["y"] + plot["height"] and not {RUNS["m3"][0], f"{ENSEMBLE} (ensemble mean)"} <= seen:
        x = plot["x"] + 2
        while x < plot["x"] + plot["width"]:
            page.mouse.move(x, y)
            seen.update(page.evaluate(_TOOLTIP_VALUES))
            x += 4
        y += 4
    # the hover names the run as written: the ensemble's mean row and a run named as markup
    assert RUNS["m3"][0] in seen and f"{ENSEMBLE} (ensemble mean)" in seen, seen
    _nothing_ran(page, dialogs)
    assert session.errors() == []
    session.close()


@pytest.mark.parametrize("query", ["tab=scores&sort=-rmse", "tab=taylor&taylor=absolute", "tab=overview&overview_by=season"])
def test_link_keys_with_an_ensemble_of_hostile_names(browser, app_url, query: str) -> None:
    session, dialogs = _open(browser, f"{app_url}/?{query}")
    page = session.page
    tab = query.split("&")[0].split("=")[1]
    wait_for_view(page, tab, what=".tabulator-row" if tab == "scores" else "canvas")
    key, value = query.split("&")[1].split("=")
    assert f"{key}={value}" in page.url  # the link keeps the value asked for
    assert page.locator(".gs-notice").count() == 0, page.locator(".gs-notice").all_text_contents()
    if tab == "scores":
        rows = page.locator(".gs-view-scores .tabulator-row").all_text_contents()
        # the ensemble's mean row (the page shows no spread rows) carries its name as text
        assert any(ENSEMBLE in r and "(ensemble mean)" in r for r in rows), rows
    _nothing_ran(page, dialogs)
    assert page.locator(f".gs-view-{tab} .gs-error").count() == 0
    assert session.errors() == []
    session.close()
