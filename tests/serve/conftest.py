"""A demo-shop store with a few products held back (a later extract adds them), and a real
``harmony serve`` process on a free loopback port talking to it."""

import csv
import socket
import subprocess
import sys
import time

import httpx
import pytest

from harmony.resources import SHOP_DIR

CLI = [sys.executable, "-c", "from harmony.cli import main; main()"]

#: Products left out of the first extract; the live test adds them while the server runs.
HELD_BACK = ("RUG-003", "CSH-004")


def write_catalogue(path, skip=(), image_for=None):
    """The demo catalogue with absolute image paths, without the ids in ``skip``; ``image_for``
    maps an id to another image path."""
    with open(SHOP_DIR / "catalogue.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    with open(path, "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=list(rows[0]))
        writer.writeheader()
        for row in rows:
            if row["id"] in skip:
                continue
            images = [str(SHOP_DIR / p) for p in row["image"].split("|")]
            if image_for and row["id"] in image_for:
                images = [str(image_for[row["id"]])]
            writer.writerow({**row, "image": "|".join(images)})
    return rows


def free_port():
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def demo_db(tmp_path_factory):
    folder = tmp_path_factory.mktemp("serve")
    catalogue = folder / "catalogue.csv"
    write_catalogue(catalogue, skip=HELD_BACK)
    db = folder / "shop.db"
    done = subprocess.run([*CLI, "extract", str(catalogue), "--db", str(db), "--workers", "1"],
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    return db


class Server:
    """A ``harmony serve`` process; :meth:`get` talks to it over loopback."""

    def __init__(self, db, *extra):
        self.port = free_port()
        self.base = f"http://127.0.0.1:{self.port}"
        self.proc = subprocess.Popen([*CLI, "serve", "--db", str(db), "--port", str(self.port), *extra],
                                     stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
        self.client = httpx.Client(base_url=self.base, timeout=60.0)
        deadline = time.monotonic() + 120
        while True:
            if self.proc.poll() is not None:
                raise RuntimeError(f"harmony serve exited: {self.proc.stdout.read()}")
            try:
                if self.client.get("/v1/health").status_code == 200:
                    return
            except httpx.TransportError:
                pass
            if time.monotonic() > deadline:
                self.stop()
                raise RuntimeError("harmony serve did not answer within 120 s")
            time.sleep(0.2)

    def get(self, path, **kw):
        return self.client.get(path, **kw)

    def request(self, method, path, **kw):
        return self.client.request(method, path, **kw)

    def stop(self):
        self.client.close()
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=20)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
        return self.proc.stdout.read()


@pytest.fixture(scope="module")
def server(demo_db):
    srv = Server(demo_db)
    try:
        yield srv
    finally:
        srv.stop()
