"""Request and response schemas (pydantic), one per purpose: *Create for what a
client sends, *Public for what the service shows."""
from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, StrictInt, StrictStr, field_validator


Status = Literal["monitoring", "flagged", "cleared", "closed"]
FacilityStatus = Literal["monitoring", "flagged", "cleared", "watching", "closed"]
AlertKind = Literal["flagged", "cleared", "decision_revised", "cap_reached", "stale",
                    "delivery_failed", "watch_signal"]
WebhookKind = Literal["flagged", "cleared", "decision_revised", "cap_reached", "stale",
                      "watch_signal"]
Role = Literal["field", "analyst", "admin"]


# Printable text: no control characters (checked by pydantic-core's regex engine, which
# keeps validation of 1000-record batches fast).
PRINTABLE = r"^[^\x00-\x1f\x7f]*$"
# Free text (notes, reasons) may hold line breaks, never NUL (it cuts strings short in C
# tools, PDFs and terminals).
NO_NUL = r"^[^\x00]*$"
# Ids travel in URLs and on screens, so what could change their meaning there is refused:
# path separators, C0/C1 control characters, bidirectional controls (U+061C, U+200E/F,
# U+202A-U+202E, U+2066-U+2069), zero-width characters (U+200B-U+200D, U+2060, U+FEFF) and
# white space at either end. The ids "." and ".." are refused by the checks that read them
# (the regex engines here have no look-ahead). Both pydantic-core's engine and Python's re
# read this pattern (the OpenAPI document carries it).
ID_FORBIDDEN = r"\x00-\x1f\x7f-\x9f/\\\u061c\u200b-\u200f\u202a-\u202e\u2060-\u2069\ufeff"
ID_PATTERN = rf"^[^\s{ID_FORBIDDEN}](?:[^{ID_FORBIDDEN}]*[^\s{ID_FORBIDDEN}])?$"
ID_RULE = ("must not contain '/', '\\', control, bidirectional or zero-width characters, "
           "nor begin or end with a space, nor be '.' or '..'")
DOT_IDS = frozenset({".", ".."})
RFC3339_PATTERN = (r"^\d{4}-\d{2}-\d{2}[Tt]\d{2}:\d{2}:\d{2}(\.\d{1,9})?([Zz]|[+-]\d{2}:\d{2})$")


def _printable(value: str, name: str) -> str:
    if any(ord(ch) < 32 or ord(ch) == 127 for ch in value):
        raise ValueError(f"{name} must not contain control characters")
    return value


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", str_strip_whitespace=False)


class RecordCreate(_Strict):
    """One re-check of one unit (or a few units) of a facility."""

    record_id: StrictStr = Field(min_length=1, max_length=64, pattern=ID_PATTERN,
                                 description="client-made idempotency key; " + ID_RULE)
    facility_id: StrictStr = Field(min_length=1, max_length=64, pattern=ID_PATTERN,
                                   description=ID_RULE)
    observed_at: StrictStr = Field(pattern=RFC3339_PATTERN, max_length=40,
                                   description="RFC 3339 date-time with offset, e.g. "
                                               "2026-03-01T09:30:00Z")
    units: StrictInt = Field(default=1, ge=1, le=100_000)
    nonconforming: StrictInt = Field(ge=0, le=100_000)
    unit_ref: StrictStr | None = Field(default=None, max_length=200, pattern=PRINTABLE)
    inspector: StrictStr | None = Field(default=None, max_length=200, pattern=PRINTABLE)
    note: StrictStr | None = Field(default=None, max_length=2000, pattern=NO_NUL)

    @field_validator("nonconforming")
    @classmethod
    def _counts(cls, value: int, info):
        # a field check (units is validated first), so that the error names this field
        units = info.data.get("units")
        if units is not None and value > units:
            raise ValueError(f"nonconforming ({value}) cannot exceed units ({units})")
        return value


class RecordBatchCreate(_Strict):
    records: list[RecordCreate] = Field(min_length=1, max_length=1000)


class FacilityCreate(_Strict):
    facility_id: StrictStr = Field(min_length=1, max_length=64, pattern=ID_PATTERN,
                                   description=ID_RULE)
    name: StrictStr = Field(min_length=1, max_length=200)
    plan: StrictStr = Field(min_length=1, max_length=64)
    region: StrictStr | None = Field(default=None, min_length=1, max_length=64)

    @field_validator("facility_id")
    @classmethod
    def _not_dots(cls, value):
        if value in DOT_IDS:
            raise ValueError(f"facility_id {ID_RULE}")
        return value

    @field_validator("name", "region")
    @classmethod
    def _no_controls(cls, value, info):
        return value if value is None else _printable(value, info.field_name)


