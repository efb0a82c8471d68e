"""A route class that parses JSON strictly (no NaN/Infinity tokens) and checks the media type."""

from __future__ import annotations

import orjson
from fastapi import Request
from fastapi.routing import APIRoute

from ..errors import ProblemError

JSON_TYPES = ("application/json",)


class StrictJSONRequest(Request):
    async def json(self):
        if not hasattr(self, "_json"):
            body = await self.body()
            # orjson rejects NaN, Infinity and numbers that overflow a double;
            # orjson.JSONDecodeError subclasses json.JSONDecodeError, which FastAPI maps
            # to a "json_invalid" validation error (HTTP 400 in errors.py).
            self._json = orjson.loads(body)
        return self._json


def _is_json(content_type: str) -> bool:
    main = content_type.split(";")[0].strip().lower()
    return main in JSON_TYPES or main.endswith("+json")


class StrictRoute(APIRoute):
    def get_route_handler(self):
        handler = super().get_route_handler()

        async def strict(request: Request):
            if request.method in ("POST", "PUT", "PATCH"):
                ctype = request.headers.get("content-type", "")
                if not _is_json(ctype) and not self._accepts_other(ctype):
                    raise ProblemError(415, "unsupported-media-type", "Unsupported media type",
                                       f"send the body as application/json (got "
                                       f"'{ctype or 'no content type'}')",
                                       [{"pointer": "", "detail": "Content-Type must be application/json"}])
            return await handler(StrictJSONRequest(request.scope, request.receive))

        return strict

    def _accepts_other(self, ctype: str) -> bool:
        return False
