"""Who may reach a served dashboard: origins, the password, and the routes without login.

- :func:`check_origins` refuses any wildcard in ``--allow-websocket-origin`` (a host or a
  port of ``*`` would let any web page drive the server) and anything that is not
  ``host[:port]``.
- :func:`password_from` reads the password from a file or ``$GRIDSCORE_PASSWORD`` so that
  it never has to appear on a command line (which every user of the machine sees in
  ``ps``); ``--password`` still works, with a warning.
- :class:`SlowLoginProvider` is Panel's basic authentication with a constant-time
  comparison and a delay after each failed login, serialised per client address, so a
  password cannot be guessed at speed.
- :class:`GuardedComponentHandler` replaces Panel's ``/components/...`` route, which
  imports any module named in the URL and is served without login: here it needs the
  login when a password is set and only reads modules already imported.
- :class:`GuardedLivenessHandler` replaces Panel's ``/liveness``, which answers without
  login (and with ``?endpoint=/`` builds a whole session): here it needs the login when a
  password is set.  Only static files (scripts, stylesheets, the icon) and the login page
  itself are served to a visitor who has not logged in.
"""

from __future__ import annotations

import asyncio
import hmac
import json
import os
import re
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any, ClassVar

import tornado.escape
from panel.auth import BasicAuthProvider, BasicLoginHandler, _validate_next_url
from panel.io.liveness import LivenessHandler
from panel.io.server import ComponentResourceHandler
from panel.io.state import state
from tornado.web import HTTPError, authenticated

from evaluation.errors import InputError

__all__ = [
    "FAILED_LOGIN_DELAY",
    "GuardedComponentHandler",
    "GuardedLivenessHandler",
    "PASSWORD_ENV",
    "SlowLoginProvider",
    "check_origins",
    "component_route",
    "liveness_route",
    "password_from",
]

#: The environment variable holding the shared password (or a credentials JSON object).
PASSWORD_ENV = "GRIDSCORE_PASSWORD"
#: Seconds a failed login waits before its answer; attempts from one address queue.
FAILED_LOGIN_DELAY = 1.0
_HOST = re.compile(r"^(\[[0-9a-fA-F:.]+\]|[A-Za-z0-9](?:[A-Za-z0-9.-]{0,251}[A-Za-z0-9])?)$")
_REMEDY_ORIGIN = "list each host name (and port) people open, e.g. --allow-websocket-origin host.example.org:5006"


# ---------------------------------------------------------------------- origins
def check_origins(origins: Sequence[str]) -> list[str]:
    """The ``--allow-websocket-origin`` values, each ``host`` or ``host:port``, checked.

    Raises
    ------
    InputError
        A value with a wildcard (``*``, ``?``, ``[``) in host or port -- Bokeh matches
        origins as patterns, so ``*:5006`` or ``*.*:5006`` would admit any web page --,
        a scheme or path (``http://host/``), an empty host, or a port outside 1-65535.
    """
    checked = []
    for text in origins:
        value = str(text).strip()
        if "*" in value or "?" in value:
            raise InputError(
                f"--allow-websocket-origin {value!r} holds a wildcard, which would let any web page drive this server",
                remedy=_REMEDY_ORIGIN,
            )
        host, port = _split_host_port(value)
        if not _HOST.match(host) or (port is not None and not (port.isdigit() and 1 <= int(port) <= 65535)):
            raise InputError(f"--allow-websocket-origin {value[:80]!r} is not host or host:port", remedy=_REMEDY_ORIGIN)
        checked.append(value)
    return checked


def _split_host_port(value: str) -> tuple[str, str | None]:
    if value.startswith("["):  # [::1]:5006
        host, _, rest = value.partition("]")
        return host + "]", (rest[1:] if rest.startswith(":") else (None if not rest else "x"))
    host, sep, port = value.rpartition(":")
    return (host, port) if sep else (value, None)


# ---------------------------------------------------------------------- the password
def password_from(*, password: str | None = None, password_file: str | os.PathLike[str] | None = None,
                  environ: dict[str, str] | None = None) -> tuple[str | dict[str, str] | None, bool]:
    """The password (or user -> password mapping) from a file, the environment or ``--password``.

    Parameters
    ----------
    password
        The deprecated command-line value (visible in ``ps``); used only when neither a
        file nor ``$GRIDSCORE_PASSWORD`` is given.
    password_file
        A file holding the password on its first line, or a JSON object of user names and
        passwords.
    environ
        The environment (default ``os.environ``).

    Returns
    -------
    (value, plain)
        ``value`` for :func:`app.server.check_password`; ``plain`` says it is a password
        read from a file or the environment, never to be taken for a path.

    Raises
    ------
    InputError
        A password file that cannot be read or is empty.
    """
    environ = os.environ if environ is None else environ
    if password_file is not None:
        path = Path(password_file).expanduser()
        try:
            text = path.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as error:
            raise InputError(f"cannot read the password file ({type(error).__name__})", file=str(path),
                             remedy="give a readable file holding the password on its first line") from None
        return _from_text(text, where=str(path)), True
    if environ.get(PASSWORD_ENV):
        return _from_text(environ[PASSWORD_ENV], where=f"${PASSWORD_ENV}"), True
    return password, False


