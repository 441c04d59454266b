"""The menus of an open page follow the collection's files under a running server.

A run folder that appears is offered, a variable added to the files is offered, and a chosen
variable, run, reference or level that disappears falls back to what remains, named in a
notice; new items are offered without being chosen.  What the menus should offer is known
from the files each step writes (each run the reference plus a constant, as in
``live.offset_collection``); the checks compare with those lists.
"""

from __future__ import annotations

import os
import shutil
import time
from pathlib import Path

import pytest
from browser.conftest import serving

from app.server import WATCH_SECONDS
from app.state import Selection
from app.views.results import Results
from evaluation.catalog import Collection

from .hostile import FOLDER_IMG, write_run
from .live import offset_collection, open_scores, wait_for_row


def _follow(results: Results, selection: Selection) -> list[str]:
    assert results.revalidate()  # the server's shared look at the files
    return selection.refresh_options()


def test_menus_follow_runs_and_variables_that_appear_and_disappear(tmp_path: Path) -> None:
    root = offset_collection(tmp_path / "c", a=1.0, b=2.0)
    results = Results(Collection.from_path(root), origin=root)
    selection = Selection(results)
    selection.models = ["b"]
    assert selection.param.models.objects == ["a", "b"]

    write_run(root / "runs" / "c", offset=3.0)  # a new run folder
    assert _follow(results, selection) == []
    assert selection.param.models.objects == ["a", "b", "c"]
    assert selection.models == ["b"]  # kept: the new run is offered, not chosen

    write_run(root / "references" / "ref", offset=0.0, variable="pr", name="pr.nc")  # a new variable
    write_run(root / "runs" / "a", offset=0.5, variable="pr", name="pr.nc")
    assert _follow(results, selection) == []
    assert selection.param.variable.objects == ["pr", "tas"] and selection.variable == "tas"

    selection.variable = "pr"
    assert selection.models == ["a"]  # the only run holding pr
    (root / "runs" / "a" / "pr.nc").unlink()  # the chosen variable is gone from every run
    notes = _follow(results, selection)
    assert selection.param.variable.objects == ["tas"] and selection.variable == "tas"
    assert len(notes) == 1 and notes[0].startswith("No longer in the collection: variable pr (showing tas)"), notes

    selection.models = ["a", "c"]
    shutil.rmtree(root / "runs" / "c")  # one chosen run removed: the other stays
    notes = _follow(results, selection)
    assert selection.models == ["a"] and notes == ["No longer in the collection: run c."]
    shutil.rmtree(root / "runs" / "a")  # the last chosen run removed: the default runs
    notes = _follow(results, selection)
    assert selection.param.models.objects == ["b"] and selection.models == ["b"]
    assert notes == ["No longer in the collection: run a (showing b)."]

    # a run folder whose name is refused (a right-to-left override): the collection cannot be
    # read again; the sources read before stay, and the problem is there for the notice
    write_run(root / "runs" / "x\u202ey", offset=4.0)
    assert _follow(results, selection) == []
    assert selection.param.models.objects == ["b"]
    assert "rename the folder" in results.listing_problem and "\u202e" not in results.listing_problem
    shutil.rmtree(root / "runs" / "x\u202ey")
    assert _follow(results, selection) == [] and results.listing_problem is None
    results.close()


def test_a_removed_reference_and_a_manifest_source_follow(tmp_path: Path) -> None:
    for name, offset in (("ref", 0.0), ("alt", 0.2), ("a", 1.0)):
        write_run(tmp_path / name, offset=offset)
    manifest = tmp_path / "manifest.toml"
    entry = '[[source]]\nname = "{}"\nrole = "{}"\npaths = ["{}/*.nc"]\n'
    manifest.write_text(entry.format("ref", "reference", "ref") + entry.format("alt", "reference", "alt")
                        + entry.format("a", "model", "a"), encoding="utf-8")
    results = Results(Collection.from_path(manifest), origin=manifest)
    selection = Selection(results)
    selection.reference = "alt"
    # the manifest rewritten: alt gone, a run added (written before the manifest names it)
    write_run(tmp_path / "b", offset=2.0)
    manifest.write_text(entry.format("ref", "reference", "ref") + entry.format("a", "model", "a")
                        + entry.format("b", "model", "b"), encoding="utf-8")
    notes = _follow(results, selection)
    assert selection.param.reference.objects == ["ref"] and selection.reference == "ref"
    assert selection.param.models.objects == ["a", "b"] and selection.models == ["a"]
    assert notes == ["No longer in the collection: reference alt (showing ref)."]
    # a manifest caught half-written is not read: the menus stay as they are until it is
    # whole, and the problem is there for the notice
    manifest.write_text('[[source]]\nname = "ref', encoding="utf-8")
    assert _follow(results, selection) == [] and selection.param.models.objects == ["a", "b"]
    assert "not valid TOML" in results.listing_problem
    results.close()


