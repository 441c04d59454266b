"""Several visitors at once on one server: every input made while the server is busy takes
effect (the hardening case "inputs made while the server was busy were dropped", which the
server's log showed as ``assert self._session is not None``).

The pages are driven by the concurrency benchmark's own session script
(``benchmarks/sessions.py``: each page a cold, separate browser context; all navigate at the
same moment; each picks a season while it loads and a map field after its first maps), run in
a subprocess on the bundled sample with an empty cache.  What is checked is behaviour the
reader sees (common practice for an interactive page: an input is kept when the page shows
its result): each page's URL carries both inputs and its drawn maps are the ones asked for,
and the server's log holds no traceback.  Times are not asserted here; they belong to the
benchmark.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

pytestmark = pytest.mark.browser

ROOT = Path(__file__).resolve().parents[2]
PAGES = 4


def test_inputs_of_pages_opened_at_once_all_take_effect(tmp_path: Path) -> None:
    logs = tmp_path / "logs"
    code = f"""
import argparse, asyncio, json, sys
sys.path.insert(0, {str(ROOT / "benchmarks")!r})
import sessions
sessions.TIMEOUT_S = 300.0
args = argparse.Namespace(collection=str(sessions.SAMPLE), sessions=[{PAGES}], logs={str(logs)!r}, profile=None,
                          compare_scripts=False)
rounds = asyncio.run(sessions.main_async(args))
print(json.dumps([[o.first_maps, o.input_kept, o.error] for o in rounds[0].outcomes]))
"""
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=900, cwd=tmp_path)
    assert done.returncode == 0, done.stderr[-2000:]
    outcomes = json.loads(done.stdout.strip().splitlines()[-1])
    assert len(outcomes) == PAGES
    for first_maps, kept, error in outcomes:
        assert error == "", error
        assert first_maps == first_maps, "a page never drew its first maps"  # not NaN
        assert kept is True, "an input made while the server was busy was lost"
    log = "\n".join(p.read_text(errors="replace") for p in logs.glob("server-*.log"))
    assert log, "the server's log was not kept"
    for bad in ("Traceback", "assert self._session", "Exception in callback"):
        assert bad not in log, f"{bad!r} in the server's log"
