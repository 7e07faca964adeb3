"""Shared pieces of the API routers: pagination and list answers."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import Depends, Query


class Page:
    def __init__(self, limit: Annotated[int, Query(ge=1, le=500, description="items per page")] = 50,
                 offset: Annotated[int, Query(ge=0, description="items to skip")] = 0) -> None:
        self.limit = limit
        self.offset = offset

    def answer(self, items: list[Any], total: int) -> dict[str, Any]:
        return {"items": items, "total": total, "limit": self.limit, "offset": self.offset}


PageDep = Annotated[Page, Depends(Page)]
