"""Request bodies of the accounts API: users, teams, memberships, API tokens."""

from __future__ import annotations

from typing import Annotated, Literal

from pydantic import AfterValidator, BaseModel, ConfigDict, Field

from server.schemas.fields import Id, line, no_repeats

RoleName = Literal["viewer", "designer", "reviewer", "manager", "admin"]


class _Body(BaseModel):
    model_config = ConfigDict(extra="forbid")


class UserIn(_Body):
    username: str = Field(min_length=1, max_length=64, pattern=r"^[A-Za-z0-9_.@-]+$")
    role: RoleName
    display_name: line(200) = ""
    password: str | None = Field(None, min_length=8, max_length=1024, description="omit for a token-only account")
    teams: Annotated[list[line(100, min_length=1)], Field(max_length=50, json_schema_extra={"uniqueItems": True}),
                     AfterValidator(no_repeats)] = Field(
        default_factory=list, description="team names (created when new), each once")


class UserPatch(_Body):
    role: RoleName | None = None
    display_name: line(200) | None = None
    active: bool | None = Field(None, description="false: the user can no longer log in or use tokens")
    password: str | None = Field(None, min_length=8, max_length=1024)


class TeamIn(_Body):
    name: line(100, min_length=1)


class MemberIn(_Body):
    user_id: Id


class TokenIn(_Body):
    name: line(100, min_length=1) = Field(description="a label, e.g. where the token is used")
    user_id: Id | None = Field(None, description="owner (admins only; default: yourself)")
