"""Wire schemas of the operational routes."""

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field


class Health(BaseModel):
    model_config = ConfigDict(json_schema_extra={"examples": [{"status": "ok"}]})

    status: Literal["ok"]


class Readiness(BaseModel):
    model_config = ConfigDict(json_schema_extra={"examples": [{"status": "ready", "workers": 2, "queue_depth": 0}]})

    status: Literal["ready"]
    workers: int = Field(description="Workers heard from within EPOCH_ASSAY_WORKER_STALE_SECONDS.")
    queue_depth: int = Field(description="Jobs waiting to be claimed.")
