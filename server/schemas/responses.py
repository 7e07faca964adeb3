"""Answers of the REST API as typed models: one per resource, the list envelopes, and the one error shape.

Each model names every key its service builds (``product_dict``, ``revision_dict``,
``job_dict``, ``approval_dict``, ``waiver_dict``, ``product_risks``...) and forbids unknown
keys, so a key renamed in a service fails the route's response validation (and the tests that
call every route) instead of vanishing from the answer. Keys a service sets only in some
answers are optional here and stay absent from those answers (the routers answer with
``response_model_exclude_unset``). Times are ISO 8601 strings in UTC; numbers are SI.

Provides :class:`ErrorResponse` (every error answer), :class:`Page` and :class:`Listing`
(list envelopes), and the models of each resource.
"""

from __future__ import annotations

from typing import Annotated, Any, Generic, Literal, TypeVar

from pydantic import BaseModel, ConfigDict, Field

from server.schemas.result import CheckRecord, Verdict

__all__ = ["ErrorDetail", "ErrorInfo", "ErrorResponse", "Page", "Listing", "Health", "DatabaseHealth", "Product",
           "Board", "PartRevision", "PartSummary", "Part", "PartDetail", "PartUse", "RevisionSummary", "Revision",
           "PartStatus", "RailSummary", "RailListItem", "Rail", "RailSaved", "FieldChange", "RevisionDiff",
           "AnalysisOptions", "Job", "Approval", "Waiver", "ResultReading", "SignoffStatus", "TransitionTaken",
           "WorkflowDefinition", "Workflow", "WorkflowReplaced", "TeamSummary", "Team", "User", "UserListItem", "Me",
           "Token", "NewToken", "AuditEntry", "RiskCheck", "ProductRisks", "ArchivedReport", "SequenceApproval",
           "SequenceAnalysis", "BoardSequence"]

T = TypeVar("T")
Timestamp = Annotated[str, Field(description="ISO 8601 time, UTC", json_schema_extra={"format": "date-time"})]
Sha256 = Annotated[str, Field(description="sha256 of the canonical document, hex", pattern=r"^[0-9a-f]{64}$")]
Document = Annotated[dict[str, Any], Field(description="the rail document (schema railsign.rail/1) in canonical SI "
                                                        "form")]
JobState = Literal["queued", "running", "done", "failed", "cancelled"]
RoleName = Literal["viewer", "designer", "reviewer", "manager", "admin"]


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", serialize_by_alias=True)


# --- errors ----------------------------------------------------------------------------------


class ErrorDetail(_Model):
    field: str = Field(description="where the problem is: a JSON path of the request, or a workflow demand")
    message: str


class RevisionRef(_Model):
    n: int
    sha256: Sha256


class ErrorInfo(_Model):
    status: int = Field(description="the HTTP status, repeated")
    code: str = Field(description="stable code for programs, e.g. not_found, conflict, invalid, not_analysed")
    message: str = Field(description="what went wrong and what to do, for people")
    details: list[ErrorDetail]
    current: Revision | PartRevision | RevisionRef | None = Field(
        None, description="conflicts: the revision that stands now (merge into it, then save again)")
    job: Job | None = Field(None, description="a result not there yet: the job computing it, if any")
    analyse: str | None = Field(None, description="not analysed: where to ask for the analysis")
    retry_after_s: float | None = Field(None, description="too many attempts: seconds to wait")
    request_id: str | None = Field(None, description="unexpected errors: the id of the request in the log")


class ErrorResponse(_Model):
    """Every error answer of the API: ``{"error": {status, code, message, details, ...}}``."""

    error: ErrorInfo


# --- envelopes and health --------------------------------------------------------------------


class Page(_Model, Generic[T]):
    """One page of a long list."""

    items: list[T]
    total: int = Field(description="items over every page")
    limit: int
    offset: int


class Listing(_Model, Generic[T]):
    """A whole short list."""

    items: list[T]
    total: int


class DatabaseHealth(_Model):
    reachable: bool
    engine: str = Field(description="sqlite or postgresql")
    error: str | None = None


class Health(_Model):
    status: Literal["ok", "degraded"]
    version: str
    database: DatabaseHealth


