"""Wire schemas of epoch sets."""

from datetime import datetime

from pydantic import BaseModel, Field

SUBJECT_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$"


class EpochSetOut(BaseModel):
    model_config = {
        "json_schema_extra": {
            "examples": [
                {
                    "id": "es_3f9c0a1b7d2e4f60",
                    "study": "READ-01",
                    "subject": "sub-01",
                    "session": "ses-01",
                    "n_trials": 140,
                    "n_channels": 33,
                    "n_times": 251,
                    "sfreq": 250.0,
                    "tmin": -0.2,
                    "conditions": {"congruent": 70, "incongruent": 70},
                    "sha256": "9b1c…",
                    "created_at": "2026-12-01T10:00:00Z",
                }
            ]
        }
    }

    id: str
    study: str
    subject: str
    session: str | None
    n_trials: int
    n_channels: int
    n_times: int
    sfreq: float = Field(description="Sampling frequency, Hz.")
    tmin: float = Field(description="Time of the first sample, s.")
    ch_names: list[str]
    conditions: dict[str, int] = Field(description="Trials per condition label.")
    sha256: str
    created_at: datetime
