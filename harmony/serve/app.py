"""The ASGI application of ``harmony serve``: a read-only JSON API over a live store.

Every answer is JSON. A request the server cannot answer gets a 4xx status and
``{"error": "<one sentence>", "status": N}``; an unexpected failure gets a JSON 500 with one
sentence and the traceback goes to the server's log only. Requests are GET (or HEAD) without a
body, with a bounded path and query (:data:`MAX_PATH_BYTES`, :data:`MAX_QUERY_BYTES`).
"""

import contextlib
import json
import logging
import math
import re
from pathlib import Path

from starlette.applications import Starlette
from starlette.concurrency import run_in_threadpool
from starlette.exceptions import HTTPException
from starlette.responses import Response
from starlette.routing import Route

from harmony.errors import HarmonyError, StoreError
from harmony.resources import ROOMS_DIR
from harmony.serve import engine
from harmony.serve.openapi import openapi_document
from harmony.shop.catalogue import normalise_category
from harmony.suggest.curation import category_pair_allowed
from harmony.suggest.provenance import file_sha256

__all__ = [
    "ApiError",
    "create_app",
    "MAX_TOP",
    "MAX_ROOM_SETS",
    "MAX_PATH_BYTES",
    "MAX_QUERY_BYTES",
    "MAX_BUDGET",
    "ROOM_TIME_LIMIT",
]

log = logging.getLogger("harmony.serve")

#: Largest ``top`` of the partners endpoint (per partner category).
MAX_TOP = 100
#: Largest ``top`` of the room sets endpoint.
MAX_ROOM_SETS = 10
#: Longest request path and query string accepted, in bytes (414 above).
MAX_PATH_BYTES = 512
MAX_QUERY_BYTES = 1024
#: Largest budget accepted (any real room costs less; larger numbers are typing errors).
MAX_BUDGET = 1e9
#: Default and largest time limit of one room-set search, in seconds.
ROOM_TIME_LIMIT = 2.0

_TEMPLATE_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_-]{0,63}$")


class ApiError(Exception):
    """A request the server answers with ``status`` and one sentence."""

    def __init__(self, status, message):
        super().__init__(message)
        self.status = int(status)
        self.message = str(message)


def _json(payload, status=200):
    body = json.dumps(payload, ensure_ascii=False, allow_nan=False, separators=(",", ":")).encode("utf-8")
    return Response(body, status_code=status, media_type="application/json")


def _error(status, message):
    return _json({"error": message, "status": int(status)}, status)


# -- query parameters -------------------------------------------------------------------------


def _params(request, allowed):
    """The query as a dict, refusing unknown and repeated names."""
    out = {}
    for name, value in request.query_params.multi_items():
        if name not in allowed:
            raise ApiError(400, f"unknown query parameter '{name}' (this endpoint takes: {', '.join(allowed) or 'none'}).")
        if name in out:
            raise ApiError(400, f"query parameter '{name}' is given more than once.")
        out[name] = value
    return out


def _int(params, name, default, lo, hi):
    text = params.get(name)
    if text is None:
        return default
    try:
        value = int(text, 10)
    except ValueError:
        raise ApiError(400, f"{name} must be a whole number, got {text[:40]!r}.") from None
    if not lo <= value <= hi:
        raise ApiError(400, f"{name} must lie between {lo} and {hi}, got {value}.")
    return value


def _float(params, name, default, lo, hi, lo_open=False):
    text = params.get(name)
    if text is None:
        return default
    try:
        value = float(text)
    except ValueError:
        raise ApiError(400, f"{name} must be a number, got {text[:40]!r}.") from None
    if not math.isfinite(value) or value < lo or value > hi or (lo_open and value == lo):
        low = f"above {lo:g}" if lo_open else f"at least {lo:g}"
        raise ApiError(400, f"{name} must be a finite number {low} and at most {hi:g}, got {text[:40]!r}.")
    return value


def _required(params, name):
    value = params.get(name)
    if value is None or value == "":
        raise ApiError(400, f"query parameter '{name}' is required.")
    return value


# -- cached answers ---------------------------------------------------------------------------


def _request_line(scope):
    """The cache key of a request as it was sent: (raw path, raw query string)."""
    return scope.get("raw_path") or scope["path"].encode("utf-8"), scope.get("query_string", b"")


