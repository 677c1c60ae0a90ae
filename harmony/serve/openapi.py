"""The OpenAPI 3 description of the live API, written by hand to match :mod:`harmony.serve.app`.

The tests call every path listed here on a running server, so a path added to the application
without a line here (or the reverse) is caught.
"""

from harmony.suggest.lookalike import SIMILAR_DELTA_E

__all__ = ["openapi_document", "OPENAPI_VERSION"]

#: The OpenAPI Specification version the document follows (https://spec.openapis.org/oas/v3.0.3).
OPENAPI_VERSION = "3.0.3"


def _param(name, where, schema, description, required=False):
    return {"name": name, "in": where, "required": required or where == "path", "schema": schema,
            "description": description}


def _ok(description, schema):
    return {"description": description, "content": {"application/json": {"schema": schema}}}


_ERROR = {"$ref": "#/components/schemas/Error"}
_ERRORS = {
    "400": _ok("A bad parameter: unknown name, not a number, out of range.", _ERROR),
    "404": _ok("Unknown product, category or room template.", _ERROR),
    "409": _ok("The product has no palette yet.", _ERROR),
}
_PRODUCT_ID = _param("product_id", "path", {"type": "string"}, "A product id of the store.")


def openapi_document(max_top, max_sets, time_limit):
    """The OpenAPI document (a dict) for the given limits."""
    partner = {
        "type": "object",
        "required": ["partner", "category", "rank", "score", "reason", "pinned"],
        "properties": {
            "partner": {"type": "string"},
            "category": {"type": "string", "description": "The partner's category (normalised)."},
            "rank": {"type": "integer", "minimum": 1, "description": "Rank within its category."},
            "score": {"type": "number", "minimum": 0, "maximum": 1},
            "reason": {"type": "string"},
            "pinned": {"type": "boolean", "description": "Placed by a curation file rather than by score."},
        },
    }
    # A look-alike row: a partner row's fields without "pinned", with the distance, in one category.
    similar = {"type": "object", "required": ["partner", "category", "rank", "score", "distance", "reason"],
               "properties": {k: v for k, v in partner["properties"].items() if k != "pinned"}}
    similar["properties"].update({
        "category": {"type": "string", "description": "The same category as the product."},
        "score": {"type": "number", "minimum": 0, "maximum": 1,
                  "description": f"exp(-distance / {SIMILAR_DELTA_E:g})."},
        "distance": {"type": "number", "minimum": 0, "description": "Earth mover's distance, CAM02-UCS ΔE."},
    })
    return {
        "openapi": OPENAPI_VERSION,
        "info": {
            "title": "harmony live suggestions",
            "version": "1",
            "description": "Read-only colour-harmony answers over a palette store. Every error is "
                           "{\"error\": sentence, \"status\": code}.",
        },
        "paths": {
            "/v1/health": {"get": {
                "summary": "Store version, product count, the hashes of the rules and curation in force, and edits that did not load.",
                "responses": {"200": _ok("Health.", {"type": "object"})},
            }},
            "/v1/categories": {"get": {
                "summary": "The store's categories with their counts and the categories the rules pair each with.",
                "responses": {"200": _ok("Categories.", {"type": "object"})},
            }},
            "/v1/products/{product_id}": {"get": {
                "summary": "One product: title, category, price, stock, whether it has a palette.",
                "parameters": [_PRODUCT_ID],
                "responses": {"200": _ok("The product.", {"type": "object"}), "404": _ERRORS["404"]},
            }},
            "/v1/products/{product_id}/partners": {"get": {
                "summary": "The best in-stock partners of a product, per partner category, with scores and reasons.",
                "parameters": [
                    _PRODUCT_ID,
                    _param("category", "query", {"type": "string"},
                           "Only this partner category (default: every category the rules pair it with)."),
                    _param("top", "query", {"type": "integer", "minimum": 1, "maximum": max_top, "default": 10},
                           "Partners per category."),
                    _param("diversity", "query", {"type": "number", "minimum": 0, "maximum": 1, "default": 0},
                           "0 = best scores; higher spreads near-identical partners apart."),
                    _param("min_score", "query", {"type": "number", "minimum": 0, "maximum": 1, "default": 0},
                           "Leave out partners scoring below this (partners a curation file pins stay)."),
                ],
                "responses": {
                    "200": _ok("Partners.", {
                        "type": "object",
                        "properties": {
                            "product": {"type": "string"},
                            "category": {"type": "string", "description": "The product's own category."},
                            "partner_categories": {"type": "array", "items": {"type": "string"}},
                            "partners": {"type": "array", "items": partner},
                        },
                    }),
                    **_ERRORS,
                },
            }},
            "/v1/products/{product_id}/similar": {"get": {
                "summary": "In-stock products of the same category whose palettes look most alike "
                           "(earth mover's distance in CAM02-UCS), closest first.",
                "parameters": [
                    _PRODUCT_ID,
                    _param("top", "query", {"type": "integer", "minimum": 1, "maximum": max_top, "default": 10},
                           "How many look-alikes."),
                ],
                "responses": {
                    "200": _ok("Look-alikes (an empty list when the category has no other in-stock product).", {
                        "type": "object",
                        "properties": {
                            "product": {"type": "string"},
                            "category": {"type": "string"},
                            "similar": {"type": "array", "items": similar},
                        },
                    }),
                    **_ERRORS,
                },
            }},
            "/v1/products/{product_id}/palette": {"get": {
                "summary": "The product's chosen palette, as `harmony palette --json` prints it.",
                "parameters": [_PRODUCT_ID],
                "responses": {"200": _ok("The palette.", {"type": "object"}), "404": _ERRORS["404"],
                              "409": _ERRORS["409"]},
            }},
            "/v1/score": {"get": {
                "summary": "The exact score of two products with its rule contributions, colour pairs and reason.",
                "parameters": [
                    _param("a", "query", {"type": "string"}, "First product id.", required=True),
                    _param("b", "query", {"type": "string"}, "Second product id.", required=True),
                ],
                "responses": {"200": _ok("The score.", {"type": "object"}), **_ERRORS},
            }},
            "/v1/rooms": {"get": {
                "summary": "The room templates this server knows.",
                "responses": {"200": _ok("Template names.", {"type": "object"})},
            }},
            "/v1/rooms/{template}/sets": {"get": {
                "summary": "The best room sets of a template under a budget, found within a time limit.",
                "parameters": [
                    _param("template", "path", {"type": "string", "pattern": "^[A-Za-z0-9][A-Za-z0-9_-]{0,63}$"},
                           "A name from /v1/rooms."),
                    _param("anchor", "query", {"type": "string"}, "A product every set must contain."),
                    _param("budget", "query", {"type": "number", "exclusiveMinimum": True, "minimum": 0},
                           "Overrides the template's budget."),
                    _param("top", "query", {"type": "integer", "minimum": 1, "maximum": max_sets, "default": 3},
                           "How many sets."),
                    _param("time_limit", "query", {"type": "number", "exclusiveMinimum": True, "minimum": 0,
                                                   "maximum": time_limit, "default": time_limit},
                           "Seconds for the search; `exact` says whether it finished."),
                ],
                "responses": {"200": _ok("Sets, as `harmony bundle --json` prints them, with `exact`.",
                                         {"type": "object"}), **_ERRORS},
            }},
            "/openapi.json": {"get": {
                "summary": "This document.",
                "responses": {"200": _ok("OpenAPI document.", {"type": "object"})},
            }},
        },
        "components": {"schemas": {"Error": {
            "type": "object",
            "required": ["error", "status"],
            "properties": {"error": {"type": "string"}, "status": {"type": "integer"}},
        }}},
    }
