"""An open page follows its files: a run replaced under a running server is drawn anew
without a reload, with a notice saying when.

The run is the reference plus a constant, so its bias is that constant (common practice:
the bias of ``x + c`` against ``x`` is ``c``); replaced by a run 5 K warmer, its bias
becomes ``c + 5``.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

import pytest
from browser.conftest import serving

from app.server import WATCH_SECONDS
from app.views.results import Results
from evaluation.catalog import Collection

from .hostile import write_run
from .live import offset_collection, open_scores, wait_for_row

pytestmark = pytest.mark.browser


def test_an_open_page_redraws_when_a_run_file_is_replaced(browser, tmp_path: Path) -> None:
    root = offset_collection(tmp_path / "c", a=1.0)
    target = root / "runs" / "a" / "data.nc"
    # written before the server starts: netCDF-C is not thread-safe, the server reads meanwhile
    warmer = write_run(tmp_path / "new", offset=6.0)
    results = Results(Collection.from_path(root))
    with serving(results) as url:
        session = open_scores(browser, url, row="1.000")
        page = session.page
        address = page.url

        os.replace(warmer, target)  # a new file renamed over the old one (atomic)
        replaced = time.monotonic()
        # the page's shown bias follows, without a reload, within the watch period plus a computation
        wait_for_row(page, "6.000", timeout_s=WATCH_SECONDS + 60)
        took = time.monotonic() - replaced
        notice = page.locator(".gs-notice", has_text="Files changed; numbers updated at")
        assert notice.count() == 1, page.locator(".gs-notice").all_text_contents()
        assert page.url == address  # the same page: no reload, no navigation
        assert session.errors() == []
        session.close()
    results.close()
    print(f"\nredrawn {took:.1f} s after the replacement (watch period {WATCH_SECONDS:.0f} s)")
