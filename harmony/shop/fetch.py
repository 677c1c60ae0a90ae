"""Downloading product photos named by ``http(s)://`` URLs in a catalogue.

:func:`fetch_images` downloads many URLs at once with :mod:`httpx`: a bounded pool of threads
sharing one client, a per-host limit, connect and read timeouts, retries with exponential backoff
on connection errors, 429 and 5xx answers (honouring ``Retry-After``, capped), redirects followed
to a limit, the body streamed and abandoned past a size cap, and a check that the body is an
image before anything decodes it.

A re-run passes what the store remembers of each URL (:class:`Known`): the request is then a
conditional GET (``If-None-Match`` with the ETag, ``If-Modified-Since`` with Last-Modified,
RFC 9110 sections 13.1.2 and 13.1.3) and a ``304 Not Modified`` answer means the stored bytes
and palette still hold: nothing is downloaded and nothing is extracted again.

Every failure is one :class:`FetchResult` with ``status == "failed"`` and a one-line ``error``;
it never stops the other downloads.
"""

import dataclasses
import email.utils
import hashlib
import io
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from urllib.parse import urlsplit

__all__ = [
    "FetchSettings",
    "Known",
    "FetchResult",
    "is_url",
    "looks_like_image",
    "retry_after_seconds",
    "fetch_images",
]

_SCHEMES = ("http://", "https://")


def is_url(image):
    """Whether a catalogue ``image`` entry is an ``http://`` or ``https://`` URL (case-insensitive)."""
    return str(image)[:8].lower().startswith(_SCHEMES)


@dataclasses.dataclass(frozen=True)
class FetchSettings:
    """How downloads behave; every field can be set (tests shrink the waits).

    Attributes
    ----------
    connect_timeout_s, read_timeout_s : float
        Seconds to open a connection, and to wait for each chunk of the answer.
    max_bytes : int
        Largest body accepted; a longer one is abandoned while streaming (before decoding).
        The default, 40 MiB, holds a 50-megapixel studio JPEG master with room to spare.
    max_redirects : int
        Redirects followed before giving up (a loop ends here).
    retries : int
        Further attempts after a connection error, a timeout, a 429 or a 5xx answer.
    backoff_s : float
        First wait between attempts; doubled after each (exponential backoff, common practice).
    max_wait_s : float
        Cap on any wait, including a server's ``Retry-After``.
    workers : int
        Downloads at once over all hosts.
    per_host : int
        Downloads at once from one host (``scheme://host:port``), to be polite to a shop's CDN.
    user_agent : str
    """

    connect_timeout_s: float = 10.0
    read_timeout_s: float = 30.0
    max_bytes: int = 40 * 1024 * 1024
    max_redirects: int = 5
    retries: int = 3
    backoff_s: float = 0.5
    max_wait_s: float = 30.0
    workers: int = 8
    per_host: int = 4
    user_agent: str = "harmony-image-fetch/1"


@dataclasses.dataclass(frozen=True)
class Known:
    """What an earlier run stored of a URL: its content hash and the server's validators."""

    sha256: str
    etag: str | None = None
    last_modified: str | None = None


@dataclasses.dataclass(frozen=True)
class FetchResult:
    """The outcome of one URL.

    ``status`` is ``"downloaded"`` (``data`` holds the body), ``"unchanged"`` (a 304: ``data`` is
    None, ``sha256`` is the stored hash) or ``"failed"`` (``error`` says why in one line).
    """

    url: str
    status: str
    sha256: str | None = None
    data: bytes | None = dataclasses.field(default=None, repr=False)
    etag: str | None = None
    last_modified: str | None = None
    fetched_at: float = 0.0
    attempts: int = 0
    error: str | None = None


class _Failure(Exception):
    """A final failure of one URL (message is the one-line reason)."""


class _Retry(Exception):
    """A failure worth another attempt; ``wait_s`` is the server's Retry-After, if any."""

    def __init__(self, reason, wait_s=None):
        super().__init__(reason)
        self.wait_s = wait_s


# Leading bytes of the formats Pillow decodes that shops use for photos (the formats' own
# specifications: JPEG ITU T.81 SOI marker; PNG 1.2 signature; GIF89a; RIFF/WEBP; TIFF 6.0; BMP).
_MAGIC = (
    (b"\xff\xd8\xff", 0, "JPEG"),
    (b"\x89PNG\r\n\x1a\n", 0, "PNG"),
    (b"GIF87a", 0, "GIF"),
    (b"GIF89a", 0, "GIF"),
    (b"WEBP", 8, "WebP"),
    (b"II*\x00", 0, "TIFF"),
    (b"MM\x00*", 0, "TIFF"),
    (b"BM", 0, "BMP"),
)


def looks_like_image(data):
    """The image format named by ``data``'s leading bytes and confirmed by Pillow, or None.

    Pillow's ``verify()`` reads the file structure without decoding the pixels, so an HTML error
    page, a truncated header or random bytes are caught before any decoding work is spent.
    """
    found = None
    for magic, offset, name in _MAGIC:
        if data[offset:offset + len(magic)] == magic and (name != "WebP" or data[:4] == b"RIFF"):
            found = name
            break
    if found is None:
        return None
    from PIL import Image

    try:
        with Image.open(io.BytesIO(data)) as im:
            im.verify()
    except Exception:  # noqa: BLE001 - any complaint from Pillow means "not a usable image"
        return None
    return found


