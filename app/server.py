"""Serve the dashboard: ``gridscore serve`` calls :func:`serve`.

One :class:`~app.views.results.Results` is shared by every browser session of the
server; each session gets its own :class:`~app.state.Selection`, filled from the URL
query before anything is computed, and writes every value back into the URL.
"""

from __future__ import annotations

import gc
import ipaddress
import json
import logging
import os
import secrets
import socket
import sys
import time
from collections.abc import Awaitable, Callable, Sequence
from concurrent.futures import Future
from pathlib import Path
from typing import Any

import panel as pn

from evaluation.errors import InputError

from . import opening
from .access import (
    PASSWORD_ENV,
    SlowLoginProvider,
    check_origins,
    component_route,
    liveness_route,
    password_from,
)
from .opening import default_collection_path
from .state import Selection, parse_query, query_string
from .views.base import gate_page, on_document
from .views.coastlines import coastline_segments
from .views.look import load_extensions
from .views.results import Results

__all__ = ["build_session", "check_password", "default_collection_path", "load_results", "make_server", "serve"]

log = logging.getLogger("gridscore.app")

#: Shortest password accepted for sharing inside a group.
MIN_PASSWORD_LENGTH = 8
#: Seconds between two looks of an open page at its input files (one look, shared by every
#: session, costs a stat per file): a changed file is drawn anew within about this time.
WATCH_SECONDS = 5.0
_LOOPBACK_NAMES = {"localhost", "localhost.localdomain", "ip6-localhost"}


# ---------------------------------------------------------------------- the collection
def load_results(path: str | os.PathLike[str] | None = None) -> Results:
    """Open the collection at ``path`` (manifest or folder) for serving."""
    return opening.load_results(path)


# ---------------------------------------------------------------------- access control
def check_password(password: str | dict[str, str] | None, *, plain: bool = False) -> str | dict[str, str] | None:
    """Validate the ``--password`` option before Panel's basic authentication gets it.

    Parameters
    ----------
    password
        A password (at least 8 characters; any user name is then accepted), the path
        of a JSON file mapping user names to passwords, or such a mapping.
    plain
        The text is a password read from a file or the environment: never a path.

    Returns
    -------
    str, dict or None
        What to hand to Panel: the password, the user -> password mapping read from the
        file, or ``None`` for no access control.

    Raises
    ------
    InputError
        A password that is too short or blank; text that looks like a file path (it
        contains a path separator or ends in ``.json``) but names no file — Panel would
        silently take the mistyped path as the password (holoviz/panel#4703); a file that
        is not a JSON object of non-empty user names and passwords.
    """
    if password is None:
        return None
    if isinstance(password, dict):
        if not password or not all(
            isinstance(k, str) and k.strip() and isinstance(v, str) and len(v) >= MIN_PASSWORD_LENGTH for k, v in password.items()
        ):
            raise InputError(f"the credentials must map user names to passwords of at least {MIN_PASSWORD_LENGTH} characters",
                             remedy='write a JSON object such as {"ana": "a long secret"}')
        return dict(password)
    text = str(password)
    if plain:
        if not text.strip() or len(text) < MIN_PASSWORD_LENGTH:
            raise InputError(f"the password must have at least {MIN_PASSWORD_LENGTH} characters", remedy="choose a longer password")
        return text
    candidate = Path(text).expanduser()
    looks_like_path = os.sep in text or "/" in text or text.lower().endswith(".json")
    if candidate.is_file():
        try:
            users = json.loads(candidate.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError) as error:
            raise InputError(f"cannot read the credentials file ({error})", file=str(candidate),
                             remedy='write a JSON object such as {"ana": "a long secret"}') from None
        if not isinstance(users, dict) or not users or not all(
            isinstance(k, str) and k.strip() and isinstance(v, str) and len(v) >= MIN_PASSWORD_LENGTH for k, v in users.items()
        ):
            raise InputError("the credentials file must map user names to passwords of at least "
                             f"{MIN_PASSWORD_LENGTH} characters", file=str(candidate),
                             remedy='write a JSON object such as {"ana": "a long secret"}')
        return dict(users)
    if looks_like_path:
        raise InputError("the password looks like a file path, but there is no such file", file=text,
                         remedy="give the path of an existing JSON credentials file, or a plain password")
    if not text.strip() or len(text) < MIN_PASSWORD_LENGTH:
        raise InputError(f"the password must have at least {MIN_PASSWORD_LENGTH} characters",
                         remedy="choose a longer password")
    return text


