"""Studies: the containers of epoch sets and runs."""

from fastapi import APIRouter, Response, status
from sqlalchemy import select
from sqlalchemy.exc import IntegrityError

from service.api.access import CallerDep
from service.api.deps import SessionDep
from service.api.idempotency import IdempotencyDep, canonical_fingerprint
from service.api.lookups import study_by_code
from service.api.responses import errors
from service.errors import Conflict
from service.schemas.studies import StudyCreate, StudyOut
from service.storage.ids import new_id
from service.storage.models import Study

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
    exists = Conflict(f"a study with code {body.code!r} exists already; choose another code or use it as it is")
    if session.scalar(select(Study.id).where(Study.code == body.code)) is not None:
        raise exists
    study = Study(id=new_id("st"), code=body.code, title=body.title)
    session.add(study)
    try:
        session.flush()
    except IntegrityError:
        # The same code arrived in a concurrent request that committed first.
        session.rollback()
        raise exists from None
    return idempotency.remember(status.HTTP_201_CREATED, study_out(study), location=f"/v1/studies/{study.code}")


@router.get("", response_model=list[StudyOut], responses=errors(401))
def list_studies(session: SessionDep, caller: CallerDep) -> list[StudyOut]:
    """The studies this key covers (all of them for an admin key), oldest first."""
    query = select(Study).where(caller.study_filter(Study.id)).order_by(Study.created_at, Study.id)
    return [study_out(study) for study in session.scalars(query)]


@router.get("/{code}", response_model=StudyOut, responses=errors(401, 404))
def get_study(code: str, session: SessionDep, caller: CallerDep) -> StudyOut:
    """One study by its code."""
    return study_out(study_by_code(session, code, caller, "read"))
