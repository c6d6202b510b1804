"""The review page's local web server: a JSON API and five static files.

Security measures (each one checked by ``tests/classify/test_review_server.py``):

* Binds to 127.0.0.1 unless told otherwise (the command warns loudly when the
  address is not a loopback one).
* A random per-session token (``secrets.token_urlsafe``) is in the address
  printed at start; every ``/api/`` request, reads included, must send it in
  the ``X-Review-Token`` header (compared in constant time). The page itself
  reads it from its own address; the server never echoes it.
* The ``Host`` header must name the bound address (or ``localhost`` on a
  loopback bind; any IP literal or this machine's name on a wildcard bind),
  with the bound port: a DNS-rebinding page cannot talk to the server.
* Writes are ``POST`` with ``Content-Type: application/json``, a body of at
  most 64 KiB (413 beyond) nested at most 32 levels deep (400 beyond, checked
  before the body is parsed, so a deeply nested body cannot exhaust the
  parser's recursion), and an ``Origin``, when sent, equal to the server's own.
* Every error is answered with a status and a one-line JSON message, including
  the ones :mod:`http.server` makes itself (a malformed request line, an
  over-long header); tracebacks go to the log, never to the client. A client
  that hangs up mid-answer is dropped quietly.
* A listen backlog of 128 (a browser opens several connections at once) and a
  thread per connection; an idle kept-alive connection is closed after 30 s.
* Only fixed routes exist: ``/`` and ``/static/plot.js``, ``/static/views.js``,
  ``/static/review.js``, ``/static/review.css``
  (from the package, by an allow-list: no file path is ever built from the
  request) and the API. Waveforms come from the catalog through the session,
  labels go to the store: nothing else on disk is reachable.
* Responses are JSON (or the static files) with ``nosniff``, a strict
  Content-Security-Policy (scripts and styles only from the page itself, no
  inline code, no images or fonts from anywhere, no framing), ``Referrer-Policy: no-referrer`` (the token is in the
  address) and ``Cache-Control: no-store``.
* The page builds its DOM with ``textContent`` and ``createElementNS`` only
  (never ``innerHTML``): plots are SVG elements the page's own script draws
  from the numbers of the JSON answers, so no text from the data is ever parsed
  as markup.
"""

from __future__ import annotations

import hmac
import ipaddress
import json
import logging
import math
import re
import secrets
import socket
import threading
from http import HTTPStatus
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from importlib import resources
from urllib.parse import urlsplit

from ._session import OutOfTurn

logger = logging.getLogger("pulsesort")

__all__ = ["ReviewServer", "make_server", "TOKEN_HEADER", "STATIC_FILES", "is_loopback",
           "json_depth", "MAX_BODY_BYTES", "MAX_JSON_DEPTH", "LISTEN_BACKLOG"]

TOKEN_HEADER = "X-Review-Token"
MAX_BODY_BYTES = 64 * 1024
#: Deepest nesting of arrays and objects accepted in a request body.
MAX_JSON_DEPTH = 32
#: Pending connections the kernel queues before the server accepts them.
LISTEN_BACKLOG = 128
#: An idle (kept-alive) connection is closed after this many seconds.
IDLE_TIMEOUT_S = 30
#: URL path -> (file in classify/review/static, content type). Nothing else is served.
STATIC_FILES = {
    "/": ("index.html", "text/html; charset=utf-8"),
    "/static/plot.js": ("plot.js", "text/javascript; charset=utf-8"),
    "/static/views.js": ("views.js", "text/javascript; charset=utf-8"),
    "/static/review.js": ("review.js", "text/javascript; charset=utf-8"),
    "/static/review.css": ("review.css", "text/css; charset=utf-8"),
}
CSP = ("default-src 'none'; script-src 'self'; style-src 'self'; connect-src 'self'; "
       "base-uri 'none'; form-action 'none'; frame-ancestors 'none'")
