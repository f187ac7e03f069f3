"""Wire schemas of webhooks and their delivery log."""

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, HttpUrl, field_validator
from pydantic.config import JsonDict

EventType = Literal["run.succeeded", "run.failed"]

WEBHOOK_EXAMPLE: JsonDict = {
    "id": "wh_5a1d0c9e8b7f6a43",
    "study": "READ-01",
    "url": "https://lims.example.org/hooks/epoch-assay",
    "events": ["run.succeeded", "run.failed"],
    "description": "LIMS import",
    "created_at": "2026-12-01T10:00:00Z",
}


class WebhookCreate(BaseModel):
    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [
                {
                    "url": "https://lims.example.org/hooks/epoch-assay",
                    "events": ["run.succeeded", "run.failed"],
                    "description": "LIMS import",
                }
            ]
        },
    )

    url: HttpUrl = Field(
        description="http or https URL that receives a POST with the event as JSON. Its host must resolve to "
        "public addresses only, unless the operator allows its network (EPOCH_ASSAY_WEBHOOK_ALLOWED_NETWORKS)."
    )
    events: list[EventType] = Field(
        default=["run.succeeded", "run.failed"], min_length=1, max_length=2, json_schema_extra={"uniqueItems": True}
    )
    description: str | None = Field(None, max_length=200)

    @field_validator("url")
    @classmethod
    def _short_enough(cls, url: HttpUrl) -> HttpUrl:
        if len(str(url)) > 2000:
            raise ValueError("the URL is longer than 2000 characters")
        return url

    @field_validator("events")
    @classmethod
    def _unique(cls, events: list[str]) -> list[str]:
        if len(set(events)) != len(events):
            raise ValueError("events lists the same event more than once")
        return events


class WebhookOut(BaseModel):
    model_config = ConfigDict(json_schema_extra={"examples": [WEBHOOK_EXAMPLE]})

    id: str
    study: str
    url: str
    events: list[EventType]
    description: str | None
    created_at: datetime


class WebhookCreated(WebhookOut):
    model_config = ConfigDict(
        json_schema_extra={
            "examples": [WEBHOOK_EXAMPLE | {"secret": "whsec_K34VFiiu0qar9xWICc9PPHYnGb0bUdQ2k1w/nNW/CP4="}]
        }
    )

    secret: str = Field(
        description=(
            "The signing secret in the Standard Webhooks form (`whsec_` and the base64 of the HMAC-SHA256 key); "
            "give it to a Standard Webhooks verifier. Shown only in this answer: keep it."
        )
    )


class DeliveryAttempt(BaseModel):
    attempt: int
    at: datetime
    status_code: int | None = Field(description="The receiver's HTTP status; null if it could not be reached.")
    error: str | None
    seconds: float


DELIVERY_EXAMPLE: JsonDict = {
    "id": "dlv_77b0e3d1c2a45f68",
    "event_id": "evt_0c1d2e3f4a5b6c7d",
    "event_type": "run.succeeded",
    "run": "run_0123456789abcdef",
    "status": "delivered",
    "attempts": 2,
    "next_attempt_at": None,
    "last_status_code": 200,
    "last_error": None,
    "created_at": "2026-12-01T10:05:00Z",
    "delivered_at": "2026-12-01T10:05:10Z",
    "log": [
        {
            "attempt": 1,
            "at": "2026-12-01T10:05:00Z",
            "status_code": 503,
            "error": "answered 503 Service Unavailable",
            "seconds": 0.01,
        },
        {"attempt": 2, "at": "2026-12-01T10:05:10Z", "status_code": 200, "error": None, "seconds": 0.01},
    ],
}


class DeliveryOut(BaseModel):
    model_config = ConfigDict(json_schema_extra={"examples": [DELIVERY_EXAMPLE]})

    id: str
    event_id: str
    event_type: EventType
    run: str
    status: Literal["pending", "delivered", "failed"]
    attempts: int
    next_attempt_at: datetime | None = Field(description="When the next attempt is due; null once delivered or failed.")
    last_status_code: int | None
    last_error: str | None
    created_at: datetime
    delivered_at: datetime | None
    log: list[DeliveryAttempt] = Field(description="Every attempt, oldest first.")


class DeliveryPage(BaseModel):
    model_config = ConfigDict(json_schema_extra={"examples": [{"deliveries": [DELIVERY_EXAMPLE]}]})

    deliveries: list[DeliveryOut]
