"""The options of a run: one validated model, every bound written once.

:class:`RunOptions` is what decides the numbers of a scoring run besides its input files. The
HTTP body of ``POST /v1/experiments`` is this model plus a name and dataset ids
(:class:`app.api.schemas.ExperimentIn` inherits it), ``landlift score`` fills it from its flags
(:func:`options_from_flags`), and a job reloads the stored dump without checking it again
(:meth:`RunOptions.reload`). Below this module nothing checks an option: the engine receives a
:class:`app.cube.pipeline.Scoring` built by :meth:`RunOptions.scoring`.

Names resolve later, once, in :meth:`RunOptions.scoring`: an unknown region id is a 404
(:class:`app.errors.NotFoundError`) there, whereas every bound and every pattern is checked here
(422). Validation errors read the same from the CLI and from HTTP
(:func:`describe_validation_errors`).
"""

from __future__ import annotations

import re
from collections.abc import Callable, Mapping, Sequence
from typing import Annotated, Any

from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)

from app.cube.inputs import DEFAULT_MIN_COVERAGE
from app.cube.pipeline import Resampling, Scoring
from app.cube.regions import resolve_region
from app.cube.windows import LeadWindow
from app.errors import ParameterError
from app.stats.fdr import DEFAULT_FDR_ALPHA
from app.stats.fisher import MIN_CELL_SAMPLES
from app.stats.intervals import DEFAULT_INTERVAL_METHOD, IntervalMethod
from app.stats.scramble import DEFAULT_SCRAMBLE, ScrambleDesign

#: every bound a client can meet, written once
MAX_RESAMPLES = 10_000
MAX_SEED = 2**63 - 1
MIN_CONFIDENCE = 0.5
MAX_CONFIDENCE = 0.999
#: a year and a month of daily leads: beyond any sub-seasonal hindcast (checked against the
#: hindcast's own lead days when the experiment is submitted)
MAX_LEAD_DAY = 400
MAX_WINDOWS = 60
MAX_REGIONS = 50
MAX_POLYGON_VERTICES = 20_000
MAX_NAME_CHARS = 200
MAX_LABEL_CHARS = 50
MAX_REGION_NAME_CHARS = 200

#: labels and names appear in URLs, file names, NetCDF coordinates and PostgreSQL text: letters,
#: digits, space and ``_ . , + - ( )`` only (no NUL, no control character, no ``/``)
LABEL_PATTERN = r"^[\w][\w .,+()\-]*$"
#: CF variable names (netCDF's rule, ASCII)
VARIABLE_PATTERN = r"^[A-Za-z][A-Za-z0-9_.\-]*$"
#: region names sent by clients: ``all``, ``box:...``, ``set:ABBREV``, ``polygon:NAME``
REGION_NAME_PATTERN = r"^[A-Za-z0-9 _.,:+\-()]+$"
_CONTROL = re.compile(r"[\x00-\x1f\x7f]")


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False, frozen=True)


def check_text(value: str) -> str:
    """Free text (experiment names): no control characters, not blank."""
    if _CONTROL.search(value):
        raise ValueError("must not contain control characters (NUL, newline, tab, ...)")
    if not value.strip():
        raise ValueError("must not be blank")
    return value.strip()


def check_region_name(value: str) -> str:
    """A region name from a client: never something that could name a server file."""
    text = value.strip()
    if "/" in text or "\\" in text or text.lower().endswith((".json", ".geojson")):
        raise ValueError(
            f"{value!r} is not a region name; use 'all', 'box:LAT0,LAT1,LON0,LON1', an id from "
            "GET /v1/regions, or give a GeoJSON polygon as {\"name\", \"geojson\"}"
        )
    if not re.match(REGION_NAME_PATTERN, text):
        raise ValueError(f"{value!r} holds characters a region name cannot have")
    return text


def _int_in(low: int, high: int) -> Callable[[int], int]:
    """Check an integer against ``low..high``; the message names the range and the value sent."""

    def check(value: int) -> int:
        if not low <= value <= high:
            raise ValueError(f"must be an integer in {low}..{high}, got {value}")
        return value

    return check


