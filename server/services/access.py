"""Who is acting, what their role allows, and which teams' data they can see.

Authorisation lives here and in :mod:`server.auth` only: routers declare the permission a
route needs; services scope every query to the actor's teams, so another team's object by
id is simply not found.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass, field

from sqlalchemy import Select

from server.models import Board, Product, Rail, Role, User
from server.services.errors import Forbidden

__all__ = ["Permission", "ROLE_PERMISSIONS", "PERMISSION_WORDS", "permission_words", "role_abilities", "refusal",
           "Actor", "scoped_products", "scoped_boards", "scoped_rails"]


class Permission:
    READ = "read"            # see products, boards, rails, parts, results
    EDIT = "edit"            # create and change products, boards, rails and parts
    ANALYZE = "analyze"      # queue analyses
    REVIEW = "review"        # approve revisions, waive checks
    RISK = "risk"            # the managers' risk view and audit export
    ADVANCE = "advance"      # move rails along the team's workflow (each transition names its roles)
    ADMIN = "admin"          # users, teams, workflows


# What each permission lets a person do, in words: what pages and error messages show (the
# permission names are for programs: the API's /me and the route table).
PERMISSION_WORDS: dict[str, str] = {
    Permission.READ: "see products, boards, rails, parts and results",
    Permission.EDIT: "create and change products, boards, rails and parts",
    Permission.ANALYZE: "run analyses",
    Permission.REVIEW: "approve revisions and waive checks",
    Permission.RISK: "see the risk view and export the audit trail",
    Permission.ADVANCE: "move rails along the team's workflow (each transition names the roles that may take it)",
    Permission.ADMIN: "manage users, teams and workflows",
}


def permission_words(permission: str) -> str:
    """What ``permission`` lets a person do, in words (an unknown name is shown as it is)."""
    return PERMISSION_WORDS.get(permission, permission)


def refusal(role: str, permission: str) -> str:
    """The message of a refusal for want of ``permission``."""
    return f"your role ({role}) may not {permission_words(permission)}"


ROLE_PERMISSIONS: dict[str, frozenset[str]] = {
    Role.viewer.value: frozenset({Permission.READ}),
    Role.designer.value: frozenset({Permission.READ, Permission.EDIT, Permission.ANALYZE, Permission.ADVANCE}),
    Role.reviewer.value: frozenset({Permission.READ, Permission.ANALYZE, Permission.REVIEW, Permission.ADVANCE}),
    Role.manager.value: frozenset({Permission.READ, Permission.RISK, Permission.ADVANCE}),
    Role.admin.value: frozenset({Permission.READ, Permission.EDIT, Permission.ANALYZE, Permission.RISK,
                                 Permission.ADMIN, Permission.ADVANCE}),
}


def role_abilities(role: str) -> list[str]:
    """What ``role`` may do, in words, in the order of :data:`PERMISSION_WORDS`."""
    allowed = ROLE_PERMISSIONS.get(role, frozenset())
    return [words for permission, words in PERMISSION_WORDS.items() if permission in allowed]


@dataclass
class Actor:
    """The user behind a request (or a named system actor for the CLI and demo seeding)."""

    user: User | None
    name: str
    request_id: str = field(default_factory=lambda: uuid.uuid4().hex[:16])
    all_teams: bool = False

    @classmethod
    def for_user(cls, user: User, request_id: str | None = None) -> "Actor":
        actor = cls(user=user, name=user.username, all_teams=user.role == Role.admin.value)
        if request_id:
            actor.request_id = request_id
        return actor

    @classmethod
    def system(cls, name: str = "railsign") -> "Actor":
        return cls(user=None, name=name, all_teams=True)

    @property
    def user_id(self) -> int | None:
        return self.user.id if self.user else None

    @property
    def role(self) -> str:
        return self.user.role if self.user else Role.admin.value

    @property
    def team_ids(self) -> set[int]:
        return self.user.team_ids if self.user else set()

    def can(self, permission: str) -> bool:
        return permission in ROLE_PERMISSIONS.get(self.role, frozenset())

    def require(self, permission: str) -> None:
        if not self.can(permission):
            raise Forbidden(refusal(self.role, permission))

    def sees_team(self, team_id: int) -> bool:
        return self.all_teams or team_id in self.team_ids


def scoped_products(stmt: Select, actor: Actor) -> Select:
    """Limit a statement that involves Product to the actor's teams."""
    return stmt if actor.all_teams else stmt.where(Product.team_id.in_(actor.team_ids or {-1}))


def scoped_boards(stmt: Select, actor: Actor) -> Select:
    if actor.all_teams:
        return stmt
    return stmt.join(Product, Product.id == Board.product_id).where(Product.team_id.in_(actor.team_ids or {-1}))


def scoped_rails(stmt: Select, actor: Actor) -> Select:
    if actor.all_teams:
        return stmt
    return (stmt.join(Board, Board.id == Rail.board_id).join(Product, Product.id == Board.product_id)
            .where(Product.team_id.in_(actor.team_ids or {-1})))
