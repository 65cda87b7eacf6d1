"""Rows of a built-once statement as the database driver gives them.

The ingest's neighbours and the status's day of readings are thousands of rows a request;
SQLAlchemy's result rows, and on SQLite its per-execution parameter handling, cost more
than the database's own work. :func:`driver_rows` returns the driver's plain tuples (no
result processing: SQLite times stay text), for statements whose columns need none.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from typing import Any

from sqlalchemy import Connection


@functools.lru_cache(maxsize=64)
def _sqlite_compiled(
    statement: Any, dialect: Any
) -> tuple[str, tuple[tuple[str, Any, Any, bool], ...]] | None:
    """SQL text and, per positional parameter, its name, its type's bind processor, the
    value bound in the statement itself (a constant) and whether the caller must give one;
    None when the text depends on the values (an expanding ``IN`` list, a parameter
    rendered at execution) or a bound value is worked out at execution (a callable)."""
    compiled = statement.compile(dialect=dialect)
    names = tuple(compiled.positiontup or ())
    if (
        any(compiled.binds[name].expanding for name in names)
        or compiled.post_compile_params
        or compiled.literal_execute_params
        or any(compiled.binds[name].callable for name in names)
    ):
        return None
    parameters = tuple(
        (
            name,
            compiled.binds[name].type.dialect_impl(dialect).bind_processor(dialect),
            None if compiled.binds[name].required else compiled.binds[name].effective_value,
            compiled.binds[name].required,
        )
        for name in names
    )
    return compiled.string, parameters


def driver_rows(
    connection: Connection, statement: Any, parameters: Mapping[str, Any] | None = None
) -> list[tuple[Any, ...]]:
    """All rows of ``statement`` as plain tuples, in the connection's transaction.

    On SQLite a statement without expanding parameters is compiled once and run on the
    driver's cursor, each parameter through its column type's bind processor (so a time
    is compared as the text the column stores); otherwise SQLAlchemy runs it and the
    driver's cursor is read.
    """
    given = parameters or {}
    compiled = (
        _sqlite_compiled(statement, connection.dialect)
        if connection.dialect.name == "sqlite"
        else None
    )
    if compiled is None:
        result = connection.execute(statement, given)
        try:
            return list(result.cursor.fetchall())
        finally:
            result.close()
    sql, positional = compiled
    values = []
    for name, process, bound, required in positional:
        if required and name not in given:
            raise KeyError(f"the statement needs a value for parameter {name!r}")
        value = given.get(name, bound)
        values.append(value if process is None else process(value))
    cursor = connection.connection.driver_connection.cursor()
    try:
        cursor.execute(sql, values)
        return cursor.fetchall()
    finally:
        cursor.close()
