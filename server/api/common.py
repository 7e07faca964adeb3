"""Shared pieces of the API routers: the route class, pagination, and the error answers an operation declares."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import Depends, Path, Query
from fastapi.routing import APIRoute
from pydantic import AfterValidator

from server.schemas.fields import ID_MAX, LINE_PATTERN, check_line
from server.schemas.responses import ErrorResponse

__all__ = ["TypedRoute", "Page", "PageDep", "errors", "ERROR_WORDS", "IdPath", "IdQuery", "SearchText", "ID_MAX"]

# An id in a path or a query: within the database's integers (beyond them: 422, never an overflow).
IdPath = Annotated[int, Path(ge=1, le=ID_MAX)]
IdQuery = Annotated[int | None, Query(ge=1, le=ID_MAX)]
# A text to search or filter by: one line, no control characters.
SearchText = Annotated[str | None, Query(max_length=200, json_schema_extra={"pattern": LINE_PATTERN}),
                       AfterValidator(check_line)]


class TypedRoute(APIRoute):
    """An API route: its answer is validated against its response model, and keys a service leaves
    out in some answers (optional in the model) stay out rather than reading as null."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        kwargs["response_model_exclude_unset"] = True
        super().__init__(*args, **kwargs)
        if self.body_field is not None:  # every body is subject to the size limit (server.limits)
            self.responses = {**errors(413), **self.responses}


class Page:
    def __init__(self, limit: Annotated[int, Query(ge=1, le=500, description="items per page")] = 50,
                 offset: Annotated[int, Query(ge=0, le=ID_MAX, description="items to skip")] = 0) -> None:
        self.limit = limit
        self.offset = offset

    def answer(self, items: list[Any], total: int) -> dict[str, Any]:
        return {"items": items, "total": total, "limit": self.limit, "offset": self.offset}


PageDep = Annotated[Page, Depends(Page)]

ERROR_WORDS = {
    400: "The body cannot be read as JSON",
    401: "Not logged in: no valid API token or session cookie",
    403: "Not allowed: the role lacks the permission, or a cookie-authenticated change came without its CSRF token",
    404: "Not found (another team's object is not found either)",
    409: "Conflict with what is stored now",
    413: "The request body is larger than the limit (RAILSIGN_MAX_REQUEST_BYTES, 2 MB by default)",
    422: "The request is not valid; details name each field",
    428: "The edit does not say which revision it is based on (If-Match or base_revision)",
}


def errors(*statuses: int, json_success: bool = True) -> dict[int | str, dict[str, Any]]:
    """The ``responses=`` of an operation: each error status it answers, all in the one error shape.

    ``json_success=False``: the operation's success answer is not JSON (a CSV file); FastAPI would
    document a model under that media type, so its JSON errors are declared by reference instead.
    """
    if json_success:
        return {status: {"model": ErrorResponse, "description": ERROR_WORDS[status]} for status in statuses}
    schema = {"$ref": f"#/components/schemas/{ErrorResponse.__name__}"}
    return {status: {"description": ERROR_WORDS[status], "content": {"application/json": {"schema": schema}}}
            for status in statuses}