class ReasonCreate(_Strict):
    reason: StrictStr = Field(min_length=1, max_length=2000, pattern=NO_NUL)


class AckCreate(_Strict):
    note: StrictStr | None = Field(default=None, max_length=2000, pattern=NO_NUL)


FindingOutcome = Literal["referred", "no_action", "records_corrected", "retraining_ordered",
                         "certification_suspended"]


class FindingCreate(_Strict):
    """What the review of a decided cycle found."""

    outcome: FindingOutcome
    note: StrictStr | None = Field(default=None, max_length=2000)


class FindingPublic(BaseModel):
    id: int
    facility_id: str
    cycle: int
    outcome: FindingOutcome
    note: str | None
    at: str
    by: str | None
    role: str | None


class KeyCreate(_Strict):
    role: Role
    label: StrictStr = Field(min_length=1, max_length=200, pattern=PRINTABLE)
    expires_at: StrictStr | None = Field(
        None, max_length=64, description="RFC 3339 date-time at which the key stops working "
        "(optional; in the future)")


class CyclePublic(BaseModel):
    cycle: int
    plan: str
    status: Status
    units: int
    nonconforming: int
    llr: float
    upper_llr: float
    lower_llr: float
    opened_at: str
    decided_at: str | None
    decided_after_units: int | None
    decided_at_cap: bool
    closed_at: str | None
    closed_reason: str | None
    last_record_at: str | None
    records: int
    plan_snapshot: dict[str, Any]
    watch: dict[str, Any] | None = None
    findings: list[FindingPublic] = []
    after_decision: dict[str, Any] | None = None


class FacilityPublic(BaseModel):
    facility_id: str
    name: str
    plan: str
    registered_at: str
    status: FacilityStatus
    decision: Literal["flagged", "cleared"] | None = None
    cycle: int
    units: int
    nonconforming: int
    llr: float
    upper_llr: float
    lower_llr: float
    decided_at: str | None
    decided_after_units: int | None
    last_record_at: str | None
    region: str | None = None
    watch: dict[str, Any] | None = None
    cycles: list[CyclePublic] | None = None


class FacilityPage(BaseModel):
    items: list[FacilityPublic]
    total: int
    limit: int
    offset: int


class RecordPublic(BaseModel):
    seq: int
    record_id: str
    facility_id: str
    cycle: int
    observed_at: str
    received_at: str
    units: int
    nonconforming: int
    unit_ref: str | None
    inspector: str | None
    note: str | None
    evidence: bool
    llr_after: float | None
    void: bool
    voided_at: str | None
    voided_by: str | None
    void_reason: str | None
    draw_id: int | None = Field(default=None, description="the draw this record's unit came "
                                                          "from, if drawn")
    draw_order: int | None = Field(default=None, description="its place in that draw")
    not_evidence_reason: str | None = Field(default=None, description="why a kept record is "
                                                                      "not evidence, if so")


class RecordList(BaseModel):
    facility_id: str
    cycle: int
    items: list[RecordPublic]
    total: int
    limit: int
    offset: int


class IngestResult(BaseModel):
    index: int
    record_id: str | None
    status: Literal["accepted", "duplicate", "conflict", "invalid"]
    code: int
    seq: int | None = None
    errors: list[dict[str, Any]] | None = None
    warnings: list[dict[str, Any]] | None = Field(
        default=None, description="accepted, but worth a look (e.g. observed before its cycle "
                                  "opened, or more than 365 days before it was received)")
    facility: FacilityPublic | None = None


class IngestReport(BaseModel):
    accepted: int
    duplicate: int
    rejected: int
    results: list[IngestResult]


class AlertPublic(BaseModel):
    alert_id: int
    kind: AlertKind
    facility_id: str
    cycle: int | None
    created_at: str
    state: Literal["open", "acknowledged"]
    detail: dict[str, Any]
    acked_at: str | None
    acked_by: str | None
    ack_note: str | None
    needs_review: bool = True


class AlertPage(BaseModel):
    items: list[AlertPublic]
    total: int
    limit: int
    offset: int


class ActionPublic(BaseModel):
    id: int
    at: str
    key_label: str | None
    role: str | None
    action: str
    facility_id: str | None
    cycle: int | None
    target: str | None
    detail: dict[str, Any]


class ActionPage(BaseModel):
    items: list[ActionPublic]
    total: int
    limit: int
    offset: int


class KeyPublic(BaseModel):
    id: int
    label: str
    role: Role
    prefix: str | None
    created_at: str
    revoked_at: str | None
    expires_at: str | None = None


class KeyCreated(KeyPublic):
    key: str = Field(description="shown once; store it now")


class VoidResult(BaseModel):
    record: RecordPublic
    decision_revised: bool
    facility: FacilityPublic
    alert_ids: list[int]


