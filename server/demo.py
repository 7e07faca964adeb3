"""Demo data for `railsign demo`: a team and one user of each role, all with the same printed password.

Seeded only into an empty database. (Invented names; the demo products, boards and rails are
added to :func:`seed_if_empty` by the demo-data work.)
"""

from __future__ import annotations

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from server.models import User
from server.services import users
from server.services.access import Actor

__all__ = ["DEMO_PASSWORD", "DEMO_TEAM", "DEMO_USERS", "seed_users", "seed_if_empty"]

DEMO_PASSWORD = "railsign-demo"
DEMO_TEAM = "power bench"
DEMO_USERS: list[tuple[str, str, str]] = [
    ("dana", "designer", "Dana Okafor"),
    ("rui", "reviewer", "Rui Almeida"),
    ("sana", "reviewer", "Sana Iqbal"),
    ("mei", "manager", "Mei Lindqvist"),
    ("vic", "viewer", "Vic Moreau"),
    ("ada", "admin", "Ada Brandt"),
]


def seed_users(session: Session) -> None:
    actor = Actor.system("railsign-demo")
    for name, role, display in DEMO_USERS:
        users.create_user(session=session, actor=actor, username=name, role=role, password=DEMO_PASSWORD,
                          display_name=display, teams=[DEMO_TEAM])


def seed_if_empty(session: Session) -> bool:
    """Seed the demo when the database holds no user yet; True when it did."""
    if session.scalar(select(func.count()).select_from(User)):
        return False
    seed_users(session)
    return True