_SECURITY_HEADERS = {
    "Content-Security-Policy": CSP,
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
    "Cache-Control": "no-store",
    "X-Frame-Options": "DENY",
    "Cross-Origin-Opener-Policy": "same-origin",
    "Cross-Origin-Resource-Policy": "same-origin",
}


def is_loopback(host: str) -> bool:
    """Whether ``host`` (an address or ``localhost``) is a loopback address."""
    if host.lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        try:
            return all(ipaddress.ip_address(info[4][0]).is_loopback
                       for info in socket.getaddrinfo(host, None))
        except (OSError, ValueError):
            return False


def _split_host(value: str):
    """``"host:port"`` -> (host lower-cased without brackets, port or None)."""
    try:
        parts = urlsplit("//" + value)
        return (parts.hostname or "").lower(), parts.port
    except ValueError:
        return None, None


def _is_ip(host: str) -> bool:
    try:
        ipaddress.ip_address(host)
        return True
    except ValueError:
        return False


_JSON_STRING = re.compile(r'"(?:[^"\\]|\\.)*"', re.DOTALL)
_JSON_BRACKET = re.compile(r"[\[\]{}]")


def json_depth(text: str) -> int:
    """Deepest nesting of arrays and objects in a JSON text (brackets inside strings skipped).

    Examples
    --------
    >>> json_depth('{"a": [1, {"b": "[[["}]}')
    3
    """
    depth = deepest = 0
    for m in _JSON_BRACKET.finditer(_JSON_STRING.sub("", text)):
        if m.group() in "[{":
            depth += 1
            deepest = max(deepest, depth)
        else:
            depth -= 1
    return deepest


def _static(name: str) -> bytes:
    return resources.files("classify.review").joinpath("static", name).read_bytes()


def _jsonable(obj):
    """Replace non-finite floats (and numpy scalars) so that strict JSON can be written."""
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if hasattr(obj, "item") and not isinstance(obj, (str, bytes)):
        return _jsonable(obj.item())
    return obj


class _Refused(Exception):
    def __init__(self, status: HTTPStatus, message: str):
        super().__init__(message)
        self.status, self.message = status, message


