"""Tests of harmony.shop.fetch and of URL images through the extraction engine.

Every request goes to a real HTTP server started inside the test on 127.0.0.1 (imageserver.py),
which serves the demo shop's photos and misbehaves on purpose. A guard refuses any connection to
an address outside the loopback network, so no test can reach another machine. Waits between
attempts go to a recorder instead of sleeping, so no test depends on timing; the only real wait is
the read timeout of the slow answer (0.2 s).
"""

import hashlib
import ipaddress
import socket

import numpy as np
import pytest

from harmony.resources import SHOP_DIR
from harmony.shop.engine import run_extraction
from harmony.shop.fetch import (
    FetchSettings,
    Known,
    fetch_images,
    is_url,
    looks_like_image,
    retry_after_seconds,
)
from harmony.shop.store import Store
from imageserver import LAST_MODIFIED, ImageServer

NAMES = ("SOF-001.jpg", "RUG-001.jpg", "ARM-001.jpg")
PHOTOS = {name: (SHOP_DIR / "images" / name).read_bytes() for name in NAMES}

#: Tiny waits and one retry: the behaviour is the same, the tests stay quick.
FAST = FetchSettings(connect_timeout_s=2.0, read_timeout_s=0.2, retries=1, backoff_s=0.001, max_wait_s=0.01,
                     max_bytes=2 * 1024 * 1024, workers=4, per_host=2)


@pytest.fixture(autouse=True)
def loopback_only(monkeypatch):
    """Refuse any connection outside 127.0.0.0/8 (and ::1) for the whole test."""
    real = socket.socket.connect

    def connect(self, address):
        if self.family in (socket.AF_INET, socket.AF_INET6):
            host = address[0]
            if not ipaddress.ip_address(host).is_loopback:
                raise AssertionError(f"a test tried to reach {host}")
        return real(self, address)

    monkeypatch.setattr(socket.socket, "connect", connect)


@pytest.fixture
def server():
    with ImageServer(PHOTOS, slow_s=1.0) as srv:
        yield srv


def one(server, path, known=None, settings=FAST, sleeps=None):
    sleeps = [] if sleeps is None else sleeps
    url = server.url(path)
    return fetch_images([url], {url: known} if known else None, settings, sleep=sleeps.append)[url]


def test_is_url():
    assert is_url("https://cdn.example/a.jpg") and is_url("HTTP://x/y.png")
    assert not is_url("images/a.jpg") and not is_url("ftp://x/y") and not is_url("/abs/https.jpg")


def test_magic_bytes_and_pillow_verify():
    # The leading bytes are those of the formats' specifications (JPEG SOI marker, ITU T.81).
    assert looks_like_image(PHOTOS["SOF-001.jpg"]) == "JPEG"
    assert looks_like_image(b"<!DOCTYPE html><html></html>") is None
    # Right magic, broken body: Pillow's verify catches it.
    assert looks_like_image(b"\x89PNG\r\n\x1a\n" + b"\0" * 40) is None


def test_retry_after_both_forms():
    assert retry_after_seconds("120") == 120.0
    # RFC 9110 section 10.2.3's own example date, 10 s after "now".
    now = 946684789.0  # 1999-12-31 23:59:49 UTC
    assert retry_after_seconds("Fri, 31 Dec 1999 23:59:59 GMT", now=now) == pytest.approx(10.0)
    assert retry_after_seconds("soon") is None and retry_after_seconds(None) is None


def test_download_keeps_validators_and_hash(server):
    r = one(server, "/img/SOF-001.jpg")
    assert r.status == "downloaded" and r.data == PHOTOS["SOF-001.jpg"]
    assert r.sha256 == hashlib.sha256(PHOTOS["SOF-001.jpg"]).hexdigest()
    assert r.etag == f'"{r.sha256}"' and r.last_modified == LAST_MODIFIED and r.fetched_at > 0


def test_etag_answer_304_is_unchanged(server):
    first = one(server, "/img/RUG-001.jpg")
    again = one(server, "/img/RUG-001.jpg", Known(first.sha256, first.etag, first.last_modified))
    assert again.status == "unchanged" and again.data is None and again.sha256 == first.sha256
    assert server.hits["/img/RUG-001.jpg"] == 2


def test_last_modified_answer_304_is_unchanged(server):
    first = one(server, "/lm/RUG-001.jpg")
    assert first.etag is None and first.last_modified == LAST_MODIFIED
    again = one(server, "/lm/RUG-001.jpg", Known(first.sha256, None, first.last_modified))
    assert again.status == "unchanged"


def test_slow_answer_times_out_after_retries(server):
    sleeps = []
    r = one(server, "/slow/SOF-001.jpg", sleeps=sleeps)
    assert r.status == "failed" and "timed out" in r.error and r.attempts == 2
    assert sleeps == [0.001]  # one backoff wait between the two attempts


def test_404_is_final(server):
    sleeps = []
    r = one(server, "/missing", sleeps=sleeps)
    assert r.status == "failed" and r.error.startswith("HTTP 404") and r.attempts == 1 and sleeps == []


def test_500_then_200_retries_with_backoff(server):
    sleeps = []
    r = one(server, "/flaky/ARM-001.jpg", sleeps=sleeps)
    assert r.status == "downloaded" and r.attempts == 2 and r.data == PHOTOS["ARM-001.jpg"]
    assert sleeps == [0.001]


def test_429_honours_retry_after_capped(server):
    sleeps = []
    r = one(server, "/busy/ARM-001.jpg", settings=FetchSettings(retries=1, max_wait_s=100.0), sleeps=sleeps)
    assert r.status == "downloaded" and sleeps == [7.0]  # the server asked for 7 s
    sleeps = []
    r = one(server, "/busy/SOF-001.jpg", sleeps=sleeps)
    assert r.status == "downloaded" and sleeps == [0.01]  # capped at max_wait_s