def _cached(request, snap, key):
    """The answer cached under ``key`` in ``snap``, also remembered under the request as sent."""
    body = snap.cache.get(key)
    if body is None:
        return None
    if request.scope["method"] == "GET":
        snap.answers.put(_request_line(request.scope), body)
    return Response(body, media_type="application/json")


def _remember(request, snap, key, response):
    """Cache the JSON bytes of a computed 200 answer under ``key`` and under the request as sent
    (the latter is answered by :class:`_Limits` before any routing)."""
    snap.cache.put(key, response.body)
    if request.scope["method"] == "GET":
        snap.answers.put(_request_line(request.scope), response.body)
    return response


# -- the application --------------------------------------------------------------------------


def _product(snap, pid):
    try:
        return snap.product(pid)
    except StoreError as exc:
        raise ApiError(404, f"{exc}.") from None


def _palette_or_409(snap, product):
    pal = snap.palette(product.id)
    if pal is None:
        raise ApiError(409, f"product '{product.id}' has no palette yet (its images gave none, or the "
                            "extraction has not reached it).")
    return pal


def _category(snap, name):
    key = normalise_category(name)
    if key in snap.category_data:
        return key
    import difflib

    close = difflib.get_close_matches(key, snap.categories(), n=1)
    hint = f" (did you mean '{close[0]}'?)" if close else ""
    raise ApiError(404, f"unknown category '{name[:60]}'{hint}.")


