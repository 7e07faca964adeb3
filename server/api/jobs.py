"""Analyses as jobs, and their stored results: /api/v1/rails/{id}/analyses, /api/v1/jobs, results."""

from __future__ import annotations

from typing import Annotated, Literal

from fastapi import APIRouter, Depends, Response

from server.services import jobs
from server.api.common import IdPath, IdQuery, PageDep, TypedRoute, errors
from server.auth import CurrentActor, require
from server.db import SessionDep
from server.models import JobState
from server.schemas.api import AnalysisRequest, BoardAnalysisRequest
from server.schemas.responses import ErrorResponse, Job, Page
from server.schemas.result import StoredResult
from server.services import results
from server.services.access import Actor, Permission
from server.services.errors import NotFound
from server.services.rails import get_revision

router = APIRouter(tags=["analyses"], route_class=TypedRoute)
Analyst = Annotated[Actor, Depends(require(Permission.ANALYZE))]
State = Literal["queued", "running", "done", "failed", "cancelled"]
# a stored result for the same revision, engine and options answers at once
ANSWERED_AT_ONCE = {200: {"model": Job, "description": "A stored result answers at once: the job is done"}}
NO_RESULT_YET = {404: {"model": ErrorResponse, "description": "No such rail or revision, or no result yet "
                       "(error.job: the job computing it, if any)"}}


def _job_answer(job, response: Response) -> dict:
    response.status_code = 200 if job.state == JobState.done.value else 202
    response.headers["Location"] = f"/api/v1/jobs/{job.id}"
    return jobs.job_dict(job)


@router.post("/rails/{rail_id}/analyses", status_code=202, response_model=Job,
             responses=ANSWERED_AT_ONCE | errors(400, 401, 403, 404, 422))
def analyse_rail(rail_id: IdPath, body: AnalysisRequest, session: SessionDep, actor: Analyst,
                 response: Response) -> dict:
    """Queue an analysis (202); a stored result for the same revision and options answers at once (200)."""
    options = body.model_dump(include={"corners", "monte_carlo", "seed", "distribution"})
    job = jobs.enqueue_rail(session=session, actor=actor, rail_id=rail_id, options=options,
                            revision=body.revision, force=body.force)
    return _job_answer(job, response)


@router.post("/boards/{board_id}/analyses", status_code=202, response_model=Job,
             responses=ANSWERED_AT_ONCE | errors(400, 401, 403, 404, 422))
def analyse_board(board_id: IdPath, body: BoardAnalysisRequest, session: SessionDep, actor: Analyst,
                  response: Response) -> dict:
    """Queue the analysis of every rail of a board as one board job with a child job per rail."""
    job = jobs.enqueue_board(session=session, actor=actor, board_id=board_id, options={"corners": body.corners},
                             force=body.force)
    return _job_answer(job, response)


@router.get("/jobs", response_model=Page[Job], responses=errors(401, 422))
def list_jobs(session: SessionDep, actor: CurrentActor, page: PageDep, state: State | None = None,
              rail_id: IdQuery = None, board_id: IdQuery = None) -> dict:
    rows, total = jobs.list_jobs(session=session, actor=actor, state=state, rail_id=rail_id, board_id=board_id,
                                 limit=page.limit, offset=page.offset)
    return page.answer([jobs.job_dict(j) for j in rows], total)


@router.get("/jobs/{job_id}", response_model=Job, responses=errors(401, 404, 422))
def get_job(job_id: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    return jobs.job_dict(jobs.get_job(session=session, actor=actor, job_id=job_id))


@router.delete("/jobs/{job_id}", response_model=Job, responses=errors(401, 403, 404, 409, 422))
def cancel_job(job_id: IdPath, session: SessionDep, actor: Analyst) -> dict:
    """Cancel a queued or running job (a board job cancels its unfinished rail jobs)."""
    return jobs.job_dict(jobs.cancel_job(session=session, actor=actor, job_id=job_id))


@router.post("/jobs/{job_id}/retry", status_code=202, response_model=Job,
             responses=errors(401, 403, 404, 409, 422))
def retry_job(job_id: IdPath, session: SessionDep, actor: Analyst) -> dict:
    return jobs.job_dict(jobs.retry_job(session=session, actor=actor, job_id=job_id))


def _revision_results(session, actor, rail_id: int, n: int | None, kind: str) -> dict:
    rev = get_revision(session=session, actor=actor, rail_id=rail_id, n=n)
    row = results.latest_result(session, sha256=rev.sha256, monte_carlo=kind == "monte_carlo")
    if row is None:
        pending, _ = jobs.list_jobs(session=session, actor=actor, rail_id=rail_id, limit=20)
        waiting = next((j for j in pending if j.sha256 == rev.sha256 and j.state in jobs.ACTIVE), None)
        hint = f"; job {waiting.id} is {waiting.state}" if waiting else ""
        raise NotFound(f"revision {rev.n} of rail {rail_id} has no {kind.replace('_', ' ')} result yet{hint}",
                       extra={"job": jobs.job_dict(waiting) if waiting else None})
    return results.result_dict(row, rail_id=rail_id, revision=rev.n)


@router.get("/rails/{rail_id}/results/latest", response_model=StoredResult,
            responses=errors(401, 422) | NO_RESULT_YET)
def latest_results(rail_id: IdPath, session: SessionDep, actor: CurrentActor,
                   kind: Literal["nominal", "monte_carlo"] = "nominal") -> dict:
    """The newest result of the rail's current revision (nominal+corners, or the newest Monte Carlo run)."""
    return _revision_results(session, actor, rail_id, None, kind)


@router.get("/rails/{rail_id}/revisions/{n}/results", response_model=StoredResult,
            responses=errors(401, 422) | NO_RESULT_YET)
def revision_results(rail_id: IdPath, n: IdPath, session: SessionDep, actor: CurrentActor,
                     kind: Literal["nominal", "monte_carlo"] = "nominal") -> dict:
    return _revision_results(session, actor, rail_id, n, kind)


@router.get("/results/{result_id}", response_model=StoredResult, responses=errors(401, 404, 422))
def get_result(result_id: IdPath, session: SessionDep, actor: CurrentActor) -> dict:
    """A stored result by id (the link a finished job gives)."""
    return results.get_result(session=session, actor=actor, result_id=result_id)
