"""Sign-off on the pages: the place where workflow state, approvals and waivers join the views.

The rail page, the board table and the product overview ask this module for a rail's
workflow state, its approvals (stale ones marked) and its waivers. Until the sign-off
services are part of the application these answer "nothing recorded", and the pages say
so in words.

Provides :func:`rail_signoff`, :func:`board_states`, :func:`waivers_by_check`,
:func:`product_states`.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy.orm import Session

from server.services.access import Actor

__all__ = ["rail_signoff", "board_states", "waivers_by_check", "product_states", "NO_STATE"]

NO_STATE = "not tracked"


def rail_signoff(session: Session, actor: Actor, rail_id: int) -> dict[str, Any] | None:
    """The rail's workflow state, approvals and waivers; None while no sign-off is recorded."""
    return None


def waivers_by_check(signoff: dict[str, Any] | None) -> dict[str, dict[str, Any]]:
    """The waivers of a rail's current revision by check id."""
    return {}


def board_states(session: Session, rail_ids: list[int]) -> dict[int, str]:
    """Workflow state by rail id (rails not listed read as :data:`NO_STATE`)."""
    return {}


def product_states(session: Session, rail_ids: list[int]) -> dict[str, int]:
    """Rails counted by workflow state."""
    states = board_states(session, rail_ids)
    counts: dict[str, int] = {}
    for rid in rail_ids:
        s = states.get(rid, NO_STATE)
        counts[s] = counts.get(s, 0) + 1
    return counts