def _float_in(
    low: float, high: float, *, open_low: bool = False, open_high: bool = False
) -> Callable[[float], float]:
    """Check a number against an interval; the message names the interval and the value."""
    shown = f"{'(' if open_low else '['}{low:g}, {high:g}{')' if open_high else ']'}"

    def check(value: float) -> float:
        above = value > low if open_low else value >= low
        below = value < high if open_high else value <= high
        if not (above and below):
            raise ValueError(f"must lie in {shown}, got {value:g}")
        return value

    return check


def _range(low: float, high: float, *, open_low: bool = False, open_high: bool = False) -> dict[str, float]:
    """The JSON-schema bounds of a range (so clients and API fuzzers see them)."""
    return {
        ("exclusiveMinimum" if open_low else "minimum"): low,
        ("exclusiveMaximum" if open_high else "maximum"): high,
    }


Resamples = Annotated[
    int, Field(strict=True, json_schema_extra=_range(1, MAX_RESAMPLES)), AfterValidator(_int_in(1, MAX_RESAMPLES))
]
Seed = Annotated[int, Field(strict=True, json_schema_extra=_range(0, MAX_SEED)), AfterValidator(_int_in(0, MAX_SEED))]
LeadDay = Annotated[
    int, Field(strict=True, json_schema_extra=_range(1, MAX_LEAD_DAY)), AfterValidator(_int_in(1, MAX_LEAD_DAY))
]
CellSamples = Annotated[
    int, Field(strict=True, json_schema_extra=_range(4, 100_000)), AfterValidator(_int_in(4, 100_000))
]
Coverage = Annotated[
    float,
    Field(json_schema_extra=_range(0.0, 1.0, open_low=True)),
    AfterValidator(_float_in(0.0, 1.0, open_low=True)),
]
Confidence = Annotated[
    float,
    Field(json_schema_extra=_range(MIN_CONFIDENCE, MAX_CONFIDENCE)),
    AfterValidator(_float_in(MIN_CONFIDENCE, MAX_CONFIDENCE)),
]
Rate = Annotated[
    float,
    Field(json_schema_extra=_range(0.0, 1.0, open_low=True, open_high=True)),
    AfterValidator(_float_in(0.0, 1.0, open_low=True, open_high=True)),
]

Label = Annotated[str, Field(min_length=1, max_length=MAX_LABEL_CHARS, pattern=LABEL_PATTERN)]
Name = Annotated[str, Field(min_length=1, max_length=MAX_NAME_CHARS), AfterValidator(check_text)]
Variable = Annotated[str, Field(min_length=1, max_length=100, pattern=VARIABLE_PATTERN)]
RegionName = Annotated[
    str, Field(min_length=1, max_length=MAX_REGION_NAME_CHARS), AfterValidator(check_region_name)
]


class LeadWindowSpec(_Strict):
    """A lead window ``first_day..last_day`` (inclusive; lead day 1 = the first day after init)."""

    label: Label
    first_day: LeadDay
    last_day: LeadDay

    @model_validator(mode="after")
    def _ordered(self) -> LeadWindowSpec:
        if self.last_day < self.first_day:
            raise ValueError(
                f"lead window {self.label!r} has days {self.first_day}-{self.last_day}; "
                "need first_day <= last_day"
            )
        return self

    def window(self) -> LeadWindow:
        return LeadWindow(self.label, self.first_day, self.last_day)


def _count_vertices(node: Any, budget: int) -> int:
    """Coordinate pairs in a GeoJSON ``coordinates`` tree, stopping once past ``budget``."""
    stack, count = [node], 0
    while stack and count <= budget:
        item = stack.pop()
        if isinstance(item, list | tuple):
            if item and all(isinstance(v, int | float) for v in item):
                count += 1
            else:
                stack.extend(item)
    return count


class PolygonRegion(_Strict):
    """A GeoJSON polygon region sent with the request; its curves are named ``polygon:NAME``."""

    name: str = Field(min_length=1, max_length=100, pattern=r"^[A-Za-z0-9 _.\-]+$")
    geojson: dict[str, Any]

    @field_validator("geojson")
    @classmethod
    def _bounded(cls, value: dict[str, Any]) -> dict[str, Any]:
        vertices = _count_vertices(value, MAX_POLYGON_VERTICES)
        if vertices > MAX_POLYGON_VERTICES:
            raise ValueError(f"holds more than {MAX_POLYGON_VERTICES} vertices")
        return value