def _everywhere(address: str) -> bool:
    return address.strip() in ("", "0.0.0.0", "::", "[::]")


def _url_host(address: str) -> str:
    """``address`` as the host part of a URL (IPv6 literals in brackets)."""
    text = address.strip().strip("[]")
    try:
        return f"[{text}]" if ipaddress.ip_address(text).version == 6 else text
    except ValueError:
        return text


def open_urls(address: str, port: int) -> list[str]:
    """Where the dashboard can be opened: this machine first, then other machines.

    ``localhost`` for 127.0.0.1 and for a server on every interface (``''``, ``0.0.0.0``,
    ``::``), which other machines reach by this machine's name; any other address as
    written (``127.0.0.2`` is loopback but not what ``localhost`` resolves to).
    """
    text = address.strip()
    if text.lower() in _LOOPBACK_NAMES or text == "127.0.0.1":
        return [f"http://localhost:{port}/"]
    if _everywhere(text):
        return [f"http://localhost:{port}/", f"http://{socket.getfqdn() or socket.gethostname()}:{port}/"]
    return [f"http://{_url_host(text)}:{port}/"]


def _own_origins(address: str, port: int) -> list[str]:
    """The host:port names of the printed URLs: the websocket must accept them."""
    hosts = {"localhost", "127.0.0.1"}
    for url in open_urls(address, port):
        hosts.add(url.split("//", 1)[1].rsplit(":", 1)[0])
    return sorted(f"{h}:{port}" for h in hosts)


def is_loopback(address: str) -> bool:
    """Whether the server listens only on this machine (127.0.0.0/8, ::1, localhost)."""
    if address.strip().lower() in _LOOPBACK_NAMES:
        return True
    try:
        return ipaddress.ip_address(address.strip().strip("[]")).is_loopback
    except ValueError:
        return False


# ---------------------------------------------------------------------- one session
def _serve_own_stylesheets() -> None:
    """Point this session's stylesheet links at the server from the start.

    Panel learns where its CSS lives only when it renders the page, after the
    components were built; stylesheets made before (or restyled in between) keep links
    to Panel's CDN, which fails on a closed network (seen here: loading.css requested from
    the CDN).  Setting the same value Panel sets later, before anything is built, keeps
    every link on this server.
    """
    from panel.io.resources import LOCAL_DIST

    doc = pn.state.curdoc
    if doc is None or doc.session_context is None:
        return
    local = f"{pn.state.rel_path}/{LOCAL_DIST}" if pn.state.rel_path else LOCAL_DIST
    doc.template_variables.setdefault("dist_url", local)


def _notice_page(text: str) -> pn.template.BaseTemplate:
    """A page that only says why there is nothing to show (plain text)."""
    from .views.base import error_box
    from .views.look import INK, page_template

    template = page_template(title="gridscore", header_background=INK, header_color="#f8fafc")
    template.main.append(error_box(f"Nothing to show: {text}"))
    return template


