"""Wire schemas of studies."""

from datetime import datetime

from pydantic import BaseModel, ConfigDict, Field

STUDY_CODE_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$"


class StudyCreate(BaseModel):
    model_config = ConfigDict(
        extra="forbid", json_schema_extra={"examples": [{"code": "READ-01", "title": "Sentence endings"}]}
    )

    code: str = Field(pattern=STUDY_CODE_PATTERN, description="Short unique code: letters, digits, '.', '_' or '-'.")
    title: str = Field(min_length=1, max_length=200)


class StudyOut(BaseModel):
    model_config = ConfigDict(
        json_schema_extra={
            "examples": [{"code": "READ-01", "title": "Sentence endings", "created_at": "2026-12-01T10:00:00Z"}]
        }
    )

    code: str
    title: str
    created_at: datetime
