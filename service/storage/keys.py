"""API keys: create, find by token, revoke, list. Only the SHA-256 of a token is stored.

A token is 32 random bytes (256 bits) from ``secrets``, so a fast unsalted hash is enough:
there is nothing to guess by brute force, and no dictionary of likely tokens to precompute.
Slow password hashes (bcrypt, scrypt) only help with secrets people choose; they would cost
every request tens of milliseconds for no gain here.
"""

import hashlib
import secrets
from dataclasses import dataclass
from datetime import datetime
from typing import Literal

from sqlalchemy import select
from sqlalchemy.orm import Session

from service.storage.ids import new_id, utc_now
from service.storage.models import API_KEY_LABEL_LENGTH, ApiKey, Study

Role = Literal["admin", "write", "read"]
ROLES: tuple[Role, ...] = ("admin", "write", "read")
TOKEN_PREFIX = "ea_"
LABEL_MAX_CHARACTERS = API_KEY_LABEL_LENGTH


class KeyProblem(ValueError):
    """A key cannot be made or found as asked; the message says why and what to do."""


@dataclass(frozen=True)
class KeyInfo:
    id: str
    role: str
    study_code: str | None
    label: str | None
    created_at: datetime
    revoked_at: datetime | None


@dataclass(frozen=True)
class CreatedKey:
    info: KeyInfo
    token: str


def token_sha256(token: str) -> str:
    return hashlib.sha256(token.encode()).hexdigest()


def _info(key: ApiKey, study_code: str | None) -> KeyInfo:
    return KeyInfo(
        id=key.id,
        role=key.role,
        study_code=study_code,
        label=key.label,
        created_at=key.created_at,
        revoked_at=key.revoked_at,
    )


def create_key(session: Session, role: Role, study_code: str | None = None, label: str | None = None) -> CreatedKey:
    """A new key; an admin key covers every study, a read or write key exactly one."""
    if role not in ROLES:
        raise KeyProblem(f"role must be one of {', '.join(ROLES)}, not {role!r}")
    if role == "admin" and study_code is not None:
        raise KeyProblem("an admin key covers every study; leave out --study, or choose --role read or write")
    if role != "admin" and study_code is None:
        raise KeyProblem(f"a {role} key belongs to one study; give it with --study CODE")
    if label is not None and len(label) > LABEL_MAX_CHARACTERS:
        raise KeyProblem(f"the label has {len(label)} characters; give at most {LABEL_MAX_CHARACTERS}")
    study_id = None
    if study_code is not None:
        study_id = session.scalar(select(Study.id).where(Study.code == study_code))
        if study_id is None:
            raise KeyProblem(f"no study with code {study_code!r}; create it first (POST /v1/studies with an admin key)")
    token = TOKEN_PREFIX + secrets.token_urlsafe(32)
    key = ApiKey(
        id=new_id("key"),
        token_sha256=token_sha256(token),
        role=role,
        study_id=study_id,
        label=label,
        created_at=utc_now(),
    )
    session.add(key)
    session.flush()
    return CreatedKey(info=_info(key, study_code), token=token)


def find_active_key(session: Session, token: str) -> ApiKey | None:
    """The key whose token this is, unless it is unknown or revoked."""
    key = session.scalar(select(ApiKey).where(ApiKey.token_sha256 == token_sha256(token)))
    if key is None or key.revoked_at is not None:
        return None
    return key


def revoke_key(session: Session, token_or_id: str) -> KeyInfo:
    """Revoke the key named by its id (``key_…``) or its token; revoking twice is harmless."""
    if token_or_id.startswith(TOKEN_PREFIX):
        key = session.scalar(select(ApiKey).where(ApiKey.token_sha256 == token_sha256(token_or_id)))
    else:
        key = session.get(ApiKey, token_or_id)
    if key is None:
        raise KeyProblem("no such key; give its id (key_…, see `epoch-assay keys list`) or its token (ea_…)")
    if key.revoked_at is None:
        key.revoked_at = utc_now()
    return _info(key, key.study.code if key.study else None)


def list_keys(session: Session) -> list[KeyInfo]:
    rows = session.execute(
        select(ApiKey, Study.code).outerjoin(Study, ApiKey.study_id == Study.id).order_by(ApiKey.created_at, ApiKey.id)
    ).all()
    return [_info(key, code) for key, code in rows]
