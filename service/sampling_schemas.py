"""Schemas of frames, draws and assignments (*Create: what clients send, *Public: what the
service shows); kept beside :mod:`service.schemas` so that module stays small."""
from __future__ import annotations

from datetime import date

from pydantic import BaseModel, ConfigDict, Field, StrictInt, StrictStr, field_validator, \
    model_validator

from .schemas import PRINTABLE
from .selection import MAX_FRAME_UNITS, MAX_SEED_CHARS, MAX_SELECTIONS

MAX_ID = 2 ** 62
DATE_PATTERN = r"^\d{4}-\d{2}-\d{2}$"


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")


class FramePeriod(_Strict):
    label: StrictStr = Field(min_length=1, max_length=200, pattern=PRINTABLE,
                             description="e.g. 'week 2026-W10'")
    period_start: StrictStr = Field(pattern=DATE_PATTERN, description="first day, YYYY-MM-DD")
    period_end: StrictStr = Field(pattern=DATE_PATTERN, description="last day, YYYY-MM-DD")

    @field_validator("period_start", "period_end")
    @classmethod
    def _date(cls, value):
        try:
            date.fromisoformat(value)
        except ValueError:
            raise ValueError(f"{value!r} is not a calendar date") from None
        return value

    @field_validator("label")
    @classmethod
    def _label(cls, value):
        if not value.strip():
            raise ValueError("label must not be blank")
        return value

    @model_validator(mode="after")
    def _order(self):
        if self.period_end < self.period_start:
            raise ValueError(f"period_end ({self.period_end}) is before period_start "
                             f"({self.period_start})")
        return self


class FrameCreate(FramePeriod):
    """The units a facility passed in a period (free-text unit refs)."""

    units: list[StrictStr] = Field(max_length=MAX_FRAME_UNITS,
                                   description="unit refs: trimmed, at most 128 characters, no "
                                               "control characters; duplicates are reported")


class FramePublic(BaseModel):
    frame_id: int
    facility_id: str
    label: str
    period_start: str
    period_end: str
    size: int = Field(description="distinct units")
    sha256: str = Field(description="SHA-256 of the canonical form (sorted, one per line, UTF-8)")
    duplicates: list[str] = Field(description="unit refs given more than once, counted once")
    created_at: str
    created_by: str | None


class FrameList(BaseModel):
    facility_id: str
    items: list[FramePublic]


class DrawCreate(_Strict):
    frame_id: StrictInt = Field(ge=1, le=MAX_ID)
    size: StrictInt = Field(ge=1, le=MAX_SELECTIONS, description="units to draw")
    seed: StrictStr = Field(min_length=1, max_length=MAX_SEED_CHARS,
                            description="public value fixed after the frame was registered, "
                                        "e.g. '9319 / 2 5 12 8 10 / 9 18 26 34 41 45'")


class DrawnUnit(BaseModel):
    order: int = Field(description="1-based place in the draw: re-check in this order")
    frame_position: int = Field(description="1-based place in the frame's canonical order")
    unit_ref: str
    record_id: str | None = Field(description="the record that re-checked it, if any")


class DrawPublic(BaseModel):
    draw_id: int
    facility_id: str
    cycle: int
    frame_id: int
    frame_label: str
    frame_sha256: str
    frame_size: int
    size: int
    seed: str
    key: str = Field(description="RFC 3797 key string: the seed's canonical form, then the "
                                 "frame's SHA-256")
    created_at: str
    created_by: str | None
    rechecked: int
    units: list[DrawnUnit] | None = None
    verify_command: str


class DrawList(BaseModel):
    facility_id: str
    items: list[DrawPublic]


class Assignment(BaseModel):
    draw_id: int
    order: int
    unit_ref: str


class FacilityAssignments(BaseModel):
    facility_id: str
    units: list[Assignment]


class AssignmentList(BaseModel):
    items: list[FacilityAssignments]