def create_app(live, *, rules_path=None, rooms_dir=ROOMS_DIR, room_time_limit=ROOM_TIME_LIMIT, watch=True):
    """The Starlette application answering from ``live`` (a :class:`harmony.serve.snapshot.LiveStore`).

    Parameters
    ----------
    live : LiveStore
        Its snapshot's rules, and its curation (pins, blocks, category pairs, score floors and the
        partner-category limit, applied as ``harmony feed --curation`` applies them), answer each
        request; edits to their files reach new requests (see ``LiveStore``).
    rules_path : path, optional
        The rules file, named in ``/v1/health`` (its hash there is that of the version in force).
    rooms_dir : path
        Folder of the room templates ``/v1/rooms/{template}/sets`` may name.
    room_time_limit : float
        Default and largest time limit of one room-set search, in seconds.
    watch : bool
        Start the store watcher with the application (and stop it at shutdown).
    """
    fixed_rules_hash = None if live.rules_file is not None or rules_path is None else file_sha256(rules_path)
    rooms_dir = Path(rooms_dir)
    document = openapi_document(MAX_TOP, MAX_ROOM_SETS, float(room_time_limit))

    async def health(request):
        _params(request, ())
        snap = live.snapshot
        return _json({
            "status": "ok",
            "store": snap.path,
            "store_version": snap.version,
            "snapshot": snap.generation,
            "loaded_at": round(snap.loaded_at, 3),
            "products": len(snap),
            "with_palette": snap.palette_count,
            "categories": len(snap.category_data),
            "warming_up": live.warming,
            "rules": None if rules_path is None else Path(rules_path).name,
            "rules_sha256": live.rules_sha256 or fixed_rules_hash,
            "curation_sha256": None if snap.curation is None else snap.curation.sha256,
            "reload_errors": live.reload_errors,
        })

    async def categories(request):
        _params(request, ())
        snap = live.snapshot
        out = []
        for key in snap.categories():
            data = snap.category_data[key]
            out.append({
                "category": key,
                "products": len(data.products),
                "with_palette": len(data.ids),
                "partners_in_stock": len(data.partner_ids),
                "pairs_with": [c for c in snap.categories() if snap.rules.pairs_with(key, c)],
            })
        return _json({"categories": out})

    async def product_info(request):
        _params(request, ())
        snap = live.snapshot
        p = _product(snap, request.path_params["product_id"])
        return _json({
            "product": p.id, "title": p.title, "category": p.category_key, "price": p.price,
            "currency": p.currency, "stock": p.stock, "in_stock": p.in_stock(),
            "has_palette": snap.palette(p.id) is not None,
        })

    def compute_partners(snap, product, pal, cats, only, top, diversity, min_score):
        found = engine.product_partners(product, pal, cats, snap.rules, snap.category_data, top, diversity,
                                        snap.screen, snap.curation)
        # A pin is kept whatever its score, as in the curated feed; min_score filters the rest.
        rows = [{"partner": r.partner, "category": r.partner_category, "rank": r.rank, "score": r.score,
                 "reason": r.reason, "pinned": r.pinned}
                for r in found if (only is None or r.partner_category == only) and (r.pinned or r.score >= min_score)]
        shown = list(cats) if only is None else [only]
        return {"product": product.id, "category": product.category_key, "partner_categories": shown,
                "partners": rows}

    async def partners(request):
        params = _params(request, ("category", "top", "diversity", "min_score"))
        snap = live.snapshot
        product = _product(snap, request.path_params["product_id"])
        top = _int(params, "top", 10, 1, MAX_TOP)
        diversity = _float(params, "diversity", 0.0, 0.0, 1.0)
        min_score = _float(params, "min_score", 0.0, 0.0, 1.0)
        own, rules, curation = product.category_key, snap.rules, snap.curation
        paired = [c for c in snap.categories() if c != own and rules.pairs_with(own, c)
                  and category_pair_allowed(curation, own, c)]
        category, only = params.get("category"), None
        if category is not None:
            cat = _category(snap, category)
            if cat == own:
                raise ApiError(400, f"'{cat}' is the category of '{product.id}' itself; ask for another category.")
            if not rules.pairs_with(own, cat):
                raise ApiError(400, f"the rules do not pair '{own}' with '{cat}'.")
            if not category_pair_allowed(curation, own, cat):
                raise ApiError(400, f"the curation file does not suggest '{cat}' with '{own}'.")
            only = cat
            # The curation's limit of partner categories is decided over all of them.
            if curation is None or curation.max_partner_categories is None:
                paired = [cat]
        key = ("partners", product.id, only, top, diversity, min_score)
        cached = _cached(request, snap, key)
        if cached is not None:
            return cached
        pal = _palette_or_409(snap, product)
        payload = await run_in_threadpool(compute_partners, snap, product, pal, paired, only, top, diversity,
                                          min_score)
        return _remember(request, snap, key, _json(payload))

    def compute_similar(snap, product, top):
        from harmony.suggest.lookalike import similar_products

        others = [pid for pid in snap.category_data[product.category_key].partner_ids if pid != product.id]
        found = similar_products(snap, product.id, top=top) if others else []
        return {"product": product.id, "category": product.category_key, "similar": found}

    async def similar(request):
        params = _params(request, ("top",))
        snap = live.snapshot
        product = _product(snap, request.path_params["product_id"])
        top = _int(params, "top", 10, 1, MAX_TOP)
        key = ("similar", product.id, top)
        cached = _cached(request, snap, key)
        if cached is not None:
            return cached
        _palette_or_409(snap, product)
        return _remember(request, snap, key, _json(await run_in_threadpool(compute_similar, snap, product, top)))

    async def palette(request):
        _params(request, ())
        snap = live.snapshot
        product = _product(snap, request.path_params["product_id"])
        pal = _palette_or_409(snap, product)
        return _json(pal.to_dict(image=snap.images.get(product.id)))

    async def score(request):
        params = _params(request, ("a", "b"))
        snap = live.snapshot
        a = _product(snap, _required(params, "a"))
        b = _product(snap, _required(params, "b"))
        pal_a, pal_b = _palette_or_409(snap, a), _palette_or_409(snap, b)
        pr = snap.rules.for_pair(a.category_key, b.category_key)
        ps = engine.score_pair(pal_a, pal_b, pr)
        return _json({"a": a.id, "b": b.id, "paired": snap.rules.pairs_with(a.category_key, b.category_key),
                      **ps.to_dict()})

    def templates():
        return sorted(p.stem for p in rooms_dir.glob("*.toml") if _TEMPLATE_NAME.match(p.stem))

    async def rooms(request):
        _params(request, ())
        return _json({"rooms": templates()})

    async def room_sets(request):
        params = _params(request, ("anchor", "budget", "top", "time_limit"))
        name = request.path_params["template"]
        if not _TEMPLATE_NAME.match(name) or not (rooms_dir / f"{name}.toml").is_file():
            raise ApiError(404, f"unknown room template '{name[:64]}' (known: {', '.join(templates()) or 'none'}).")
        snap = live.snapshot
        anchor = params.get("anchor")
        if anchor is not None:
            _product(snap, anchor)
        budget = _float(params, "budget", None, 0.0, MAX_BUDGET, lo_open=True)
        top = _int(params, "top", 3, 1, MAX_ROOM_SETS)
        limit = _float(params, "time_limit", float(room_time_limit), 0.0, float(room_time_limit), lo_open=True)
        key = ("rooms", name, anchor, budget, top, limit)
        cached = _cached(request, snap, key)
        if cached is not None:
            return cached
        try:
            result = await run_in_threadpool(engine.room_sets, snap, rooms_dir / f"{name}.toml", snap.rules,
                                             budget, anchor, top, limit, curation=snap.curation)
        except StoreError as exc:
            raise ApiError(404, f"{exc}.") from None
        except HarmonyError as exc:
            raise ApiError(400, f"{exc}.") from None
        result = {"template": name, "anchor": anchor, "time_limit": limit, **result}
        return _remember(request, snap, key, _json(result))

    async def openapi(request):
        _params(request, ())
        return _json(document)

    async def on_api_error(request, exc):
        return _error(exc.status, exc.message)

    async def on_http_error(request, exc):
        if exc.status_code == 404:
            return _error(404, f"no such endpoint: {request.url.path[:80]} (see /openapi.json).")
        if exc.status_code == 405:
            return _error(405, "only GET and HEAD are answered.")
        detail = exc.detail if isinstance(exc.detail, str) else "the request was refused"
        return _error(exc.status_code, f"{detail}.")

    async def on_harmony_error(request, exc):
        return _error(400, f"{exc}.")

    async def on_crash(request, exc):
        log.exception("unexpected failure answering %s", request.url.path)
        return _error(500, "the server failed to answer this request; the failure is in its log.")

    @contextlib.asynccontextmanager
    async def lifespan(app):
        if watch:
            live.start()
        try:
            yield
        finally:
            if watch:
                live.close()

    routes = [
        Route("/v1/health", health, methods=["GET", "HEAD"]),
        Route("/v1/categories", categories, methods=["GET", "HEAD"]),
        Route("/v1/products/{product_id}", product_info, methods=["GET", "HEAD"]),
        Route("/v1/products/{product_id}/partners", partners, methods=["GET", "HEAD"]),
        Route("/v1/products/{product_id}/palette", palette, methods=["GET", "HEAD"]),
        Route("/v1/products/{product_id}/similar", similar, methods=["GET", "HEAD"]),
        Route("/v1/score", score, methods=["GET", "HEAD"]),
        Route("/v1/rooms", rooms, methods=["GET", "HEAD"]),
        Route("/v1/rooms/{template}/sets", room_sets, methods=["GET", "HEAD"]),
        Route("/openapi.json", openapi, methods=["GET", "HEAD"]),
    ]
    app = Starlette(
        routes=routes,
        exception_handlers={ApiError: on_api_error, HTTPException: on_http_error, HarmonyError: on_harmony_error,
                            Exception: on_crash},
        lifespan=lifespan,
    )
    return _Limits(app, live)


