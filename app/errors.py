"""The shape of every error answer, declared once for the OpenAPI schema.

Every 4xx answer is ``{"detail": ...}``: a sentence naming the problem, or for a request
that fails validation the list of problems with a ``message`` that puts them in sentences.
"""

from __future__ import annotations

import math
from typing import Any

from fastapi import Request
from fastapi.encoders import jsonable_encoder
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from pydantic import BaseModel, ConfigDict, Field


class ValidationProblem(BaseModel):
    model_config = ConfigDict(extra="allow")

    loc: list[str | int] = Field(description="Where the problem is: body, query or path, field.")
    msg: str
    type: str


class ErrorOut(BaseModel):
    """An error answer. ``detail`` is one sentence, or the list of validation problems."""

    model_config = ConfigDict(extra="allow")

    detail: str | list[ValidationProblem]
    message: str | None = Field(
        default=None, description="The validation problems as sentences (422 only)."
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


def _problem_sentence(problem: dict[str, Any]) -> str:
    location = [str(part) for part in problem.get("loc", ())]
    if location and location[0] in ("body", "query", "path", "header", "cookie"):
        where, field = location[0], ".".join(location[1:])
    else:
        where, field = "", ".".join(location)
    message = str(problem.get("msg", "is invalid")).removeprefix("Value error, ")
    kind = problem.get("type", "")
    if kind == "missing" and location == ["body"]:
        return "the request body is empty; send a JSON object"
    if kind == "missing":
        return f"{field or where} is required" + (f" (in the {where})" if field and where else "")
    if kind == "extra_forbidden":
        return f"{field} is not a field here"
    if kind == "json_invalid":
        return f"the body is not valid JSON: {message}"
    if not field:
        return f"the {where or 'request'}: {message}"
    return f"{field}: {message}"


async def validation_error_handler(_request: Request, error: Exception) -> JSONResponse:
    # FastAPI's own handler echoes the offending input, and a refused NaN or Infinity
    # would make that answer itself unserialisable (a 500 instead of a 422).
    assert isinstance(error, RequestValidationError)
    problems = _json_safe(jsonable_encoder(error.errors()))
    message = "; ".join(_problem_sentence(p) for p in problems) + "."
    return JSONResponse(status_code=422, content={"detail": problems, "message": message})
