"""The webhook outbox: claiming due deliveries, logging attempts, backoff, giving up."""

import time

from service.storage import outbox
from service.storage.db import Database
from service.storage.ids import new_id, utc_now
from service.storage.models import Run, Study, Webhook, WebhookDelivery

OK = outbox.AttemptOutcome(delivered=True, status_code=200, error=None, seconds=0.01)
DOWN = outbox.AttemptOutcome(delivered=False, status_code=None, error="ConnectError: refused", seconds=0.01)
BACKOFF = {"max_attempts": 3, "backoff_seconds": 0.05, "backoff_max_seconds": 0.08}


def _event(database: Database) -> str:
    """A finished run of a study with one webhook; returns the id of its one delivery."""
    with database.session() as session:
        study = Study(id=new_id("st"), code=new_id("code"), title="t")
        session.add(study)
        session.flush()
        run = Run(
            id=new_id("run"),
            study_id=study.id,
            spec={"pipelines": [{"name": "raw"}], "epoch_sets": ["es_1"]},
            status="succeeded",
        )
        hook = Webhook(
            id=new_id("wh"),
            study_id=study.id,
            url="http://127.0.0.1:9/",
            secret="s3cret",
            events=["run.succeeded", "run.failed"],
        )
        session.add_all([run, hook])
        session.flush()
        assert outbox.record_run_event(session, run.id, "succeeded", None, utc_now()) == 1
    with database.session() as session:
        return session.query(WebhookDelivery.id).one()[0]


def _claim(database: Database) -> outbox.DueDelivery | None:
    with database.session() as session:
        return outbox.claim_delivery(session, lease_seconds=30.0)


def _record(database: Database, due: outbox.DueDelivery, outcome: outbox.AttemptOutcome) -> str:
    with database.session() as session:
        return outbox.record_attempt(session, due, outcome, **BACKOFF)


def test_a_new_event_is_due_at_once_with_its_url_and_secret(database):
    delivery_id = _event(database)
    due = _claim(database)
    assert (due.id, due.url, due.secret, due.attempt) == (delivery_id, "http://127.0.0.1:9/", "s3cret", 1)
    assert '"type":"run.succeeded"' in due.payload


def test_a_claimed_delivery_is_not_claimed_again_while_its_lease_runs(database):
    _event(database)
    assert _claim(database) is not None
    assert _claim(database) is None


def test_a_failed_attempt_waits_for_its_backoff_then_is_due_again(database):
    _event(database)
    assert _record(database, _claim(database), DOWN) == outbox.PENDING
    assert _claim(database) is None
    time.sleep(0.06)
    assert _claim(database).attempt == 2


def test_the_wait_between_attempts_doubles_up_to_its_cap(database):
    delivery_id = _event(database)
    waits = []
    for _ in range(2):
        due = _claim(database)
        _record(database, due, DOWN)
        with database.session() as session:
            waits.append((session.get(WebhookDelivery, delivery_id).next_attempt_at - utc_now()).total_seconds())
        time.sleep(0.09)
    assert 0.0 < waits[0] <= 0.05 and 0.05 < waits[1] <= 0.08


def test_the_last_failed_attempt_gives_up_and_keeps_every_attempt_in_the_log(database):
    delivery_id = _event(database)
    for _ in range(3):
        while (due := _claim(database)) is None:
            time.sleep(0.01)
        status = _record(database, due, DOWN)
    assert status == outbox.FAILED and _claim(database) is None
    with database.session() as session:
        row = session.get(WebhookDelivery, delivery_id)
        assert [entry["attempt"] for entry in row.log] == [1, 2, 3]
        assert row.last_error.startswith("gave up after 3 attempts")


def test_a_delivered_event_is_not_sent_again(database):
    _event(database)
    assert _record(database, _claim(database), OK) == outbox.DELIVERED
    assert _claim(database) is None
