"""Request and response bodies (pydantic). Field names follow DESIGN section 5 exactly.

The experiment body *is* the run options (:class:`app.runs.options.RunOptions`) plus a name and
the dataset ids, so every option ``landlift score`` offers can be set over HTTP with the same
bounds and the same error text. Every JSON answer is one of the ``...Out`` models, validated
before it is sent (routes that set cache headers validate explicitly).
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

from app.runs.options import (
    ComparisonOptions,
    Name,
    RunOptions,
    Variable,
)

Role = Literal["hindcast", "observations", "land_state"]
JobStatus = Literal["queued", "running", "done", "failed"]
#: ids are short prefixed hex strings (``ds_0123abcd...``)
ID_PATTERN = r"^[a-z]{2,4}_[0-9a-f]{1,32}$"
DatasetId = Field(min_length=1, max_length=64, pattern=ID_PATTERN)


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False, frozen=True)


class ExperimentIn(RunOptions):
    """``POST /v1/experiments``: a name, the dataset ids, and the run options."""

    name: Name
    realistic: str = Field(min_length=1, max_length=64, pattern=ID_PATTERN, description="dataset id (role hindcast)")
    scrambled: str = Field(min_length=1, max_length=64, pattern=ID_PATTERN, description="dataset id (role hindcast)")
    observations: str = Field(min_length=1, max_length=64, pattern=ID_PATTERN, description="dataset id")
    land_state: str | None = Field(default=None, min_length=1, max_length=64, pattern=ID_PATTERN)


class RegisterIn(_Strict):
    uri: str = Field(min_length=1, max_length=4096)
    role: Role
    variable: Variable | None = None


class ComparisonIn(ComparisonOptions):
    """``POST /v1/comparisons``: two finished experiments and the comparison options."""

    baseline: str = Field(min_length=1, max_length=64, pattern=ID_PATTERN, description="experiment id")
    candidate: str = Field(min_length=1, max_length=64, pattern=ID_PATTERN, description="experiment id")


class TokenIn(_Strict):
    name: Name
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
    result_digest: str | None = None
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
    links: dict[str, str] = {}


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


class RegionsOut(BaseModel):
    regions: list[dict[str, str]]
    patterns: dict[str, str]


class ErrorDetail(BaseModel):
    code: str
    message: str
    detail: dict[str, Any]


class ErrorOut(BaseModel):
    """Every error: ``{"error": {"code", "message", "detail"}}`` (DESIGN section 5)."""

    error: ErrorDetail


class _Open(BaseModel):
    """Result bodies: the contract's fields are required; fields are only ever added."""

    model_config = ConfigDict(extra="allow")


class Bounded(_Open):
    value: float | None
    low: float | None
    high: float | None


class Tested(Bounded):
    p_value: float | None


class WindowSkill(_Open):
    label: str
    first_day: int
    last_day: int
    n_years: int
    n_samples: int
    acc_realistic: Bounded
    acc_scrambled: Bounded
    gain: Tested


class SkillCurve(_Open):
    """The skill-by-lead curve of DESIGN section 5."""

    experiment: str
    variable: str
    units: str
    region: str
    aggregation: str
    confidence: float
    resamples: int
    seed: int
    interval_method: str
    windows: list[WindowSkill]


class Stratum(_Open):
    stratum: str
    windows: list[WindowSkill]


class ConditionalTable(_Open):
    """Gain by stratum of the initial land anomaly (DESIGN 3.8)."""

    experiment: str
    variable: str
    region: str
    available: bool
    strata: list[Stratum]


#: what an error answer can be, on every /v1 route (one body: ErrorOut); the OpenAPI document
#: declares them so that clients and API fuzzers know every status a route returns
ERROR_STATUSES: dict[int, str] = {
    400: "malformed request (body not JSON, broken multipart)",
    401: "no token, or an unknown or revoked one",
    403: "the token's scope is too small",
    404: "an unknown id, region, window or field",
    409: "conflicts with stored state, or the result is not ready yet",
    413: "the body or upload is larger than its limit",
    415: "the wrong content type",
    422: "invalid parameters or data (the message names them)",
    429: "too many requests of this kind at once (see Retry-After)",
    503: "the service is busy or its database does not answer (see Retry-After)",
}


def error_responses(*statuses: int) -> dict[int | str, dict[str, Any]]:
    """``responses=`` entries for these statuses (all of them when none is named)."""
    chosen = statuses or tuple(ERROR_STATUSES)
    return {s: {"model": ErrorOut, "description": ERROR_STATUSES[s]} for s in chosen}
