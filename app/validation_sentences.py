"""Validation problems as sentences that name the field and what it may be.

Pydantic reports one broken constraint at a time ("Input should be less than or equal to
14"); an operator needs the whole range and the value sent: "ph must be from 0 to 14; got
99". The range is read from the field's own declaration (the route's body model, query or
path parameter), so the sentence cannot drift from the rule that refused the value.
"""

from __future__ import annotations

import math
import types
import typing
from collections.abc import Iterable, Sequence
from typing import Any

import annotated_types
from pydantic import BaseModel
from pydantic.fields import FieldInfo

_LOCATIONS = ("body", "query", "path", "header", "cookie")
_RANGE_TYPES = {"greater_than", "greater_than_equal", "less_than", "less_than_equal"}
_NUMBER_TYPES = {"float_parsing", "float_type", "int_parsing", "int_type", "int_from_float",
                 "decimal_parsing", "decimal_type", "finite_number"}
_INPUT_SHOWN_CHARS = 60


def _strip_annotated(annotation: Any) -> Any:
    while typing.get_origin(annotation) is typing.Annotated:
        annotation = typing.get_args(annotation)[0]
    return annotation


def _inner_types(annotation: Any) -> list[Any]:
    """The types a value of ``annotation`` may hold one level down (union members, items)."""
    annotation = _strip_annotated(annotation)
    origin = typing.get_origin(annotation)
    if origin in (typing.Union, types.UnionType):
        return [t for arg in typing.get_args(annotation) for t in _inner_types(arg)]
    if origin in (list, tuple, set, frozenset, Sequence, Iterable) or (
        origin is not None and origin is dict
    ):
        return [t for arg in typing.get_args(annotation)[-1:] for t in _inner_types(arg)]
    return [annotation]


def _models(annotation: Any) -> list[type[BaseModel]]:
    return [
        t for t in _inner_types(annotation) if isinstance(t, type) and issubclass(t, BaseModel)
    ]


def _model_field(model: type[BaseModel], name: Any) -> FieldInfo | None:
    for field_name, info in model.model_fields.items():
        if name in (field_name, info.alias, info.validation_alias):
            return info
    return None


def find_field(annotation: Any, path: Sequence[Any]) -> FieldInfo | None:
    """The declaration of the field at ``path`` inside ``annotation``, if it can be found.

    Segments that are not field names (list indexes, union tags, dict keys) are skipped.
    """
    if not path:
        return None
    head, rest = path[0], path[1:]
    for model in _models(annotation):
        info = _model_field(model, head)
        if info is not None:
            if not rest:
                return info
            found = find_field(info.annotation, rest)
            if found is not None:
                return found
    return find_field(annotation, rest) if rest else None


def _is_integer(info: FieldInfo | None) -> bool:
    if info is None:
        return False
    members = [t for t in _inner_types(info.annotation) if t is not type(None)]
    return bool(members) and all(t is int for t in members)


def _number(value: Any) -> str:
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e15:
        return str(int(value))
    return f"{value:g}" if isinstance(value, float) else str(value)


def _bounds(info: FieldInfo | None, ctx: dict[str, Any]) -> dict[str, Any]:
    bounds: dict[str, Any] = {}
    for item in (info.metadata if info is not None else []):
        for name in ("ge", "gt", "le", "lt"):
            value = getattr(item, name, None)
            if value is not None and isinstance(
                item, annotated_types.Ge | annotated_types.Gt | annotated_types.Le
                | annotated_types.Lt | annotated_types.Interval
            ):
                bounds[name] = value
    for name in ("ge", "gt", "le", "lt"):
        if name in ctx:
            bounds.setdefault(name, ctx[name])
    return bounds


def range_phrase(bounds: dict[str, Any]) -> str:
    """"from 0 to 14", "more than 0 and at most 10000", "at least 1"; empty without bounds."""
    low = (
        f"from {_number(bounds['ge'])}" if "ge" in bounds
        else f"more than {_number(bounds['gt'])}" if "gt" in bounds else None
    )
    high = (
        f"at most {_number(bounds['le'])}" if "le" in bounds
        else f"less than {_number(bounds['lt'])}" if "lt" in bounds else None
    )
    if low and high and low.startswith("from ") and high.startswith("at most "):
        return f"{low} to {high.removeprefix('at most ')}"
    if low and high:
        return f"{low} and {high}"
    if low:
        return "at least " + low.removeprefix("from ") if low.startswith("from ") else low
    return high or ""


def _shown(value: Any) -> str:
    if isinstance(value, float) and not math.isfinite(value):
        return repr(value)
    if isinstance(value, bool):
        return "true" if value else "false"
    if value is None:
        return "null"
    if isinstance(value, int | float):
        return _number(value)
    text = repr(value) if isinstance(value, str) else type(value).__name__.replace(
        "dict", "an object").replace("list", "a list")
    if len(text) > _INPUT_SHOWN_CHARS:
        text = text[: _INPUT_SHOWN_CHARS - 1] + "…"
    return text


