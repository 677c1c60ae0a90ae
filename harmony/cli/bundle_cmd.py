"""``harmony bundle``: the best room sets under a budget, found by an exact search."""

import json
from pathlib import Path

import click

from harmony.errors import RoomError
from harmony.resources import DEFAULT_RULES, DEMO_DIR

from . import main
from .feed_cmd import CURATION_HELP, load_curation_for, warn_unmatched_pairs


def _room_path(value):
    """A template path, or the name of a shipped template (``dining_corner``)."""
    path = Path(value)
    if not path.exists() and path.suffix == "" and (DEMO_DIR / f"{value}.toml").exists():
        return DEMO_DIR / f"{value}.toml"
    return path


def _ids(value):
    return tuple(x.strip() for x in (value or "").split(",") if x.strip())


@main.command("bundle")
@click.option("--db", "db_path", required=True, type=click.Path(dir_okay=False), help="Palette store (SQLite).")
@click.option("--room", "room_file", required=True, metavar="FILE",
              help="Room template (TOML), or the name of a shipped one such as 'dining_corner'.")
@click.option("--budget", type=float, default=None, help="Budget; overrides the template's.")
@click.option("--anchor", default=None, metavar="ID", help="A product every set must contain.")
@click.option("--exclude", default=None, metavar="ID,...", help="Products no set may contain.")
@click.option("--top", type=int, default=3, show_default=True, help="How many sets.")
@click.option("--min-difference", type=int, default=1, show_default=True,
              help="Any two sets differ in at least this many slots.")
@click.option("--pool-limit", type=int, default=60, show_default=True,
              help="Largest candidate pool per slot; larger ones keep the best partners by the screen.")
@click.option("--rules", "rules_file", default=str(DEFAULT_RULES), show_default="rules/default.toml",
              type=click.Path(dir_okay=False), help="Rules file (TOML).")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object.")
@click.option("--curation", "curation_path", type=click.Path(dir_okay=False), default=None, metavar="FILE",
              help=CURATION_HELP + " Sets never hold two products a block keeps apart.")
def bundle(db_path, room_file, budget, anchor, exclude, top, min_difference, pool_limit, rules_file, as_json,
           curation_path):
    """Assemble the best-coordinated room sets within a budget."""
    from harmony.rules import load_rules
    from harmony.shop.store import Store
    from harmony.suggest.bundle import result_to_dict, search_bundles
    from harmony.suggest.room import load_room
    room = load_room(_room_path(room_file))
    rules = load_rules(rules_file)
    with Store(db_path) as store:
        curation = load_curation_for(curation_path, store)
        result = search_bundles(store, room, rules, budget=budget, anchor=anchor, exclude=_ids(exclude),
                                top=top, min_difference=min_difference, pool_limit=pool_limit, curation=curation)
        warn_unmatched_pairs(rules, store.categories())
        titles = {pid: store.product(pid).title for b in result.bundles for _, pid, _, _ in b.items}
    if as_json:
        click.echo(json.dumps(result_to_dict(result)))
        return
    if not result.bundles:
        raise RoomError(f"room '{room.name}': no set fits the budget with the candidates left")
    eligible = dict(result.eligible)
    pools = ", ".join(f"{name} {n}" + (f" of {eligible[name]}" if eligible.get(name, n) > n else "")
                      for name, n in result.pool_sizes)
    exact = "exact over the pools" if result.exact else "search stopped early: not proven best"
    if result.exact and any(eligible.get(name, n) > n for name, n in result.pool_sizes):
        exact += " (pools cut to the best partners; raise --pool-limit to search more)"
    click.echo(f"{result.room}: budget {result.budget:,.2f} {result.currency}; pools: {pools}; {exact}")
    for rank, b in enumerate(result.bundles, start=1):
        click.echo(f"\n{rank}. score {b.score:.3f}   total {b.total_price:,.2f} {result.currency}")
        width = max(len(slot) for slot, _, _, _ in b.items)
        for slot, pid, qty, price in b.items:
            click.echo(f"   {slot:<{width}}  {pid:<10} {qty:>2} x {price:>9,.2f}  {titles.get(pid, '')}")
        v = b.view
        shares = " / ".join(f"{x * 100:.0f}" for x in v.shares)
        click.echo(f"   proportions {shares} (60-30-10 distance {v.distance:.2f}); "
                   f"hue template {v.template.name} at {v.template.rotation_deg:.0f} deg")
