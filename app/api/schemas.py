"""Request and response bodies (pydantic). Field names follow DESIGN section 5 exactly."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

Role = Literal["hindcast", "observations", "land_state"]
JobStatus = Literal["queued", "running", "done", "failed"]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")


class LeadWindowIn(_Strict):
    label: str = Field(min_length=1, max_length=50)
    first_day: int = Field(ge=1)
    last_day: int = Field(ge=1)

    @model_validator(mode="after")
    def _ordered(self) -> LeadWindowIn:
        if self.last_day < self.first_day:
            raise ValueError(
                f"lead window {self.label!r}: last_day {self.last_day} is before first_day "
                f"{self.first_day}"
            )
        return self


class BootstrapIn(_Strict):
    resamples: int = Field(default=1000, ge=1, le=10000)
    seed: int = Field(default=1234, ge=0, le=2**63 - 1)
    confidence: float = Field(default=0.95, gt=0.0, lt=1.0)


class PolygonRegionIn(_Strict):
    """An uploaded GeoJSON polygon region; its curves are named ``polygon:NAME``."""

    name: str = Field(min_length=1, max_length=100, pattern=r"^[A-Za-z0-9 _.\-]+$")
    geojson: dict[str, Any]


class ExperimentIn(_Strict):
    name: str = Field(min_length=1, max_length=200)
    variable: str | None = Field(default=None, min_length=1, max_length=100)
    realistic: str = Field(min_length=1, max_length=64, description="dataset id (role hindcast)")
    scrambled: str = Field(min_length=1, max_length=64, description="dataset id (role hindcast)")
    observations: str = Field(min_length=1, max_length=64, description="dataset id")
    land_state: str | None = Field(default=None, min_length=1, max_length=64)
    lead_windows: list[LeadWindowIn] | None = Field(default=None, min_length=1, max_length=52)
    regions: list[str | PolygonRegionIn] | None = Field(default=None, min_length=1, max_length=100)
    bootstrap: BootstrapIn | None = None
    fdr_alpha: float | None = Field(default=None, gt=0.0, lt=1.0)
    equalize_members: bool = False


class RegisterIn(_Strict):
    uri: str = Field(min_length=1, max_length=4096)
    role: Role
    variable: str | None = Field(default=None, min_length=1, max_length=100)


class ComparisonIn(_Strict):
    baseline: str = Field(min_length=1, max_length=64, description="experiment id")
    candidate: str = Field(min_length=1, max_length=64, description="experiment id")
    bootstrap: BootstrapIn | None = None


class TokenIn(_Strict):
    name: str = Field(min_length=1, max_length=200)
    scope: Literal["read", "write", "admin"]


class JobBrief(BaseModel):
    id: str
    status: JobStatus
    progress: float = 0.0
    message: str | None = None
    error: str | None = None


class JobOut(JobBrief):
    kind: str
    attempts: int
    max_attempts: int
    experiment_id: str | None = None
    comparison_id: str | None = None
    created_at: str | None = None
    started_at: str | None = None
    finished_at: str | None = None


class DatasetOut(BaseModel):
    model_config = ConfigDict(extra="allow")

    id: str
    role: Role
    sha256: str
    source: str
    uri: str | None = None
    filename: str | None = None
    size_bytes: int
    created_at: str | None = None
    variables: list[str] = []
    variable: str | None = None
    dims: dict[str, int] = {}
    units: str | None = None
    init_dates: list[str] | None = None
    members: int | None = None
    lead_days: list[int] | None = None
    grid: dict[str, Any] = {}
    warnings: list[str] = []


class ExperimentOut(BaseModel):
    id: str
    name: str
    variable: str | None
    status: JobStatus
    progress: float
    job: JobBrief
    datasets: dict[str, str | None]
    parameters: dict[str, Any]
    options: dict[str, Any]
    provenance: dict[str, Any] | None
    created_at: str | None
    finished_at: str | None
    links: dict[str, str] = {}


class ExperimentPage(BaseModel):
    items: list[ExperimentOut]
    total: int
    limit: int
    offset: int


class ComparisonOut(BaseModel):
    id: str
    baseline: str
    candidate: str
    parameters: dict[str, Any]
    status: JobStatus
    job: JobBrief
    result: dict[str, Any] | None
    created_at: str | None
    finished_at: str | None


class TokenOut(BaseModel):
    id: str
    name: str
    scope: str
    prefix: str
    created_at: str | None = None
    last_used_at: str | None = None
    revoked_at: str | None = None


class TokenCreated(TokenOut):
    token: str = Field(description="shown once; only its SHA-256 is stored")


class Health(BaseModel):
    status: str
    database: str
    version: str
