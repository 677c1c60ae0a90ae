"""``harmony serve --db DB``: the live, read-only JSON API (Starlette run by uvicorn)."""

import ipaddress

import click

from harmony.errors import HarmonyError, warn
from harmony.resources import DEFAULT_RULES, ROOMS_DIR

from . import FiniteRange, main
from .feed_cmd import CURATION_HELP, load_curation_for

__all__ = ["serve", "DEFAULT_PORT", "KEEP_ALIVE_SECONDS"]

#: The port ``harmony serve`` listens on unless told otherwise (unassigned by IANA for any service
#: this machine is likely to run; any free port will do).
DEFAULT_PORT = 8765


#: Idle keep-alive connections are closed after this long: longer than a reverse proxy's own
#: upstream idle time (nginx's keepalive_timeout is 60 s by default), so the proxy closes first
#: and never sends a request on a connection the server is closing (common practice).
KEEP_ALIVE_SECONDS = 65


@main.command("serve")
@click.option("--db", "db", required=True, type=click.Path(dir_okay=False), help="The palette store (opened read-only).")
@click.option("--rules", "rules_path", type=click.Path(dir_okay=False), default=str(DEFAULT_RULES),
              show_default="rules/default.toml", help="Harmony rules file.")
@click.option("--rooms", "rooms_dir", type=click.Path(file_okay=False), default=str(ROOMS_DIR),
              show_default="the shipped room templates", help="Folder of room templates (*.toml) the API may name.")
@click.option("--host", default="127.0.0.1", show_default=True,
              help="Address to listen on; keep the loopback default behind a reverse proxy.")
@click.option("--port", type=click.IntRange(1, 65535), default=DEFAULT_PORT, show_default=True)
@click.option("--room-time-limit", type=FiniteRange(0.05, 60.0), default=2.0, show_default=True,
              help="Seconds one room-set search may take (the best found so far is returned, marked not exact).")
@click.option("--access-log/--no-access-log", default=False, show_default=True, help="Log every request.")
@click.option("--curation", "curation_path", type=click.Path(dir_okay=False), default=None, metavar="FILE",
              help=CURATION_HELP)
def serve(db, rules_path, rooms_dir, host, port, room_time_limit, access_log, curation_path):
    """Answer partners, palettes, scores and room sets over HTTP, as JSON.

    With --curation, partners are pinned, blocked and cut as 'harmony feed --curation' does.
    The store is opened read-only and watched: products a later 'harmony extract' adds are
    answered within about a second of its commit, without a restart. Edits to the rules and
    curation files are taken up the same way; an edit that does not load leaves the last good
    version in force and is named under "reload_errors" in /v1/health. The API is described at
    /openapi.json. Stop with Ctrl-C (or SIGTERM).
    """
    import logging

    import uvicorn

    from harmony.rules import load_rules
    from harmony.serve.app import create_app
    from harmony.serve.snapshot import LiveStore
    from harmony.serve.watched import file_version
    from harmony.shop.store import Store

    try:
        loopback = ipaddress.ip_address(host).is_loopback
    except ValueError:
        loopback = host == "localhost"
    if not loopback:
        warn(f"listening on {host}, not on loopback: put a reverse proxy with access control in front")
    # Each file's version is noted before it is read: an edit made while the server starts is
    # then loaded by the watcher, not left unseen until the next edit.
    rules_version = file_version(rules_path)
    rules = load_rules(rules_path)
    with Store(db, read_only=True) as store:
        if not store.products():
            raise HarmonyError(f"{db}: the store holds no products (run 'harmony extract' first)")
        curation_version = None if curation_path is None else file_version(curation_path)
        curation = load_curation_for(curation_path, store)
    live = LiveStore(db, rules, rules_path=rules_path, curation=curation, curation_path=curation_path,
                     rules_version=rules_version, curation_version=curation_version)
    logging.basicConfig(level=logging.INFO, format="%(levelname)s: %(name)s: %(message)s")
    app = create_app(live, rules_path=rules_path, rooms_dir=rooms_dir, room_time_limit=room_time_limit)
    click.echo(f"serving {len(live.snapshot)} products of {db} on http://{host}:{port} (API: /openapi.json)", err=True)
    uvicorn.run(app, host=host, port=port, access_log=access_log, log_level="info", server_header=False,
                timeout_keep_alive=KEEP_ALIVE_SECONDS, limit_concurrency=512, h11_max_incomplete_event_size=16 * 1024)