def retry_after_seconds(value, now=None):
    """Seconds asked for by a ``Retry-After`` header (delta-seconds or an HTTP-date, RFC 9110
    section 10.2.3), or None when it is absent or unreadable. Never negative."""
    if value is None:
        return None
    text = str(value).strip()
    if text.isdigit():
        return float(text)
    try:
        when = email.utils.parsedate_to_datetime(text)
    except (TypeError, ValueError):
        return None
    if when is None:
        return None
    now = time.time() if now is None else now
    return max(0.0, when.timestamp() - now)


def _host(url):
    parts = urlsplit(url)
    return f"{parts.scheme.lower()}://{(parts.hostname or '').lower()}:{parts.port or ''}"


def _attempt(client, url, known, settings):
    """One GET of ``url``; returns a FetchResult or raises _Retry / _Failure."""
    import httpx

    headers = {}
    if known is not None:
        if known.etag:
            headers["If-None-Match"] = known.etag
        if known.last_modified:
            headers["If-Modified-Since"] = known.last_modified
    try:
        with client.stream("GET", url, headers=headers) as answer:
            status = answer.status_code
            if status == 304 and known is not None:
                return FetchResult(url, "unchanged", sha256=known.sha256,
                                   etag=answer.headers.get("etag") or known.etag,
                                   last_modified=answer.headers.get("last-modified") or known.last_modified,
                                   fetched_at=time.time())
            if status == 429 or 500 <= status <= 599:
                raise _Retry(f"HTTP {status} {answer.reason_phrase}".strip(),
                             retry_after_seconds(answer.headers.get("retry-after")))
            if status != 200:
                raise _Failure(f"HTTP {status} {answer.reason_phrase}".strip())
            declared = answer.headers.get("content-length")
            if declared is not None and declared.isdigit() and int(declared) > settings.max_bytes:
                raise _Failure(f"body of {int(declared):,} bytes is over the {settings.max_bytes:,}-byte cap")
            chunks, size = [], 0
            for chunk in answer.iter_bytes():
                size += len(chunk)
                if size > settings.max_bytes:
                    raise _Failure(f"body over the {settings.max_bytes:,}-byte cap; download abandoned")
                chunks.append(chunk)
            data = b"".join(chunks)
            etag = answer.headers.get("etag")
            last_modified = answer.headers.get("last-modified")
            kind = answer.headers.get("content-type", "").split(";")[0].strip() or "no content type"
    except httpx.TooManyRedirects:
        raise _Failure(f"more than {settings.max_redirects} redirects") from None
    except httpx.TimeoutException as exc:
        raise _Retry(f"timed out ({type(exc).__name__})") from None
    except httpx.TransportError as exc:  # connection refused or reset, protocol errors
        raise _Retry(f"connection failed ({type(exc).__name__}: {exc})") from None
    if looks_like_image(data) is None:
        raise _Failure(f"not an image ({kind}, {len(data):,} bytes)")
    return FetchResult(url, "downloaded", sha256=hashlib.sha256(data).hexdigest(), data=data, etag=etag,
                       last_modified=last_modified, fetched_at=time.time())


def _fetch_one(client, url, known, settings, gates, sleep):
    """Every attempt at one URL, under its host's gate; never raises."""
    attempts = 0
    wait_s = float(settings.backoff_s)
    with gates[_host(url)]:
        while True:
            attempts += 1
            try:
                result = _attempt(client, url, known, settings)
                return dataclasses.replace(result, attempts=attempts)
            except _Failure as exc:
                return FetchResult(url, "failed", attempts=attempts, fetched_at=time.time(), error=str(exc))
            except _Retry as exc:
                if attempts > settings.retries:
                    return FetchResult(url, "failed", attempts=attempts, fetched_at=time.time(),
                                       error=f"{exc} after {attempts} attempts")
                asked = exc.wait_s
                sleep(min(float(settings.max_wait_s), asked if asked is not None else wait_s))
                wait_s *= 2.0


def fetch_images(urls, known=None, settings=None, progress=None, sleep=time.sleep):
    """Download every URL (each once), concurrently; return ``{url: FetchResult}``.

    Parameters
    ----------
    urls : iterable of str
        ``http(s)://`` URLs; duplicates are fetched once.
    known : mapping of str to Known, optional
        What the store holds per URL; such URLs get a conditional GET.
    settings : FetchSettings, optional
    progress : callable, optional
        Called with each FetchResult as it finishes (a progress bar's update).
    sleep : callable
        Waits between attempts (tests pass a recorder).

    Returns
    -------
    dict of str to FetchResult
        In the order of ``urls``.
    """
    import httpx

    settings = settings or FetchSettings()
    known = dict(known or {})
    urls = list(dict.fromkeys(str(u) for u in urls))
    if not urls:
        return {}
    gates = {}
    for url in urls:
        gates.setdefault(_host(url), threading.BoundedSemaphore(max(1, int(settings.per_host))))
    workers = max(1, min(int(settings.workers), len(urls)))
    timeout = httpx.Timeout(settings.read_timeout_s, connect=settings.connect_timeout_s)
    limits = httpx.Limits(max_connections=workers, max_keepalive_connections=workers)
    out = {}
    with httpx.Client(timeout=timeout, limits=limits, follow_redirects=True,
                      max_redirects=int(settings.max_redirects),
                      headers={"User-Agent": settings.user_agent}) as client:
        with ThreadPoolExecutor(max_workers=workers) as pool:
            futures = {url: pool.submit(_fetch_one, client, url, known.get(url), settings, gates, sleep)
                       for url in urls}
            for url, future in futures.items():
                out[url] = future.result()
                if progress is not None:
                    progress(out[url])
    return out
