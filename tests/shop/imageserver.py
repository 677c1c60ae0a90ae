"""A small image server on 127.0.0.1 for the download tests: serves photos and misbehaves on purpose.

It binds a free port on the loopback address only, runs in a daemon thread, counts requests per
path and stops when the ``with`` block ends. Paths:

``/img/NAME``       the photo NAME with an ETag (its SHA-256) and Last-Modified; 304 on a match
``/lm/NAME``        the photo with Last-Modified only; 304 when If-Modified-Since matches
``/plain/NAME``     the photo with no validators at all
``/slow/NAME``      the photo after ``slow_s`` seconds (longer than the client's read timeout)
``/missing``        404
``/flaky/NAME``     500 on the first request, then the photo
``/busy/NAME``      429 with ``Retry-After: 7`` on the first request, then the photo
``/loop``           a redirect to itself, for ever
``/moved/NAME``     one redirect to ``/img/NAME``
``/big``            an endless JPEG-looking body with no Content-Length
``/bigdeclared``    a Content-Length over any cap, and no body worth reading
``/html``           an HTML page served as 200
``/reset``          the connection is reset before any answer
"""

import hashlib
import http.server
import socket
import struct
import threading
import time
from collections import Counter

__all__ = ["ImageServer", "LAST_MODIFIED"]

#: A fixed Last-Modified date (RFC 9110 IMF-fixdate).
LAST_MODIFIED = "Mon, 06 Jan 2025 10:00:00 GMT"


class _Handler(http.server.BaseHTTPRequestHandler):
    protocol_version = "HTTP/1.1"

    def log_message(self, *args):  # keep the test output clean
        pass

    def _send(self, status, body=b"", headers=()):
        self.send_response(status)
        for name, value in headers:
            self.send_header(name, value)
        self.send_header("Content-Length", str(len(body)))
        self.end_headers()
        if body and self.command != "HEAD":
            self.wfile.write(body)

    def _photo(self, name, etag=True, modified=True):
        data = self.server.photos.get(name)
        if data is None:
            return self._send(404, b"no such photo", [("Content-Type", "text/plain")])
        tag = '"' + hashlib.sha256(data).hexdigest() + '"'
        if etag and self.headers.get("If-None-Match") == tag:
            return self._send(304, headers=[("ETag", tag)])
        if modified and not etag and self.headers.get("If-Modified-Since") == LAST_MODIFIED:
            return self._send(304, headers=[("Last-Modified", LAST_MODIFIED)])
        headers = [("Content-Type", "image/jpeg")]
        if etag:
            headers.append(("ETag", tag))
        if modified:
            headers.append(("Last-Modified", LAST_MODIFIED))
        self._send(200, data, headers)

    def do_GET(self):  # noqa: N802 - the http.server API
        server = self.server
        with server.lock:
            server.inflight += 1
            server.most = max(server.most, server.inflight)
        try:
            return self._answer()
        finally:
            with server.lock:
                server.inflight -= 1

    def _answer(self):
        server = self.server
        path = self.path
        with server.lock:
            server.hits[path] += 1
            hit = server.hits[path]
        head, _, name = path.split("?")[0].lstrip("/").partition("/")
        if head == "img":
            return self._photo(name)
        if head == "lm":
            return self._photo(name, etag=False)
        if head == "plain":
            return self._photo(name, etag=False, modified=False)
        if head == "slow":
            time.sleep(server.slow_s)
            return self._photo(name)
        if head == "missing":
            return self._send(404, b"not here", [("Content-Type", "text/plain")])
        if head == "flaky":
            if hit == 1:
                return self._send(500, b"oops", [("Content-Type", "text/plain")])
            return self._photo(name)
        if head == "busy":
            if hit == 1:
                return self._send(429, b"slow down", [("Retry-After", "7"), ("Content-Type", "text/plain")])
            return self._photo(name)
        if head == "loop":
            return self._send(302, headers=[("Location", "/loop")])
        if head == "moved":
            return self._send(301, headers=[("Location", f"/img/{name}")])
        if head == "big":
            self.send_response(200)
            self.send_header("Content-Type", "image/jpeg")
            self.send_header("Transfer-Encoding", "chunked")
            self.end_headers()
            block = b"\xff\xd8\xff" + b"\0" * 65533
            try:
                for _ in range(64):  # at most 4 MiB, then stop by itself
                    self.wfile.write(f"{len(block):x}\r\n".encode() + block + b"\r\n")
                self.wfile.write(b"0\r\n\r\n")
            except OSError:  # the client gave up, as it should
                pass
            return None
        if head == "bigdeclared":
            self.send_response(200)
            self.send_header("Content-Type", "image/jpeg")
            self.send_header("Content-Length", str(10**12))
            self.end_headers()
            try:
                self.wfile.write(b"\xff\xd8\xff" + b"\0" * 1000)
            except OSError:
                pass
            self.close_connection = True
            return None
        if head == "html":
            return self._send(200, b"<!DOCTYPE html><html><body>Sorry</body></html>",
                              [("Content-Type", "text/html; charset=utf-8")])
        if head == "reset":
            # SO_LINGER with a zero timeout makes close() send a TCP RST (a connection reset).
            self.connection.setsockopt(socket.SOL_SOCKET, socket.SO_LINGER, struct.pack("ii", 1, 0))
            self.close_connection = True
            self.connection.close()
            return None
        return self._send(404, b"unknown path", [("Content-Type", "text/plain")])


class ImageServer:
    """``with ImageServer({"a.jpg": bytes}) as server:`` then ``server.url("/img/a.jpg")``."""

    def __init__(self, photos, slow_s=1.0):
        self.httpd = http.server.ThreadingHTTPServer(("127.0.0.1", 0), _Handler)
        self.httpd.daemon_threads = True
        self.httpd.photos = dict(photos)
        self.httpd.hits = Counter()
        self.httpd.lock = threading.Lock()
        self.httpd.slow_s = float(slow_s)
        self.httpd.inflight = 0
        self.httpd.most = 0  # most requests answered at once
        self.thread = threading.Thread(target=self.httpd.serve_forever, kwargs={"poll_interval": 0.05}, daemon=True)

    @property
    def hits(self):
        return self.httpd.hits

    @property
    def most_at_once(self):
        return self.httpd.most

    @property
    def photos(self):
        return self.httpd.photos

    def url(self, path):
        host, port = self.httpd.server_address[:2]
        return f"http://{host}:{port}{path}"

    def __enter__(self):
        self.thread.start()
        return self

    def __exit__(self, *exc):
        self.httpd.shutdown()
        self.httpd.server_close()
        self.thread.join(timeout=5)
        return False
