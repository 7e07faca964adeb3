"""Request bodies of the accounts API: users, teams, memberships, API tokens."""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator

RoleName = Literal["viewer", "designer", "reviewer", "manager", "admin"]


class _Body(BaseModel):
    model_config = ConfigDict(extra="forbid")


class UserIn(_Body):
    username: str = Field(min_length=1, max_length=64, pattern=r"^[A-Za-z0-9_.@-]+$")
    role: RoleName
    display_name: str = Field("", max_length=200)
    password: str | None = Field(None, min_length=8, max_length=1024, description="omit for a token-only account")
    teams: list[str] = Field(default_factory=list, description="team names (created when new); a name given "
                             "twice counts once")

    @field_validator("teams")
    @classmethod
    def _each_team_once(cls, names: list[str]) -> list[str]:
        return list(dict.fromkeys(names))


class UserPatch(_Body):
    role: RoleName | None = None
    display_name: str | None = Field(None, max_length=200)
    active: bool | None = Field(None, description="false: the user can no longer log in or use tokens")
    password: str | None = Field(None, min_length=8, max_length=1024)


class TeamIn(_Body):
    name: str = Field(min_length=1, max_length=100)


class MemberIn(_Body):
    user_id: int


class TokenIn(_Body):
    name: str = Field(min_length=1, max_length=100, description="a label, e.g. where the token is used")
    user_id: int | None = Field(None, description="owner (admins only; default: yourself)")
