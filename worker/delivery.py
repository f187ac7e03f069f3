"""Sending webhook events from the outbox, signed, with retries; runs as a thread of each worker.

Each request carries

    Epoch-Assay-Signature: t=<unix seconds>,v1=<hex HMAC-SHA256(secret, "<t>.<body>")>
    Epoch-Assay-Event: run.succeeded | run.failed
    Epoch-Assay-Delivery: dlv_…      (the same on every retry of this delivery)

A receiver recomputes the HMAC over the timestamp, a dot and the raw body with the secret it
was shown when the webhook was made, compares in constant time, and refuses timestamps far
from its clock (a replayed old request). Any 2xx answer counts as delivered; anything else, a
redirect included (redirects are not followed), is retried with backoff.
"""

import hashlib
import hmac
import logging
import threading
import time

import httpx

from epoch_assay import __version__
from service.settings import Settings
from service.storage.worker_port import AttemptOutcome, DueDelivery, WorkerStore

SIGNATURE_HEADER = "Epoch-Assay-Signature"
EVENT_HEADER = "Epoch-Assay-Event"
DELIVERY_HEADER = "Epoch-Assay-Delivery"
log = logging.getLogger("epoch_assay.delivery")


def signature(secret: str, timestamp: int, body: str) -> str:
    """The signature header value for ``body`` sent at ``timestamp`` (unix seconds)."""
    digest = hmac.new(secret.encode(), f"{timestamp}.{body}".encode(), hashlib.sha256).hexdigest()
    return f"t={timestamp},v1={digest}"


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
        headers = {
            "Content-Type": "application/json",
            SIGNATURE_HEADER: signature(due.secret, int(time.time()), due.payload),
            EVENT_HEADER: due.event_type,
            DELIVERY_HEADER: due.id,
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