class BootstrapOptions(_Strict):
    """The year-block bootstrap: resamples, seed, confidence level, interval method."""

    resamples: Resamples = 1000
    seed: Seed = 1234
    confidence: Confidence = 0.95
    interval: IntervalMethod = DEFAULT_INTERVAL_METHOD

    def resampling(self) -> Resampling:
        return Resampling(
            resamples=self.resamples, seed=self.seed, confidence=self.confidence,
            interval=self.interval,
        )


def _default_bootstrap(value: Any) -> Any:
    return {} if value is None else value


class RunOptions(_Strict):
    """Everything that decides the numbers of a run besides its input files."""

    variable: Variable | None = Field(default=None, description="variable to score")
    lead_windows: list[LeadWindowSpec] | None = Field(
        default=None, min_length=1, max_length=MAX_WINDOWS,
        description="default: weeks 1-4, weeks 3-4 and further weeks the hindcast reaches",
    )
    regions: list[RegionName | PolygonRegion] | None = Field(
        default=None, min_length=1, max_length=MAX_REGIONS,
        description="regions reported besides 'all'",
    )
    bootstrap: BootstrapOptions = Field(default_factory=BootstrapOptions)
    fdr_alpha: Rate = Field(
        default=DEFAULT_FDR_ALPHA,
        description="Benjamini-Hochberg false discovery rate across the cells of a map",
    )
    equalize_members: bool = Field(
        default=False, description="subsample both experiments to the smaller ensemble (seeded)"
    )
    leave_one_out: bool = Field(
        default=True, description="climatologies leave the verified year out"
    )
    scramble: ScrambleDesign = Field(
        default=DEFAULT_SCRAMBLE,
        description="how the scrambled land states were drawn: 'other_years' (from other years "
        "of the hindcast period: the gain is also reported corrected for the bias this causes) "
        "or 'independent' (from outside the period, or synthetic: nothing is corrected)",
    )
    min_cell_samples: CellSamples = Field(
        default=MIN_CELL_SAMPLES,
        description="a cell is scored, and enters region means of ACC, with at least this many "
        "(year, start) samples",
    )
    min_coverage: Coverage = Field(
        default=DEFAULT_MIN_COVERAGE,
        description="an observed lead window counts when at least this share of its days is "
        "present",
    )

    @field_validator("bootstrap", mode="before")
    @classmethod
    def _none_is_default(cls, value: Any) -> Any:
        return _default_bootstrap(value)

    @field_validator("lead_windows")
    @classmethod
    def _unique_labels(cls, value: list[LeadWindowSpec] | None) -> list[LeadWindowSpec] | None:
        if value is not None:
            labels = [w.label for w in value]
            if len(set(labels)) != len(labels):
                raise ValueError(f"lead window labels must be unique, got {labels}")
        return value

    def scoring(self) -> Scoring:
        """What the engine needs; resolves region names (NotFoundError for an unknown id)."""
        return Scoring(
            variable=self.variable,
            lead_windows=tuple(w.window() for w in self.lead_windows) if self.lead_windows else None,
            regions=tuple(
                resolve_region(r if isinstance(r, str) else r.model_dump()) for r in self.regions or []
            ),
            bootstrap=self.bootstrap.resampling(),
            fdr_alpha=self.fdr_alpha,
            equalize_members=self.equalize_members,
            leave_one_out=self.leave_one_out,
            scramble=self.scramble,
            min_cell_samples=self.min_cell_samples,
            min_coverage=self.min_coverage,
        )

    def dump(self) -> dict[str, Any]:
        """The JSON form a job stores and :meth:`reload` reads back."""
        return self.model_dump(mode="json", include=set(RunOptions.model_fields))

    @classmethod
    def reload(cls, data: Mapping[str, Any]) -> RunOptions:
        """Options validated when the run was submitted (a job's payload), not checked again."""
        d = dict(data)
        d["bootstrap"] = BootstrapOptions.model_construct(**(d.get("bootstrap") or {}))
        if d.get("lead_windows") is not None:
            d["lead_windows"] = [LeadWindowSpec.model_construct(**w) for w in d["lead_windows"]]
        if d.get("regions") is not None:
            d["regions"] = [
                r if isinstance(r, str) else PolygonRegion.model_construct(**r) for r in d["regions"]
            ]
        return cls.model_construct(**d)


