"""The RFC 9457 problem document every error answer carries."""

from pydantic import BaseModel, ConfigDict, Field


class FieldProblem(BaseModel):
    loc: list[str | int] = Field(description='Where the problem is, e.g. ["body", "scoring", "alpha"].')
    msg: str
    type: str | None = None


class Problem(BaseModel):
    """An error answer (``application/problem+json``, RFC 9457)."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "type": "urn:epoch-assay:problem:not-found",
                    "title": "Not found",
                    "status": 404,
                    "detail": "no study with code 'READ-01'; list the studies with GET /v1/studies",
                }
            ]
        }
    )

    type: str = Field(description="A URN naming the kind of problem, e.g. urn:epoch-assay:problem:not-found.")
    title: str
    status: int
    detail: str = Field(description="What is wrong and how to fix it.")
    errors: list[FieldProblem] | None = Field(None, description="For validation problems: one entry per field.")
    request_id: str | None = Field(None, description="For server errors: quote it when reporting the problem.")