class PlanPublic(BaseModel):
    name: str
    title: str | None
    p0: float
    p1: float
    alpha: float
    beta: float
    max_units: int | None
    cut_llr: float
    calibrate: bool
    visit_units: int = 1
    sensitivity: float = 1.0
    specificity: float = 1.0
    warnings: list[dict[str, str]] = []
    boundaries: dict[str, float]
    exact: dict[str, Any]
    wald: dict[str, float]
    fixed_sample: dict[str, Any]
    watch: dict[str, Any] | None = None
    recheck: dict[str, float] = {}
    calibration: dict[str, Any] | None = None
    decision_numbers: list[dict[str, Any]] = []
    at_rates: list[dict[str, Any]] = []


class WebhookCreate(_Strict):
    url: StrictStr = Field(min_length=8, max_length=2000, pattern=r"^https?://[^\s\x00-\x1f\x7f]+$")
    secret: StrictStr | None = Field(default=None, description="whsec_ + base64; made if absent")
    kinds: list[WebhookKind] = Field(min_length=1)

    @field_validator("secret")
    @classmethod
    def _secret(cls, value):
        if value is not None:
            from .webhooks import secret_key
            secret_key(value)
        return value


class WebhookPublic(BaseModel):
    id: int
    url: str
    kinds: list[str]
    created_at: str
    active: bool
    disabled_at: str | None
    disabled_reason: str | None


class WebhookCreated(WebhookPublic):
    secret: str = Field(description="shown once; verify signatures with it")


class DeliveryAttempt(BaseModel):
    at: str
    status_code: int | None
    error: str | None
    duration_ms: float | None


class DeliveryPublic(BaseModel):
    id: int
    webhook_id: int
    alert_id: int
    msg_id: str
    event_type: str | None
    status: Literal["pending", "delivered", "failed", "cancelled"]
    attempts: int
    created_at: str
    next_attempt_at: str | None
    delivered_at: str | None
    last_error: str | None
    attempt_log: list[DeliveryAttempt] = []


class DeliveryPage(BaseModel):
    items: list[DeliveryPublic]
    total: int
    limit: int
    offset: int


class CaseFacility(BaseModel):
    facility_id: str
    name: str
    plan: str
    registered_at: str


class TrailEntryRef(BaseModel):
    n: int | None = Field(description="entry number in the database's trail")
    entry_sha256: str | None


class DecisionEntryRef(TrailEntryRef):
    at: str
    alert_id: int
    alert_kind: str


class RecordEntryRef(TrailEntryRef):
    seq: int
    record_id: str


class VoidEntryRef(TrailEntryRef):
    seq: int


class CaseFileTrail(BaseModel):
    """What a case file cites of the tamper-evident trail (README, 'Tamper-evident trail')."""

    decision_entry: DecisionEntryRef | None = Field(
        description="the entry of the decision: the chain head right after it was appended")
    record_entries: list[RecordEntryRef]
    void_entries: list[VoidEntryRef]
    head_when_made: TrailEntryRef
    how_to_check: str


class CaseFilePublic(BaseModel):
    """The case file of a decided cycle (the PDF shows the same content)."""

    model_config = ConfigDict(extra="forbid")

    facility: CaseFacility
    cycle: int
    decision: Literal["flagged", "cleared"]
    decided_at: str | None
    decided_after_units: int
    decided_at_cap: bool
    units: int
    nonconforming: int
    llr: float
    p_value: float = Field(ge=0, le=1)
    ci_level: float = Field(gt=0, lt=1)
    ci_low: float = Field(ge=0, le=1)
    ci_high: float = Field(ge=0, le=1)
    estimate_median_unbiased: float = Field(ge=0, le=1)
    estimate_naive: float = Field(ge=0, le=1)
    estimate_naive_note: str
    estimate_mid_p: float = Field(ge=0, le=1)
    estimate_note: str
    recheck: dict[str, Any]
    looks: dict[str, Any]
    warnings: list[dict[str, str]]
    plan: dict[str, Any]
    plan_explained: dict[str, str]
    cycle_state: CyclePublic
    records: list[RecordPublic]
    draws: dict[str, Any] | None = Field(default=None, description="frames and RFC 3797 draws "
                                         "of the cycle; whether every evidence record was drawn")
    actions: list[ActionPublic]
    trail: CaseFileTrail | None = None
    curve: list[dict[str, Any]]
    method: str
    caution: str
    assumptions: list[str]
    not_checked: list[str]
    generated_at: str
    after_decision: dict[str, Any] | None = None
    watch: dict[str, Any] | None = None
    findings: list[FindingPublic] = []
    software_version: str
    document_id: str = Field(description="SHA-256 of this case file's canonical JSON "
                                         "(service/casefile/docid.py); printed on every PDF page")