def build_session(results: Results) -> pn.template.BaseTemplate:
    """The page of one browser session, with the URL query applied before any computation."""
    from .dashboard import available_tabs, build

    gate_page()
    _serve_own_stylesheets()
    # No look at the files here, on the event loop: the views look (off the loop) before they
    # draw, and this session's first look (below) rebuilds its menus if the files changed.
    try:
        selection = Selection(results, tabs=available_tabs(results))
    except InputError as error:  # nothing to compare: say so on the page, not only in the log
        # a page with nothing to compare has no views that would look: look here, so that a
        # collection that gained a variable is served on the next reload
        if not results.revalidate():
            return _notice_page(error.message)
        try:
            selection = Selection(results, tabs=available_tabs(results))
        except InputError as error:
            return _notice_page(error.message)
    location = pn.state.location
    asked = parse_query(location.search) if location is not None and location.search else None
    if asked:
        selection.apply_query(asked)
    # Years already known (the comparison is open: warmed, or asked for by another session):
    # settled before the page is built, so that it opens on the period instead of a
    # placeholder slider and "checking the years…".
    known = results.known_period(*selection.span_key)
    if known is not None:
        selection.settle(known[0], known[1])
        for reason in known[2]:
            selection.notify(f"Left out of the {selection.variable} comparison: {reason}")
    page = build(selection, results)

    async def settle() -> None:
        key = selection.span_key
        try:
            span, default = await results.run(results.period_info, *key)
            left = await results.run(results.left_out, key[0], key[1], None)
        except InputError as error:
            selection.notify(error.message)
            return

        if selection.span_key != key:  # a newer choice settles itself
            return
        # Parameter changes only: what they change on the page goes through `on_document`.
        selection.settle(span, default)
        for reason in left:
            selection.notify(f"Left out of the {key[1]} comparison: {reason}")

    def span_cleared(event: Any) -> None:
        if event.new is None:
            pn.state.execute(settle)

    def write_url(*events: Any) -> None:
        query = selection.query()
        if query and pn.state.location is not None:
            pn.state.location.search = query_string(query)

    doc = pn.state.curdoc
    selection.param.watch(span_cleared, "span")
    # Through the page gate: a URL written while the page loads could be dropped, and
    # writing the same value again later would then change nothing.
    selection.param.watch(lambda *events: on_document(doc, write_url), ["request", "tab"])
    _watch_files(results, selection, settle, asked)
    if known is None:
        pn.state.execute(settle)
    else:
        selection.param.trigger("request")  # the views (built after the request) draw it
    return page


#: How the notice of changed files starts (the look keeps only the latest one).
_FILES_CHANGED = "Files changed;"


def _watch_files(results: Results, selection: Selection, settle: Callable[[], Awaitable[None]], asked: Any = None) -> None:
    """Follow this open page's files: menus, years and numbers, with a notice.

    At once and then every :data:`WATCH_SECONDS` the session asks for the shared look at the
    files (:meth:`Results.fresh`, off the event loop).  A new generation of the files rebuilds
    the menus (:meth:`Selection.refresh_options`: a new run folder is offered, a chosen item
    that disappeared falls back and is named in the notice), checks the period against the
    new years (``settle``) and re-issues the request: the view on display is drawn again from
    the new files (hidden ones when they are shown), and a notice tells when.  The first look
    (the page was built from the listing before it) says nothing unless a choice was lost,
    and applies the link (``asked``) again: a run of the link whose file was unreadable at
    the last look, and is readable now, is shown as the link asks.
    """
    seen = results.generation

    async def look(first: bool = False) -> None:
        nonlocal seen
        files = await results.fresh()
        if files == seen:
            return
        seen = files
        lost = selection.refresh_options()  # parameter changes only; the page follows through on_document
        if first and asked:
            selection.apply_query(asked)
        if not first:
            when = time.strftime("%H:%M", time.localtime(results.changed_at or time.time()))
            # one such notice, the latest: an earlier one would only repeat it
            selection.notices = [n for n in selection.notices if not n.startswith(_FILES_CHANGED)]
            selection.notify(f"{_FILES_CHANGED} numbers updated at {when}.")
        for text in lost:
            selection.notify(text)
        if results.listing_problem:
            selection.notify(f"The collection cannot be read again ({results.listing_problem}); showing the sources read before.")
        before = selection.request
        await settle()  # the years may have changed: the period is checked again and published
        if before is not None and selection.request is before:
            selection.param.trigger("request")

    async def first_look() -> None:
        await look(first=True)

    pn.state.execute(first_look)
    pn.state.add_periodic_callback(look, period=int(WATCH_SECONDS * 1000))