@pytest.mark.browser
def test_an_open_page_offers_a_new_run_and_drops_a_removed_one(browser, tmp_path: Path) -> None:
    """In the browser: the run checkboxes follow a run folder (with a hostile name) that
    appears and a chosen run that is removed; the years follow files replaced by shorter
    ones; no dialog opens and nothing is reloaded."""
    root = offset_collection(tmp_path / "c", a=1.0, b=2.0)
    # written before the server starts (netCDF-C is not thread-safe), moved in while it runs
    staged = tmp_path / "staged"
    write_run(staged / FOLDER_IMG, offset=3.0)
    short = {name: write_run(staged / "short" / name, offset=offset, years=2, start_year=2002)
             for name, offset in (("ref", 0.0), ("b", 2.0), ("img", 3.0))}
    results = Results(Collection.from_path(root), origin=root)
    dialogs: list[str] = []
    with serving(results) as url:
        session = open_scores(browser, url, "models=a", row="1.000")
        page = session.page
        page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
        boxes = page.locator(".gs-models label")
        assert boxes.all_text_contents() == ["a", "b"]

        os.rename(staged / FOLDER_IMG, root / "runs" / FOLDER_IMG)
        deadline = time.monotonic() + WATCH_SECONDS + 60
        while boxes.all_text_contents() != sorted(["a", "b", FOLDER_IMG]):  # folders in name order
            assert time.monotonic() < deadline, boxes.all_text_contents()
            page.wait_for_timeout(100)
        assert page.locator(".gs-models input:checked").count() == 1  # still only a
        assert "models=a&" in page.url
        assert page.locator(".gs-notice", has_text="Files changed; numbers updated at").count() == 1

        shutil.rmtree(root / "runs" / "a")  # the chosen run
        wait_for_row(page, "2.000", timeout_s=WATCH_SECONDS + 60)
        notice = page.locator(".gs-notice", has_text="No longer in the collection: run a")
        notice.first.wait_for(timeout=30_000)
        assert page.locator(".gs-notice", has_text="Pick at least one").count() == 0  # no empty moment
        assert boxes.all_text_contents() == sorted(["b", FOLDER_IMG])

        # every file replaced by one of 2002-2003: the period 2001-2003 no longer fits
        assert "period=2001-2003" in page.url
        os.replace(short["ref"], root / "references" / "ref" / "data.nc")
        os.replace(short["b"], root / "runs" / "b" / "data.nc")
        os.replace(short["img"], root / "runs" / FOLDER_IMG / "data.nc")
        deadline = time.monotonic() + WATCH_SECONDS + 60
        while "period=2002-2003" not in page.url:
            assert time.monotonic() < deadline, page.url
            page.wait_for_timeout(100)
        assert page.locator(".gs-notice", has_text="lies outside the years all sources cover").count() >= 1
        assert dialogs == [] and page.evaluate("window.__xss") is None
        assert session.errors() == []
        session.close()
    results.close()


def test_a_chosen_level_that_disappears_falls_back(tmp_path: Path) -> None:
    from leveldata import write_levels

    root = tmp_path / "c"
    for folder in ("references/ref", "runs/a"):
        (root / folder).mkdir(parents=True)
        write_levels(root / folder / "ta.nc")
    results = Results(Collection.from_path(root), origin=root)
    selection = Selection(results)
    selection.level = "200 hPa"
    # the reference rewritten without 200 hPa (written aside, then renamed over: a new file)
    write_levels(tmp_path / "ta.nc", levels=(1000.0, 850.0, 500.0))
    os.replace(tmp_path / "ta.nc", root / "references" / "ref" / "ta.nc")
    notes = _follow(results, selection)
    assert selection.param.level.objects == ["1000 hPa", "850 hPa", "500 hPa"]
    assert selection.level == selection.param.level.default and selection.level in selection.param.level.objects
    assert notes == [f"No longer in the collection: level 200 hPa (showing {selection.level})."]
    results.close()
