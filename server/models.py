"""ORM tables (SQLAlchemy 2 typed mappings). Alembic migrations are the only way they change.

Ownership: Team -> Product -> Board -> Rail -> RailRevision (immutable). Parts (MOSFETs) are a
shared library, revisioned the same way; a rail revision pins the part revision it used.
Users belong to teams; API tokens are stored as hashes; the audit trail is append-only.
"""

from __future__ import annotations

import enum
from datetime import date, datetime, timezone
from typing import Any

from sqlalchemy import (JSON, Date, DateTime, ForeignKey, Index, Integer, LargeBinary, String, Text, UniqueConstraint,
                        text)
from sqlalchemy.dialects.postgresql import JSONB
from sqlalchemy.types import TypeDecorator
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship

JsonType = JSON().with_variant(JSONB(), "postgresql")


def utcnow() -> datetime:
    return datetime.now(timezone.utc)


class Utc(TypeDecorator[datetime]):
    """Timezone-aware UTC datetimes on both engines (SQLite keeps no zone: read back as UTC)."""

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect) -> datetime | None:  # noqa: ANN001
        if value is not None and value.tzinfo is None:
            raise ValueError("naive datetime: use timezone-aware UTC times")
        return value

    def process_result_value(self, value: datetime | None, dialect) -> datetime | None:  # noqa: ANN001
        if value is not None and value.tzinfo is None:
            value = value.replace(tzinfo=timezone.utc)
        return value


class Base(DeclarativeBase):
    type_annotation_map = {dict[str, Any]: JsonType, list[Any]: JsonType, datetime: Utc}


class Role(str, enum.Enum):
    viewer = "viewer"
    designer = "designer"
    reviewer = "reviewer"
    manager = "manager"
    admin = "admin"


class Team(Base):
    __tablename__ = "teams"
    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(100), unique=True)
    created_at: Mapped[datetime] = mapped_column(default=utcnow)


class User(Base):
    __tablename__ = "users"
    id: Mapped[int] = mapped_column(primary_key=True)
    username: Mapped[str] = mapped_column(String(64), unique=True)
    display_name: Mapped[str] = mapped_column(String(200), default="")
    role: Mapped[str] = mapped_column(String(20), default=Role.viewer.value)
    password_hash: Mapped[str | None] = mapped_column(String(255))
    active: Mapped[bool] = mapped_column(default=True)
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    # carried by session cookies; raised at logout, which ends every session issued before
    session_generation: Mapped[int] = mapped_column(default=0, server_default="0")
    teams: Mapped[list[Team]] = relationship(secondary="team_members", lazy="selectin")

    @property
    def team_ids(self) -> set[int]:
        return {t.id for t in self.teams}


class TeamMember(Base):
    __tablename__ = "team_members"
    team_id: Mapped[int] = mapped_column(ForeignKey("teams.id", ondelete="CASCADE"), primary_key=True)
    user_id: Mapped[int] = mapped_column(ForeignKey("users.id", ondelete="CASCADE"), primary_key=True)


class ApiToken(Base):
    __tablename__ = "api_tokens"
    id: Mapped[int] = mapped_column(primary_key=True)
    user_id: Mapped[int] = mapped_column(ForeignKey("users.id", ondelete="CASCADE"), index=True)
    name: Mapped[str] = mapped_column(String(100))
    token_sha256: Mapped[str] = mapped_column(String(64), unique=True)
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    last_used_at: Mapped[datetime | None]
    revoked_at: Mapped[datetime | None]


class Product(Base):
    __tablename__ = "products"
    id: Mapped[int] = mapped_column(primary_key=True)
    team_id: Mapped[int] = mapped_column(ForeignKey("teams.id"), index=True)
    name: Mapped[str] = mapped_column(String(200), unique=True)
    description: Mapped[str] = mapped_column(Text, default="")
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    boards: Mapped[list[Board]] = relationship(back_populates="product", order_by="Board.name")