# ---------------------------------------------------------------------- the server
def _drop_messages_of_closed_pages() -> None:
    """Let Bokeh drop, quietly, a message whose page has gone before it was handled.

    While the event loop is busy (pages being built, maps drawn), a browser's last messages
    (a plot's new size, a widget value) can wait behind the work; when that page is closed
    meanwhile, Bokeh detaches its connection and then handles the waiting message, failing
    with ``assert self._session is not None`` and an error in the log (seen under 5 and 10
    sessions in benchmarks/sessions.py: PATCH-DOC messages right after the page's websocket
    closed).  There is no document left to apply such a message to; dropping it is what the
    assertion should have done.  Messages of open pages are handled as before.  The same
    assertion came from a second close notice of one websocket (Bokeh's ``on_close`` asks the
    detached connection for its session again); that one is ignored as well.
    """
    from bokeh.server.protocol_handler import ProtocolHandler

    original = ProtocolHandler.handle
    if getattr(original, "_gridscore_guard", False):
        return

    async def handle(self, message, connection):
        if getattr(connection, "_session", True) is None:  # detached: the page's websocket closed
            log.debug("dropped a %s message of a closed page", message.msgtype)
            return None
        return await original(self, message, connection)

    handle._gridscore_guard = True  # type: ignore[attr-defined]
    ProtocolHandler.handle = handle

    from bokeh.server.views.ws import WSHandler

    closing = WSHandler.on_close

    def on_close(self) -> None:
        # a second close notice of one websocket (seen under 10 sessions): already detached
        if self.connection is not None and getattr(self.connection, "_session", True) is None:
            return
        closing(self)

    WSHandler.on_close = on_close


#: Scripts Panel lists for every page and what a page must hold to need them (see
#: :func:`serve_needed_scripts`): Bokeh's bundles by component name, Panel's by file name.
TEX_BUNDLE, WEBGL_BUNDLE, ESM_SHIM = "bokeh-mathjax", "bokeh-gl", "es-module-shims"
#: The delimiters of TeX that Bokeh typesets in a text model with math on.
_TEX_DELIMITERS = ("$$", "\\[", "\\(")


def needed_scripts(models: Any) -> dict[str, bool]:
    """Which optional scripts a page of these Bokeh ``models`` runs.

    ``bokeh-mathjax`` (1.8 MB) typesets TeX: needed by a ``MathText`` model, or a text
    model (a Bokeh or Panel HTML/Markdown model) whose ``disable_math`` is off and whose text
    holds a TeX delimiter; Panel's HTML panes have math off, so a name such as ``$$x$$``
    stays text.  ``bokeh-gl`` draws plots whose ``output_backend`` is ``"webgl"`` (without
    it Bokeh falls back to the canvas, with a warning).  ``es-module-shims`` imports the
    code of Panel's ``ReactiveESM`` components.
    """
    from bokeh.models import Markup, Plot
    from bokeh.models.text import MathText
    from panel.models.esm import ReactiveESM

    tex = webgl = esm = False
    for model in models:
        if isinstance(model, MathText) or (isinstance(model, Markup) and not model.disable_math
                                            and any(d in str(model.text or "") for d in _TEX_DELIMITERS)):
            tex = True
        elif isinstance(model, Plot) and model.output_backend == "webgl":
            webgl = True
        elif isinstance(model, ReactiveESM):
            esm = True
    return {TEX_BUNDLE: tex, WEBGL_BUNDLE: webgl, ESM_SHIM: esm}


