"""Serving to a group: origins, passwords, failed logins, routes without login, printed URLs,
and a collection with nothing to compare.

A real server runs in a thread of this process on a free loopback port (as in
tests/browser), spoken to over HTTP with urllib.
"""

from __future__ import annotations

import sys
import threading
import time
import urllib.error
import urllib.parse
import urllib.request
from pathlib import Path

import pytest
from browser.conftest import free_port, open_dashboard

from app.access import FAILED_LOGIN_DELAY, password_from
from app.server import check_password, make_server, open_urls
from app.views.results import Results
from evaluation.catalog import Collection
from evaluation.errors import InputError

from .cli import run
from .hostile import write_run

PASSWORD = "a long shared secret"


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    def redirect_request(self, *args, **kwargs):
        return None


_opener = urllib.request.build_opener(_NoRedirect)


def _status(url: str, data: bytes | None = None) -> tuple[int, str]:
    try:
        with _opener.open(urllib.request.Request(url, data=data), timeout=30) as reply:
            return reply.status, reply.headers.get("Location", "")
    except urllib.error.HTTPError as error:
        return error.code, error.headers.get("Location", "")
    except urllib.error.URLError:
        return 0, ""  # not listening yet


@pytest.fixture(scope="module")
def collection(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("served")
    write_run(root / "references" / "ref", offset=0.0)
    write_run(root / "runs" / "a", offset=1.0)
    return root


def _serve(results: Results, **options):
    port = free_port()
    server = make_server(results, port=port, address="127.0.0.1", threaded=True, **options)
    url = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 30
    ready = "/login" if options.get("password") else "/liveness"  # with a password /liveness needs the login
    while _status(url + ready)[0] != 200:
        assert time.monotonic() < deadline
        time.sleep(0.1)
    return server, url


@pytest.fixture(scope="module")
def guarded(collection: Path):
    results = Results(Collection.from_path(collection))
    server, url = _serve(results, password=PASSWORD)
    yield url
    server.stop()
    results.close()


@pytest.fixture(scope="module")
def open_server(collection: Path):
    results = Results(Collection.from_path(collection))
    server, url = _serve(results)
    yield url
    server.stop()
    results.close()


# ---------------------------------------------------------------------- origins
@pytest.mark.parametrize("origin", ["*", "*:5006", "*.*:5006", "*:*", "host:*", "*.example.org", "h?st:5006",
                                    "http://host:5006", "host:5006/", "host:0", "host:70000", "", ":5006", "host:port"])
def test_a_wildcard_or_malformed_origin_is_refused(capsys, collection: Path, origin: str) -> None:
    outcome = run(capsys, "serve", str(collection), "--port", "0", "--allow-websocket-origin", origin)
    assert outcome.one_line_refusal(), outcome
    assert "websocket-origin" in outcome.err


# ---------------------------------------------------------------------- passwords
def test_the_password_comes_from_a_file_or_the_environment(tmp_path: Path) -> None:
    secret = tmp_path / "secret"
    secret.write_text(PASSWORD + "\n")
    assert password_from(password_file=secret, environ={}) == (PASSWORD, True)
    assert password_from(environ={"GRIDSCORE_PASSWORD": PASSWORD}) == (PASSWORD, True)
    assert password_from(password="x" * 9, environ={}) == ("x" * 9, False)
    # a password with a slash read from a file is a password, not a path
    secret.write_text("my/secret/phrase\n")
    assert check_password(*password_from(password_file=secret, environ={})[:1], plain=True) == "my/secret/phrase"
    secret.write_text('{"ana": "a long secret"}')
    assert check_password(password_from(password_file=secret, environ={})[0], plain=True) == {"ana": "a long secret"}


@pytest.mark.parametrize("content", ["", "\n", "short\n", '{"ana": "short"}', "{not json", '{"": "a long secret"}'])
def test_a_bad_password_file_is_one_line(capsys, collection: Path, tmp_path: Path, content: str) -> None:
    secret = tmp_path / "secret"
    secret.write_text(content)
    outcome = run(capsys, "serve", str(collection), "--port", "0", "--password-file", str(secret))
    assert outcome.one_line_refusal(), outcome


def test_a_missing_password_file_is_one_line(capsys, collection: Path, tmp_path: Path) -> None:
    outcome = run(capsys, "serve", str(collection), "--port", "0", "--password-file", str(tmp_path / "absent"))
    assert outcome.one_line_refusal(), outcome


def test_wrong_logins_are_slow_and_queued(guarded: str) -> None:
    form = urllib.parse.urlencode({"username": "x", "password": "wrong"}).encode()
    times: list[float] = []

    def attempt() -> None:
        start = time.monotonic()
        status, location = _status(f"{guarded}/login", form)
        assert status == 302 and "error=" in location
        times.append(time.monotonic() - start)

    threads = [threading.Thread(target=attempt) for _ in range(3)]
    start = time.monotonic()
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    # three attempts at once from one address take as long as three in a row
    assert time.monotonic() - start >= 3 * FAILED_LOGIN_DELAY * 0.95
    good = urllib.parse.urlencode({"username": "anyone", "password": PASSWORD}).encode()
    begin = time.monotonic()
    status, location = _status(f"{guarded}/login", good)
    assert status == 302 and "error" not in location
    assert time.monotonic() - begin < FAILED_LOGIN_DELAY


#: One request per route of the server that is not a static file (see the test below).
GUARDED_PATHS = ["/", "/?tab=scores", "/liveness", "/liveness?endpoint=/", "/metadata", "/ws",
                 "/autoload.js?bokeh-autoload-element=x&bokeh-absolute-url=http://127.0.0.1",
                 "/components/panel.widgets/FileDownload/__css__/x.css",
                 "/components/antigravity/x/__css__/y", "/components/os/path/__css__/passwd"]
#: Routes that answer everyone: the login page itself, logging out, and static files.
OPEN_ROUTES = ("/login", "/logout", "/favicon.ico", "/static/")


@pytest.mark.parametrize("path", GUARDED_PATHS)
def test_no_route_without_login_but_static_files(guarded: str, path: str) -> None:
    status, location = _status(guarded + path)
    assert status in (302, 403, 404) and (status != 302 or "login" in location), (status, location)
    assert "antigravity" not in sys.modules


def test_every_route_of_the_server_is_checked(collection: Path) -> None:
    """A route added by a new Panel or Bokeh (or by us) must join GUARDED_PATHS or OPEN_ROUTES."""
    results = Results(Collection.from_path(collection))
    server = make_server(results, port=0, password=PASSWORD, start=False)
    try:
        patterns = [rule.matcher.regex.pattern for rule in server._tornado.wildcard_router.rules]
    finally:
        server.stop()
        results.close()
    assert patterns
    for pattern in patterns:
        stem = pattern.rstrip("$").split("(")[0].rstrip("?") or "/"
        checked = any(p == stem or (stem != "/" and p.startswith(stem)) for p in GUARDED_PATHS)
        assert checked or stem.startswith(OPEN_ROUTES), f"route {pattern!r} is neither checked for the login nor open"


def test_liveness_answers_after_login(guarded: str) -> None:
    import http.cookiejar

    jar = http.cookiejar.CookieJar()
    opener = urllib.request.build_opener(urllib.request.HTTPCookieProcessor(jar))
    form = urllib.parse.urlencode({"username": "anyone", "password": PASSWORD}).encode()
    opener.open(urllib.request.Request(f"{guarded}/login", data=form), timeout=30).close()
    with opener.open(f"{guarded}/liveness", timeout=30) as reply:
        assert reply.status == 200 and reply.geturl().endswith("/liveness")


def test_static_assets_need_no_login(guarded: str) -> None:
    assert _status(f"{guarded}/login")[0] == 200
    assert _status(f"{guarded}/static/js/bokeh.min.js")[0] == 200


def test_the_component_route_imports_nothing(open_server: str) -> None:
    assert _status(f"{open_server}/components/antigravity/x/__css__/y")[0] == 404
    assert "antigravity" not in sys.modules


# ---------------------------------------------------------------------- printed URLs
@pytest.mark.parametrize(("address", "first"), [
    ("127.0.0.1", "http://localhost:5006/"),
    ("localhost", "http://localhost:5006/"),
    ("127.0.0.2", "http://127.0.0.2:5006/"),
    ("::1", "http://[::1]:5006/"),
    ("::", "http://localhost:5006/"),
    ("", "http://localhost:5006/"),
    ("0.0.0.0", "http://localhost:5006/"),
    ("192.0.2.7", "http://192.0.2.7:5006/"),
    ("host.example.org", "http://host.example.org:5006/"),
])
def test_printed_urls_can_be_opened(address: str, first: str) -> None:
    urls = open_urls(address, 5006)
    assert urls[0] == first
    if address in ("::", "", "0.0.0.0"):  # every interface: other machines use this machine's name
        assert len(urls) == 2 and "::" not in urls[1] and "0.0.0.0" not in urls[1]


@pytest.mark.browser  # Playwright: runs with the browser tests, last
def test_a_loopback_address_other_than_localhost_is_served(collection: Path, browser) -> None:
    results = Results(Collection.from_path(collection))
    port = free_port()
    server = make_server(results, port=port, address="127.0.0.2", threaded=True)
    try:
        url = open_urls("127.0.0.2", port)[0]
        deadline = time.monotonic() + 30
        while _status(f"{url}liveness")[0] != 200:
            assert time.monotonic() < deadline
            time.sleep(0.1)
        session = open_dashboard(browser, url)  # the websocket opens: the origin is allowed
        session.close()
    finally:
        server.stop()
        results.close()


# ---------------------------------------------------------------------- nothing to compare
@pytest.mark.browser  # Playwright: runs with the browser tests, last
def test_a_reference_only_collection_shows_a_notice(tmp_path: Path, browser) -> None:
    write_run(tmp_path / "ref", offset=0.0)
    manifest = tmp_path / "manifest.toml"
    manifest.write_text('[[source]]\nname = "ref"\nrole = "reference"\npaths = ["ref/*.nc"]\n')
    results = Results(Collection.from_path(manifest))
    server, url = _serve(results)
    try:
        session = open_dashboard(browser, url + "/")
        notice = session.page.locator(".gs-error")
        notice.first.wait_for(timeout=30_000)
        assert "no variable that a model run and a reference both provide" in notice.first.text_content()
        session.close()
    finally:
        server.stop()
        results.close()


def test_check_password_refuses_bad_mappings() -> None:
    with pytest.raises(InputError):
        check_password({}, plain=True)
    with pytest.raises(InputError):
        check_password({"ana": 5}, plain=True)  # type: ignore[dict-item]


def test_a_message_of_a_closed_page_is_dropped_without_an_error(caplog) -> None:
    """Bokeh detaches a connection when its websocket closes; a message of that page still
    waiting behind a busy event loop used to fail with ``assert self._session is not None``."""
    import asyncio
    import logging

    from bokeh.protocol import Protocol
    from bokeh.server.connection import ServerConnection
    from bokeh.server.protocol_handler import ProtocolHandler

    from app.server import _drop_messages_of_closed_pages

    closed = ServerConnection.__new__(ServerConnection)
    closed._session = None  # what ServerConnection.detach_session leaves
    message = Protocol().create("PULL-DOC-REQ")
    _drop_messages_of_closed_pages()
    with caplog.at_level(logging.ERROR, logger="bokeh"):
        assert asyncio.run(ProtocolHandler().handle(message, closed)) is None
    assert not [r for r in caplog.records if "error handling message" in r.getMessage()]


def test_a_second_close_of_a_page_is_ignored() -> None:
    from bokeh.server.connection import ServerConnection
    from bokeh.server.views.ws import WSHandler

    from app.server import _drop_messages_of_closed_pages

    _drop_messages_of_closed_pages()
    closed = ServerConnection.__new__(ServerConnection)
    closed._session = None  # detached by the first close
    handler = WSHandler.__new__(WSHandler)
    handler.connection = closed
    assert handler.on_close() is None  # Bokeh's own would fail on the detached connection
