"""Boards: /api/v1/boards."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Query, Response

from server.api.common import ID_MAX, IdPath, IdQuery, PageDep, SearchText, TypedRoute, errors
from server.auth import CurrentActor, require, require_any
from server.db import SessionDep
from server.schemas.api import BoardIn, BoardPatch, SequenceSave
from server.schemas.responses import (Board, BoardSequence, Listing, Page, SequenceApproval, SequenceDiff,
                                      SequenceRevision, SequenceRevisionSummary, SequenceTransitionTaken,
                                      SequenceWaiver)
from server.schemas.signoff import ApprovalIn, SequenceWaiverIn, TransitionIn
from server.services import catalog, sequences
from server.services.access import Actor, Permission
from server.workflow import FAIL_WAIVER_ROLES

router = APIRouter(prefix="/boards", tags=["boards"], route_class=TypedRoute)
Editor = Annotated[Actor, Depends(require(Permission.EDIT))]
Reviewer = Annotated[Actor, Depends(require(Permission.REVIEW))]
Mover = Annotated[Actor, Depends(require(Permission.ADVANCE))]
# reviewers, and the roles a team may name for failing checks: the sequence service applies the team's rules
Waiving = Annotated[Actor, Depends(require_any(Permission.REVIEW, *FAIL_WAIVER_ROLES))]


@router.get("", response_model=Page[Board], responses=errors(401, 422))
def list_boards(session: SessionDep, actor: CurrentActor, page: PageDep, product_id: IdQuery = None,
                q: SearchText = None) -> dict:
    rows, total = catalog.list_boards(session=session, actor=actor, product_id=product_id, q=q,
                                      limit=page.limit, offset=page.offset)
    return page.answer([catalog.board_dict(b) for b in rows], total)


@router.post("", status_code=201, response_model=Board, responses=errors(400, 401, 403, 404, 409, 422))
def create_board(body: BoardIn, session: SessionDep, actor: Editor, response: Response) -> dict:
    board = catalog.create_board(session=session, actor=actor, **body.model_dump())
    response.headers["Location"] = f"/api/v1/boards/{board.id}"
    return catalog.board_dict(board)


@router.get("/{board_id}", response_model=Board, responses=errors(401, 404, 422))
def get_board(board_id: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    return catalog.board_dict(catalog.get_board(session=session, actor=actor, board_id=board_id))


@router.patch("/{board_id}", response_model=Board, responses=errors(400, 401, 403, 404, 409, 422))
def update_board(board_id: IdPath, body: BoardPatch, session: SessionDep, actor: Editor) -> dict:
    board = catalog.update_board(session=session, actor=actor, board_id=board_id,
                                 **body.model_dump(exclude_unset=True))
    return catalog.board_dict(board)


@router.delete("/{board_id}", status_code=204, response_class=Response, responses=errors(401, 403, 404, 409, 422))
def delete_board(board_id: IdPath, session: SessionDep, actor: Editor) -> Response:
    catalog.delete_board(session=session, actor=actor, board_id=board_id)
    return Response(status_code=204)


@router.get("/{board_id}/sequence", response_model=BoardSequence, responses=errors(401, 404, 422))
def get_sequence(board_id: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    """The board's power-up sequence: its head revision and the board start-up with the rails as they are now;
    while a job computes that (after a save or a rail's change), ``analysis`` names the job and
    ``outdated_result`` is the last result of older inputs; ``state`` in the team's workflow and the
    ``transitions`` on offer with what blocks them. Never writes."""
    seq = sequences.get_sequence(session=session, actor=actor, board_id=board_id)
    return sequences.sequence_dict(session, seq, actor=actor)


@router.put("/{board_id}/sequence", response_model=BoardSequence, responses=errors(400, 401, 403, 404, 409, 422))
def put_sequence(board_id: IdPath, body: SequenceSave, session: SessionDep, actor: Editor) -> dict:
    """Save a new revision of the board's power-up sequence and queue its analysis (a job: ``analysis`` names
    it); a document the analysis cannot read is refused with every field named, and nothing is stored."""
    seq, _, _ = sequences.save_sequence(session=session, actor=actor, board_id=board_id, document=body.document,
                                        base_sha256=body.base_sha256, message=body.message)
    return sequences.sequence_dict(session, seq, actor=actor)


@router.get("/{board_id}/sequence/revisions", response_model=Page[SequenceRevisionSummary],
            responses=errors(401, 404, 422))
def list_sequence_revisions(board_id: IdPath, session: SessionDep, actor: CurrentActor, page: PageDep) -> dict:
    """The revisions of the board's power-up sequence, newest first (``total``: the head revision's number)."""
    rows, total = sequences.list_revisions(session=session, actor=actor, board_id=board_id, limit=page.limit,
                                           offset=page.offset)
    return page.answer([sequences.revision_dict(r, board_id=board_id, with_document=False) for r in rows], total)


@router.get("/{board_id}/sequence/revisions/{n}", response_model=SequenceRevision, responses=errors(401, 404, 422))
def get_sequence_revision(board_id: IdPath, n: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    """One revision of the board's power-up sequence with its document as it was saved."""
    rev = sequences.get_revision(session=session, actor=actor, board_id=board_id, n=n)
    return sequences.revision_dict(rev, board_id=board_id)


