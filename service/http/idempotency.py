"""``Idempotency-Key`` on POSTs: a retried request gets the first answer again instead of a duplicate.

A route hands the helper a fingerprint of what was asked (the validated JSON body; for an
upload the file's SHA-256 and its form fields, since a multipart body differs in its
boundary on every try) and gets back the stored answer when the key was used before:

* same key, same method, path and fingerprint → the first answer, with ``Idempotent-Replayed: true``;
* same key with anything else → 409;
* only successful answers are kept, so a request that failed (404, 422…) can be retried after
  the cause is fixed;
* the record is written in the same transaction as what the request creates, so two concurrent
  tries with one key create one thing: the loser's transaction hits the key's primary key, rolls
  back, and answers with the winner's record.

Keys belong to the caller (its API key), so two callers cannot collide, and are kept for
``idempotency_ttl_seconds``.
"""

import hashlib
import json
from datetime import timedelta
from typing import Annotated, Any

from fastapi import Depends, Header, Request, Response
from pydantic import BaseModel
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from service.errors import Conflict
from service.http.access import CallerDep
from service.http.deps import SessionDep, SettingsDep
from service.storage.idempotency import forget_answers_before, kept_answer
from service.storage.ids import utc_now
from service.storage.models import IdempotencyRecord

REPLAYED_HEADER = "Idempotent-Replayed"
KEY_PATTERN = r"^[\x21-\x7E]{1,255}$"


def canonical_fingerprint(value: Any) -> str:
    """SHA-256 of ``value`` as canonical JSON (sorted keys, no spaces)."""
    return hashlib.sha256(json.dumps(value, sort_keys=True, separators=(",", ":")).encode()).hexdigest()


class Idempotency:
    """The ``Idempotency-Key`` of one request (if any) and the record kept for it."""

    def __init__(
        self, session: Session, caller_id: str, key: str | None, method: str, path: str, ttl_seconds: float
    ) -> None:
        self.session, self.caller_id, self.key = session, caller_id, key
        self.method, self.path, self.ttl = method, path, timedelta(seconds=ttl_seconds)
        self._request_sha256 = ""

    def replay(self, fingerprint: str) -> Response | None:
        """The stored answer when this key was used for this very request; 409 when for another."""
        self._request_sha256 = hashlib.sha256(f"{self.method} {self.path} {fingerprint}".encode()).hexdigest()
        if self.key is None:
            return None
        record = kept_answer(self.session, self.caller_id, self.key)
        if record is None:
            return None
        if record.created_at < utc_now() - self.ttl:
            self.session.delete(record)
            self.session.flush()
            return None
        return self._answer(record)

    def remember(self, status_code: int, content: BaseModel, location: str | None = None) -> Response:
        """Answer with ``content``; with a key, keep the answer in the current transaction.

        Call :meth:`replay` first. When a concurrent request with the same key committed first,
        everything this request did is rolled back and the other's answer is returned.
        """
        if not self._request_sha256:
            raise RuntimeError("Idempotency.replay(fingerprint) must be called before remember()")
        body = content.model_dump_json()
        response = _response(status_code, "application/json", body, location)
        if self.key is None:
            return response
        now = utc_now()
        forget_answers_before(self.session, now - self.ttl)
        self.session.add(
            IdempotencyRecord(
                caller_id=self.caller_id,
                key=self.key,
                method=self.method,
                path=self.path[:500],
                request_sha256=self._request_sha256,
                status_code=status_code,
                media_type="application/json",
                body=body,
                location=location,
                created_at=now,
            )
        )
        try:
            self.session.flush()
        except IntegrityError:
            self.session.rollback()
            winner = kept_answer(self.session, self.caller_id, self.key)
            if winner is None:
                raise
            return self._answer(winner)
        return response

    def _answer(self, record: IdempotencyRecord) -> Response:
        if record.request_sha256 != self._request_sha256:
            raise Conflict(
                f"the Idempotency-Key {self.key!r} was used before for a different request ({record.method} "
                f"{record.path} with another body); use a new key for a new request"
            )
        replayed = _response(record.status_code, record.media_type, record.body, record.location)
        replayed.headers[REPLAYED_HEADER] = "true"
        return replayed


def _response(status_code: int, media_type: str, body: str, location: str | None) -> Response:
    response = Response(content=body, status_code=status_code, media_type=media_type)
    if location is not None:
        response.headers["Location"] = location
    return response


def get_idempotency(
    request: Request,
    session: SessionDep,
    caller: CallerDep,
    settings: SettingsDep,
    idempotency_key: Annotated[
        str | None,
        Header(
            alias="Idempotency-Key",
            pattern=KEY_PATTERN,
            description="Any unique string (e.g. a UUID) of up to 255 visible ASCII characters. Retrying a POST "
            "with the same key and body returns the first answer; the same key with another body is 409.",
            examples=["3f0c2a7e-9d4b-4c55-8a0e-5b1f9e2d7c11"],
        ),
    ] = None,
) -> Idempotency:
    key = idempotency_key.strip('"') if idempotency_key else None
    return Idempotency(
        session, caller.id, key or None, request.method, request.url.path, settings.idempotency_ttl_seconds
    )


IdempotencyDep = Annotated[Idempotency, Depends(get_idempotency)]
