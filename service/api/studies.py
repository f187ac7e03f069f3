"""Studies: the containers of epoch sets and runs."""

from fastapi import APIRouter, status
from sqlalchemy import select

from service.api.deps import SessionDep
from service.api.lookups import study_by_code
from service.errors import Conflict
from service.schemas.studies import StudyCreate, StudyOut
from service.storage.ids import new_id
from service.storage.models import Study

router = APIRouter(prefix="/v1/studies", tags=["studies"])


def study_out(study: Study) -> StudyOut:
    return StudyOut(code=study.code, title=study.title, created_at=study.created_at)


@router.post("", status_code=status.HTTP_201_CREATED, response_model=StudyOut,
             responses={409: {"description": "A study with this code exists."}})
def create_study(body: StudyCreate, session: SessionDep) -> StudyOut:
    """Create a study."""
    if session.scalar(select(Study.id).where(Study.code == body.code)) is not None:
        raise Conflict(f"a study with code {body.code!r} exists already; choose another code or use it as it is")
    study = Study(id=new_id("st"), code=body.code, title=body.title)
    session.add(study)
    session.flush()
    return study_out(study)


@router.get("", response_model=list[StudyOut])
def list_studies(session: SessionDep) -> list[StudyOut]:
    """All studies, oldest first."""
    return [study_out(study) for study in session.scalars(select(Study).order_by(Study.created_at, Study.id))]


@router.get("/{code}", response_model=StudyOut, responses={404: {"description": "No such study."}})
def get_study(code: str, session: SessionDep) -> StudyOut:
    """One study by its code."""
    return study_out(study_by_code(session, code))