class _Handler(BaseHTTPRequestHandler):
    server: ReviewServer
    protocol_version = "HTTP/1.1"

    timeout = IDLE_TIMEOUT_S  # socket timeout: an idle kept-alive connection is closed

    def version_string(self):
        return "pulsesort-review"

    def handle(self):
        try:
            super().handle()
        except (ConnectionError, TimeoutError):  # the client hung up or went quiet
            self.close_connection = True

    def send_error(self, code, message=None, explain=None):
        """http.server's own refusals (bad request line, long header...): JSON, one line."""
        try:
            phrase = HTTPStatus(code).phrase
        except ValueError:
            phrase = "error"
        self.close_connection = True
        if self.request_version == "HTTP/0.9":  # unparsable request line: answer with a status
            self.request_version = "HTTP/1.0"
        self._error(code, (message or phrase).splitlines()[0][:200])

    def log_message(self, format, *args):  # noqa: A002 - the base class's name
        # the request line may hold the token: log the path only
        logger.debug("review server: %s %s", self.command,
                     urlsplit(getattr(self, "path", "") or "").path)

    # ------------------------------------------------------------------ replies

    def _send(self, status, body: bytes, content_type: str):
        self.send_response(status)
        self.send_header("Content-Type", content_type)
        self.send_header("Content-Length", str(len(body)))
        for k, v in _SECURITY_HEADERS.items():
            self.send_header(k, v)
        if self.close_connection:
            self.send_header("Connection", "close")
        self.end_headers()
        if self.command != "HEAD":
            self.wfile.write(body)

    def _json(self, status, obj):
        body = json.dumps(_jsonable(obj), allow_nan=False, ensure_ascii=False).encode()
        self._send(status, body, "application/json; charset=utf-8")

    def _error(self, status, message):
        self._json(status, {"error": message})

    # ------------------------------------------------------------------ checks

    def _check_host(self):
        host, port = _split_host(self.headers.get("Host", ""))
        if not host or port != self.server.port or not self.server.host_allowed(host):
            raise _Refused(HTTPStatus.MISDIRECTED_REQUEST,
                           "unexpected Host header (this server answers only to its own "
                           "address)")

    def _check_token(self):
        got = self.headers.get(TOKEN_HEADER, "")
        if not hmac.compare_digest(got.encode(), self.server.token.encode()):
            raise _Refused(HTTPStatus.FORBIDDEN, "missing or wrong session token: open the "
                                                 "address printed by 'pulsesort review'")

    def _check_origin(self):
        origin = self.headers.get("Origin")
        if origin is not None and origin != f"http://{self.headers.get('Host')}":
            raise _Refused(HTTPStatus.FORBIDDEN, "cross-origin request refused")
        if self.headers.get("Sec-Fetch-Site", "same-origin") not in ("same-origin", "none"):
            raise _Refused(HTTPStatus.FORBIDDEN, "cross-site request refused")

    def _body(self) -> dict:
        ctype = self.headers.get("Content-Type", "").split(";")[0].strip().lower()
        if ctype != "application/json":
            raise _Refused(HTTPStatus.UNSUPPORTED_MEDIA_TYPE, "send JSON "
                           "(Content-Type: application/json)")
        try:
            n = int(self.headers.get("Content-Length", ""))
        except ValueError:
            raise _Refused(HTTPStatus.LENGTH_REQUIRED, "Content-Length required") from None
        if n < 0 or n > MAX_BODY_BYTES:
            raise _Refused(HTTPStatus.REQUEST_ENTITY_TOO_LARGE,
                           f"request body over {MAX_BODY_BYTES} bytes")
        try:
            raw = self.rfile.read(n)
        except TimeoutError:
            raise _Refused(HTTPStatus.REQUEST_TIMEOUT, "request body incomplete") from None
        if len(raw) < n:
            raise _Refused(HTTPStatus.BAD_REQUEST, "request body shorter than its "
                                                  "Content-Length")
        try:
            text = raw.decode("utf-8")
        except UnicodeDecodeError:
            raise _Refused(HTTPStatus.BAD_REQUEST, "body is not UTF-8 text") from None
        if json_depth(text) > MAX_JSON_DEPTH:
            raise _Refused(HTTPStatus.BAD_REQUEST,
                           f"body nested deeper than {MAX_JSON_DEPTH} levels")
        try:
            obj = json.loads(text) if text else {}
        except (json.JSONDecodeError, RecursionError) as exc:
            raise _Refused(HTTPStatus.BAD_REQUEST, f"body is not JSON ({exc})") from None
        if not isinstance(obj, dict):
            raise _Refused(HTTPStatus.BAD_REQUEST, "body must be a JSON object")
        return obj

    # ------------------------------------------------------------------ routes

    def _handle(self, method):
        try:
            self._check_host()
            path = urlsplit(self.path).path
            if method in ("GET", "HEAD") and path in STATIC_FILES:
                name, ctype = STATIC_FILES[path]
                return self._send(HTTPStatus.OK, _static(name), ctype)
            if not path.startswith("/api/"):
                raise _Refused(HTTPStatus.NOT_FOUND, "not found")
            self._check_token()
            session = self.server.session
            route = (method, path)
            if route == ("GET", "/api/session"):
                return self._json(HTTPStatus.OK, session.info())
            if route == ("GET", "/api/current"):
                return self._json(HTTPStatus.OK, session.current())
            if method == "POST" and path in ("/api/decision", "/api/undo"):
                self._check_origin()
                body = self._body()
                if path == "/api/undo":
                    return self._json(HTTPStatus.OK, session.undo())
                return self._json(HTTPStatus.OK, session.decide(
                    body.get("event_id"), body.get("action"), label=body.get("label"),
                    note=body.get("note")))
            if path in ("/api/session", "/api/current", "/api/decision", "/api/undo"):
                raise _Refused(HTTPStatus.METHOD_NOT_ALLOWED, f"{method} not allowed here")
            raise _Refused(HTTPStatus.NOT_FOUND, "no such API route")
        except _Refused as exc:
            if method == "POST":
                self.close_connection = True  # the body may be unread
            self._error(exc.status, exc.message)
        except OutOfTurn as exc:
            self._error(HTTPStatus.CONFLICT, str(exc))
        except ValueError as exc:  # a refused decision: bad label, note, nothing to undo
            self._error(HTTPStatus.BAD_REQUEST, str(exc))
        except (ConnectionError, TimeoutError):  # the client went away mid-answer
            self.close_connection = True
        except Exception as exc:  # noqa: BLE001 - keep serving; the analyst sees the message
            logger.exception("review server: internal error on %s", urlsplit(self.path).path)
            self._error(HTTPStatus.INTERNAL_SERVER_ERROR, f"internal error: {type(exc).__name__}")

    def do_GET(self):  # noqa: N802 - http.server's naming
        self._handle("GET")

    def do_HEAD(self):  # noqa: N802
        self._handle("HEAD")

    def do_POST(self):  # noqa: N802
        self._handle("POST")

    def do_PUT(self):  # noqa: N802
        self._handle("PUT")

    def do_DELETE(self):  # noqa: N802
        self._handle("DELETE")