class ComparisonOptions(_Strict):
    """A version comparison: the region whose mean series is compared, and the bootstrap."""

    region: RegionName = "all"
    bootstrap: BootstrapOptions = Field(default_factory=BootstrapOptions)

    @field_validator("bootstrap", mode="before")
    @classmethod
    def _none_is_default(cls, value: Any) -> Any:
        return _default_bootstrap(value)

    def dump(self) -> dict[str, Any]:
        return self.model_dump(mode="json", include=set(ComparisonOptions.model_fields))

    @classmethod
    def reload(cls, data: Mapping[str, Any]) -> ComparisonOptions:
        d = dict(data)
        d["bootstrap"] = BootstrapOptions.model_construct(**(d.get("bootstrap") or {}))
        return cls.model_construct(**d)


# ----------------------------------------------------------------------------- errors


def describe_validation_errors(errors: Sequence[Mapping[str, Any]]) -> str:
    """One line for a list of pydantic errors: ``where: what`` of the first one (the CLI and
    the API show the same text)."""
    if not errors:
        return "invalid request"
    # a union (a region is a name or a polygon) reports one error per alternative: keep the
    # alternative that matches what was sent, and name the place without the alternatives
    by_place: dict[str, tuple[str, int]] = {}
    for e in errors:
        loc = [p for p in e.get("loc", ()) if p not in ("body", "query", "path")]
        member = next((str(p) for p in loc if not _is_place(p)), "")
        where = ".".join(str(p) for p in loc if _is_place(p))
        sent = e.get("input")
        rank = 0 if (isinstance(sent, str) == ("str" in member or member == "")) else 1
        what = str(e.get("msg", "invalid value")).removeprefix("Value error, ")
        if where not in by_place or rank < by_place[where][1]:
            by_place[where] = (what, rank)
    where, (what, _) = next(iter(by_place.items()))
    more = f" (and {len(by_place) - 1} more problem(s))" if len(by_place) > 1 else ""
    return f"{where}: {what}{more}" if where else f"{what}{more}"


def _is_place(part: Any) -> bool:
    """A field name or list index, not a union alternative such as ``function-after[...]``."""
    return isinstance(part, int) or (
        isinstance(part, str) and part.isidentifier() and part not in ("str", "PolygonRegion")
    )


def parameter_error(exc: ValidationError) -> ParameterError:
    """The domain error for invalid options (CLI and library callers)."""
    errors = exc.errors(include_url=False)
    return ParameterError(
        describe_validation_errors(errors),
        errors=[{"loc": [str(p) for p in e.get("loc", ())], "message": e.get("msg")} for e in errors],
    )


# ----------------------------------------------------------------------------- CLI forms

_WINDOW_TEXT = re.compile(r"^\s*(?P<label>[^=]+?)\s*=\s*(?P<first>\d+)\s*-\s*(?P<last>\d+)\s*$")


def window_from_text(text: str) -> dict[str, Any]:
    """``"LABEL=FIRST-LAST"`` (the CLI form, e.g. ``"week 2=8-14"``) as the model's mapping."""
    m = _WINDOW_TEXT.match(text)
    if not m:
        raise ParameterError(f"lead window {text!r} is not of the form LABEL=FIRST-LAST, e.g. 'week 2=8-14'")
    return {"label": m["label"], "first_day": int(m["first"]), "last_day": int(m["last"])}


def validated(model: type[_Strict], data: Mapping[str, Any]) -> Any:
    """``model`` from ``data``, or :class:`ParameterError` with the shared message."""
    try:
        return model.model_validate(dict(data))
    except ValidationError as exc:
        raise parameter_error(exc) from None
