"""Request bodies of the REST API (its answers are the models of server.schemas.responses)."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

from server.schemas.fields import COMMENT_MAX, MESSAGE_MAX, SEED_MAX, Id, line, prose

Name = line(200, min_length=1)
BoardRevision = line(10, min_length=1)
Description = prose(COMMENT_MAX)
Message = prose(MESSAGE_MAX)


class _Body(BaseModel):
    model_config = ConfigDict(extra="forbid")


class ProductIn(_Body):
    name: Name
    description: Description = ""
    team_id: Id | None = None


class ProductPatch(_Body):
    name: Name | None = None
    description: Description | None = None


class BoardIn(_Body):
    product_id: Id
    name: Name
    revision: BoardRevision = "A"
    description: Description = ""


class BoardPatch(_Body):
    name: Name | None = None
    revision: BoardRevision | None = None
    description: Description | None = None


class PartRefIn(_Body):
    id: Id
    revision: Id | None = Field(None, description="part revision to pin; omitted: the newest")


class RailCreate(_Body):
    board_id: Id
    document: dict[str, Any] = Field(description="the rail document (schema railsign.rail/1)")
    part: PartRefIn | None = Field(None, description="pin a library part; its FET fills document.fet")
    message: Message = ""


class RailSave(_Body):
    document: dict[str, Any]
    base_revision: Id | None = Field(None, description="revision number the edit started from "
                                     "(or send If-Match with its sha256)")
    part: PartRefIn | None = Field(None, description="omitted: keep the pinned part; null: use document.fet")
    message: Message = ""


class PartCreate(_Body):
    document: dict[str, Any] = Field(description="the FET fields of the rail document")
    message: Message = ""


class PartSave(_Body):
    document: dict[str, Any]
    base_revision: Id
    message: Message = ""


class AnalysisRequest(_Body):
    corners: bool = Field(True, description="also run every tolerance corner")
    monte_carlo: int = Field(0, ge=0, le=200_000, description="Monte Carlo samples (0: none)")
    seed: int = Field(0, ge=0, le=SEED_MAX, description="random seed of the Monte Carlo run")
    distribution: Literal["uniform", "normal"] | dict[Literal["v_s", "c", "i_limit", "timer_c", "i_charge", "v_trip",
                                                              "rds_on"],
                                                      Literal["uniform", "normal"]] = Field(
        "uniform", description="Monte Carlo distribution of the tolerances: uniform within the tolerance, or normal "
        "with the tolerance as 3 sigma truncated to it; one word for every parameter, or per parameter (v_s, c, "
        "i_limit, timer_c, i_charge, v_trip, and rds_on where the part gives an R_DS(on) maximum; the others "
        "uniform)")
    revision: Id | None = Field(None, description="revision to analyse (default: the newest)")
    force: bool = Field(False, description="compute again even when a stored result exists")


class BoardAnalysisRequest(_Body):
    corners: bool = True
    force: bool = False


class SequenceSave(_Body):
    document: dict[str, Any] = Field(description="the board's power-up sequence (schema railsign.sequence/1); rails "
                                                 "by ref (the rail's name on this board) or inline")
    base_sha256: str | None = Field(None, pattern=r"^[0-9a-f]{64}$",
                                    description="sha256 of the revision the edit started from (none: any)")
    message: Message = ""
