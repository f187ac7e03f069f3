"""Sending webhook events from the outbox, signed, with retries; runs as a thread of each worker.

Requests are signed as the Standard Webhooks specification (standardwebhooks.com, v1
scheme) defines, so any of its verifier libraries checks them:

    webhook-id: dlv_…                    (the same on every retry of this delivery)
    webhook-timestamp: <unix seconds>
    webhook-signature: v1,<base64 HMAC-SHA256(key, "<webhook-id>.<webhook-timestamp>.<body>")>
    Epoch-Assay-Event: run.succeeded | run.failed

The key is the base64-decoded part of the secret after ``whsec_``. A receiver recomputes the
HMAC with the secret it was shown when the webhook was made, compares in constant time, and
refuses timestamps far from its clock (a replayed old request; verifier libraries allow five
minutes). Any 2xx answer counts as delivered; anything else, a redirect included (redirects
are not followed), is retried with backoff.
"""

import base64
import hashlib
import hmac
import logging
import threading
import time

import httpx

from epoch_assay import __version__
from service.settings import Settings
from service.storage.worker_port import AttemptOutcome, DueDelivery, WorkerStore

ID_HEADER = "webhook-id"
TIMESTAMP_HEADER = "webhook-timestamp"
SIGNATURE_HEADER = "webhook-signature"
EVENT_HEADER = "Epoch-Assay-Event"
SECRET_PREFIX = "whsec_"
log = logging.getLogger("epoch_assay.delivery")


def signature(secret: str, message_id: str, timestamp: int, body: str) -> str:
    """The ``webhook-signature`` value for ``body`` sent as ``message_id`` at ``timestamp`` (unix seconds).

    ``secret`` is ``whsec_`` followed by the base64 key (Standard Webhooks, "Signature scheme").
    """
    key = base64.b64decode(secret.removeprefix(SECRET_PREFIX))
    digest = hmac.new(key, f"{message_id}.{timestamp}.{body}".encode(), hashlib.sha256).digest()
    return "v1," + base64.b64encode(digest).decode()


class Deliverer:
    """Claims due deliveries one at a time and sends them until told to stop."""

    def __init__(self, store: WorkerStore, settings: Settings) -> None:
        self.store, self.settings = store, settings
        # No proxies from the environment: events go straight to the URL the study registered.
        self.client = httpx.Client(
            timeout=settings.webhook_timeout_seconds,
            follow_redirects=False,
            trust_env=False,
            headers={"User-Agent": f"epoch-assay/{__version__}"},
        )
        self._lease_seconds = settings.webhook_timeout_seconds + 30.0

    def run_until(self, stop: threading.Event) -> None:
        while not stop.is_set():
            try:
                sent = self.deliver_one()
            except Exception:
                log.exception("webhook delivery loop hit an error; going on")
                sent = False
            if not sent:
                stop.wait(self.settings.poll_seconds)
        self.client.close()

    def deliver_one(self) -> bool:
        """Send one due delivery; False when none was due."""
        due = self.store.claim_delivery(self._lease_seconds)
        if due is None:
            return False
        outcome = self._send(due)
        status = self.store.record_attempt(
            due,
            outcome,
            max_attempts=self.settings.webhook_max_attempts,
            backoff_seconds=self.settings.webhook_backoff_seconds,
            backoff_max_seconds=self.settings.webhook_backoff_max_seconds,
        )
        log.info(
            "webhook delivery",
            extra={
                "delivery": due.id,
                "event": due.event_id,
                "attempt": due.attempt,
                "status_code": outcome.status_code,
                "outcome": status,
            },
        )
        return True

    def _send(self, due: DueDelivery) -> AttemptOutcome:
        timestamp = int(time.time())
        headers = {
            "Content-Type": "application/json",
            ID_HEADER: due.id,
            TIMESTAMP_HEADER: str(timestamp),
            SIGNATURE_HEADER: signature(due.secret, due.id, timestamp, due.payload),
            EVENT_HEADER: due.event_type,
        }
        started = time.perf_counter()
        try:
            answer = self.client.post(due.url, content=due.payload.encode(), headers=headers)
        except httpx.HTTPError as error:
            return AttemptOutcome(False, None, f"{type(error).__name__}: {error}", time.perf_counter() - started)
        seconds = time.perf_counter() - started
        if answer.is_success:
            return AttemptOutcome(True, answer.status_code, None, seconds)
        if answer.is_redirect:
            refused = f"answered {answer.status_code} (redirects are not followed; register the final URL)"
        else:
            refused = f"answered {answer.status_code} {answer.reason_phrase}".rstrip()
        return AttemptOutcome(False, answer.status_code, refused, seconds)
