"""Errors raised by services; the app turns each into one JSON error shape (or a page)."""

from __future__ import annotations

from typing import Any

from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

__all__ = ["flush_or_conflict", "ServiceError", "NotFound", "Forbidden", "Conflict", "Invalid", "PreconditionRequired",
           "Unauthenticated", "TooManyRequests", "CsrfFailed"]


def flush_or_conflict(session: Session, message: str) -> None:
    """Flush pending rows; a unique constraint refusing them becomes :class:`Conflict` (nothing written)."""
    try:
        session.flush()
    except IntegrityError:
        session.rollback()
        raise Conflict(message) from None


class ServiceError(Exception):
    status = 400
    code = "bad_request"

    def __init__(self, message: str, *, details: list[dict[str, Any]] | None = None,
                 extra: dict[str, Any] | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.details = details or []
        self.extra = extra or {}


class Unauthenticated(ServiceError):
    status, code = 401, "not_logged_in"


class Forbidden(ServiceError):
    status, code = 403, "forbidden"


class CsrfFailed(Forbidden):
    code = "csrf_failed"


class NotFound(ServiceError):
    status, code = 404, "not_found"


class Conflict(ServiceError):
    status, code = 409, "conflict"


class PreconditionRequired(ServiceError):
    status, code = 428, "base_revision_required"


class Invalid(ServiceError):
    status, code = 422, "invalid"


class TooManyRequests(ServiceError):
    status, code = 429, "too_many_attempts"