# --- catalog and parts -----------------------------------------------------------------------


class Product(_Model):
    id: int
    team_id: int
    name: str
    description: str
    created_at: Timestamp


class Board(_Model):
    id: int
    product_id: int
    name: str
    revision: str
    description: str
    created_at: Timestamp


class FieldWarning(_Model):
    field: str = Field(description="JSON path in the document")
    message: str = Field(description="why the value is unusual; it is analysed as given")


class PartRevision(_Model):
    part_id: int
    n: int
    sha256: Sha256
    author: str
    message: str
    created_at: Timestamp
    document: dict[str, Any] = Field(description="the FET fields of the rail document, SI")


class PartSummary(_Model):
    id: int
    name: str
    kind: str
    head_n: int
    created_at: Timestamp
    updated_at: Timestamp


class Part(PartSummary):
    head: PartRevision


class PartUse(_Model):
    rail_id: int
    rail_name: str
    board_id: int
    part_revision: int


class PartDetail(Part):
    used_by: list[PartUse] = Field(description="rails whose current revision pins this part")
    warnings: list[FieldWarning] = Field(description="where the analysis reads the SOA curves lower than drawn: "
                                         "curves that cross or whose current rises with V_DS are read as their "
                                         "conservative envelope; never a reason to refuse")


# --- rails, revisions, diffs -----------------------------------------------------------------


class _RevisionFields(_Model):
    """What every stored revision (a rail's, a board sequence's) says of itself."""
    n: int
    sha256: Sha256
    author: str
    author_id: int | None
    message: str
    created_at: Timestamp


class RevisionSummary(_RevisionFields):
    rail_id: int
    part_revision_id: int | None


class Revision(RevisionSummary):
    document: Document


class PartStatus(_Model):
    id: int
    name: str
    pinned_revision: int
    latest_revision: int
    newer_available: bool


class RailSummary(_Model):
    v_nom: float = Field(description="nominal supply, V")
    c_nom: float = Field(description="nominal load capacitance, F")
    load_model: str
    fet: str = Field(description="name of the MOSFET")


class RailListItem(_Model):
    id: int
    board_id: int
    product_id: int
    name: str
    mode: Literal["hard", "slew", "current_limit", "power_limit"]
    created_at: Timestamp
    updated_at: Timestamp
    head: RevisionSummary
    summary: RailSummary
    part: PartStatus | None = Field(description="the pinned library part (none: the document's own FET)")
    retired: bool = Field(description="retired: kept with its history, left out of lists, queues and the risk view")
    retired_at: Timestamp | None
    retired_by: str | None


class Rail(RailListItem):
    document: Document
    warnings: list[FieldWarning] = Field(description="values that compute but lie outside the usual range of "
                                         "their quantity (a slip of the unit prefix?), and where the analysis reads "
                                         "the SOA curves lower than drawn (crossing curves, a current rising with "
                                         "V_DS: the conservative envelope); never a reason to refuse")


class RailSaved(Rail):
    created_revision: bool = Field(description="false: the document was unchanged and no revision was made")


class FieldChange(_Model):
    field: str = Field(description="JSON path in the document")
    change: Literal["added", "removed", "changed"]
    old: Any
    new: Any


class RevisionDiff(_Model):
    rail_id: int
    from_: RevisionSummary = Field(alias="from")
    to: RevisionSummary
    changes: list[FieldChange]


# --- jobs ------------------------------------------------------------------------------------

Distribution = Literal["uniform", "normal"]


class AnalysisOptions(_Model):
    corners: bool
    monte_carlo: int = Field(description="Monte Carlo samples (0: none)")
    seed: int
    distribution: Distribution | dict[str, Distribution]


class JobLinks(_Model):
    self: str
    result: str | None = Field(None, description="where the result is, once there is one (a sequence job: the "
                                                 "board's sequence)")


