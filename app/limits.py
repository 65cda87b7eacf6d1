"""What one request may cost: body size, a strict JSON body, and a per-device request rate.

The body limit and the JSON check are ASGI middleware, so an oversized or ambiguous body is
answered before any route (or database session) sees it. The rate limit is a dependency of
the readings endpoint, because it needs the device the key belongs to.

The rate limit is an in-process token bucket per device: with several server processes each
process keeps its own buckets, so a device may reach up to (processes x rate). That is a
guard against a runaway sensor loop, not an accounting of use.
"""

from __future__ import annotations

import json
import math
import threading
import time
from collections.abc import Callable, Coroutine
from dataclasses import dataclass
from typing import Annotated, Any

from fastapi import Depends, HTTPException, Request, status
from fastapi.responses import JSONResponse, Response
from fastapi.routing import APIRoute
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from app.auth.dependencies import Principal, require_device

# Methods whose body the JSON check reads; the web pages (forms) live outside the API prefix.
_BODY_METHODS = frozenset({"POST", "PUT", "PATCH"})


class BodyLimitMiddleware:
    """Refuse request bodies over ``limit`` bytes with 413 before the app reads them whole.

    A declared ``Content-Length`` over the limit is refused without reading a byte; a
    chunked body is counted as it arrives and refused at the first chunk that crosses the
    limit, so the server never holds more than the limit plus one chunk.
    """

    def __init__(self, app: ASGIApp, limit: int) -> None:
        self.app = app
        self.limit = limit

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        declared = dict(scope.get("headers") or []).get(b"content-length")
        if declared is not None and declared.isdigit() and int(declared) > self.limit:
            await _refuse(send, 413, self._sentence())
            return
        received = 0
        response_started = False

        async def limited_receive() -> Message:
            nonlocal received
            message = await receive()
            if message["type"] == "http.request":
                received += len(message.get("body", b""))
                if received > self.limit:
                    raise _BodyTooLargeError
            return message

        async def tracking_send(message: Message) -> None:
            nonlocal response_started
            if message["type"] == "http.response.start":
                response_started = True
            await send(message)

        try:
            await self.app(scope, limited_receive, tracking_send)
        except _BodyTooLargeError:
            if not response_started:
                await _refuse(send, 413, self._sentence())

    def _sentence(self) -> str:
        return (
            f"The request body is larger than the limit of {self.limit} bytes; "
            "send fewer readings per request."
        )


class StrictJsonMiddleware:
    """Check API request bodies before the routes parse them.

    - A non-empty body must be declared ``application/json`` (415 otherwise).
    - It must be valid JSON (400 naming the position).
    - No object may repeat a key (422 naming the key): ``{"ph": 7, "ph": 9}`` means
      one value to one parser and the other to the next, so it is refused, not guessed.

    NaN and Infinity literals are left to the field validators, which name the field and
    its range (some sensors send them for a missing value). The body is bounded by
    ``BodyLimitMiddleware`` outside this one, so buffering it here is bounded too.
    """

    def __init__(self, app: ASGIApp, path_prefix: str) -> None:
        self.app = app
        self.path_prefix = path_prefix

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if (
            scope["type"] != "http"
            or scope.get("method") not in _BODY_METHODS
            or not str(scope.get("path", "")).startswith(self.path_prefix)
        ):
            await self.app(scope, receive, send)
            return
        chunks: list[bytes] = []
        while True:
            message = await receive()
            if message["type"] == "http.disconnect":
                return
            chunks.append(message.get("body", b""))
            if not message.get("more_body", False):
                break
        body = b"".join(chunks)
        problem = _json_problem(scope, body)
        if problem is not None:
            await _refuse(send, *problem)
            return
        replayed = False

        async def replay() -> Message:
            nonlocal replayed
            if not replayed:
                replayed = True
                return {"type": "http.request", "body": body, "more_body": False}
            return await receive()

        await self.app(scope, replay, send)


# Where ``StrictJsonMiddleware`` leaves the body it parsed, in the request's scope.
PARSED_JSON_KEY = "spatline.parsed_json"


class ParsedJsonRequest(Request):
    """A request whose ``json()`` is the body ``StrictJsonMiddleware`` already parsed.

    The middleware's parse is ``json.loads`` with a duplicate-key check, so the value is
    the one the route would get by parsing the body again; a body the middleware did not
    parse (not JSON, or no middleware) is parsed as usual.
    """

    async def json(self) -> Any:
        if PARSED_JSON_KEY in self.scope:
            return self.scope[PARSED_JSON_KEY]
        return await super().json()


class ParsedJsonRoute(APIRoute):
    """An API route whose body parameter is read from the middleware's parse."""

    def get_route_handler(self) -> Callable[[Request], Coroutine[Any, Any, Response]]:
        handler = super().get_route_handler()

        async def parsed_json_handler(request: Request) -> Response:
            return await handler(ParsedJsonRequest(request.scope, request.receive))

        return parsed_json_handler


class DuplicateKeyError(ValueError):
    def __init__(self, key: str) -> None:
        super().__init__(key)
        self.key = key


