"""Open the served collection on a thread of its own while the server's modules load.

``gridscore serve`` calls :func:`open_collection` before it imports Panel, HoloViews and
the views (more than a second and a half): the files' listing, the first comparison and
the first maps' reductions are then under way by the time the server listens.  This
module imports neither Panel nor the views.
"""

from __future__ import annotations

import os
import sys
import threading
from concurrent.futures import Future
from pathlib import Path
from typing import Any

__all__ = ["default_collection_path", "load_results", "open_collection"]


def default_collection_path() -> Path:
    """The bundled ``sample_output/`` or, when installed without it, the demo in a cache folder.

    Notes
    -----
    The demo scenario is generated once (about a minute) into the user cache folder and
    reused afterwards.
    """
    bundled = Path(__file__).resolve().parents[1] / "sample_output"
    if (bundled / "manifest.toml").is_file():
        return bundled / "manifest.toml"
    import platformdirs

    from evaluation.demo import write_demo

    cached = Path(platformdirs.user_cache_dir("gridscore")) / "demo"
    if (cached / "manifest.toml").is_file():
        return cached / "manifest.toml"
    print(f"gridscore: writing the demo collection to {cached} (once) …", file=sys.stderr)
    return Path(write_demo(cached))


def load_results(path: str | os.PathLike[str] | None = None) -> Any:
    """Open the collection at ``path`` (manifest or folder) for serving: an
    :class:`app.views.results.Results`."""
    from evaluation.catalog import Collection

    from .views.results import Results

    origin = default_collection_path() if path is None else path
    # read again at every look at the files: a new run folder or manifest source is offered
    return Results(Collection.from_path(origin), origin=origin)


def open_collection(path: str | os.PathLike[str] | None = None, *, warm: bool = True) -> Future:
    """Start :func:`load_results` on a thread of its own; with ``warm``, then start the
    background work of :meth:`~app.views.results.Results.warm` (overview included).

    Returns a future of the ``Results``; its exception is the one :func:`load_results`
    raised (an :class:`~evaluation.errors.InputError` for a collection that cannot be read,
    or for a cache folder that cannot be used: checked first, before anything is written).
    The thread is a daemon: a refused option does not wait for it.
    """
    opened: Future = Future()

    def work() -> None:
        try:
            from evaluation.cache import default_cache

            default_cache()  # a cache folder holding other files, or a bad size bound: nothing written into it
            results = load_results(path)
            if warm:
                results.warm(overview=True)
        except BaseException as error:  # noqa: BLE001 - handed to the caller of .result()
            opened.set_exception(error)
        else:
            opened.set_result(results)

    threading.Thread(target=work, name="gridscore-open", daemon=True).start()
    return opened
