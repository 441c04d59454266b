"""Hostile run names on the maps stay text when the maps are updated in place.

The maps are plain Bokeh models whose titles are painted on a canvas, and a new season
only puts new titles and numbers into them.  Run names from folder names (markup, braces,
quotes, TeX delimiters) must appear in the titles exactly as written, before and after
the update, and nothing in them may run (a dialog listener catches every ``alert``).
Bokeh typesets a string title holding TeX delimiters with MathJax unless it is a
``PlainText`` model (Bokeh's documentation, "Mathematical notation").
"""

from __future__ import annotations

import time

import pytest
from browser.conftest import open_dashboard, wait_for_view
from browser.test_maps_in_place import MAPS_JS

from .hostile import FOLDER_BRACES, FOLDER_IMG, toml_text, write_run
from .live import served

pytestmark = pytest.mark.browser

TEX = "$$x^2$$ \\(y\\)"

@pytest.fixture(scope="module")
def hostile_app(tmp_path_factory):
    # names from a manifest: netCDF-C will not open a path holding "$" and "\\"
    root = tmp_path_factory.mktemp("names")
    text = ""
    for folder, name, role, offset in (("r", "ref {0}", "reference", 0.0), ("a", FOLDER_IMG, "model", 1.0),
                                       ("b", FOLDER_BRACES, "model", -0.5), ("c", TEX, "model", 2.0)):
        write_run(root / folder, offset=offset)
        text += f'[[source]]\nname = {toml_text(name)}\nrole = "{role}"\npaths = ["{folder}/*.nc"]\n'
    (root / "manifest.toml").write_text(text, encoding="utf-8")
    yield from served(root / "manifest.toml")


def _titles(page, season: str, timeout_s: float = 60) -> list[tuple[str, str, list[str]]]:
    """Each map's (type of its title text, title, model ids) once the maps show ``season``."""
    deadline = time.monotonic() + timeout_s
    while True:
        line = page.locator(".gs-hint", has_text="Showing:")
        if line.count() and f" · {season} · " in line.first.inner_text() and not page.locator(".gs-view-maps.pn-loading").count():
            found = [(m["title_type"], m["title"], m["ids"]) for m in page.evaluate(MAPS_JS)]
            if len(found) == 3:
                return found
        assert time.monotonic() < deadline, [m["title"] for m in page.evaluate(MAPS_JS)]
        page.wait_for_timeout(50)


def test_hostile_names_in_map_titles_stay_text_after_an_update(browser, hostile_app: str) -> None:
    session = open_dashboard(browser, hostile_app + "/?field=difference&season=ANN")
    page = session.page
    dialogs: list[str] = []
    page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
    wait_for_view(page, "maps")
    expected = sorted(f"{name} minus ref {{0}}" for name in (FOLDER_IMG, FOLDER_BRACES, TEX))
    annual = _titles(page, "ANN")
    assert sorted(t for _, t, _ in annual) == expected
    # the title with TeX delimiters is plain text; the others are plain strings (no delimiters)
    assert {kind for kind, t, _ in annual if t.startswith("$$")} == {"PlainText"}
    page.locator(".gs-season select").select_option(label="Jun–Aug (JJA)")
    summer = _titles(page, "JJA")
    assert summer == annual  # same titles, same models
    labels = page.locator(".gs-view-maps .gs-download-nc button").all_text_contents()
    assert sorted(labels) == expected
    assert dialogs == [] and page.evaluate("() => window.__xss === undefined")
    for selector in ("img[src='x']", "mjx-container", "svg[onload]"):
        assert page.locator(selector).count() == 0, selector
    assert session.errors() == []
    session.close()