def _no_duplicate_keys(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    # The dict is built in C; only an object that lost a key to a repeat is walked in Python.
    result = dict(pairs)
    if len(result) != len(pairs):
        seen: set[str] = set()
        for key, _value in pairs:
            if key in seen:
                raise DuplicateKeyError(key)
            seen.add(key)
    return result


def strict_json_loads(body: bytes | str) -> Any:
    """``json.loads`` that refuses an object repeating a key (``DuplicateKeyError``)."""
    return json.loads(body, object_pairs_hook=_no_duplicate_keys)


def _json_problem(scope: Scope, body: bytes) -> tuple[int, str] | None:
    if not body.strip():
        return None  # the route says what it needs (a missing body is its 422)
    headers = dict(scope.get("headers") or [])
    content_type = headers.get(b"content-type", b"").decode("latin-1").split(";")[0].strip()
    if not (content_type == "application/json" or content_type.endswith("+json")):
        shown = content_type or "none"
        return (
            status.HTTP_415_UNSUPPORTED_MEDIA_TYPE,
            f"The request body must be JSON with Content-Type: application/json; "
            f"the content type was {shown}.",
        )
    try:
        # Kept for the route (``ParsedJsonRoute``): a 1,000-reading body is not parsed twice.
        scope[PARSED_JSON_KEY] = strict_json_loads(body)
    except DuplicateKeyError as error:
        return (
            status.HTTP_422_UNPROCESSABLE_CONTENT,
            f"The JSON body repeats the key {error.key!r} in one object; send each field once.",
        )
    except UnicodeDecodeError:
        return (status.HTTP_400_BAD_REQUEST, "The request body is not UTF-8 encoded JSON.")
    except json.JSONDecodeError as error:
        return (
            status.HTTP_400_BAD_REQUEST,
            f"The request body is not valid JSON: {error.msg} at line {error.lineno} "
            f"column {error.colno}.",
        )
    except (ValueError, RecursionError) as error:  # e.g. an integer of more than 4300 digits
        return (status.HTTP_400_BAD_REQUEST, f"The request body is not usable JSON: {error}.")
    return None


async def _refuse(send: Send, status_code: int, detail: str) -> None:
    response = JSONResponse(status_code=status_code, content={"detail": detail})
    await response({"type": "http"}, _no_receive, send)


class _BodyTooLargeError(Exception):
    pass


async def _no_receive() -> Message:
    return {"type": "http.disconnect"}


# --- per-device rate -------------------------------------------------------------------


@dataclass
class _Bucket:
    tokens: float
    updated: float


class TokenBuckets:
    """One token bucket per key: ``rate_per_s`` tokens a second, at most ``burst`` saved."""

    def __init__(
        self,
        *,
        rate_per_s: float,
        burst: int,
        clock: Callable[[], float] = time.monotonic,
        max_keys: int = 100_000,
    ) -> None:
        if rate_per_s <= 0 or burst < 1:
            raise ValueError("rate_per_s must be positive and burst at least 1")
        self.rate_per_s = rate_per_s
        self.burst = burst
        self._clock = clock
        self._max_keys = max_keys
        self._buckets: dict[Any, _Bucket] = {}
        self._lock = threading.Lock()

    def take(self, key: Any) -> float:
        """Take one token for ``key``: 0.0 if granted, else the seconds until one is due."""
        with self._lock:
            now = self._clock()
            bucket = self._buckets.get(key)
            if bucket is None:
                if len(self._buckets) >= self._max_keys:
                    # Full buckets carry no information; forgetting them is harmless.
                    self._forget_full(now)
                bucket = self._buckets[key] = _Bucket(tokens=float(self.burst), updated=now)
            bucket.tokens = min(
                float(self.burst), bucket.tokens + (now - bucket.updated) * self.rate_per_s
            )
            bucket.updated = now
            if bucket.tokens >= 1.0:
                bucket.tokens -= 1.0
                return 0.0
            return (1.0 - bucket.tokens) / self.rate_per_s

    def _forget_full(self, now: float) -> None:
        for key in [
            key
            for key, bucket in self._buckets.items()
            if bucket.tokens + (now - bucket.updated) * self.rate_per_s >= self.burst
        ]:
            del self._buckets[key]


_buckets_lock = threading.Lock()


def _device_buckets(request: Request) -> TokenBuckets | None:
    state = request.app.state
    buckets = getattr(state, "device_rate_buckets", None)
    if buckets is None:
        settings = state.settings
        if settings.device_requests_per_minute <= 0:
            return None
        with _buckets_lock:
            buckets = getattr(state, "device_rate_buckets", None)
            if buckets is None:
                buckets = TokenBuckets(
                    rate_per_s=settings.device_requests_per_minute / 60.0,
                    burst=settings.device_request_burst,
                )
                state.device_rate_buckets = buckets
    return buckets


async def limit_device_rate(
    request: Request, principal: Annotated[Principal, Depends(require_device)]
) -> Principal:
    """Admit a device's request, or answer 429 with ``Retry-After`` when it posts too often.

    async because it does no I/O (the bucket's lock is held for a few arithmetic steps):
    a sync dependency would cost a thread-pool hop on every reading posted.
    """
    buckets = _device_buckets(request)
    if buckets is None:
        return principal
    wait_s = buckets.take(principal.device_id)
    if wait_s > 0:
        settings = request.app.state.settings
        retry_after = max(1, math.ceil(wait_s))
        raise HTTPException(
            status_code=status.HTTP_429_TOO_MANY_REQUESTS,
            detail=f"Device {principal.device_id} posts more than "
            f"{settings.device_requests_per_minute:g} requests a minute "
            f"(bursts up to {settings.device_request_burst}); retry after {retry_after} s, "
            "or send more readings per request.",
            headers={"Retry-After": str(retry_after)},
        )
    return principal


RateLimitedDeviceDep = Annotated[Principal, Depends(limit_device_rate)]