class Job(_Model):
    id: int
    kind: Literal["rail", "monte_carlo", "board", "sequence"]
    state: JobState
    progress: float = Field(description="0 to 1")
    rail_id: int | None
    board_id: int | None
    parent_id: int | None = Field(description="the board job this rail job belongs to")
    revision: int | None = Field(description="the rail revision, or a sequence job's sequence revision")
    sha256: Sha256 | None = Field(description="the rail revision's sha256, or a sequence job's inputs_sha256")
    engine_version: str
    options: AnalysisOptions | None = Field(description="none for a sequence job")
    attempts: int
    max_attempts: int
    error: str | None
    worker: str | None
    result_id: int | None
    requested_by: str
    created_at: Timestamp
    started_at: Timestamp | None
    finished_at: Timestamp | None
    links: JobLinks


# --- sign-off --------------------------------------------------------------------------------


class Approval(_Model):
    id: int
    rail_id: int
    revision: int
    sha256: Sha256
    reviewer: str
    reviewer_id: int | None
    comment: str
    created_at: Timestamp
    stale: bool
    stale_since: Timestamp | None
    stale_reason: str | None
    engine_version: str | None = Field(description="engine of the result it was given against (none: older row)")
    result_id: int | None
    for_current_result: bool | None = Field(None, description="approvals of the current revision: whether given "
                                                               "against its current result")
    result_note: str | None = Field(None, description="approvals of the current revision: why the result it saw "
                                                      "is not the current one, in words")


class Waiver(_Model):
    id: int
    rail_id: int
    revision: int
    sha256: Sha256
    check_id: str
    check_title: str
    verdict: Verdict = Field(description="the verdict waived")
    reason: str
    reviewer: str
    reviewer_id: int | None
    created_at: Timestamp
    carried_from: int | None = Field(description="the waiver of an earlier revision this one carries")
    engine_version: str | None
    result_id: int | None
    past_edge: bool = Field(description="a waiver of a failing check: its reading was past the physical edge "
                                        "(allowed only where the team's rules name a role for it)")
    current: bool | None = Field(None, description="whether it is of the rail's current revision")
    for_current_result: bool | None = None
    result_note: str | None = None
    covers: bool | None = Field(None, description="whether it still covers its check's current verdict")
    now_reads: Verdict | None = Field(None, description="what its check reads now (current revision)")


class ResultReading(_Model):
    id: int
    engine_version: str
    verdict: str
    outdated: bool = Field(description="computed by another engine version than the current one")
    current_engine: str
    created_at: Timestamp


class SignoffHead(_Model):
    n: int
    sha256: Sha256
    author: str
    author_id: int | None


class SignoffState(_Model):
    name: str
    signed_off: bool
    since: Timestamp | None
    revision: int | None
    by: str | None


class SignoffCheck(_Model):
    id: str
    title: str
    verdict: Verdict
    value: float | None
    limit: float | None
    unit: str
    corner: str | None
    waiver: Waiver | None = Field(description="the newest waiver of the current revision that covers this reading")


class SignoffChecks(_Model):
    analysed: bool = Field(description="whether the current engine has read the current revision")
    checks: list[SignoffCheck]
    open: list[str] = Field(description="ids of failing or marginal checks no waiver covers")


class Demands(_Model):
    approvals: int
    checks_pass: bool
    no_stale_approvals: bool


class OfferedTransition(_Model):
    name: str
    to: str
    roles: list[str]
    demands: Demands
    blockers: list[ErrorDetail] = Field(description="unmet demands (field: the demand)")
    you_may_take: bool


class WaiverRulesOut(_Model):
    two_person: bool = Field(description="an approval relying on a waiver comes from another reviewer than the "
                                         "one who waived")
    fail_waiver_role: str | None = Field(description="the role that may waive failing checks; null: nobody")


class SignoffStatus(_Model):
    rail_id: int
    product_id: int
    team_id: int
    head: SignoffHead
    state: SignoffState
    workflow: str
    rules: WaiverRulesOut
    retired: bool
    result: ResultReading | None
    approvals: list[Approval]
    waivers: list[Waiver]
    checks: SignoffChecks
    transitions: list[OfferedTransition]


class TransitionTaken(_Model):
    rail_id: int
    from_: str = Field(alias="from")
    to: str
    transition: str
    revision: int
    signed_off: bool


# --- workflows, teams, users, tokens, audit ---------------------------------------------------


class WorkflowState(_Model):
    name: str
    initial: bool
    signed_off: bool
    archives: bool = Field(description="entering it archives the record: once every rail of a board stands in "
                                       "such a state, the board's sign-off report is archived as a PDF")
    description: str


