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

Before each attempt the URL's host is resolved and checked (``service.webhook_targets``); the
request goes to the checked address itself, with the host name in the Host header and TLS's
server name, so the address checked is the address connected to. The delivery log records only
generic classes of failure ("timed out", "could not connect", ...), never a library's message,
so it cannot be used to map hosts. Several sender threads share the outbox, never two on one
study at a time, so one study's slow receiver holds one sender for at most the timeout and the
other studies' deliveries go on.
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
from service.webhook_targets import TargetRefused, resolve

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


def failure_class(error: httpx.HTTPError) -> str:
    """A generic description of a failed request, in our own words (no addresses, no library text)."""
    if isinstance(error, httpx.TimeoutException):
        return "timed out"
    if isinstance(error, httpx.ConnectError):
        return "could not connect (refused, unreachable or TLS failed)"
    if isinstance(error, httpx.RemoteProtocolError):
        return "the answer was not valid HTTP"
    return "the request failed"


class Deliverer:
    """Sender threads that claim due deliveries, one study at a time each, and send them until told to stop."""

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
        self._claiming = threading.Lock()
        self._busy_studies: set[str] = set()

    def run_until(self, stop: threading.Event) -> None:
        senders = [
            threading.Thread(target=self._send_until, args=(stop,), name=f"webhook-sender-{index}", daemon=True)
            for index in range(self.settings.webhook_senders)
        ]
        for sender in senders:
            sender.start()
        for sender in senders:
            sender.join()
        self.client.close()

    def _send_until(self, stop: threading.Event) -> None:
        while not stop.is_set():
            try:
                sent = self.deliver_one()
            except Exception:
                log.exception("webhook delivery loop hit an error; going on")
                sent = False
            if not sent:
                stop.wait(self.settings.poll_seconds)

    def deliver_one(self) -> bool:
        """Send one due delivery of a study no other sender of this worker is serving; False when none was due."""
        with self._claiming:
            due = self.store.claim_delivery(self._lease_seconds, busy_studies=frozenset(self._busy_studies))
            if due is None:
                return False
            self._busy_studies.add(due.study_id)
        try:
            self._deliver(due)
        finally:
            with self._claiming:
                self._busy_studies.discard(due.study_id)
        return True

    def _deliver(self, due: DueDelivery) -> None:
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
                "error": outcome.error,
            },
        )

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
            target = resolve(due.url, self.settings.allowed_webhook_networks)
        except TargetRefused as not_allowed:
            reason = f"not sent: the URL's host is {not_allowed.category}"
            return AttemptOutcome(False, None, reason, time.perf_counter() - started)
        try:
            answer = self.client.post(
                target.connect_url,
                content=due.payload.encode(),
                headers=headers | {"Host": target.host_header},
                extensions={"sni_hostname": target.server_name},
            )
        except httpx.HTTPError as error:
            return AttemptOutcome(False, None, failure_class(error), time.perf_counter() - started)
        seconds = time.perf_counter() - started
        if answer.is_success:
            return AttemptOutcome(True, answer.status_code, None, seconds)
        if answer.is_redirect:
            refused = f"answered {answer.status_code} (redirects are not followed; register the final URL)"
        else:
            refused = f"answered {answer.status_code} {answer.reason_phrase}".rstrip()
        return AttemptOutcome(False, answer.status_code, refused, seconds)
