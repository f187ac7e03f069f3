"""Who is calling, and what they may do: the one place where access is decided.

Every protected route takes a :class:`Caller` (resolved once per request from the
``Authorization: Bearer`` header) and asks it before touching a study:

* 401 when the key is missing, unknown or revoked;
* 404 for a study the key does not cover, word for word as for a study that does not exist,
  so a key cannot learn that other studies exist;
* 403 for an action beyond the key's role in its own study (a read key starting a run).
"""

from dataclasses import dataclass
from typing import Annotated, Literal

from fastapi import Depends, Request
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer
from sqlalchemy import ColumnElement, true
from sqlalchemy.orm import InstrumentedAttribute

from service.errors import Forbidden, NotFound, Unauthorized
from service.http.deps import SessionDep
from service.storage.keys import find_active_key
from service.storage.models import Study

Action = Literal["read", "write"]
OPEN_CALLER_ID = "open"

_bearer = HTTPBearer(auto_error=False, description="An API key made with `epoch-assay keys create`.")


def study_not_found(code: str) -> NotFound:
    """The answer for a study that does not exist, and for one the caller may not see."""
    return NotFound(f"no study with code {code!r}; list the studies with GET /v1/studies")


@dataclass(frozen=True)
class Caller:
    """The key behind a request: its id, its role, and the one study it covers (None: all)."""

    id: str
    role: str
    study_id: str | None

    @property
    def is_admin(self) -> bool:
        return self.role == "admin"

    def covers(self, study: Study) -> bool:
        return self.study_id is None or self.study_id == study.id

    def require(self, study: Study, action: Action) -> None:
        """Allow ``action`` on ``study`` or raise 404 (not covered) or 403 (role too weak)."""
        if not self.covers(study):
            raise study_not_found(study.code)
        if action == "write" and self.role == "read":
            raise Forbidden(
                f"this key may only read study {study.code!r}; ask an admin for a write key "
                f"(epoch-assay keys create --study {study.code} --role write)"
            )

    def require_admin(self) -> None:
        if not self.is_admin:
            raise Forbidden("only an admin key may do this; ask the operator (epoch-assay keys create --role admin)")

    def study_filter(self, study_id_column: InstrumentedAttribute[str]) -> ColumnElement[bool]:
        """A WHERE clause keeping only rows of the studies this caller covers."""
        return true() if self.study_id is None else study_id_column == self.study_id


OPEN_CALLER = Caller(id=OPEN_CALLER_ID, role="admin", study_id=None)
MISSING_KEY = (
    "this route needs an API key: send 'Authorization: Bearer <token>' (make one with `epoch-assay keys create`)"
)
UNKNOWN_KEY = "the API key is unknown or has been revoked; ask the operator for a valid one"


def get_caller(
    request: Request,
    session: SessionDep,
    credentials: Annotated[HTTPAuthorizationCredentials | None, Depends(_bearer)],
) -> Caller:
    if request.app.state.settings.open:
        return OPEN_CALLER
    if credentials is None or credentials.scheme.lower() != "bearer":
        raise Unauthorized(MISSING_KEY)
    key = find_active_key(session, credentials.credentials)
    if key is None:
        raise Unauthorized(UNKNOWN_KEY)
    request.state.caller_id = key.id
    return Caller(id=key.id, role=key.role, study_id=key.study_id)


CallerDep = Annotated[Caller, Depends(get_caller)]