class WorkflowTransition(_Model):
    name: str
    from_: str = Field(alias="from")
    to: str
    roles: list[str]
    demands: Demands


class WorkflowDefinition(_Model):
    name: str
    states: list[WorkflowState]
    transitions: list[WorkflowTransition]
    on_edit: str = Field(description="the state a rail goes to when it gets a new revision")


class Workflow(_Model):
    team_id: int
    team: str
    version: int = Field(description="0: the default, never replaced")
    updated_at: Timestamp | None
    updated_by: str
    definition: WorkflowDefinition


class MovedRail(_Model):
    rail_id: int
    from_: str = Field(alias="from")
    to: str


class WorkflowReplaced(Workflow):
    moved_rails: list[MovedRail] = Field(description="rails whose state the new workflow no longer has")


class Member(_Model):
    id: int
    username: str
    role: RoleName
    active: bool


class TeamSummary(_Model):
    id: int
    name: str
    created_at: Timestamp
    products: int = Field(description="how many products the team owns")


class Team(TeamSummary):
    members: list[Member]


class User(_Model):
    id: int
    username: str
    display_name: str
    role: RoleName
    active: bool
    teams: list[str] = Field(description="team names")


class UserListItem(User):
    created_at: Timestamp


class TeamRef(_Model):
    id: int
    name: str


class Me(_Model):
    id: int | None
    username: str
    display_name: str
    role: RoleName
    permissions: list[str]
    teams: list[TeamRef]
    auth: Literal["token", "cookie"] | None
    csrf_token: str | None = Field(None, description="with a session cookie: send it as X-CSRF-Token")


class Token(_Model):
    id: int
    name: str
    user_id: int
    user: str | None = Field(None, description="the owner's username")
    created_at: Timestamp
    last_used_at: Timestamp | None
    revoked: bool
    revoked_at: Timestamp | None


class NewToken(Token):
    token: str = Field(description="the token itself, shown once")
    note: str


class AuditEntry(_Model):
    id: int
    at: Timestamp
    user: str
    user_id: int | None
    request_id: str | None
    action: str
    object_type: str
    object_id: int | None
    object: str = Field(description="the object in words, as it was then")
    product_id: int | None
    before: Any = Field(description="the object's state before (JSON), or none")
    after: Any = Field(description="the object's state after (JSON), or none")


# --- the managers' risk view ------------------------------------------------------------------


class RiskCheck(CheckRecord):
    """A check record as the analysis stored it, with the waiver that covers it."""

    waiver: Waiver | None


class StaleApproval(_Model):
    reviewer: str
    revision: int


class OutdatedReading(_Model):
    engine_version: str
    verdict: str


RiskKind = Literal["failing_check", "never_analysed", "not_analysed", "marginal_check", "outdated_result",
                   "waived_check", "outdated_part", "stale_signoff", "awaiting_review", "missing_signoff"]


class OutdatedPart(_Model):
    name: str
    pinned_revision: int
    latest_revision: int


class RiskRail(_Model):
    id: int
    name: str
    mode: str
    head: RevisionRef
    owner: str = Field(description="who saved the current revision")
    state: str
    signed_off: bool
    analysed: bool
    ever_analysed: bool
    outdated: OutdatedReading | None = Field(description="its only reading is of another engine version")
    outdated_part: OutdatedPart | None = Field(description="the library holds a newer revision of its pinned part")
    failing: list[RiskCheck]
    marginal: list[RiskCheck]
    waived: list[RiskCheck]
    stale_approvals: list[StaleApproval]
    current_approvals: int
    risks: list[RiskKind] = Field(description="every kind of risk of the rail, worst first")
    technical: list[RiskKind] = Field(description="the technical risks: the design itself may not hold")
    process: list[RiskKind] = Field(description="the process state: the sign-off is not done")


class RiskCounts(_Model):
    failing_check: int
    never_analysed: int
    not_analysed: int
    marginal_check: int
    outdated_result: int
    waived_check: int
    outdated_part: int
    stale_signoff: int
    awaiting_review: int
    missing_signoff: int
    rails: int
    signed_off: int
    failing_checks: int
    marginal_checks: int
    waived_checks: int
    rails_at_risk: int
    rails_at_technical_risk: int


