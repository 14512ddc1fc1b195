"""Pydantic schemas of the planner's API (``/api/v1/plans/...``) and of the planner page's feeds.

They state the shape (and OpenAPI documents it); the values are checked by the model's planner
(``model.plan``), whose problems name the failing field the same way (``axes.0.start``, ``vary.1``).
Unknown keys are refused, so a misspelt one is named rather than ignored.
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

BASE_DESCRIPTION = (
    "a shot in the API JSON shape (its measured section, shot_id and taken_at are dropped), "
    'or a stored shot {"campaign": SLUG, "shot_id": ID} (the payload of its current revision)'
)
CAMPAIGN_DESCRIPTION = "use this campaign's settings (default: model.DEFAULT_SETTINGS, or the stored shot's campaign)"


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")


class AxisIn(_Strict):
    field: str = Field(description="dotted input path, e.g. plasma.density_cm3 (any numeric input of MODEL.md 1)")
    start: float
    stop: float
    steps: int = Field(description="number of values, start and stop included")
    spacing: Literal["linear", "log"] = Field(
        default="linear", description="numpy.linspace or numpy.geomspace (log needs start and stop > 0)"
    )


class _WithBase(_Strict):
    base: dict[str, Any] = Field(description=BASE_DESCRIPTION)


class _PlanIn(_WithBase):
    campaign: str | None = Field(default=None, description=CAMPAIGN_DESCRIPTION)


class ScanIn(_PlanIn):
    axes: list[AxisIn] = Field(description="one or two axes; at most 250,000 points in all")
    outputs: list[str] | None = Field(default=None, description="output names to answer (default: every output)")
    output_encoding: Literal["json", "float64_base64"] = Field(
        default="json",
        description="json: each output a list of numbers, null where the model has none; float64_base64 (opt-in, "
        "half the bytes and far less time for large scans): each output the base64 text of its little-endian "
        "IEEE 754 float64 values, NaN where the model has none",
    )


class WindowIn(_PlanIn):
    fields: list[str] | None = Field(
        default=None, description="input paths (default: every positive numeric input the base sets)"
    )


class NearestIn(_PlanIn):
    vary: list[str] = Field(description="one to four positive input fields to vary")


class SensitivitiesIn(_PlanIn):
    pass


class BaseOut(BaseModel):
    campaign: str | None = Field(description="the campaign whose settings were used (null: the defaults)")
    shot_id: str | None = Field(description="the stored shot planned from (null: a shot given inline)")
    revision: int | None


class _PlanOut(BaseModel):
    base: BaseOut
    model_version: str
    settings_version: int | None = Field(description="the campaign's settings version (null: the defaults)")


class ScanAxisOut(BaseModel):
    field: str
    unit: str
    values: list[float]


class ScanOut(_PlanOut):
    axes: list[ScanAxisOut]
    shape: list[int] = Field(description="[n1] or [n1, n2]; arrays are flat, row-major: the first axis slowest")
    status: list[str]
    outputs: dict[str, list[float | None] | str] = Field(
        description="output name -> values, null where the model has none (with output_encoding float64_base64: "
        "the base64 text of the little-endian float64 values, NaN where the model has none)"
    )
    flags: dict[str, list[str | None]] = Field(description="rule code -> severity at each point, null: did not fire")
    output_encoding: Literal["float64_base64"] | None = Field(
        default=None, description="present only when the request asked for float64_base64"
    )


class FieldProblemOut(BaseModel):
    field: str
    reason: str


class WindowOut(BaseModel):
    field: str
    unit: str
    base: float
    low: float | None = Field(description="lower edge of the nominal window; null: not reached inside the span")
    high: float | None
    low_rules: list[str] = Field(description="rule codes that fire just below the lower edge")
    high_rules: list[str]
    spacing: Literal["linear", "log"] = Field(description="log: a factor-10 span; linear: the documented span")
    span_low: float
    span_high: float
    found: bool = Field(description="a nominal interval exists in the span")
    contains_base: bool
    low_problems: list[FieldProblemOut] = Field(description="an edge set by another field's valid range")
    high_problems: list[FieldProblemOut]


class WindowsOut(_PlanOut):
    base_status: str
    windows: list[WindowOut]


class NearestOut(_PlanOut):
    found: bool
    distance: float | None = Field(description="sqrt(sum (x_i/x0_i - 1)^2) over the varied fields")
    inputs: dict[str, float]
    status: str | None
    evaluation: dict[str, Any] | None = Field(description="as POST /api/v1/evaluate answers it")
    shot: dict[str, Any] | None = Field(description="the base with the varied fields replaced")


class SensitivityRowOut(BaseModel):
    output: str
    field: str
    value: float | None = Field(description="d ln(output)/d ln(field); null where the model has no derivative")
    one_sided: bool


class SensitivitiesOut(_PlanOut):
    rows: list[SensitivityRowOut]


# --- the planner page's feeds ---------------------------------------------------------------------


class MapIn(_WithBase):
    axes: list[AxisIn]
    contour: str | None = None
    curves: list[str] = Field(default_factory=list)


class PanelsIn(_WithBase):
    vary: list[str] = Field(default_factory=list)


class PointIn(_WithBase):
    values: dict[str, float]
