"""Finding stored things by their public names, with the 404 every router gives.

Each lookup also asks the caller: a study (or a run of a study) the caller's key does not
cover is answered exactly like one that does not exist.
"""

from sqlalchemy.orm import Session

from service.errors import NotFound
from service.http.access import Action, Caller, study_not_found
from service.storage.models import Run, Study
from service.storage.studies import study_with_code


def study_by_code(session: Session, code: str, caller: Caller, action: Action) -> Study:
    study = study_with_code(session, code)
    if study is None:
        raise study_not_found(code)
    caller.require(study, action)
    return study


def run_not_found(run_id: str) -> NotFound:
    return NotFound(f"no run with id {run_id!r}; list runs with GET /v1/runs?study=CODE")


def run_by_id(session: Session, run_id: str, caller: Caller, action: Action) -> Run:
    run = session.get(Run, run_id)
    if run is None or not caller.covers(run.study):
        raise run_not_found(run_id)
    caller.require(run.study, action)
    return run