class RiskBoard(_Model):
    id: int
    name: str
    revision: str
    counts: RiskCounts
    rails: list[RiskRail]


class RiskProduct(_Model):
    id: int
    name: str
    team_id: int


class EngineMove(_Model):
    """A signed-off rail that a new engine read worse, and where that moved it."""

    rail_id: int
    rail: str
    board_id: int
    board: str
    product_id: int
    product: str
    at: Timestamp
    revision: int | None
    reason: str
    old_verdict: str | None
    new_verdict: str | None
    old_engine: str | None
    new_engine: str | None
    from_: str | None = Field(alias="from")
    to: str | None
    state_now: str | None
    link: str


class ProductRisks(_Model):
    product: RiskProduct
    workflow: str
    signed_off_states: list[str]
    generated_at: Timestamp
    caution: str
    totals: RiskCounts
    boards: list[RiskBoard]
    current_engine: str
    engine_moves: list[EngineMove]


ErrorInfo.model_rebuild()


# --- waiver rules, review assignments, the review queue ----------------------------------------


class SignoffRulesOut(_Model):
    team_id: int
    team: str
    version: int = Field(description="0: the defaults, never saved")
    updated_at: Timestamp | None
    updated_by: str
    two_person: bool = Field(description="an approval relying on a waiver comes from another reviewer than the "
                                         "one who waived")
    fail_waiver_role: str | None = Field(description="the role that may waive failing checks; null: nobody")
    defaults: WaiverRulesOut


class ReviewAssignmentOut(_Model):
    id: int
    reviewer_id: int
    reviewer: str
    rail_id: int | None
    board_id: int | None
    target: str = Field(description="the rail or board, in words")
    assigned_by: str
    created_at: Timestamp


class QueueCheck(_Model):
    id: str
    title: str
    verdict: Verdict
    value: float | None
    limit: float | None
    unit: str | None
    margin: float | None
    corner: str | None
    waived_by: str | None = Field(None, description="the reviewer whose waiver covers it")


class QueueChange(_Model):
    id: str
    title: str
    old_verdict: Verdict | None
    new_verdict: Verdict | None
    old_value: float | None
    new_value: float | None
    unit: str | None


class QueueChanges(_Model):
    since: int | None = Field(description="the last approved revision before the current one (null: none)")
    inputs: list[FieldChange]
    results: list[QueueChange]
    results_known: bool | None = Field(None, description="false: one of the two revisions has no current result")


class QueueApprovals(_Model):
    counted: list[str]
    barred: list[str] = Field(description="approvals that do not count under the two-person rule")
    needed: int


class QueueRevision(_Model):
    n: int
    sha256: Sha256
    author: str
    saved_at: Timestamp


class QueueEntry(_Model):
    rail: dict[str, Any]
    board: dict[str, Any]
    product: dict[str, Any]
    revision: QueueRevision
    state: str
    waiting_since: Timestamp | None
    verdict: Verdict | None
    analysed: bool
    failing: list[QueueCheck]
    marginal: list[QueueCheck]
    approvals: QueueApprovals
    assigned: Literal["rail", "board"] | None = Field(description="how it is assigned to you (null: team queue)")
    changes: QueueChanges


class ReviewQueue(_Model):
    assigned: list[QueueEntry] = Field(description="awaiting you, oldest first")
    team: list[QueueEntry] = Field(description="awaiting a reviewer of your teams, nobody assigned, oldest first")
    totals: dict[str, int]


# --- sign-off reports ------------------------------------------------------------------------


class ArchivedRail(_Model):
    rail_id: int
    name: str
    revision: int
    sha256: Sha256


class ArchiveOccasion(_Model):
    rail_id: int
    rail: str = Field(description="the rail whose entry completed the board")
    transition: str
    state: str