_JSON_TYPE = (b"content-type", b"application/json")


class _Limits:
    """ASGI middleware: GET/HEAD only, no request body, bounded path and query, JSON refusals; a
    GET whose answer the current snapshot has cached (the same path and query as sent before) is
    answered here with its stored bytes, without routing or a Request object."""

    def __init__(self, app, live):
        self.app = app
        self.live = live

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)
        refusal = self._refusal(scope)
        if refusal is not None:
            status, message = refusal
            response = _error(status, message)
            return await response(scope, receive, send)
        if scope["method"] == "GET":
            body = self.live.snapshot.answers.get(_request_line(scope))
            if body is not None:
                await send({"type": "http.response.start", "status": 200,
                            "headers": [(b"content-length", str(len(body)).encode("ascii")), _JSON_TYPE]})
                await send({"type": "http.response.body", "body": body})
                return None
        return await self.app(scope, receive, send)

    @staticmethod
    def _refusal(scope):
        if scope["method"] not in ("GET", "HEAD"):
            return 405, "only GET and HEAD are answered."
        if len(scope.get("raw_path") or scope["path"].encode()) > MAX_PATH_BYTES:
            return 414, f"the request path is longer than {MAX_PATH_BYTES} bytes."
        if len(scope.get("query_string", b"")) > MAX_QUERY_BYTES:
            return 414, f"the query string is longer than {MAX_QUERY_BYTES} bytes."
        for name, value in scope.get("headers", ()):
            if name == b"content-length" and value.strip() not in (b"", b"0"):
                return 413, "requests to this server carry no body."
            if name == b"transfer-encoding":
                return 413, "requests to this server carry no body."
        return None