def serve_needed_scripts() -> None:
    """Hand each page only the optional scripts its document needs (:func:`needed_scripts`).

    Panel 1.9.4 lists for every page Bokeh's TeX bundle (1.8 MB, kept whenever the page holds
    any HTML pane, math on or off), Bokeh's WebGL bundle and the module shim of its ESM
    components; a gridscore page needs none of them (its plots are drawn on a canvas,
    :func:`~app.views.look.load_extensions`).  Parsing and running them cost Chromium
    0.4 CPU-s of the 2.2 a page took to its first maps (benchmarks/page_cost.py).
    ``bokeh-tables`` stays: Panel's Tabulator describes its columns with Bokeh's
    ``TableColumn``, a model defined only in that bundle.

    Panel offers no option for this: its page handler (``server_html_page_for_session`` in
    ``panel/io/server.py``) calls ``bundle_resources(doc.roots, resources)``, whose
    ``enable_mathjax`` argument and Bokeh's ``Resources.clone(components=...)`` are the public
    parts used here.  The call is wrapped by name in that module;
    tests/test_page_scripts.py fails when Panel no longer calls it so or the page still
    lists a script left out.  Scripts cannot be added to an open page: a model that needs one
    and appears only after the page loaded (a tab built later) runs without it, which for
    these three means plain text, a canvas plot, or a console error the browser tests see.
    """
    import panel.io.server as panel_server

    original = panel_server.bundle_resources
    if getattr(original, "_gridscore_scripts", False):
        return

    def bundle_resources(roots, resources, *args, **kwargs):
        document = roots[0].document if roots else None
        needed = needed_scripts(document.models if document is not None else ())
        components = [c for c in resources.components if needed.get(c, True)]
        kwargs["enable_mathjax"] = needed[TEX_BUNDLE]
        bundle = original(roots, resources.clone(components=components), *args, **kwargs)
        if not needed[ESM_SHIM]:
            bundle.js_files = [url for url in bundle.js_files if f"/{ESM_SHIM}" not in str(url)]
        return bundle

    bundle_resources._gridscore_scripts = True  # type: ignore[attr-defined]
    panel_server.bundle_resources = bundle_resources


def _prepare(results: Results) -> None:
    load_extensions()
    _drop_messages_of_closed_pages()
    serve_needed_scripts()
    coastline_segments()  # read the land fraction once, on this thread, before sessions start
    # Everything made so far (modules, the collection's listing) lives as long as the server:
    # kept out of the cyclic garbage collector's passes.  Panel collects after every closed
    # page, on the event loop; measured on the sample, a full pass took 0.26 CPU-s before and
    # 0.025 after (403 000 objects set aside).
    gc.freeze()
    results.warm()


def make_server(
    results: Results,
    *,
    port: int = 0,
    address: str = "127.0.0.1",
    allow_websocket_origin: Sequence[str] = (),
    show: bool = False,
    password: str | dict[str, str] | None = None,
    threaded: bool = False,
    start: bool = True,
    server_id: str | None = None,
    **server_options: Any,
) -> Any:
    """A Panel server of the dashboard at ``/`` (with ``/liveness``); for tests and :func:`serve`.

    ``server_options`` go to Bokeh's server (for instance
    ``check_unused_sessions_milliseconds`` and ``unused_session_lifetime_milliseconds``,
    which tests shorten).
    """
    _prepare(results)
    origins = check_origins(allow_websocket_origin) or None
    if port:
        # The addresses the person is told to open must be allowed too, or the page loads without data.
        origins = [*(origins or []), *_own_origins(address, port)]
    # Panel's component route imports any module named in the URL and skips the login,
    # and its /liveness skips the login: these, listed first, take their places.
    options: dict[str, Any] = {"extra_patterns": [component_route(), liveness_route()]}
    if password is not None:
        options.update(auth_provider=SlowLoginProvider(password), cookie_secret=secrets.token_urlsafe(32))
    if server_id is not None:
        options.update(server_id=server_id)
    options.update(server_options)
    return pn.serve(
        {"/": lambda: build_session(results)},
        port=port,
        address=address,
        websocket_origin=origins,
        show=show,
        start=start,
        threaded=threaded,
        title="gridscore",
        liveness=True,
        **options,
    )