def test_redirects_followed_to_a_limit(server):
    assert one(server, "/moved/SOF-001.jpg").status == "downloaded"
    r = one(server, "/loop")
    assert r.status == "failed" and "redirects" in r.error
    assert server.hits["/loop"] == FAST.max_redirects + 1


@pytest.mark.parametrize("path", ["/big", "/bigdeclared"])
def test_body_over_the_cap_is_abandoned(server, path):
    r = one(server, path, settings=FetchSettings(max_bytes=200_000, retries=0))
    assert r.status == "failed" and "cap" in r.error and r.data is None


def test_html_instead_of_an_image(server):
    r = one(server, "/html")
    assert r.status == "failed" and "not an image (text/html" in r.error


def test_connection_reset_is_retried_then_fails(server):
    r = one(server, "/reset")
    assert r.status == "failed" and "connection failed" in r.error and r.attempts == 2
    assert server.hits["/reset"] == 2


def test_per_host_limit_bounds_requests_at_once(server):
    urls = [server.url(f"/slow/{name}?{i}") for i in range(2) for name in NAMES]
    settings = FetchSettings(read_timeout_s=5.0, workers=6, per_host=1, retries=0)
    server.httpd.slow_s = 0.05
    results = fetch_images(urls, settings=settings)
    assert all(r.status == "downloaded" for r in results.values())
    assert server.most_at_once == 1


# -- through the engine --------------------------------------------------------------------------


def write_catalogue(folder, images):
    lines = ["id,category,price,image"]
    for i, (category, image) in enumerate(images):
        lines.append(f"P{i},{category},10,{image}")
    path = folder / "catalogue.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_url_palettes_equal_file_palettes_and_reruns_are_conditional(server, tmp_path):
    for name, data in PHOTOS.items():
        (tmp_path / name).write_bytes(data)
    local = write_catalogue(tmp_path, [("sofa", n) for n in NAMES])
    remote_dir = tmp_path / "remote"
    remote_dir.mkdir()
    mixed = [("sofa", server.url(f"/img/{NAMES[0]}")), ("sofa", server.url(f"/lm/{NAMES[1]}")),
             ("sofa", str(tmp_path / NAMES[2])), ("sofa", server.url("/missing"))]
    remote = write_catalogue(remote_dir, mixed)

    run_extraction(local, tmp_path / "local.db", workers=1, progress=False)
    first = run_extraction(remote, tmp_path / "remote.db", workers=1, progress=False, fetch_settings=FAST)
    assert (first.downloaded, first.unchanged, first.download_failed) == (2, 0, 1)
    assert first.new == 3 and first.failed == 1 and first.no_palette == 1
    assert "URLs: 2 downloaded, 0 unchanged, 1 failed" in first.line()
    with Store(tmp_path / "local.db") as a, Store(tmp_path / "remote.db") as b:
        pa, pb = a.palettes(), b.palettes()
        for i in range(3):
            np.testing.assert_array_equal(pa[f"P{i}"].jab, pb[f"P{i}"].jab)
            np.testing.assert_array_equal(pa[f"P{i}"].weights, pb[f"P{i}"].weights)
        failures = b.failures()
        assert [(pid, reason) for pid, _img, reason in failures] == [
            ("P3", f"{server.url('/missing')}: download failed: HTTP 404 Not Found")]
        known = b.remote_known()
        assert set(known) == {server.url(f"/img/{NAMES[0]}"), server.url(f"/lm/{NAMES[1]}")}
        assert b.remote_bytes(server.url(f"/img/{NAMES[0]}")) == PHOTOS[NAMES[0]]

    again = run_extraction(remote, tmp_path / "remote.db", workers=1, progress=False, fetch_settings=FAST)
    assert (again.downloaded, again.unchanged, again.download_failed) == (0, 2, 1)
    assert again.new == 0 and again.cached == 3
    assert server.hits[f"/img/{NAMES[0]}"] == 2 and server.hits[f"/lm/{NAMES[1]}"] == 2


def test_changed_image_is_downloaded_and_extracted_again(server, tmp_path):
    url = server.url("/img/SOF-001.jpg")
    cat = write_catalogue(tmp_path, [("sofa", url)])
    run_extraction(cat, tmp_path / "s.db", workers=1, progress=False, fetch_settings=FAST)
    server.photos["SOF-001.jpg"] = PHOTOS["RUG-001.jpg"]  # the shop replaced the photo
    second = run_extraction(cat, tmp_path / "s.db", workers=1, progress=False, fetch_settings=FAST)
    assert (second.downloaded, second.unchanged, second.new) == (1, 0, 1)
    with Store(tmp_path / "s.db") as store:
        assert store.remote_bytes(url) == PHOTOS["RUG-001.jpg"]
        assert store.palette("P0").sha256 == hashlib.sha256(PHOTOS["RUG-001.jpg"]).hexdigest()


def test_cli_failed_download_is_one_line_and_strict_exits_1(server, tmp_path):
    from click.testing import CliRunner

    from harmony.cli import main

    cat = write_catalogue(tmp_path, [("sofa", server.url("/img/SOF-001.jpg")), ("rug", server.url("/html"))])
    runner = CliRunner()
    result = runner.invoke(main, ["extract", str(cat), "--db", str(tmp_path / "s.db"), "--workers", "1", "--strict"])
    assert result.exit_code == 1
    lines = [line for line in result.stderr.splitlines() if server.url("/html") in line]
    assert len(lines) == 1 and lines[0].startswith("warning: product P1: no palette from")
    assert "not an image (text/html" in lines[0]
