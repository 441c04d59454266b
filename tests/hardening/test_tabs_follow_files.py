"""The tabs of an open page follow the collection's files under a running server.

The vertical section needs a variable on levels that a run and a reference both hold: a
collection of surface fields does not offer it; once a reference and a run gain such a
file the open page offers the tab (without a reload), and it draws; when the files go, the
tab goes, and a page that showed it falls back to the first tab with a notice.  What the
tabs should be is known from the files the test writes.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

import pytest
from browser.conftest import open_dashboard, serving, wait_for_view
from leveldata import write_levels

from app.server import WATCH_SECONDS
from app.state import TABS
from app.views.results import Results
from evaluation.catalog import Collection

from .live import offset_collection


def _tab_names(page) -> list[str]:
    return [t.strip() for t in page.locator(".gs-tabs .bk-tab").all_text_contents()]


def _wait_for_tabs(page, check, what: str) -> list[str]:
    deadline = time.monotonic() + WATCH_SECONDS + 60
    while not check(names := _tab_names(page)):
        assert time.monotonic() < deadline, f"{what}: {names}"
        page.wait_for_timeout(100)
    return names


@pytest.mark.browser
def test_an_open_page_offers_and_drops_the_vertical_section_tab(browser, tmp_path: Path) -> None:
    root = offset_collection(tmp_path / "c", a=1.0)
    # written before the server starts (netCDF-C is not thread-safe), moved in while it runs
    staged = {}
    for folder in ("ref", "a"):
        (tmp_path / "staged" / folder).mkdir(parents=True)
        staged[folder] = write_levels(tmp_path / "staged" / folder / "ta.nc")
    results = Results(Collection.from_path(root), origin=root)
    section = TABS["section"]
    with serving(results) as url:
        session = open_dashboard(browser, url + "/?tab=maps")
        page = session.page
        wait_for_view(page, "maps")
        names = _tab_names(page)
        assert names and section not in names and names[0] == TABS["maps"]

        os.rename(staged["ref"], root / "references" / "ref" / "ta.nc")
        os.rename(staged["a"], root / "runs" / "a" / "ta.nc")
        names = _wait_for_tabs(page, lambda n: section in n, "the section tab was not offered")
        assert [n for n in names if n != section] == [n for n in _tab_names(page) if n != section]
        assert names.index(section) == names.index(TABS["zonal"]) + 1  # in the dashboard's order
        page.locator(".gs-tabs .bk-tab", has_text=section).first.click()
        page.locator(".gs-level select").wait_for(state="attached", timeout=30_000)
        page.locator(".gs-variable select").select_option("ta")
        wait_for_view(page, "section")
        assert "tab=section" in page.url

        # the files on levels go while their tab is shown: the first tab, and a notice
        (root / "runs" / "a" / "ta.nc").unlink()
        _wait_for_tabs(page, lambda n: n and section not in n, "the section tab stayed")
        page.locator(".gs-notice", has_text="the Vertical section tab is gone").first.wait_for(timeout=30_000)
        deadline = time.monotonic() + 30
        while "tab=maps" not in page.url:
            assert time.monotonic() < deadline, page.url
            page.wait_for_timeout(100)
        wait_for_view(page, "maps")
        assert session.errors() == []
        session.close()
    results.close()