def problem_field(problem: dict[str, Any]) -> tuple[str, str]:
    """(where, dotted field name) of a problem: ("body", "readings.0.ph")."""
    location = [str(part) for part in problem.get("loc", ())]
    if location and location[0] in _LOCATIONS:
        return location[0], ".".join(location[1:])
    return "", ".".join(location)


def problem_sentence(problem: dict[str, Any], info: FieldInfo | None = None) -> str:
    """One validation problem (a pydantic error dict) as a sentence naming the field."""
    where, field = problem_field(problem)
    kind = str(problem.get("type", ""))
    message = str(problem.get("msg", "is invalid")).removeprefix("Value error, ")
    ctx = problem.get("ctx") or {}
    has_input = "input" in problem
    got = f"; got {_shown(problem['input'])}" if has_input else ""
    name = field or (f"the {where}" if where else "the request")
    if kind == "missing" and not field:
        return f"the request {where or 'body'} is empty; send a JSON object"
    if kind == "missing":
        return f"{name} is required" + (f" (in the {where})" if where and where != "body" else "")
    if kind == "extra_forbidden":
        return f"{name} is not a field here; remove it"
    if kind == "json_invalid":
        return f"the body is not valid JSON: {message}"
    if kind in _RANGE_TYPES or kind in _NUMBER_TYPES:
        span = range_phrase(_bounds(info, ctx))
        what = "a whole number" if kind.startswith("int") or _is_integer(info) else (
            "a finite number")
        return f"{name} must be {what}" + (f" {span}" if span else "") + got
    if kind in ("bool_type", "bool_parsing"):
        return f"{name} must be true or false{got}"
    if kind in ("literal_error", "enum"):
        return f"{name} must be one of {ctx.get('expected', message)}{got}"
    if kind in ("string_too_short", "string_too_long"):
        span = range_phrase(
            {"ge": ctx["min_length"]} if "min_length" in ctx else {}
        ) if kind == "string_too_short" else f"at most {ctx.get('max_length')}"
        return f"{name} must be {span} characters long{got}"
    if kind in ("too_short", "too_long"):
        limit = ctx.get("min_length") if kind == "too_short" else ctx.get("max_length")
        word = "at least" if kind == "too_short" else "at most"
        return f"{name} must hold {word} {limit} items; got {ctx.get('actual_length')}"
    if kind == "string_pattern_mismatch":
        return f"{name} must match the pattern {ctx.get('pattern')}{got}"
    if kind in ("string_type", "string_unicode"):
        return f"{name} must be text{got}"
    if kind in ("date_parsing", "date_type", "date_from_datetime_parsing",
                "date_from_datetime_inexact", "date_past", "date_future"):
        return f"{name} must be a date written YYYY-MM-DD{got} ({message[0].lower()}{message[1:]})"
    if kind in ("datetime_parsing", "datetime_type", "datetime_from_date_parsing",
                "datetime_object_invalid"):
        return (f"{name} must be a date and time in ISO 8601 with a UTC offset, for example "
                f"2026-06-01T05:00:00Z{got}")
    if kind == "timezone_aware":
        return f"{name} must carry a UTC offset (Z or +hh:mm){got}"
    if kind in ("model_type", "model_attributes_type", "dict_type"):
        return f"{name} must be a JSON object{got}"
    if kind in ("list_type", "tuple_type", "set_type"):
        return f"{name} must be a list{got}"
    if kind in ("union_tag_invalid", "union_tag_not_found"):
        return f"{name}: {message}"
    if kind in ("value_error", "assertion_error"):
        # Our own validators write sentences; name the field when they do not.
        return message if not field or field.split(".")[-1] in message else f"{name}: {message}"
    return f"{name}: {message[0].lower()}{message[1:]}{got}"


def _route_field(route: Any, where: str, path: list[Any]) -> FieldInfo | None:
    if route is None or not path:
        return None
    if where == "body":
        body = getattr(route, "body_field", None)
        if body is None:
            return None
        annotation = body.field_info.annotation
        found = find_field(annotation, path)
        if found is None and path[0] == body.name:  # an embedded body parameter
            found = find_field(annotation, path[1:]) if len(path) > 1 else body.field_info
        return found
    dependant = getattr(route, "dependant", None)
    params = {
        "query": "query_params", "path": "path_params", "header": "header_params",
        "cookie": "cookie_params",
    }.get(where)
    if dependant is None or params is None:
        return None
    for param in getattr(dependant, params, []):
        if path[0] in (param.name, param.alias):
            return param.field_info if len(path) == 1 else find_field(
                param.field_info.annotation, path[1:])
    return None


def sentences_for(problems: Iterable[dict[str, Any]], route: Any = None) -> list[str]:
    """Each problem as a sentence, with the field's declared range when the route has it."""
    out = []
    for problem in problems:
        location = list(problem.get("loc", ()))
        where = str(location[0]) if location and location[0] in _LOCATIONS else ""
        info = _route_field(route, where, location[1:] if where else location)
        sentence = problem_sentence(problem, info)
        if sentence not in out:
            out.append(sentence)
    return out


def join_sentences(sentences: Sequence[str]) -> str:
    """"a; b." with the first letter capitalised unless it starts a field name."""
    text = "; ".join(sentences) or "the request is invalid"
    return text if text.endswith(".") else text + "."
