"""Request bodies of the REST API (its answers are the models of server.schemas.responses)."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field


class _Body(BaseModel):
    model_config = ConfigDict(extra="forbid")


class ProductIn(_Body):
    name: str = Field(min_length=1, max_length=200)
    description: str = ""
    team_id: int | None = None


class ProductPatch(_Body):
    name: str | None = Field(None, min_length=1, max_length=200)
    description: str | None = None


class BoardIn(_Body):
    product_id: int
    name: str = Field(min_length=1, max_length=200)
    revision: str = Field("A", min_length=1, max_length=10)
    description: str = ""


class BoardPatch(_Body):
    name: str | None = Field(None, min_length=1, max_length=200)
    revision: str | None = Field(None, min_length=1, max_length=10)
    description: str | None = None


class PartRefIn(_Body):
    id: int
    revision: int | None = Field(None, ge=1, description="part revision to pin; omitted: the newest")


class RailCreate(_Body):
    board_id: int
    document: dict[str, Any] = Field(description="the rail document (schema railsign.rail/1)")
    part: PartRefIn | None = Field(None, description="pin a library part; its FET fills document.fet")
    message: str = ""


class RailSave(_Body):
    document: dict[str, Any]
    base_revision: int | None = Field(None, ge=1, description="revision number the edit started from "
                                      "(or send If-Match with its sha256)")
    part: PartRefIn | None = Field(None, description="omitted: keep the pinned part; null: use document.fet")
    message: str = ""


class PartCreate(_Body):
    document: dict[str, Any] = Field(description="the FET fields of the rail document")
    message: str = ""


class PartSave(_Body):
    document: dict[str, Any]
    base_revision: int = Field(ge=1)
    message: str = ""


class AnalysisRequest(_Body):
    corners: bool = Field(True, description="also run every tolerance corner")
    monte_carlo: int = Field(0, ge=0, le=200_000, description="Monte Carlo samples (0: none)")
    seed: int = Field(0, ge=0, description="random seed of the Monte Carlo run")
    distribution: Literal["uniform", "normal"] | dict[Literal["v_s", "c", "i_limit", "timer_c", "i_charge", "v_trip"],
                                                      Literal["uniform", "normal"]] = Field(
        "uniform", description="Monte Carlo distribution of the tolerances: uniform within the tolerance, or normal "
        "with the tolerance as 3 sigma truncated to it; one word for every parameter, or per parameter (v_s, c, "
        "i_limit, timer_c, i_charge, v_trip; the others uniform)")
    revision: int | None = Field(None, ge=1, description="revision to analyse (default: the newest)")
    force: bool = Field(False, description="compute again even when a stored result exists")


class BoardAnalysisRequest(_Body):
    corners: bool = True
    force: bool = False
