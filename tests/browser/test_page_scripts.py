"""The page runs without the scripts it does not need (app.server.serve_needed_scripts).

Bokeh's TeX bundle (bokeh-mathjax), its WebGL bundle (bokeh-gl) and Panel's module shim
(es-module-shims) are left out of a gridscore page.  A model whose bundle is missing makes
BokehJS log "Model 'X' does not exist" (BokehJS's resolver, common practice to look for):
every tab, every map field, the downloads and the Taylor diagram are opened and the console
must stay free of errors.  Names that look like TeX or HTML stay text: Bokeh typesets
``$$...$$``, ``\\[...\\]`` and ``\\(...\\)`` in text models with math on (Bokeh
documentation, "Mathematical notation"); a single ``$`` is not a delimiter there.
"""

from __future__ import annotations

import re
import time
from pathlib import Path
from urllib.parse import parse_qs, urlparse

import pytest

from app.state import FIELDS, TABS

from .conftest import PAGE_MODELS_JS, open_dashboard, serving, wait_for_view

pytestmark = pytest.mark.browser

#: What shows that a view has drawn (the sample's first variable has no levels: the
#: vertical section says so instead of drawing).
DRAWN = {tab: "canvas" for tab in TABS} | {"scores": ".tabulator-row", "budget": ".tabulator-row", "section": "canvas, .gs-empty"}
LEFT_OUT = ("bokeh-mathjax", "bokeh-gl", "es-module-shims")
#: The file names of the scripts the page loaded (Resource Timing entries).
LOADED_SCRIPTS_JS = """() => performance.getEntriesByType("resource")
  .map(e => e.name.split("?")[0].split("/").pop()).filter(n => n.endsWith(".js"))"""
#: Run names that hold TeX delimiters or markup.
SINGLE_DOLLAR = "$x^2$ <b>y</b>"
DELIMITED = "$$\\alpha$$ \\(z\\) <i>w</i>"


def _query(page) -> dict[str, str]:
    return {k: v[0] for k, v in parse_qs(urlparse(page.url).query).items()}


def _wait_for_field(page, field: str) -> None:
    deadline = time.monotonic() + 60
    while _query(page).get("field") != field:
        assert time.monotonic() < deadline, f"URL {page.url} does not hold field={field}"
        page.wait_for_timeout(20)
    wait_for_view(page, "maps")


def _no_missing_models(messages: list[str]) -> None:
    missing = [m for m in messages if "does not exist" in m or "importShim" in m or "is not defined" in m]
    assert missing == [], missing


def test_every_tab_renders_without_the_left_out_scripts(browser, served_sample) -> None:
    session = open_dashboard(browser, served_sample + "/")
    page = session.page
    wait_for_view(page, "maps")
    loaded = page.evaluate(LOADED_SCRIPTS_JS)
    assert {"bokeh.min.js", "bokeh-widgets.min.js", "bokeh-tables.min.js", "panel.min.js", "tabulator.min.js"} <= set(loaded), loaded
    assert not [name for name in loaded if name.startswith(LEFT_OUT)], loaded
    # every map field, then a field's NetCDF and the maps' PNG
    for field, label in FIELDS.items():
        page.locator(".gs-field").get_by_text(label, exact=True).click()
        _wait_for_field(page, field)
    with page.expect_download() as nc:
        page.locator(".gs-view-maps .gs-download-nc button").first.click()
    assert nc.value.suggested_filename.endswith(".nc")
    with page.expect_download() as png:
        page.locator(".gs-download-png button").first.click()
    assert Path(png.value.path()).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # the PNG signature (PNG spec)
    # every tab offered, the score table and the Taylor diagram among them
    offered = [t for t in TABS if page.locator(".gs-tabs").get_by_text(TABS[t], exact=True).count()]
    assert {"scores", "taylor", "overview"} <= set(offered)
    for tab in offered[1:]:
        page.locator(".gs-tabs").get_by_text(TABS[tab], exact=True).first.click()
        wait_for_view(page, tab, what=DRAWN[tab])
        assert page.locator(f".gs-view-{tab} .gs-error").count() == 0, tab
    # no script was fetched later either
    assert not [name for name in page.evaluate(LOADED_SCRIPTS_JS) if name.startswith(LEFT_OUT)]
    _no_missing_models(session.messages)
    assert session.errors() == []
    session.close()


@pytest.fixture(scope="module")
def tex_names(tmp_path_factory):
    """A collection whose run names hold TeX delimiters and markup (manifest names)."""
    from hardening.hostile import toml_text, write_run

    from app.views.results import Results
    from evaluation.catalog import Collection

    root = tmp_path_factory.mktemp("tex-names")
    for folder, offset in (("ref", 0.0), ("a", 1.0), ("b", -1.0)):
        write_run(root / folder, offset=offset)
    manifest = root / "manifest.toml"
    manifest.write_text(
        '[[source]]\nname = "ref"\nrole = "reference"\npaths = ["ref/*.nc"]\n'
        f'[[source]]\nname = {toml_text(SINGLE_DOLLAR)}\nrole = "model"\npaths = ["a/*.nc"]\n'
        f'[[source]]\nname = {toml_text(DELIMITED)}\nrole = "model"\npaths = ["b/*.nc"]\n', encoding="utf-8")
    results = Results(Collection.from_path(manifest))
    with serving(results) as url:
        yield url
    results.close()


#: The text of every plot title and axis label of the page: a string, or the class and text of a text model.
TITLES_JS = f"""() => {PAGE_MODELS_JS}
  .filter(m => m.constructor.__name__ === "Title" || "axis_label" in m)
  .map(m => m.constructor.__name__ === "Title" ? m.text : m.axis_label)
  .filter(t => t != null && t !== "")
  .map(t => typeof t === "string" ? ["string", t] : [t.constructor.__name__, t.text])"""


def test_names_with_dollars_and_markup_are_shown_as_written(browser, tex_names) -> None:
    session = open_dashboard(browser, tex_names + "/?field=model_mean")
    page = session.page
    wait_for_view(page, "maps")
    for name in (SINGLE_DOLLAR, DELIMITED):
        # the run list and the download buttons show the name's characters, markup included
        assert page.get_by_text(name, exact=False).count() >= 1, name
    # no element made of the names' markup (an element holding only "y" or "w")
    assert page.locator("b", has_text=re.compile(r"^y$")).count() == 0
    assert page.locator("i", has_text=re.compile(r"^w$")).count() == 0
    titles = page.evaluate(TITLES_JS)
    named = [t for t in titles if SINGLE_DOLLAR in t[1] or DELIMITED in t[1]]
    assert len(named) >= 2, titles
    # a title with TeX delimiters is drawn as plain text; one with single dollars stays a string
    assert all(kind == "PlainText" for kind, text in named if DELIMITED in text), named
    assert all(kind in ("string", "PlainText") for kind, _ in named), named
    for tab in ("series", "taylor", "scores"):
        page.locator(".gs-tabs").get_by_text(TABS[tab], exact=True).first.click()
        wait_for_view(page, tab, what=DRAWN[tab])
    assert page.get_by_text(SINGLE_DOLLAR, exact=False).count() >= 1
    _no_missing_models(session.messages)
    assert session.errors() == []
    session.close()