class Board(Base):
    __tablename__ = "boards"
    __table_args__ = (UniqueConstraint("product_id", "name", "revision"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    product_id: Mapped[int] = mapped_column(ForeignKey("products.id", ondelete="RESTRICT"), index=True)
    name: Mapped[str] = mapped_column(String(200))
    revision: Mapped[str] = mapped_column(String(10), default="A")
    description: Mapped[str] = mapped_column(Text, default="")
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    product: Mapped[Product] = relationship(back_populates="boards")


class Part(Base):
    __tablename__ = "parts"
    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(200), unique=True)
    kind: Mapped[str] = mapped_column(String(20), default="mosfet")
    head_n: Mapped[int] = mapped_column(Integer, default=0)
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    updated_at: Mapped[datetime] = mapped_column(default=utcnow)


class PartRevision(Base):
    __tablename__ = "part_revisions"
    __table_args__ = (UniqueConstraint("part_id", "n"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    part_id: Mapped[int] = mapped_column(ForeignKey("parts.id", ondelete="CASCADE"), index=True)
    n: Mapped[int]
    document: Mapped[dict[str, Any]]
    sha256: Mapped[str] = mapped_column(String(64))
    author_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"))
    author_name: Mapped[str] = mapped_column(String(200))
    message: Mapped[str] = mapped_column(Text, default="")
    created_at: Mapped[datetime] = mapped_column(default=utcnow)


class Rail(Base):
    __tablename__ = "rails"
    __table_args__ = (UniqueConstraint("board_id", "name"), Index("ix_rails_mode", "mode"))
    id: Mapped[int] = mapped_column(primary_key=True)
    board_id: Mapped[int] = mapped_column(ForeignKey("boards.id", ondelete="RESTRICT"), index=True)
    name: Mapped[str] = mapped_column(String(200))
    mode: Mapped[str] = mapped_column(String(20))
    head_n: Mapped[int] = mapped_column(Integer, default=0)
    head_sha256: Mapped[str] = mapped_column(String(64), default="")
    part_id: Mapped[int | None] = mapped_column(ForeignKey("parts.id"), index=True)
    # A few figures of the head revision's document, kept beside it so lists need not read documents.
    summary: Mapped[dict[str, Any]] = mapped_column(JsonType, default=dict, server_default=text("'{}'"))
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    updated_at: Mapped[datetime] = mapped_column(default=utcnow)
    # A retired rail keeps its history but leaves lists, queues and the risk view until it is restored.
    retired_at: Mapped[datetime | None]
    retired_by: Mapped[str] = mapped_column(String(200), default="", server_default=text("''"))
    board: Mapped[Board] = relationship()


class RailRevision(Base):
    __tablename__ = "rail_revisions"
    __table_args__ = (UniqueConstraint("rail_id", "n"), Index("ix_rail_revisions_sha256", "sha256"))
    id: Mapped[int] = mapped_column(primary_key=True)
    rail_id: Mapped[int] = mapped_column(ForeignKey("rails.id", ondelete="CASCADE"), index=True)
    n: Mapped[int]
    document: Mapped[dict[str, Any]]
    sha256: Mapped[str] = mapped_column(String(64))
    part_revision_id: Mapped[int | None] = mapped_column(ForeignKey("part_revisions.id"))
    author_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"))
    author_name: Mapped[str] = mapped_column(String(200))
    message: Mapped[str] = mapped_column(Text, default="")
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    part_revision: Mapped[PartRevision | None] = relationship()


class AuditEntry(Base):
    """Append-only change record: written in the same transaction as the change it describes."""

    __tablename__ = "audit_entries"
    __table_args__ = (Index("ix_audit_object", "object_type", "object_id"), Index("ix_audit_action", "action"))
    id: Mapped[int] = mapped_column(primary_key=True)
    at: Mapped[datetime] = mapped_column(default=utcnow, index=True)
    user_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"))
    user_name: Mapped[str] = mapped_column(String(200), default="")
    request_id: Mapped[str] = mapped_column(String(64), default="")
    action: Mapped[str] = mapped_column(String(50))
    object_type: Mapped[str] = mapped_column(String(50))
    object_id: Mapped[int | None]
    object_repr: Mapped[str] = mapped_column(String(300), default="")
    product_id: Mapped[int | None] = mapped_column(index=True)
    before: Mapped[dict[str, Any] | None] = mapped_column(JsonType)
    after: Mapped[dict[str, Any] | None] = mapped_column(JsonType)


class JobState(str, enum.Enum):
    queued = "queued"
    running = "running"
    done = "done"
    failed = "failed"
    cancelled = "cancelled"


class JobKind(str, enum.Enum):
    rail = "rail"                # nominal + tolerance corners of one rail revision
    monte_carlo = "monte_carlo"  # Monte Carlo run of one rail revision
    board = "board"              # container: one rail job per rail of a board
    sequence = "sequence"        # a board's power-up sequence with the rails as they are (sha256: inputs_sha256)


class AnalysisResult(Base):
    """A computed result, stored once per (revision sha256, engine version, options)."""

    __tablename__ = "analysis_results"
    __table_args__ = (UniqueConstraint("sha256", "engine_version", "options_key"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    sha256: Mapped[str] = mapped_column(String(64), index=True)
    engine_version: Mapped[str] = mapped_column(String(20))
    options_key: Mapped[str] = mapped_column(String(64))
    options: Mapped[dict[str, Any]]
    verdict: Mapped[str] = mapped_column(String(10))
    result: Mapped[dict[str, Any]]
    duration_s: Mapped[float] = mapped_column(default=0.0)
    created_at: Mapped[datetime] = mapped_column(default=utcnow)


class Job(Base):
    __tablename__ = "jobs"
    __table_args__ = (Index("ix_jobs_state_created", "state", "created_at"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    kind: Mapped[str] = mapped_column(String(20))
    state: Mapped[str] = mapped_column(String(12), default=JobState.queued.value)
    rail_id: Mapped[int | None] = mapped_column(ForeignKey("rails.id", ondelete="CASCADE"), index=True)
    board_id: Mapped[int | None] = mapped_column(ForeignKey("boards.id", ondelete="CASCADE"), index=True)
    parent_id: Mapped[int | None] = mapped_column(ForeignKey("jobs.id", ondelete="CASCADE"), index=True)
    sha256: Mapped[str | None] = mapped_column(String(64))
    revision_n: Mapped[int | None]
    engine_version: Mapped[str] = mapped_column(String(20))
    options: Mapped[dict[str, Any]]
    options_key: Mapped[str] = mapped_column(String(64))
    progress: Mapped[float] = mapped_column(default=0.0)
    attempts: Mapped[int] = mapped_column(default=0)
    max_attempts: Mapped[int] = mapped_column(default=3)
    error: Mapped[str] = mapped_column(Text, default="")
    worker: Mapped[str] = mapped_column(String(100), default="")
    result_id: Mapped[int | None] = mapped_column(ForeignKey("analysis_results.id"))
    requested_by_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"))
    requested_by: Mapped[str] = mapped_column(String(200), default="")
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    started_at: Mapped[datetime | None]
    heartbeat_at: Mapped[datetime | None]
    finished_at: Mapped[datetime | None]


# --- Sign-off: team workflows, rail states, approvals, waivers, login throttling -------------


class Workflow(Base):
    """A team's sign-off workflow: states and transitions as one definition (see server.workflow)."""

    __tablename__ = "workflows"
    id: Mapped[int] = mapped_column(primary_key=True)
    team_id: Mapped[int] = mapped_column(ForeignKey("teams.id", ondelete="CASCADE"), unique=True)
    definition: Mapped[dict[str, Any]]
    version: Mapped[int] = mapped_column(Integer, default=1)
    updated_at: Mapped[datetime] = mapped_column(default=utcnow)
    updated_by: Mapped[str] = mapped_column(String(200), default="")


class RailState(Base):
    """Where a rail stands in its team's workflow, and since which revision."""

    __tablename__ = "rail_states"
    rail_id: Mapped[int] = mapped_column(ForeignKey("rails.id", ondelete="CASCADE"), primary_key=True)
    state: Mapped[str] = mapped_column(String(100))
    revision_n: Mapped[int] = mapped_column(Integer, default=1)
    since: Mapped[datetime] = mapped_column(default=utcnow)
    changed_by: Mapped[str] = mapped_column(String(200), default="")


class Approval(Base):
    """A reviewer's approval of one rail revision as one stored result read it.

    Stale (kept) once the rail has a newer revision, or once a new engine reads the revision
    worse than the result it was given for (``stale_reason`` says which). ``engine_version``
    and ``result_id`` name that result; they are empty on approvals made before they were kept.
    """

    __tablename__ = "approvals"
    __table_args__ = (UniqueConstraint("rail_id", "revision_n", "reviewer_id", "result_id",
                                       name="uq_approvals_reviewer_result"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    rail_id: Mapped[int] = mapped_column(ForeignKey("rails.id", ondelete="CASCADE"), index=True)
    revision_n: Mapped[int]
    sha256: Mapped[str] = mapped_column(String(64))
    reviewer_id: Mapped[int] = mapped_column(ForeignKey("users.id"))
    reviewer_name: Mapped[str] = mapped_column(String(200))
    comment: Mapped[str] = mapped_column(Text, default="")
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    stale_at: Mapped[datetime | None]
    stale_reason: Mapped[str] = mapped_column(Text, default="", server_default=text("''"))
    engine_version: Mapped[str | None] = mapped_column(String(20))
    result_id: Mapped[int | None] = mapped_column(ForeignKey("analysis_results.id", ondelete="SET NULL"))


class Waiver(Base):
    """A reviewer's reasoned acceptance of one failing or marginal check of one rail revision.

    It covers the check while the check reads no worse than ``verdict``, the verdict waived.
    ``engine_version`` and ``result_id`` name the result it was given against (empty on
    waivers made before they were kept).
    """

    __tablename__ = "waivers"
    __table_args__ = (UniqueConstraint("rail_id", "revision_n", "check_id", "result_id",
                                       name="uq_waivers_check_result"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    rail_id: Mapped[int] = mapped_column(ForeignKey("rails.id", ondelete="CASCADE"), index=True)
    revision_n: Mapped[int]
    sha256: Mapped[str] = mapped_column(String(64))
    check_id: Mapped[str] = mapped_column(String(100))
    check_title: Mapped[str] = mapped_column(String(200), default="")
    verdict: Mapped[str] = mapped_column(String(10))
    reason: Mapped[str] = mapped_column(Text)
    reviewer_id: Mapped[int] = mapped_column(ForeignKey("users.id"))
    reviewer_name: Mapped[str] = mapped_column(String(200))
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    carried_from_id: Mapped[int | None] = mapped_column(ForeignKey("waivers.id", ondelete="SET NULL"))
    engine_version: Mapped[str | None] = mapped_column(String(20))
    result_id: Mapped[int | None] = mapped_column(ForeignKey("analysis_results.id", ondelete="SET NULL"))


class LoginThrottle(Base):
    """Failed-login counter of one account or one address, shared by every web process."""

    __tablename__ = "login_throttles"
    id: Mapped[int] = mapped_column(primary_key=True)
    key: Mapped[str] = mapped_column(String(200), unique=True)
    failures: Mapped[int] = mapped_column(Integer, default=0)
    last_failure_at: Mapped[datetime | None]
    locked_until: Mapped[datetime | None]


class RiskSnapshot(Base):
    """A product's risk counts on one day (UTC): the points of the risk view's trend chart.

    Taken by the first view of the risk pages on a day (when the product has none for that
    day yet) and by ``railsign risks snapshot`` (which replaces that day's snapshot).
    """

    __tablename__ = "risk_snapshots"
    __table_args__ = (UniqueConstraint("product_id", "day", name="uq_risk_snapshots_product_day"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    product_id: Mapped[int] = mapped_column(ForeignKey("products.id", ondelete="CASCADE"), index=True)
    day: Mapped[date] = mapped_column(Date)
    taken_at: Mapped[datetime] = mapped_column(default=utcnow)
    counts: Mapped[dict[str, Any]]


class SignoffRules(Base):
    """A team's waiver rules (see :class:`server.workflow.WaiverRules`); a team without a row has the defaults."""

    __tablename__ = "signoff_rules"
    team_id: Mapped[int] = mapped_column(ForeignKey("teams.id", ondelete="CASCADE"), primary_key=True)
    two_person: Mapped[bool] = mapped_column(default=True, server_default=text("true"))
    fail_waiver_role: Mapped[str | None] = mapped_column(String(20))
    version: Mapped[int] = mapped_column(Integer, default=1)
    updated_at: Mapped[datetime] = mapped_column(default=utcnow)
    updated_by: Mapped[str] = mapped_column(String(200), default="")


class ReviewAssignment(Base):
    """A reviewer assigned to one rail or to every rail of one board (exactly one of the two is set)."""

    __tablename__ = "review_assignments"
    __table_args__ = (UniqueConstraint("reviewer_id", "rail_id", "board_id", name="uq_review_assignments_target"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    reviewer_id: Mapped[int] = mapped_column(ForeignKey("users.id", ondelete="CASCADE"), index=True)
    rail_id: Mapped[int | None] = mapped_column(ForeignKey("rails.id", ondelete="CASCADE"), index=True)
    board_id: Mapped[int | None] = mapped_column(ForeignKey("boards.id", ondelete="CASCADE"), index=True)
    assigned_by: Mapped[str] = mapped_column(String(200), default="")
    created_at: Mapped[datetime] = mapped_column(default=utcnow)


class ArchivedReport(Base):
    """A board's sign-off report as a PDF, archived when the board's rails entered a state that
    archives the record. Append-only: the database refuses UPDATE and DELETE (migration 0010);
    ``sha256`` is the digest of ``pdf``, the bytes a download gives.
    """

    __tablename__ = "archived_reports"
    id: Mapped[int] = mapped_column(primary_key=True)
    board_id: Mapped[int] = mapped_column(ForeignKey("boards.id", ondelete="RESTRICT"), index=True)
    product_id: Mapped[int] = mapped_column(ForeignKey("products.id", ondelete="RESTRICT"))
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    created_by: Mapped[str] = mapped_column(String(200), default="")
    state: Mapped[str] = mapped_column(String(100))          # the state whose entry archived it
    # what it holds: [{rail_id, name, revision, sha256}], and what entered the state last
    rails: Mapped[list[Any]] = mapped_column(JsonType)
    occasion: Mapped[dict[str, Any]] = mapped_column(JsonType)
    engine_version: Mapped[str] = mapped_column(String(20))
    sha256: Mapped[str] = mapped_column(String(64))
    size: Mapped[int] = mapped_column(Integer)
    pdf: Mapped[bytes] = mapped_column(LargeBinary)


# --- Board power-up sequences: a board-level document with its own revisions, results, approvals ---


class BoardSequence(Base):
    """A board's power-up sequence (schema ``railsign.sequence/1``): one per board, revisioned."""

    __tablename__ = "board_sequences"
    id: Mapped[int] = mapped_column(primary_key=True)
    board_id: Mapped[int] = mapped_column(ForeignKey("boards.id", ondelete="CASCADE"), unique=True)
    head_n: Mapped[int] = mapped_column(Integer, default=0)
    head_sha256: Mapped[str] = mapped_column(String(64), default="")
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    updated_at: Mapped[datetime] = mapped_column(default=utcnow)


class BoardSequenceState(Base):
    """Where a board's sequence stands in its team's workflow: since which revision, and the inputs
    (``inputs_sha256``: the sequence revision with the rails it names) it was put there for."""

    __tablename__ = "board_sequence_states"
    sequence_id: Mapped[int] = mapped_column(ForeignKey("board_sequences.id", ondelete="CASCADE"), primary_key=True)
    state: Mapped[str] = mapped_column(String(100))
    revision_n: Mapped[int] = mapped_column(Integer, default=1)
    inputs_sha256: Mapped[str] = mapped_column(String(64), default="")
    since: Mapped[datetime] = mapped_column(default=utcnow)
    changed_by: Mapped[str] = mapped_column(String(200), default="")


class BoardSequenceRevision(Base):
    """An immutable revision of a board's sequence document (rails named by ``ref``: their rail name)."""

    __tablename__ = "board_sequence_revisions"
    __table_args__ = (UniqueConstraint("sequence_id", "n"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    sequence_id: Mapped[int] = mapped_column(ForeignKey("board_sequences.id", ondelete="CASCADE"), index=True)
    n: Mapped[int]
    document: Mapped[dict[str, Any]]
    sha256: Mapped[str] = mapped_column(String(64))
    author_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"))
    author_name: Mapped[str] = mapped_column(String(200))
    message: Mapped[str] = mapped_column(Text, default="")
    created_at: Mapped[datetime] = mapped_column(default=utcnow)


class BoardSequenceResult(Base):
    """The board start-up of one sequence revision with the rails as they were (``inputs_sha256``: the
    sequence revision's sha256 and every referenced rail's head sha256), at one engine version."""

    __tablename__ = "board_sequence_results"
    __table_args__ = (UniqueConstraint("sequence_id", "inputs_sha256", "engine_version"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    sequence_id: Mapped[int] = mapped_column(ForeignKey("board_sequences.id", ondelete="CASCADE"), index=True)
    revision_n: Mapped[int]
    inputs_sha256: Mapped[str] = mapped_column(String(64))
    engine_version: Mapped[str] = mapped_column(String(20))
    verdict: Mapped[str] = mapped_column(String(10))
    result: Mapped[dict[str, Any]]
    duration_s: Mapped[float] = mapped_column(default=0.0)
    created_at: Mapped[datetime] = mapped_column(default=utcnow)


class BoardSequenceApproval(Base):
    """A reviewer's approval of a board sequence as one result read it; stale (kept) once the sequence has
    a newer revision or one of its rails a new revision (``stale_reason`` says which)."""

    __tablename__ = "board_sequence_approvals"
    id: Mapped[int] = mapped_column(primary_key=True)
    sequence_id: Mapped[int] = mapped_column(ForeignKey("board_sequences.id", ondelete="CASCADE"), index=True)
    revision_n: Mapped[int]
    inputs_sha256: Mapped[str] = mapped_column(String(64))
    result_id: Mapped[int | None] = mapped_column(ForeignKey("board_sequence_results.id", ondelete="SET NULL"))
    reviewer_id: Mapped[int] = mapped_column(ForeignKey("users.id"))
    reviewer_name: Mapped[str] = mapped_column(String(200))
    comment: Mapped[str] = mapped_column(Text, default="")
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    stale_at: Mapped[datetime | None]
    stale_reason: Mapped[str] = mapped_column(Text, default="", server_default=text("''"))


class BoardSequenceWaiver(Base):
    """A reviewer's reasoned acceptance of one failing or marginal check of a board sequence's result, made on
    one set of inputs (``inputs_sha256``: the sequence revision with its rails as they were); stale (kept) once
    the sequence or one of the rails it names has a newer revision (``stale_reason`` says which).

    ``check_id`` names the check as ``<check>:<subject>`` (e.g. ``supply_uvlo:harness12``): every row of the
    result with that check and subject (both corners, every threshold on the supply). It covers them while they
    read no worse than ``verdict``, the worst verdict waived.
    """

    __tablename__ = "board_sequence_waivers"
    __table_args__ = (UniqueConstraint("sequence_id", "inputs_sha256", "check_id", "result_id",
                                       name="uq_board_sequence_waivers_check_result"),)
    id: Mapped[int] = mapped_column(primary_key=True)
    sequence_id: Mapped[int] = mapped_column(ForeignKey("board_sequences.id", ondelete="CASCADE"), index=True)
    revision_n: Mapped[int]
    inputs_sha256: Mapped[str] = mapped_column(String(64))
    result_id: Mapped[int | None] = mapped_column(ForeignKey("board_sequence_results.id", ondelete="SET NULL"))
    check_id: Mapped[str] = mapped_column(String(100))
    check_title: Mapped[str] = mapped_column(String(200), default="")
    verdict: Mapped[str] = mapped_column(String(10))
    reason: Mapped[str] = mapped_column(Text)
    reviewer_id: Mapped[int] = mapped_column(ForeignKey("users.id"))
    reviewer_name: Mapped[str] = mapped_column(String(200))
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    stale_at: Mapped[datetime | None]
    stale_reason: Mapped[str] = mapped_column(Text, default="", server_default=text("''"))
