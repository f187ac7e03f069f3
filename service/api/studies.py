"""Studies: the containers of epoch sets and runs."""

from fastapi import APIRouter, Response, status

from service.domain.studies import create_study as add_study
from service.http.access import CallerDep
from service.http.deps import SessionDep
from service.http.idempotency import IdempotencyDep, canonical_fingerprint
from service.http.lookups import study_by_code
from service.http.responses import errors
from service.schemas.studies import StudyCreate, StudyOut
from service.storage.models import Study
from service.storage.studies import studies_where

router = APIRouter(prefix="/v1/studies", tags=["studies"])


def study_out(study: Study) -> StudyOut:
    return StudyOut(code=study.code, title=study.title, created_at=study.created_at)


@router.post(
    "",
    status_code=status.HTTP_201_CREATED,
    response_model=StudyOut,
    responses=errors(
        400,
        401,
        403,
        409,
        413,
        422,
        conflict="A study with this code exists, or the Idempotency-Key was used for another request.",
    ),
)
def create_study(body: StudyCreate, session: SessionDep, caller: CallerDep, idempotency: IdempotencyDep) -> Response:
    """Create a study (admin keys only)."""
    caller.require_admin()
    if (replayed := idempotency.replay(canonical_fingerprint(body.model_dump(mode="json")))) is not None:
        return replayed
    study = add_study(session, body.code, body.title)
    return idempotency.remember(status.HTTP_201_CREATED, study_out(study), location=f"/v1/studies/{study.code}")


@router.get("", response_model=list[StudyOut], responses=errors(401))
def list_studies(session: SessionDep, caller: CallerDep) -> list[StudyOut]:
    """The studies this key covers (all of them for an admin key), oldest first."""
    return [study_out(study) for study in studies_where(session, caller.study_filter(Study.id))]


@router.get("/{code}", response_model=StudyOut, responses=errors(401, 404))
def get_study(code: str, session: SessionDep, caller: CallerDep) -> StudyOut:
    """One study by its code."""
    return study_out(study_by_code(session, code, caller, "read"))