def _from_text(text: str, *, where: str) -> str | dict[str, str]:
    stripped = text.strip()
    if stripped.startswith("{"):
        try:
            users = json.loads(stripped)
        except json.JSONDecodeError:
            raise InputError("the credentials are not valid JSON", file=where,
                             remedy='write a JSON object such as {"ana": "a long secret"}, or a plain password') from None
        return users
    lines = text.splitlines()
    return lines[0].rstrip("\r") if lines else ""


# ---------------------------------------------------------------------- the login
class SlowLoginHandler(BasicLoginHandler):
    """Panel's login page; wrong credentials wait :data:`FAILED_LOGIN_DELAY` seconds.

    Failed attempts from one client address are answered one after another, so many
    attempts at once take as long as many attempts in a row.
    """

    credentials: ClassVar[str | dict[str, str]] = ""
    _queues: ClassVar[dict[str, asyncio.Lock]] = {}

    def _validate(self, username: str, password: str) -> bool:
        wanted = self.credentials
        if isinstance(wanted, dict):
            expected = wanted.get(username)
            if expected is None:
                hmac.compare_digest(password.encode(), password.encode())  # same work either way
                return False
            return hmac.compare_digest(password.encode(), expected.encode())
        return hmac.compare_digest(password.encode(), str(wanted).encode())

    async def post(self) -> None:
        username = self.get_argument("username", "")
        password = self.get_argument("password", "")
        if self._validate(username, password):
            self.set_current_user(username)
            self.redirect(_validate_next_url(self.get_cookie("next_url", state.base_url)))
            return
        if len(self._queues) > 10_000:  # bounded: forget idle addresses
            for address in [a for a, lock in self._queues.items() if not lock.locked()]:
                del self._queues[address]
        queue = self._queues.setdefault(self.request.remote_ip or "", asyncio.Lock())
        async with queue:
            await asyncio.sleep(FAILED_LOGIN_DELAY)
        self.redirect(self.request.uri + "?error=" + tornado.escape.url_escape("Invalid username or password!"))


class SlowLoginProvider(BasicAuthProvider):
    """Basic authentication whose login page is :class:`SlowLoginHandler`."""

    def __init__(self, credentials: str | dict[str, str], **options: Any) -> None:
        self._credentials = credentials  # before Panel's set-up, which asks for the login handler
        super().__init__(**options)

    @property
    def login_handler(self) -> type[SlowLoginHandler]:
        return type("GridscoreLoginHandler", (SlowLoginHandler,), {
            "_login_endpoint": self._login_endpoint,
            "_login_template": self._login_template,
            "credentials": self._credentials,
        })


# ---------------------------------------------------------------------- routes behind the login
class _LoginRequired:
    """The server's login for a Tornado handler that Bokeh does not guard itself.

    With a password (an auth provider that has a user getter) the current user is the
    logged-in one, else none and ``@authenticated`` sends the visitor to the login page;
    without a password every visitor is let through, as Bokeh's own pages do.
    """

    def get_login_url(self) -> str:
        provider = self.application.auth_provider
        if provider.get_login_url is not None:
            return provider.get_login_url(self)
        return provider.login_url or "/login"

    def get_current_user(self) -> Any:
        provider = self.application.auth_provider
        if provider.get_user is not None:
            return provider.get_user(self)
        return "default_user"


class GuardedLivenessHandler(_LoginRequired, LivenessHandler):
    """Panel's ``/liveness`` (is the server up; with ``?endpoint=/`` can it build that
    page), behind the login.  The pages are the server's own, looked up when asked."""

    def initialize(self, applications: dict[str, Any] | None = None) -> None:
        self.applications = applications or {}

    @authenticated
    async def get(self, *args: Any, **kwargs: Any) -> None:
        contexts = getattr(self.application, "_applications", {})  # Bokeh's path -> ApplicationContext
        self.applications = {path: context.application for path, context in contexts.items()}
        await super().get(*args, **kwargs)


def liveness_route() -> tuple[str, type, dict]:
    """The ``/liveness`` route, listed before Panel's own (which answers without login)."""
    return ("/liveness", GuardedLivenessHandler, {})


# ---------------------------------------------------------------------- component files
class GuardedComponentHandler(_LoginRequired, ComponentResourceHandler):
    """Panel's component resource route, behind the login and without imports.

    Panel's own handler (``/components/<module>/<class>/...``) imports the module the URL
    names and answers without login.  Here a module that is not already imported is not
    found, and with a password the login is required as for every page.
    """

    def parse_url_path(self, path: str) -> str:
        module = path.split("/", 1)[0]
        if module not in sys.modules:
            raise HTTPError(404, "Module not found")
        return super().parse_url_path(path)

    @authenticated
    async def get(self, *args: Any, **kwargs: Any) -> None:
        await super().get(*args, **kwargs)


def component_route() -> tuple[str, type, dict]:
    """The route that takes precedence over Panel's component route (listed first)."""
    from panel.io.resources import COMPONENT_PATH

    return (f"/{COMPONENT_PATH}(.*)", GuardedComponentHandler, {})