class ArchivedReport(_Model):
    """An archived copy of a board's sign-off report (a PDF); append-only: never changed or deleted."""

    id: int
    board_id: int
    created_at: Timestamp
    created_by: str
    state: str = Field(description="the state (one that archives the record) every rail stood in")
    rails: list[ArchivedRail] = Field(description="each rail's revision in the report")
    occasion: ArchiveOccasion
    engine_version: str
    sha256: str = Field(description="sha256 of the PDF's bytes, hex (what a download gives)",
                        pattern=r"^[0-9a-f]{64}$")
    size: int = Field(description="bytes")
    download: str = Field(description="where the PDF is")


class SequenceRevisionSummary(_RevisionFields):
    board_id: int


class SequenceRevision(SequenceRevisionSummary):
    document: dict[str, Any] = Field(description="the sequence document of this revision (railsign.sequence/1)")


class SequenceDiff(_Model):
    board_id: int
    from_: SequenceRevisionSummary = Field(alias="from")
    to: SequenceRevisionSummary
    changes: list[FieldChange]


class SequenceApproval(_Model):
    id: int
    revision_n: int
    reviewer: str
    comment: str
    created_at: Timestamp
    stale: bool
    stale_reason: str
    current: bool = Field(description="not stale, and given against the result of the board as it is now")


class SequenceWaiver(_Model):
    id: int
    revision_n: int
    inputs_sha256: Sha256 = Field(description="the inputs it was made on: the sequence revision with its rails")
    result_id: int | None
    check_id: str = Field(description="the check and its subject (supply_uvlo:harness12): both corners' rows, and "
                                      "every threshold on that supply")
    check_title: str
    verdict: Verdict = Field(description="the verdict waived")
    reason: str
    reviewer: str
    reviewer_id: int | None
    created_at: Timestamp
    past_edge: bool = Field(description="a waiver of a failing check (allowed only where the team's rules name a "
                                        "role for it)")
    stale: bool
    stale_reason: str
    current: bool = Field(description="not stale, and made on the inputs of the board as it is now")


class SequenceProblemCheck(_Model):
    check_id: str
    verdict: Verdict = Field(description="its worst verdict over its rows")
    titles: list[str]
    reasons: list[str]
    waiver: SequenceWaiver | None = Field(None, description="the waiver of the current inputs that covers it")


class SequenceAnalysis(_Model):
    state: Literal["done", "queued", "running", "failed", "cancelled", "not_queued"] = Field(
        description="done: the result of the current inputs is stored; otherwise the state of its job")
    job: Job | None = Field(None, description="the job computing the current inputs, while there is no result")


class BoardSequence(_Model):
    board_id: int
    n: int = Field(description="the head revision's number")
    sha256: Sha256
    author: str
    message: str
    created_at: Timestamp
    document: dict[str, Any]
    inputs_sha256: Sha256 = Field(description="the key of the result: the head revision's sha256 with each rail "
                                              "it names at its head revision")
    result: dict[str, Any] | None = Field(None, description="the board start-up with the rails as they are now "
                                                            "(railsign.sequence-result/1): checks, figures, series; "
                                                            "none while its job computes it (see analysis)")
    analysis: SequenceAnalysis
    outdated_result: dict[str, Any] | None = Field(None, description="while there is no result of the current "
                                                   "inputs: the last result of older ones (revision_n, inputs_sha256, "
                                                   "computed_at, outdated_because), not for sign-off")
    approvals: list[SequenceApproval]
    waivers: list[SequenceWaiver]
    problem_checks: list[SequenceProblemCheck] = Field(description="the current result's failing or marginal "
                                                                   "checks, each with the waiver that covers it")
    approval_blocked: str | None = Field(None, description="why the current result cannot be approved yet, in "
                                                           "words (null: it can, or there is no result yet)")
    rules: dict[str, Any] = Field(description="the team's waiver rules (two_person, fail_waiver_role), as for a rail")
    workflow: str = Field(description="the name of the team's workflow the sequence follows, as its rails do")
    state: SignoffState = Field(description="where the sequence stands in that workflow (since, revision and by "
                                            "are null until its first move)")
    transitions: list[OfferedTransition] = Field(description="the transitions leaving the state, each with its "
                                                             "unmet demands and whether you may take it now")


class SequenceTransitionTaken(_Model):
    board_id: int
    from_: str = Field(alias="from")
    to: str
    transition: str
    revision: int = Field(description="the sequence revision it was taken on")
    signed_off: bool
