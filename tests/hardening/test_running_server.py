"""Files changed under a running server, seen in the browser: a reload shows the numbers of
the new files, a repaired run comes back, a deleted run is named as left out.

Expected values follow from the construction of the files: the run is the reference plus a
constant, so its bias is that constant (common practice: the bias of ``x + c`` against
``x`` is ``c``).
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest
from browser.conftest import serving

from app.views.results import Results
from evaluation.catalog import Collection

from .hostile import write_run
from .live import offset_collection, open_scores, wait_for_row

pytestmark = pytest.mark.browser


def test_changes_under_a_running_server(browser, tmp_path: Path) -> None:
    root = offset_collection(tmp_path / "c", a=1.0, b=2.0)
    run_a, run_b = (root / "runs" / name / "data.nc" for name in "ab")
    good_b = run_b.read_bytes()
    run_b.write_bytes(good_b[: len(good_b) // 2])  # truncated when the server starts
    results = Results(Collection.from_path(root))
    with serving(results) as url:
        session = open_scores(browser, url, row="1.000")
        page = session.page
        notice = page.locator(".gs-view-scores .gs-notice")
        assert "b: cannot read the file" in notice.first.text_content()  # a half HDF5 file

        # a: replaced by a run 5 K warmer, equal size, the old modification time put back
        st = run_a.stat()
        new = write_run(tmp_path / "new", offset=6.0)
        shutil.copyfile(new, run_a)
        os.utime(run_a, ns=(st.st_atime_ns, st.st_mtime_ns))
        run_b.write_bytes(good_b)  # b: repaired
        session.close()
        session = open_scores(browser, url, "models=a,b")
        page = session.page
        rows = wait_for_row(page, "6.000")
        assert any(r.lstrip("0123456789").startswith("b") and "2.000" in r for r in rows), rows  # rows begin with their index
        assert page.locator(".gs-view-scores .gs-notice").count() == 0

        run_b.unlink()  # b: deleted
        session.close()
        session = open_scores(browser, url)
        page = session.page
        assert "b:" in page.locator(".gs-view-scores .gs-notice").first.text_content()
        assert session.errors() == []
        session.close()
    results.close()


def test_a_new_session_does_not_look_at_the_files_on_the_event_loop(browser, tmp_path: Path) -> None:
    """The page is built without a synchronous look at the files (a stat and a content sample
    per file, on the thread every session shares); the views' shared look runs off the loop
    and still finds a file replaced before the page opened."""
    root = offset_collection(tmp_path / "c", a=1.0)
    warmer = write_run(tmp_path / "new", offset=6.0)
    results = Results(Collection.from_path(root))
    on_loop: list[str] = []
    looked = results.revalidate
    results.revalidate = lambda: on_loop.append("revalidate") or looked()  # type: ignore[method-assign]
    with serving(results) as url:
        os.replace(warmer, root / "runs" / "a" / "data.nc")  # before the first page
        session = open_scores(browser, url)
        wait_for_row(session.page, "6.000")  # drawn from the new file
        assert on_loop == []
        assert session.errors() == []
        session.close()
    results.close()