class ReviewServer(ThreadingHTTPServer):
    """A :class:`~http.server.ThreadingHTTPServer` serving one :class:`ReviewSession`.

    Attributes
    ----------
    session : ReviewSession
    token : str
        The per-session secret.
    host, port : str, int
        The bound address (port 0 at creation picks a free port).
    url : str
        ``http://HOST:PORT/?token=...``, the address to open.
    """

    daemon_threads = True
    allow_reuse_address = False
    request_queue_size = LISTEN_BACKLOG

    def __init__(self, session, host="127.0.0.1", port=0, token=None):
        self.session = session
        self.token = token or secrets.token_urlsafe(32)
        infos = socket.getaddrinfo(host, port, type=socket.SOCK_STREAM)
        self.address_family = infos[0][0]
        super().__init__((host, port), _Handler)
        self.host = host
        self.port = int(self.server_address[1])
        self._names = {host.lower().strip("[]")}
        self._wildcard = host in ("0.0.0.0", "::", "")
        if is_loopback(host):
            self._names |= {"localhost", "127.0.0.1", "::1"}
        if self._wildcard:
            self._names |= {"localhost", socket.gethostname().lower(),
                            socket.getfqdn().lower()}

    def handle_error(self, request, client_address):
        """Log (never print) what escaped a handler; the client got its answer already."""
        logger.debug("review server: error on a connection", exc_info=True)

    def host_allowed(self, host: str) -> bool:
        """Whether a request's Host name is one this server answers to."""
        return host in self._names or (self._wildcard and _is_ip(host))

    @property
    def url(self) -> str:
        shown = f"[{self.host}]" if ":" in self.host else self.host
        if self._wildcard:
            shown = "127.0.0.1"
        return f"http://{shown}:{self.port}/?token={self.token}"

    def start_background(self) -> threading.Thread:
        """Serve in a daemon thread (tests); stop with :meth:`shutdown` then :meth:`server_close`."""
        t = threading.Thread(target=self.serve_forever, name="pulsesort-review", daemon=True)
        t.start()
        return t


def make_server(session, host: str = "127.0.0.1", port: int = 0, token=None) -> ReviewServer:
    """Bind a :class:`ReviewServer` for ``session`` (not yet serving)."""
    return ReviewServer(session, host, port, token)
