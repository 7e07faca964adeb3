"""Request bodies of the sign-off API: approvals, waivers, transitions, team workflows."""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from server.schemas.fields import COMMENT_MAX, line, prose

Comment = prose(COMMENT_MAX)

Sha256 = Field(min_length=64, max_length=64, pattern=r"^[0-9a-fA-F]{64}$",
               description="sha256 of the rail revision this is about (its current revision)")


class _Body(BaseModel):
    model_config = ConfigDict(extra="forbid")


class ApprovalIn(_Body):
    sha256: str = Sha256
    comment: prose(COMMENT_MAX, min_length=1) = Field(description="what was checked")


class WaiverIn(_Body):
    sha256: str = Sha256
    check_id: line(100, min_length=1)
    reason: prose(COMMENT_MAX, min_length=1)


class SequenceWaiverIn(_Body):
    sha256: str = Field(min_length=64, max_length=64, pattern=r"^[0-9a-fA-F]{64}$",
                        description="sha256 of the sequence revision this is about (its current revision)")
    inputs_sha256: str | None = Field(None, min_length=64, max_length=64, pattern=r"^[0-9a-fA-F]{64}$",
                                      description="the inputs of the result you read; another answers 409")
    check_id: line(100, min_length=1) = Field(description="the check and its subject, as problem_checks names it")
    reason: prose(COMMENT_MAX, min_length=1)


class WaiverCarry(_Body):
    sha256: str = Sha256
    reason: Comment | None = Field(None, description="omitted: keep the original reason")


class TransitionIn(_Body):
    transition: line(60, min_length=1) = Field(description="name of a transition leaving the current state")
    sha256: str = Sha256
    comment: Comment = ""


class WorkflowIn(_Body):
    definition: dict[str, Any] = Field(description="states, transitions and on_edit (see server.workflow)")


class SignoffRulesIn(_Body):
    two_person: bool = Field(True, description="the approval relying on a waiver comes from another reviewer")
    fail_waiver_role: str | None = Field(None, description="the role that may waive failing checks; null: nobody")
    expected_version: int | None = Field(None, ge=0, description="the version you read (0: the defaults); a newer "
                                                                 "one answers 409")


class AssignmentIn(_Body):
    reviewer_id: int | None = Field(None, description="omitted: yourself (taking a review from the team queue)")
    rail_id: int | None = None
    board_id: int | None = None


class RetireIn(_Body):
    reason: str = Field("", max_length=1000)