def serve(
    path: str | os.PathLike[str] | None = None,
    *,
    port: int = 5006,
    address: str = "127.0.0.1",
    allow_websocket_origin: Sequence[str] = (),
    show: bool = False,
    scheduler: str | None = None,
    password: str | None = None,
    password_file: str | os.PathLike[str] | None = None,
    opened: Future | None = None,
) -> None:
    """Serve the dashboard of the collection at ``path`` until interrupted.

    Parameters
    ----------
    path
        A ``manifest.toml`` or a data folder; ``None`` serves the bundled sample.
    port, address
        Where to listen (default ``127.0.0.1:5006``, this machine only).
    allow_websocket_origin
        Extra ``host[:port]`` names the page may be opened under (for a research group);
        never ``*``.
    show
        Open the dashboard in the default browser.
    scheduler
        Address of a running dask.distributed scheduler for the computations.
    password
        A shared password or a JSON file of user -> password (see :func:`check_password`);
        deprecated: a command line is visible to every user of the machine.
    password_file
        A file holding the password on its first line (or a JSON object of users);
        ``$GRIDSCORE_PASSWORD`` is read when neither is given.
    opened
        The collection at ``path`` being opened already (:func:`app.opening.open_collection`,
        started before this module was imported); ``None`` opens it here.

    Raises
    ------
    InputError
        Bad password option, unreadable collection, unreachable scheduler, ``*`` as origin.
    """
    from evaluation import engine

    secret, plain = password_from(password=password, password_file=password_file)
    auth = check_password(secret, plain=plain)
    from evaluation.cache import default_cache

    default_cache()  # a cache folder holding other files, or a bad size bound: refused before serving
    if password is not None and not plain:
        print(f"gridscore: note: --password is visible to every user of this machine (ps); "
              f"use --password-file or ${PASSWORD_ENV} instead", file=sys.stderr)
    elif password is not None:
        print(f"gridscore: note: --password is ignored; the password comes from "
              f"{'--password-file' if password_file is not None else '$' + PASSWORD_ENV}", file=sys.stderr)
    check_origins(allow_websocket_origin)
    if not is_loopback(address) and auth is None:
        print(
            f"gridscore: WARNING: serving on {address}, reachable from other machines, without access control. "
            "Anyone who can reach this port can use the dashboard; add --password to require one.",
            file=sys.stderr,
        )
    # Panel's and HoloViews' set-up while the collection is still being opened on its own thread
    load_extensions()
    results = load_results(path) if opened is None else opened.result()
    if not results.variables():
        print("gridscore: WARNING: no variable is held by both a model run and a reference; "
              "the page will only say so", file=sys.stderr)
    urls = open_urls(address, port)
    print(f"gridscore: serving {getattr(results.collection, 'title', '') or 'the collection'}", file=sys.stderr)
    print(f"gridscore: open {urls[0]}" + (f" (from other machines: {urls[1]})" if len(urls) > 1 else ""), flush=True)
    if auth is not None:
        print("gridscore: the dashboard asks for the password (any user name is accepted with a single password)", file=sys.stderr)
    if scheduler:
        with engine.connect(address=scheduler):
            results.warm(overview=True)  # on the cluster
            make_server(results, port=port, address=address, allow_websocket_origin=allow_websocket_origin, show=show, password=auth)
    else:
        results.warm(overview=True)  # the first page's numbers, then the overview, in the background (started already when opened)
        make_server(results, port=port, address=address, allow_websocket_origin=allow_websocket_origin, show=show, password=auth)
