"""Files changed under a running server, seen in the browser: a reload shows the numbers of
the new files, a repaired run comes back, a deleted run is named as left out.

Expected values follow from the construction of the files: the run is the reference plus a
constant, so its bias is that constant (common practice: the bias of ``x + c`` against
``x`` is ``c``).
"""

from __future__ import annotations

import os
import shutil
import time
from pathlib import Path

import pytest
from browser.conftest import open_dashboard, serving, wait_for_view

from app.views.results import Results
from evaluation.catalog import Collection

from .hostile import write_run

pytestmark = pytest.mark.browser


def _rows(page) -> list[str]:
    return page.locator(".gs-view-scores .tabulator-row").all_text_contents()


def _wait_for_row(page, text: str, *, present: bool = True, timeout_s: float = 60) -> list[str]:
    deadline = time.monotonic() + timeout_s
    while True:
        rows = _rows(page)
        if rows and any(text in r for r in rows) == present:
            return rows
        assert time.monotonic() < deadline, rows
        page.wait_for_timeout(50)


def test_changes_under_a_running_server(browser, tmp_path: Path) -> None:
    root = tmp_path / "c"
    write_run(root / "references" / "ref", offset=0.0)
    run_a = write_run(root / "runs" / "a", offset=1.0)
    run_b = write_run(root / "runs" / "b", offset=2.0)
    good_b = run_b.read_bytes()
    run_b.write_bytes(good_b[: len(good_b) // 2])  # truncated when the server starts
    results = Results(Collection.from_path(root))
    with serving(results) as url:
        session = open_dashboard(browser, url + "/?tab=scores")
        page = session.page
        wait_for_view(page, "scores", what=".tabulator-row")
        _wait_for_row(page, "1.000")
        notice = page.locator(".gs-view-scores .gs-notice")
        assert "b: cannot read the file" in notice.first.text_content()  # a half HDF5 file

        # a: replaced by a run 5 K warmer, equal size, the old modification time put back
        st = run_a.stat()
        new = write_run(tmp_path / "new", offset=6.0)
        shutil.copyfile(new, run_a)
        os.utime(run_a, ns=(st.st_atime_ns, st.st_mtime_ns))
        run_b.write_bytes(good_b)  # b: repaired
        session.close()
        session = open_dashboard(browser, url + "/?tab=scores&models=a,b")
        page = session.page
        wait_for_view(page, "scores", what=".tabulator-row")
        rows = _wait_for_row(page, "6.000")
        assert any(r.lstrip("0123456789").startswith("b") and "2.000" in r for r in rows), rows  # rows begin with their index
        assert page.locator(".gs-view-scores .gs-notice").count() == 0

        run_b.unlink()  # b: deleted
        session.close()
        session = open_dashboard(browser, url + "/?tab=scores")
        page = session.page
        wait_for_view(page, "scores", what=".tabulator-row")
        assert "b:" in page.locator(".gs-view-scores .gs-notice").first.text_content()
        assert session.errors() == []
        session.close()
    results.close()
