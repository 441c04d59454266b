"""Shared fixtures; the helpers they use live in tests/cfdata.py (importable by every test)."""

from __future__ import annotations

import os
from collections.abc import Callable
from pathlib import Path

import pytest
from cfdata import write_cf


@pytest.fixture(scope="session", autouse=True)
def _private_cache(tmp_path_factory):
    """Every test (and every CLI it starts) uses a cache folder of this session only."""
    old = os.environ.get("GRIDSCORE_CACHE")
    os.environ["GRIDSCORE_CACHE"] = str(tmp_path_factory.mktemp("gridscore-cache"))
    yield
    if old is None:
        os.environ.pop("GRIDSCORE_CACHE", None)
    else:
        os.environ["GRIDSCORE_CACHE"] = old


@pytest.fixture(scope="session")
def browser():
    """One headless Chromium for the whole run (tests/browser and tests/hardening share it)."""
    from browser.conftest import launch_browser

    yield from launch_browser()


@pytest.fixture(scope="session")
def screenshots() -> Path:
    from browser.conftest import screenshot_folder

    return screenshot_folder()


@pytest.fixture(autouse=True)
def _quiet_dashboard_workers():
    """After each test, wait for dashboard workers still reading files (a warm-up started by a
    served app): netCDF-C/HDF5 is not thread-safe, and the next test's file writes must not
    overlap those reads (a crash of the whole run was seen)."""
    yield
    import sys

    results = sys.modules.get("app.views.results")
    if results is not None:
        results.wait_until_idle()


@pytest.fixture
def cf_file(tmp_path: Path) -> Callable[..., Path]:
    """Factory ``cf_file(name, **options)`` writing :func:`cf_dataset` into ``tmp_path``."""

    def make(name: str = "field.nc", **options) -> Path:
        return write_cf(tmp_path / name, **options)

    return make


@pytest.fixture
def raise_if_computed():
    """A dask scheduler that fails on a compute, as in xarray's ``raise_if_dask_computes``.

    Use as ``with raise_if_computed(max_computes=0): ...``.  With ``touching=("tas",)``
    only computes that read those variables from a file count (their dask keys are named
    ``open_dataset-<variable>-<token>`` by xarray), so that small grid metadata (bounds,
    cell areas, land fraction) may still be read eagerly.
    """
    import contextlib

    import dask

    def reads(graph, variables) -> bool:
        names = (k[0] if isinstance(k, tuple) else k for k in graph)
        prefixes = tuple(f"open_dataset-{v}-" for v in variables)
        return any(str(n).startswith(prefixes) or str(n).startswith(tuple("original-" + p for p in prefixes)) for n in names)

    class CountingScheduler:
        def __init__(self, max_computes: int, touching) -> None:
            self.total = 0
            self.max_computes = max_computes
            self.touching = touching

        def __call__(self, dsk, keys, **kwargs):
            graph = dsk.__dask_graph__() if hasattr(dsk, "__dask_graph__") else dsk
            if self.touching is None or reads(dict(graph), self.touching):
                self.total += 1
                if self.total > self.max_computes:
                    raise RuntimeError(f"Too many computes. Total: {self.total} > max: {self.max_computes}.")
            return dask.get(dsk, keys, **kwargs)

    @contextlib.contextmanager
    def guard(max_computes: int = 0, *, touching=None):
        scheduler = CountingScheduler(max_computes, touching)
        with dask.config.set(scheduler=scheduler):
            yield scheduler

    return guard


def pytest_collection_modifyitems(config, items):
    """Run the browser tests last: Playwright's sync API keeps an asyncio loop running in
    the main thread for the rest of the session, which tests that drive Panel code
    directly (asyncio.run) cannot share."""
    def drives_a_browser(item) -> bool:
        # tests/browser/ and any test marked `browser` elsewhere (tests/hardening/ has some)
        return "browser" in item.nodeid.split("::")[0].split("/") or item.get_closest_marker("browser") is not None

    items.sort(key=drives_a_browser)