@router.get("/{board_id}/sequence/diff", response_model=SequenceDiff, responses=errors(401, 404, 422))
def diff_sequence(board_id: IdPath, session: SessionDep, actor: CurrentActor,
                  from_n: Annotated[int, Query(alias="from", ge=1, le=ID_MAX)],
                  to_n: Annotated[int, Query(alias="to", ge=1, le=ID_MAX)]) -> dict:
    """The field-level changes of the sequence document between two of its revisions (JSON paths)."""
    return sequences.diff_revisions(session=session, actor=actor, board_id=board_id, from_n=from_n, to_n=to_n)


@router.post("/{board_id}/sequence/approvals", status_code=201, response_model=SequenceApproval,
             responses=errors(400, 401, 403, 404, 409, 422))
def approve_sequence(board_id: IdPath, body: ApprovalIn, session: SessionDep, actor: Reviewer) -> dict:
    """Approve the board's sequence as its current result reads it (its head revision, named by sha256; never a
    revision you saved). Refused (409) while a failing or marginal check has no waiver of the current inputs that
    covers it (the message names each by its title); under the team's two-person rule, refused (403) to the
    reviewer whose waiver it would rely on."""
    approval = sequences.approve(session=session, actor=actor, board_id=board_id, sha256=body.sha256,
                                 comment=body.comment)
    return sequences.approval_dict(approval)


@router.get("/{board_id}/sequence/waivers", response_model=Listing[SequenceWaiver], responses=errors(401, 404, 422))
def list_sequence_waivers(board_id: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    """Every waiver of the board's sequence, oldest first; ``current``: not stale and of the inputs as they are."""
    rows, key = sequences.list_waivers(session=session, actor=actor, board_id=board_id)
    return {"items": [sequences.waiver_dict(w, key) for w in rows], "total": len(rows)}


@router.post("/{board_id}/sequence/waivers", status_code=201, response_model=SequenceWaiver,
             responses=errors(400, 401, 403, 404, 409, 422))
def waive_sequence_check(board_id: IdPath, body: SequenceWaiverIn, session: SessionDep, actor: Waiving) -> dict:
    """Waive a failing or marginal check of the current result of the board's sequence (``check_id`` as
    ``problem_checks`` names it), with a reason. The team's waiver rules apply, as to a rail's: never by the
    sequence's author; a failing check only by the role the rules name (nobody by default); under the two-person
    rule not by a reviewer who approved these inputs. The waiver goes stale when the inputs change."""
    waiver = sequences.waive(session=session, actor=actor, board_id=board_id, sha256=body.sha256,
                             inputs_sha256=body.inputs_sha256, check_id=body.check_id, reason=body.reason)
    return sequences.waiver_dict(waiver)


@router.post("/{board_id}/sequence/transitions", response_model=SequenceTransitionTaken,
             responses=errors(400, 401, 403, 404, 409, 422))
def take_sequence_transition(board_id: IdPath, body: TransitionIn, session: SessionDep, actor: Mover) -> dict:
    """Move the board's sequence along a transition of its team's workflow (its head revision named by sha256; the
    transition names who may). Refused (409) while a demand is unmet, each named in words, or when the sha256
    names an older revision."""
    return sequences.take_transition(session=session, actor=actor, board_id=board_id, transition=body.transition,
                                     sha256=body.sha256, comment=body.comment)
