"""Hostile names from every source reach the page as text, never as markup or script.

Names come from folder names (a collection read by its layout), manifest fields, NetCDF
attributes and link values.  Each page is watched by a dialog listener (every payload
calls ``alert``) and checked for elements the payloads would create; every tab is opened.
Braces in names must not break the plots (HoloViews formats titles with ``str.format``).
One served app per collection, shared by the cases of this module.
"""

from __future__ import annotations

from urllib.parse import quote

import pytest
from browser.conftest import open_dashboard, wait_for_view

from app.state import QUERY_NAMES, TABS

from .hostile import (
    ATTRIBUTE_IMG,
    FOLDER_BRACES,
    FOLDER_IMG,
    FORMULA,
    MANIFEST_SCRIPT,
    MANIFEST_SVG,
    layout_collection,
    manifest_collection,
)
from .live import served

pytestmark = pytest.mark.browser

DRAWN = {tab: "canvas" for tab in TABS} | {"scores": ".tabulator-row"}


@pytest.fixture(scope="module")
def layout_app(tmp_path_factory):
    yield from served(layout_collection(tmp_path_factory.mktemp("layout")))


@pytest.fixture(scope="module")
def manifest_app(tmp_path_factory):
    yield from served(manifest_collection(tmp_path_factory.mktemp("manifest")))


def _watch(session) -> list[str]:
    dialogs: list[str] = []

    def on_dialog(dialog) -> None:
        dialogs.append(dialog.message)
        dialog.dismiss()

    session.page.on("dialog", on_dialog)
    return dialogs


def _nothing_ran(page, dialogs: list[str]) -> None:
    assert dialogs == [], f"a name ran as script: {dialogs}"
    assert page.evaluate("() => window.__xss === undefined")
    # Playwright's CSS engine looks inside the shadow roots Panel renders into
    for selector in ("img[src='x']", "img[src='y']", "svg[onload]", "script:text('alert(78)')"):
        assert page.locator(selector).count() == 0, selector


def _every_tab(page, dialogs: list[str]) -> None:
    tabs = [t for t in TABS if page.locator(".gs-tabs").get_by_text(TABS[t], exact=True).count()]
    assert {"maps", "scores", "series", "taylor"} <= set(tabs)
    _tabs(page, dialogs, tabs)


def _tabs(page, dialogs: list[str], tabs: list[str]) -> None:
    for tab in tabs:
        page.locator(".gs-tabs").get_by_text(TABS[tab], exact=True).first.click()
        wait_for_view(page, tab, what=DRAWN[tab])
        _nothing_ran(page, dialogs)
        assert page.locator(f".gs-view-{tab} .gs-error").count() == 0, page.locator(f".gs-view-{tab} .gs-error").all_text_contents()


def test_folder_names_are_text_on_every_tab(browser, layout_app) -> None:
    session = open_dashboard(browser, layout_app + "/")
    dialogs = _watch(session)
    page = session.page
    wait_for_view(page, "maps")
    _nothing_ran(page, dialogs)
    # the NetCDF download buttons carry the names in label and tooltip: hover them all
    buttons = page.locator(".gs-download-nc")
    assert buttons.count() == 2
    for i in range(buttons.count()):
        buttons.nth(i).hover()
        page.wait_for_timeout(200)
        _nothing_ran(page, dialogs)
    # the names are on the page as written (run list and download labels)
    assert page.get_by_text(FOLDER_IMG, exact=False).count() >= 1
    assert page.get_by_text(FOLDER_BRACES, exact=False).count() >= 1
    # the manifest case opens every tab; here the tabs that draw names in plot titles,
    # legends and table cells (kept short: the whole folder should run in about a minute)
    _tabs(page, dialogs, ["series", "scores", "taylor"])
    assert session.errors() == []
    session.close()


def test_manifest_names_and_attributes_are_text_on_every_tab(browser, manifest_app) -> None:
    session = open_dashboard(browser, manifest_app + "/?field=model_mean")
    dialogs = _watch(session)
    page = session.page
    wait_for_view(page, "maps")
    _nothing_ran(page, dialogs)
    for i in range(page.locator(".gs-download-nc").count()):
        page.locator(".gs-download-nc").nth(i).hover()
        page.wait_for_timeout(150)
    _nothing_ran(page, dialogs)
    for name in (MANIFEST_SCRIPT, MANIFEST_SVG, FORMULA, "-1+1 {z}"):
        assert page.get_by_text(name, exact=False).count() >= 1, name
    assert page.get_by_text(ATTRIBUTE_IMG, exact=False).count() >= 1  # a source description
    _every_tab(page, dialogs)
    assert session.errors() == []
    session.close()


def test_hostile_link_values_are_text(browser, manifest_app) -> None:
    hostile = "<img src=x onerror=alert(80)>"
    query = "&".join(f"{name}={quote(hostile)}" for name in QUERY_NAMES)  # every key, taylor, sort and overview_by too
    session = open_dashboard(browser, f"{manifest_app}/?{query}&{quote(hostile)}=1")
    dialogs = _watch(session)
    page = session.page
    wait_for_view(page, "maps")
    _nothing_ran(page, dialogs)
    # the notices repeat the link's values literally (the page shows the last six: the keys
    # read last are taylor, sort and overview_by)
    assert page.locator(".gs-notice").get_by_text(hostile, exact=False).count() >= 1
    for what in ("Taylor scale", "Overview sub-view", "Unknown sort column"):
        assert page.locator(".gs-notice", has_text=what).count() == 1, (what, page.locator(".gs-notice").all_text_contents())
    assert session.errors() == []
    session.close()
