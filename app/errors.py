"""The shape of every error answer, declared once for the OpenAPI schema.

Every 4xx answer is ``{"detail": "..."}``: sentences naming the problem. A request that fails
validation (422) also lists its ``problems``, each with the field's location and its sentence;
the sentences name the field, its allowed range and the value sent
(``app/validation_sentences.py``).
"""

from __future__ import annotations

import math
from typing import Annotated, Any

from fastapi import Path, Request
from fastapi.encoders import jsonable_encoder
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from pydantic import BaseModel, ConfigDict, Field

from app.validation_sentences import join_sentences, sentences_for


def no_site(site_id: str) -> str:
    """The one sentence for a site id that does not exist (API, web pages, CLI alike)."""
    return f"There is no site with id {site_id!r}."


def site_has_no(site_id: str, kind: str, item_id: object) -> str:
    """The one sentence for a station, tank, rule, alert or batch missing from a site."""
    return f"Site {site_id!r} has no {kind} with id {item_id!r}."


# A row id in a path: positive and within a signed 64-bit integer, the widest integer
# column of SQLite and PostgreSQL (a larger number would fail in the driver, not here).
RowId = Annotated[int, Path(ge=1, le=2**63 - 1, description="A positive integer id.")]


class ValidationProblem(BaseModel):
    model_config = ConfigDict(extra="allow")

    loc: list[str | int] = Field(description="Where the problem is: body, query or path, field.")
    msg: str
    type: str
    sentence: str = Field(description="The problem as a sentence naming the field.")


class ErrorOut(BaseModel):
    """An error answer: ``detail`` is always sentences; 422 adds the problems one by one."""

    model_config = ConfigDict(extra="allow")

    detail: str
    problems: list[ValidationProblem] | None = Field(
        default=None, description="Each validation problem with its location (422 only)."
    )


# Declared on every API route (``include_router(..., responses=ERROR_RESPONSES)``).
ERROR_RESPONSES: dict[int | str, dict[str, Any]] = {
    400: {"model": ErrorOut, "description": "The body is not valid JSON."},
    401: {"model": ErrorOut, "description": "No API key, or an unknown or revoked one."},
    403: {"model": ErrorOut, "description": "The key's role may not do this."},
    404: {"model": ErrorOut, "description": "A named site, station, tank or item does not exist."},
    409: {"model": ErrorOut, "description": "The id is taken or the change conflicts."},
    413: {"model": ErrorOut, "description": "The body is over the size limit."},
    415: {"model": ErrorOut, "description": "The body is not declared application/json."},
    422: {"model": ErrorOut, "description": "A field is missing, repeated or out of range."},
    429: {"model": ErrorOut, "description": "Too many requests from one device; see Retry-After."},
}


def _json_safe(value: Any) -> Any:
    """Replace NaN and infinities (not valid JSON) with their names."""
    if isinstance(value, float) and not math.isfinite(value):
        return repr(value)
    if isinstance(value, dict):
        return {key: _json_safe(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [_json_safe(item) for item in value]
    return value


async def validation_error_handler(request: Request, error: Exception) -> JSONResponse:
    # FastAPI's own handler echoes the offending input, and a refused NaN or Infinity
    # would make that answer itself unserialisable (a 500 instead of a 422).
    assert isinstance(error, RequestValidationError)
    raw = list(error.errors())
    route = request.scope.get("route")
    problems = []
    sentences: list[str] = []
    for problem in raw:
        sentence = sentences_for([problem], route)[0]
        if sentence not in sentences:
            sentences.append(sentence)
        shown = {key: problem[key] for key in ("loc", "msg", "type") if key in problem}
        problems.append(_json_safe(jsonable_encoder(shown | {"sentence": sentence})))
    return JSONResponse(
        status_code=422, content={"detail": join_sentences(sentences), "problems": problems}
    )
