"""Creating a study: one per code, also when two requests race."""

from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from service.errors import Conflict
from service.storage.ids import new_id
from service.storage.models import Study
from service.storage.studies import study_with_code


def create_study(session: Session, code: str, title: str) -> Study:
    """Add and flush a new study; 409 when the code is taken (also by a concurrent request that committed first)."""
    exists = Conflict(f"a study with code {code!r} exists already; choose another code or use it as it is")
    if study_with_code(session, code) is not None:
        raise exists
    study = Study(id=new_id("st"), code=code, title=title)
    session.add(study)
    try:
        session.flush()
    except IntegrityError:
        session.rollback()
        raise exists from None
    return study
